"""What the terminal tells: a failed job's error, a typo before any job, each application's
result at the end of a run, and progress lines of long commands.

Snakemake runs in a subprocess, as a user types it (the workflow profile in
profiles/default is read by itself, as for a user in the clone).
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from kinset.errors import InputError
from kinset.physics.forward import voltage_from_current
from kinset.workflow import check_config, errors_in

ROOT = Path(__file__).resolve().parents[1]

# A profile that matches forward voltage only (the reel below has no other data).
PROFILE = """\
name: terminal test pair
set_size: 2
match:
  - {quantity: forward_voltage, at_current_A: [1.0e-4], tolerance_V: 0.005}
operating_temperature_C: 25
goal: most_sets
guard_band: none
"""


def make_reel(folder: Path, devices=("A1", "A2", "A3")) -> Path:
    """Forward sweeps of identical parts, from the Shockley law with series resistance."""
    (folder / "forward").mkdir(parents=True)
    (folder / "reel.yaml").write_text("reel: term-test\nmaterial: silicon\n"
                                      "applications: [pair.yaml]\n")
    (folder / "pair.yaml").write_text(PROFILE)
    currents = np.logspace(-5, -2, 12)
    v = voltage_from_current(currents, 2.7e-9, 1.85, 0.6, 298.15)
    lines = ["device,position,current_A,voltage_V"]
    for k, d in enumerate(devices):
        lines += [f"{d},{k + 1},{i:.6e},{u:.6f}" for i, u in zip(currents, v)]
    (folder / "forward" / "sweep.csv").write_text("\n".join(lines) + "\n")
    return folder


def snakemake(work: Path, *args, config=()):
    cmd = [sys.executable, "-m", "snakemake", "-s", str(ROOT / "Snakefile"), "--cores", "2",
           "--directory", str(work), "--config", f"reel={work / 'reel'}",
           f"results={work / 'results'}", *config, *args]
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=300,
                       env={**os.environ, "PYTHONPATH": str(ROOT / "src")})
    return r, r.stdout + r.stderr


@pytest.mark.workflow
def test_a_bad_forward_file_shows_its_error_on_the_terminal(tmp_path):
    reel = make_reel(tmp_path / "reel")
    sweep = reel / "forward" / "sweep.csv"
    lines = sweep.read_text().splitlines()
    # line 6 of the file (header = line 1), counted by hand: its voltage made text
    device, position, current, _ = lines[5].split(",")
    lines[5] = ",".join([device, position, current, "0.6x"])
    sweep.write_text("\n".join(lines) + "\n")
    r, out = snakemake(tmp_path)
    assert r.returncode != 0
    said = f"{sweep}, line 6, column 'voltage_V'"
    # printed where the job failed (show-failed-logs) and repeated as the run's last words
    assert out.count(said) >= 2, out
    tail = out[out.rindex("kinset: the run stopped:"):]
    assert said in tail and "0.6x" in tail


@pytest.mark.workflow
@pytest.mark.parametrize("typo,key,line", [
    # (edit of the profile above, the key the message must name, its line: counted by hand)
    (("set_size: 2", "set_sise: 2"), "set_size", 2),
    (("goal: most_sets", "goal: most_set"), "most_sets", 6),
    (("tolerance_V: 0.005", "tolerance_V: five"), "tolerance_V", 4),
])
def test_a_profile_typo_stops_the_dry_run_before_any_job(tmp_path, typo, key, line):
    reel = make_reel(tmp_path / "reel")
    profile = reel / "pair.yaml"
    profile.write_text(profile.read_text().replace(*typo))
    for args in (("-n",), ()):
        r, out = snakemake(tmp_path, *args)
        assert r.returncode != 0
        assert f"{profile}, line {line}" in out and key in out, out
        assert "Job stats" not in out and "localrule" not in out      # no job planned or run
        assert "Traceback" not in out and "  File " not in out
    assert not (tmp_path / "results").exists()


@pytest.mark.workflow
def test_a_config_typo_is_one_short_line_naming_the_key(tmp_path):
    make_reel(tmp_path / "reel")
    r, out = snakemake(tmp_path, "-n", config=("aplication=pair.yaml",))
    assert r.returncode != 0
    # Snakemake's own line (the profile it reads) and kinset's: nothing of the schema
    assert len(out.strip().splitlines()) < 5, out
    error = [x for x in out.splitlines() if x.startswith("kinset: error:")]
    assert len(error) == 1
    assert "'aplication'" in error[0] and "did you mean 'application'?" in error[0]


def test_config_errors_name_the_key_and_the_nearest_one():
    # the workflow schema's keys, and difflib's nearest name (Python standard library)
    with pytest.raises(InputError, match=r"unknown key 'resluts' \(did you mean 'results'\?"):
        check_config({"resluts": "x"})
    with pytest.raises(InputError, match=r"^--config: max_jobs_per_dataset: .*integer"):
        check_config({"max_jobs_per_dataset": "many"})
    filled = check_config({})                              # the schema's defaults, filled in
    assert filled["reel"] is None and filled["results"] == "results"   # None: the demo reels


def test_errors_in_reads_kinset_errors_once_each(tmp_path):
    log = tmp_path / "run.log"
    log.write_text("Logfile a.log:\nkinset: error: f.csv, line 3: bad\nother\n"
                   "kinset: error: f.csv, line 3: bad\nkinset: error: g.csv, line 9: worse\n")
    assert errors_in([str(log), str(tmp_path / "absent.log")]) == [
        "kinset: error: f.csv, line 3: bad", "kinset: error: g.csv, line 9: worse"]
    assert errors_in(None) == []


@pytest.mark.workflow
def test_a_run_ends_with_each_applications_result_and_report_shows_progress(tmp_path):
    make_reel(tmp_path / "reel", devices=("A1", "A2", "A3", "A4", "A5"))
    r, out = snakemake(tmp_path)
    assert r.returncode == 0, out
    # Brute force by hand: five identical parts form floor(5 / 2) = 2 pairs, one part left.
    tail = out[out.rindex("(100%) done"):]
    assert f"{tmp_path / 'results' / 'term-test'}/" in tail
    assert "pair: 2 new sets of 2" in tail and "4 of 5 parts used" in tail, tail

    folder = tmp_path / "results" / "term-test"
    before = {f: (folder / "pair" / f).read_bytes() for f in ("models.lib", "pick_list.csv")}
    rep = subprocess.run([sys.executable, "-m", "kinset", "report", "--results", str(folder),
                          "--application", str(tmp_path / "reel" / "pair.yaml"),
                          "-o", str(folder / "pair")], capture_output=True, text=True,
                         timeout=300, env={**os.environ, "PYTHONPATH": str(ROOT / "src")})
    assert rep.returncode == 0, rep.stderr
    lines = rep.stderr.splitlines()
    assert lines[0].startswith("report: reading the tables")
    assert any(x.startswith("report: drawing 2 sets and 1 parts left out") for x in lines)
    # the size said is the file's size on disk (os.stat), in MB
    size = (folder / "pair" / "report.html").stat().st_size / 1e6
    assert any(x.endswith(f"report.html ({size:.1f} MB)") for x in lines), lines
    assert rep.stdout == ""                                   # progress goes to stderr only
    for name, data in before.items():                        # and changes no output file
        assert (folder / "pair" / name).read_bytes() == data


def test_an_earlier_runs_summary_is_marked_out_of_date(tmp_path):
    """A run that built other targets must not pass an old summary off as current: the
    files' modification times (os.stat) decide."""
    from kinset.workflow import make_plan
    reel = make_reel(tmp_path / "reel")
    plan = make_plan(check_config({"reel": str(reel), "results": str(tmp_path / "results")}))
    assert plan.summary() == []                                   # nothing matched yet
    (plan.out / "pair").mkdir(parents=True)
    summary = {"application": "pair", "parts_left": {"no_set": 1}, "sets": 1, "new_sets": 1,
               "set_size": 2, "upper_bound": 1, "method": "test", "parts_used": 2,
               "parts_seen": 3}
    (plan.out / "pair" / "summary.json").write_text(json.dumps(summary))
    (plan.out / "devices.csv").write_text("device\n")
    old, new = 1_000_000_000, 1_000_000_100
    os.utime(plan.out / "pair" / "summary.json", (new, new))
    for path in (plan.out / "devices.csv", reel / "pair.yaml"):
        os.utime(path, (old, old))
    lines = plan.summary()
    assert lines[0].startswith(f"kinset: {plan.out}/")
    assert lines[1].startswith("  pair: 1 new sets of 2") and "out of date" not in lines[1]
    os.utime(plan.out / "devices.csv", (new + 1, new + 1))
    assert plan.summary()[1].endswith("(out of date: from an earlier run)")
