"""The Snakemake workflow end to end on a small reel, and what a rerun touches."""

import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kinset.physics.forward import voltage_from_current

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.workflow


def make_reel(folder: Path):
    (folder / "forward").mkdir(parents=True)
    (folder / "reel.yaml").write_text("reel: wf-test\nmaterial: silicon\npart: test part\n")
    currents = np.logspace(-5, -2, 12)
    for name, devs in {"batch1": ["A1", "A2"], "batch2": ["B1"]}.items():
        lines = ["device,position,current_A,voltage_V"]
        for k, d in enumerate(devs):
            v = voltage_from_current(currents, 2.7e-9, 1.85, 0.6, 298.15)
            lines += [f"{d},{k + 1},{i:.6e},{u:.6f}" for i, u in zip(currents, v)]
        (folder / "forward" / f"{name}.csv").write_text("\n".join(lines) + "\n")


def snakemake(work: Path, *args):
    cmd = [sys.executable, "-m", "snakemake", "-s", str(ROOT / "Snakefile"), "--cores", "2",
           "--directory", str(work), "--config", f"reel={work / 'reel'}",
           f"results={work / 'results'}", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=300)


def planned_jobs(work: Path) -> dict[str, int]:
    r = snakemake(work, "--dry-run", "--quiet", "rules")
    assert r.returncode == 0, r.stderr + r.stdout
    jobs = {}
    for line in (r.stdout + r.stderr).splitlines():
        parts = line.split()
        if len(parts) == 2 and parts[1].isdigit() and parts[0] not in ("total", "job"):
            jobs[parts[0]] = int(parts[1])
    return jobs


def test_workflow_runs_and_reruns_only_what_changed(tmp_path):
    make_reel(tmp_path / "reel")
    r = snakemake(tmp_path)
    assert r.returncode == 0, r.stderr
    out = tmp_path / "results" / "wf-test"
    fwd = pd.read_csv(out / "forward.csv")
    for col in ("device", "status", "note", "is_A", "n", "rs_ohm", "points", "fit_rms_V",
                "self_heating_K"):
        assert col in fwd.columns
    assert sorted(fwd["device"]) == ["A1", "A2", "B1"]
    devices = pd.read_csv(out / "devices.csv")
    assert {"device", "position"} <= set(devices.columns)
    assert len(devices) == 3

    assert planned_jobs(tmp_path) == {}  # nothing to do

    # A new batch file: only its parse job, then the extraction and the merge.
    shutil.copy(tmp_path / "reel" / "forward" / "batch2.csv", tmp_path / "reel" / "forward" / "batch3.csv")
    text = (tmp_path / "reel" / "forward" / "batch3.csv").read_text().replace("B1,", "C1,")
    (tmp_path / "reel" / "forward" / "batch3.csv").write_text(text)
    assert planned_jobs(tmp_path) == {"parse": 1, "extract_forward": 1, "devices": 1, "all": 1}
    assert snakemake(tmp_path).returncode == 0

    # An edit of reel.yaml that no extraction uses reruns only its settings copy ...
    reel_yaml = tmp_path / "reel" / "reel.yaml"
    reel_yaml.write_text(reel_yaml.read_text().replace("test part", "another part"))
    assert planned_jobs(tmp_path) == {"reel_settings": 1, "all": 1}
    assert snakemake(tmp_path).returncode == 0
    # ... while the reference temperature reruns the fit, not the parsing.
    reel_yaml.write_text(reel_yaml.read_text() + "reference_temperature_C: 27\n")
    assert planned_jobs(tmp_path) == {"extract_forward": 1, "devices": 1, "reel_settings": 1,
                                      "all": 1}


def declared_memory(work: Path) -> dict[str, list[int]]:
    """Each planned job's declared mem_mb, by rule, from Snakemake's dry-run listing."""
    r = snakemake(work, "--dry-run")
    assert r.returncode == 0, r.stderr + r.stdout
    out: dict[str, list[int]] = {}
    rule = None
    for line in (r.stdout + r.stderr).splitlines():
        if line.startswith(("rule ", "localrule ")):
            rule = line.split()[1].rstrip(":")
        elif "resources:" in line and "mem_mb=" in line and rule:
            out.setdefault(rule, []).append(int(line.split("mem_mb=")[1].split(",")[0]))
    return out


def test_declared_memory_grows_with_the_raw_files(tmp_path):
    """A cluster reserves what a job declares. Measured at 100,000 parts (issue 18), a
    306 MB recovery bucket took 2.4 GB to parse and forward extraction 1.86 GB for
    152 MB: a large file raises its parse job's and its extraction's mem_mb above the
    rules' floors (kinset.workflow.PARSE_MEMORY_PER_MB, the registry's memory_per_mb); small ones keep the floors."""
    make_reel(tmp_path / "reel")
    small = declared_memory(tmp_path)
    assert small["parse"] == [1000, 1000] and small["extract_forward"] == [2000]
    big = tmp_path / "reel" / "forward" / "batch9.csv"
    with open(big, "wb") as fh:          # 250 MB, sparse: only its size is read here
        fh.truncate(250_000_000)
    grown = declared_memory(tmp_path)
    assert sorted(grown["parse"]) == [1000, 1000, 9 * 250]
    assert grown["extract_forward"] == [int(14 * (250 + sum(
        f.stat().st_size for f in (tmp_path / "reel" / "forward").glob("batch[12].csv")) / 1e6))]


def test_lint_is_clean(tmp_path):
    make_reel(tmp_path / "reel")
    r = snakemake(tmp_path, "--lint")
    assert r.returncode == 0, r.stdout + r.stderr


# A stand-in for the conda command: Snakemake asks it these three things before a dry run
# with --sdm conda (snakemake/deployment/conda.py: info, --version, channel_priority); a
# dry run creates no environment, so nothing else is asked.
FAKE_CONDA = """#!/bin/sh
case "$*" in
  "info --json") echo '{"conda_version": "24.7.1", "platform": "linux-64", "conda_prefix": "%s"}' ;;
  "--version") echo "conda 24.7.1" ;;
  "config --get channel_priority --json") echo '{"get": {"channel_priority": "strict"}}' ;;
  *) echo "stand-in conda: $*" >&2; exit 1 ;;
esac
"""


def shell_commands(r) -> list[str]:
    """The shell commands a dry run prints (the target rule 'all' prints None)."""
    found = [line.split("Shell command:", 1)[1].strip()
             for line in (r.stdout + r.stderr).splitlines() if "Shell command:" in line]
    return [c for c in found if c != "None"]


def test_each_rule_runs_its_conda_environments_python_under_sdm_conda(tmp_path):
    make_reel(tmp_path / "reel")
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    conda = bin_dir / "conda"
    conda.write_text(FAKE_CONDA % (tmp_path / "conda"), encoding="utf-8")
    conda.chmod(0o755)
    env = {**os.environ, "PATH": f"{bin_dir}{os.pathsep}{os.environ['PATH']}"}
    cmd = [sys.executable, "-m", "snakemake", "-s", str(ROOT / "Snakefile"), "--cores", "1",
           "--directory", str(tmp_path), "--config", f"reel={tmp_path / 'reel'}",
           f"results={tmp_path / 'results'}", "--dry-run", "--printshellcmds"]
    with_conda = subprocess.run(cmd + ["--sdm", "conda"], capture_output=True, text=True,
                                timeout=300, env=env)
    assert with_conda.returncode == 0, with_conda.stderr + with_conda.stdout
    host = subprocess.run(cmd, capture_output=True, text=True, timeout=300, env=env)
    assert host.returncode == 0, host.stderr + host.stdout
    conda_cmds, host_cmds = shell_commands(with_conda), shell_commands(host)
    # every job of this reel's plan: two parse jobs, the extraction, devices, reel settings
    assert len(conda_cmds) == len(host_cmds) == 5
    assert all(c.startswith("python -m kinset ") for c in conda_cmds), conda_cmds
    assert all(c.startswith(f"{sys.executable} -m kinset ") for c in host_cmds), host_cmds
