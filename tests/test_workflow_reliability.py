"""The whole workflow: no part lost, the same bytes every run, safe to kill, runs on a cluster.

One small demo reel (40 parts, all four datasets, VNA files included; one part id
carries markup and a comma) is run through Snakemake three times, each in its own
folder: a clean local run, a run killed midway and restarted, and a clean run
through Snakemake's generic cluster executor. Outside references:

* The part ids of the input files are read here with Python's ``csv`` module straight
  from the raw files (comment lines skipped, as the README states), not through
  kinset's readers; the contract (shared/contract.md) says each must appear in
  ``devices.csv`` and in exactly one of ``sets.csv`` / ``unmatched.csv``.
* Byte equality of the output files, compared with ``hashlib`` digests.
* Snakemake's own handling of incomplete jobs (``--rerun-incomplete``, ``--unlock``)
  and its generic cluster executor (``snakemake-executor-plugin-cluster-generic``).

Each run passes ``max_jobs_per_dataset=2``: the parse jobs go through the stable
buckets (the path big reels take), and there are fewer jobs to pay for.
"""

from __future__ import annotations

import csv
import hashlib
import importlib.util
import io
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import yaml

from kinset.demo import write_demo
from report_tools import EVIL_ID                # tests/ is on sys.path (conftest)

ROOT = Path(__file__).resolve().parents[1]
SUBMIT = ROOT / "tests" / "cluster" / "submit.sh"
pytestmark = pytest.mark.workflow

APPLICATIONS = ("ring_mixer_quad", "audio_clipper_pair")   # the demo reel.yaml's defaults
EXTRACTIONS = ("forward", "leakage", "capacitance", "recovery")
HOSTILE = EVIL_ID + ", with a comma"                         # markup, quotes and a comma
DATASET_FOLDERS = ("forward", "leakage", "capacitance", "recovery")


def _make_reel(folder: Path) -> Path:
    reel = write_demo(folder, devices=40, seed=412)
    hostile_csv = '"' + HOSTILE.replace('"', '""') + '"'
    for path in sorted(reel.rglob("*.csv")):           # D003 -> a hostile id, everywhere
        text = path.read_text(encoding="utf-8")
        if "\nD003," in text:
            path.write_text(text.replace("\nD003,", f"\n{hostile_csv},"), encoding="utf-8")
    return reel


def command(work: Path, reel: Path, *args: str) -> list[str]:
    return [sys.executable, "-m", "snakemake", "-s", str(ROOT / "Snakefile"), "--cores", "2",
            "--directory", str(work), "--config", f"reel={reel}", f"results={work / 'results'}",
            "max_jobs_per_dataset=2", *args]


def run(work: Path, reel: Path, *args: str, timeout: float = 300) -> subprocess.CompletedProcess:
    # From the repository root, as a user would: profiles/default applies.
    return subprocess.run(command(work, reel, *args), cwd=ROOT, capture_output=True, text=True,
                          timeout=timeout)


def outputs(work: Path, intermediates: bool = True) -> dict[str, str]:
    """SHA-256 of every file the run wrote under results/<reel>/, logs aside.

    ``intermediates=False`` leaves out parsed/ (each input file's arrays, and each
    Touchstone file's fitted point), the workflow's private cache, which names each file
    by the path it was read from.
    """
    base = work / "results" / "demo-0412"
    # with intermediates=False the runs may come from copies of the reel in other folders:
    # reel_folder.txt, which names the reel folder the results belong to, differs then
    skip = {"logs"} | (set() if intermediates else {"parsed", "reel_folder.txt"})
    files = [p for p in sorted(base.rglob("*")) if p.is_file() and not skip & set(p.parts)
             and not (p.name.startswith(".") and p.name.endswith(".tmp"))]   # a writer's temporary
    return {p.relative_to(base).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in files}


def expected_files() -> set[str]:
    files = {f"{d}.csv" for d in EXTRACTIONS} | {"forward_readings.csv", "capacitance_points.csv",
                                                   "devices.csv", "reel.json"}
    for app in APPLICATIONS:
        files |= {f"{app}/{f}" for f in ("sets.csv", "unmatched.csv", "values.csv", "summary.json",
                                         "report.html", "models.lib", "pick_list.csv",
                                         "tolerance_scan.csv")}
    return files


@pytest.fixture(scope="module")
def reel(tmp_path_factory) -> Path:
    return _make_reel(tmp_path_factory.mktemp("reel") / "reel")


@pytest.fixture(scope="module")
def clean(reel, tmp_path_factory) -> Path:
    """A clean local run; its folder."""
    work = tmp_path_factory.mktemp("clean")
    r = run(work, reel)
    assert r.returncode == 0, r.stderr[-3000:]
    return work


# --------------------------------------------------------------------------- accounting

def raw_part_ids(reel: Path) -> dict[str, set[str]]:
    """Part ids of every input file, read with the csv module (not kinset's readers)."""
    found: dict[str, set[str]] = {}
    for dataset in DATASET_FOLDERS:
        for path in sorted((reel / dataset).glob("*.csv")):
            text = path.read_text(encoding="utf-8-sig")
            lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
            rows = list(csv.DictReader(io.StringIO("\n".join(lines)), skipinitialspace=True))
            ids = {r["device"].strip() for r in rows}
            if path.name == "index.csv":         # the empty fixture is not a part
                ids = {d for d in ids if d.lower() != "open"}
            found.setdefault(dataset, set()).update(ids)
    return found


def test_every_input_part_is_in_devices_and_placed_or_unmatched_once(clean, reel):
    raw = raw_part_ids(reel)
    assert set(raw) == set(DATASET_FOLDERS) and all(raw.values())   # all four datasets
    parts = set().union(*raw.values())
    assert HOSTILE in parts and len(parts) == 40
    out = clean / "results" / "demo-0412"
    devices = pd.read_csv(out / "devices.csv", dtype={"device": str}, keep_default_na=False)
    assert devices["device"].is_unique
    assert set(devices["device"]) == parts
    for dataset in EXTRACTIONS:          # each dataset's table: exactly its own parts
        table = pd.read_csv(out / f"{dataset}.csv", dtype={"device": str}, keep_default_na=False)
        assert sorted(table["device"]) == sorted(raw[dataset]), dataset
    for app in APPLICATIONS:
        sets = pd.read_csv(out / app / "sets.csv", dtype={"device": str}, keep_default_na=False)
        un = pd.read_csv(out / app / "unmatched.csv", dtype={"device": str}, keep_default_na=False)
        placed, left = list(sets["device"]), list(un["device"])
        assert len(set(placed)) == len(placed) and len(set(left)) == len(left), app
        assert not set(placed) & set(left), app
        assert set(placed) | set(left) == parts, app
        assert (un["reason"].str.strip() != "").all(), app      # every one says why
        picks = pd.read_csv(out / app / "pick_list.csv", dtype={"device": str},
                            keep_default_na=False)
        assert sorted(picks["device"]) == sorted(placed), app


# --------------------------------------------------------------------------- cluster

def test_cluster_executor_runs_the_workflow_with_three_submissions(cluster):
    work, log = cluster
    submitted = [ln for ln in log.splitlines() if "Submitted group job" in ln]
    assert len(submitted) == 3, log[-3000:]
    assert set(outputs(work)) >= expected_files()


@pytest.fixture(scope="module")
def cluster(reel, tmp_path_factory) -> tuple[Path, str]:
    """A clean run through the generic cluster executor, from a copy of the reel in
    another folder (so neither the reel's path nor the run's folder may leak into an
    output). Each rule's jobs go to a "batch system" (tests/cluster/submit.sh) that
    runs them detached, in processes that share nothing with Snakemake but the files
    they declare. Groups (read, tables, apps) cut 18 submissions to 3."""
    if importlib.util.find_spec("snakemake_executor_plugin_cluster_generic") is None:
        pytest.skip("snakemake-executor-plugin-cluster-generic is not installed (pip install -e '.[test]')")
    work = tmp_path_factory.mktemp("cluster")
    moved = shutil.copytree(reel, work / "elsewhere" / "reel")
    groups = {"parse": "read", "fit_touchstone": "read", "reel_settings": "read",
              "devices": "tables", "match": "apps", "report": "apps",
              **{f"extract_{d}": "tables" for d in EXTRACTIONS}}
    r = run(work, moved, "--executor", "cluster-generic",
            "--cluster-generic-submit-cmd", str(SUBMIT), "--jobs", "4",
            "--seconds-between-status-checks", "1", "--latency-wait", "10",
            "--groups", *[f"{k}={v}" for k, v in groups.items()],
            "--group-components", "read=100", "apps=100")
    assert r.returncode == 0, (r.stdout + r.stderr)[-4000:]
    return work, r.stdout + r.stderr


# --------------------------------------------------------------------------- determinism

def test_two_clean_runs_are_byte_identical(clean, cluster):
    """Every output (tables, reel.json, sets, SPICE cards, pick lists, report pages) of
    the local run and of the cluster run, made from a copy of the reel in another
    folder, has the same bytes. (The killed-and-restarted run, from the same folder,
    is compared with its parsed intermediates too.)"""
    a, b = outputs(clean, intermediates=False), outputs(cluster[0], intermediates=False)
    assert set(a) >= expected_files()
    differ = sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))
    assert differ == []


# --------------------------------------------------------------------------- interruption

def test_a_killed_run_restarted_ends_equal_to_a_clean_run(clean, reel, tmp_path):
    """Kill the whole process group (SIGKILL: no clean-up, like a power cut) as soon as the
    first extraction table is written and some job is still running; then do what the
    README says: ``snakemake --unlock``, and the same command again (profiles/default
    sets rerun-incomplete). The outputs equal the clean run's. (A kill in the middle of
    a write leaves the writer's hidden temporary file beside its target; nothing reads
    it, and the target itself is whole or absent: tests/test_atomic_output.py.)"""
    out = tmp_path / "results" / "demo-0412"
    incomplete = tmp_path / ".snakemake" / "incomplete"
    with open(tmp_path / "first.log", "w") as log:
        proc = subprocess.Popen(command(tmp_path, reel), cwd=ROOT, stdout=log,
                                stderr=subprocess.STDOUT, start_new_session=True)
    try:
        deadline = time.monotonic() + 240
        while time.monotonic() < deadline and proc.poll() is None:
            first = any((out / f"{d}.csv").exists() for d in EXTRACTIONS)
            if first and incomplete.is_dir() and any(incomplete.iterdir()):
                break
            time.sleep(0.02)
        assert proc.poll() is None, "the run ended before it could be interrupted"
        os.killpg(proc.pid, signal.SIGKILL)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
    assert not (out / "devices.csv").exists()            # it was stopped midway

    r = run(tmp_path, reel)                               # the kill left its lock behind
    assert r.returncode != 0 and "--unlock" in r.stdout + r.stderr
    r = run(tmp_path, reel, "--unlock")
    assert r.returncode == 0, r.stderr[-2000:]
    r = run(tmp_path, reel)
    assert r.returncode == 0, r.stderr[-3000:]
    assert outputs(tmp_path) == outputs(clean)


# --------------------------------------------------------------------------- profiles

def _snakemake_options() -> set[str]:
    from snakemake.cli import get_argument_parser
    return {s.lstrip("-") for a in get_argument_parser()._actions for s in a.option_strings}


def test_profiles_use_only_snakemake_options_and_slurm_sizes_jobs():
    """Each key of profiles/*/config.yaml is an option of the installed Snakemake (its
    own argument parser is the reference); the slurm profile selects the SLURM executor
    and gives default mem_mb and runtime; every rule declares threads, mem_mb, runtime."""
    options = _snakemake_options()
    for name in ("default", "slurm"):
        config = yaml.safe_load((ROOT / "profiles" / name / "config.yaml").read_text())
        assert set(config) <= options, (name, sorted(set(config) - options))
    slurm = yaml.safe_load((ROOT / "profiles" / "slurm" / "config.yaml").read_text())
    assert slurm["executor"] == "slurm"
    assert {"mem_mb", "runtime"} <= set(slurm["default-resources"])
    assert slurm["rerun-incomplete"] is True
    text = "\n".join(p.read_text() for p in sorted((ROOT / "rules").glob("*.smk")))
    for block in text.split("\nrule ")[1:]:
        name = block.split(":")[0]
        for key in ("threads:", "mem_mb=", "runtime="):
            assert key in block, (name, key)
