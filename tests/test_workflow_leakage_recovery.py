"""The workflow's leakage and recovery steps end to end, and what a change reruns.

The reel is made of the ngspice reference data (tests/reference/ngspice/{leakage,recovery}).
"""

import shutil
from pathlib import Path

import pandas as pd
import pytest

from test_workflow import planned_jobs, snakemake   # tests/ is on sys.path (conftest)

ROOT = Path(__file__).resolve().parents[1]
REFERENCE = ROOT / "tests" / "reference" / "ngspice"
pytestmark = pytest.mark.workflow

LEAKAGE = ("soft_68V", "leaky_shunt")
RECOVERY = ("reel_a", "reel_d")


def make_reel(folder: Path):
    for d in ("leakage", "recovery"):
        (folder / d).mkdir(parents=True)
    (folder / "reel.yaml").write_text("reel: lr-test\nmaterial: silicon\npart: test part\n"
                                      "leakage: {report_at_V: [2.5, 20]}\n")
    for name in LEAKAGE:
        shutil.copy(REFERENCE / "leakage" / f"{name}.csv", folder / "leakage")
    for name in RECOVERY:
        shutil.copy(REFERENCE / "recovery" / f"{name}.csv", folder / "recovery")


def test_leakage_and_recovery_steps(tmp_path):
    make_reel(tmp_path / "reel")
    r = snakemake(tmp_path)
    assert r.returncode == 0, r.stderr
    out = tmp_path / "results" / "lr-test"
    leak = pd.read_csv(out / "leakage.csv")
    for col in ("device", "status", "note", "ir_A_at_2.5V", "ir_A_at_20V", "bv_V"):
        assert col in leak.columns
    assert sorted(leak["device"]) == sorted(LEAKAGE)
    rec = pd.read_csv(out / "recovery.csv")
    for col in ("device", "status", "note", "trr_s", "ta_s", "tb_s", "irrm_A", "qrr_C",
                "softness", "tt_s"):
        assert col in rec.columns
    assert sorted(rec["device"]) == sorted(RECOVERY)
    devices = pd.read_csv(out / "devices.csv")
    assert sorted(devices["device"]) == sorted(LEAKAGE + RECOVERY)
    for col in ("ir_A_at_20V", "bv_V", "trr_s", "qrr_C", "tt_s", "leakage_status",
                "recovery_status"):
        assert col in devices.columns

    assert planned_jobs(tmp_path) == {}

    # One new recovery file: its parse job, the recovery step and what follows it
    # (merging, and matching where the reel has applications); never the other steps.
    text = (REFERENCE / "recovery" / "reel_b.csv").read_text()
    (tmp_path / "reel" / "recovery" / "late.csv").write_text(text.replace("reel_b,", "late_b,"))
    jobs = planned_jobs(tmp_path)
    assert jobs["parse"] == 1 and jobs["extract_recovery"] == 1 and jobs["devices"] == 1
    assert "extract_leakage" not in jobs
    assert snakemake(tmp_path).returncode == 0
    assert "late_b" in set(pd.read_csv(out / "recovery.csv")["device"])

    # A recovery setting reruns the recovery step only; a leakage setting the leakage step.
    reel_yaml = tmp_path / "reel" / "reel.yaml"
    original = reel_yaml.read_text()
    reel_yaml.write_text(original + "recovery: {end: {current_A: 1.0e-3}}\n")
    jobs = planned_jobs(tmp_path)
    assert jobs["extract_recovery"] == 1 and "extract_leakage" not in jobs and "parse" not in jobs
    reel_yaml.write_text(original.replace("[2.5, 20]", "[20]"))
    jobs = planned_jobs(tmp_path)
    assert jobs["extract_leakage"] == 1 and "extract_recovery" not in jobs and "parse" not in jobs
