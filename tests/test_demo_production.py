"""Large demo reels (``kinset demo --layout batches|per-part``) and the jobs they make.

The files are read back with pandas and scikit-rf (readers outside kinset) and with
kinset's own readers; the point counts are those the scale issue asks for.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import skrf

from kinset.cli import main
from kinset.demo_production import (BATCH_PARTS, FORWARD_CURRENTS, LEAKAGE_VOLTAGES,
                                    RECOVERY_SAMPLES)
from kinset.registry import dataset as dataset_record
from kinset.io.reel import load_reel
from kinset.io.touchstone import read_plain_touchstone, read_touchstone
from kinset.workflow import make_plan

ROOT = Path(__file__).resolve().parents[1]
N = 30
COUNTS = {"forward": len(FORWARD_CURRENTS), "capacitance": 8, "recovery": RECOVERY_SAMPLES}


@pytest.fixture(scope="module")
def reels(tmp_path_factory) -> dict[str, Path]:
    base = tmp_path_factory.mktemp("production")
    out = {}
    for layout in ("batches", "per-part"):
        assert main(["demo", "--out", str(base / layout), "--devices", str(N),
                     "--layout", layout]) == 0
        out[layout] = base / layout
    return out


def _rows(folder: Path, dataset: str) -> pd.DataFrame:
    files = sorted(p for p in (folder / dataset).glob("*.csv") if p.name != "index.csv")
    return pd.concat([pd.read_csv(f, comment="#") for f in files], ignore_index=True)


def test_every_part_on_every_station_with_the_stated_point_counts(reels):
    truth = pd.read_csv(reels["batches"] / "truth.csv", comment="#", keep_default_na=False)
    assert len(truth) == N
    for layout, folder in reels.items():
        for dataset, k in COUNTS.items():
            # Counted by pandas.read_csv (a reader outside kinset); the counts are the
            # scale issue's: 40 forward points, 8 C-V biases, 2,000 recovery samples.
            per_device = _rows(folder, dataset).groupby("device").size()
            assert len(per_device) == N and (per_device == k).all(), (layout, dataset)
        # 30 leakage voltages; a sweep that reaches the current limit stops with one
        # reading at the limit (a part drawn to break down inside the sweep).
        leak = _rows(folder, "leakage").groupby("device")
        count = leak.size()
        limited = leak["reverse_current_A"].max() >= 1e-3 * (1 - 1e-3)
        assert (count[~limited] == len(LEAKAGE_VOLTAGES)).all()
        assert (count[limited] <= len(LEAKAGE_VOLTAGES)).all()
        assert set(count[limited].index) >= set(truth.loc[truth["role"] == "breakdown in sweep",
                                                          "device"])


def test_a_tenth_of_the_parts_in_touchstone_files_that_scikit_rf_reads(reels):
    folder = reels["batches"] / "capacitance"
    index = pd.read_csv(folder / "index.csv", comment="#")
    parts = index.loc[index["device"] != "open", "device"].unique()
    assert len(parts) == round(N / 10)
    for name in index["file"]:
        # scikit-rf's Touchstone reader (outside kinset) takes each file as written.
        net = skrf.Network(str(folder / name))
        assert net.s.shape == (51, 1, 1) and net.z0[0, 0] == 50
        # A passive one-port reflects at most what it receives, |S11| <= 1 (from memory,
        # any microwave text; the demo adds 2e-4 rms of noise, hence the margin).
        assert np.all(np.abs(net.s) < 1.01)
        # kinset reads the demo's files with its plain reader: the same numbers as
        # scikit-rf's (the reference), bit for bit.
        assert read_plain_touchstone(str(folder / name)) is not None
        sweep = read_touchstone(folder / name)
        assert sweep.frequency.tolist() == net.f.tolist() and sweep.s.tolist() == net.s.tolist()
    assert set(index.groupby("device").size()) == {3}


def test_layouts_hold_the_same_readings_cut_per_batch_or_per_part(reels):
    for dataset in COUNTS:
        files = {layout: [f for f in (folder / dataset).glob("*.csv") if f.name != "index.csv"]
                 for layout, folder in reels.items()}
        assert len(files["batches"]) == -(-N // BATCH_PARTS)
        assert len(files["per-part"]) == N
        a, b = (_rows(reels[layout], dataset) for layout in ("batches", "per-part"))
        pd.testing.assert_frame_equal(a, b)
        # kinset's reader sees what pandas sees, in SI.
        one = sorted((reels["per-part"] / dataset).glob("*.csv"))[0]
        assert dataset_record(dataset).read(one)["device"].nunique() == 1


def test_per_part_reel_gathers_files_into_stable_buckets(reels, tmp_path):
    folder = reels["per-part"]
    config = {"reel": str(folder), "results": str(tmp_path), "application": None,
              "max_jobs_per_dataset": 8}
    plan = make_plan(config)
    for dataset in COUNTS:
        assert len(plan.buckets[dataset]) <= 8
        assert sum(map(len, plan.buckets[dataset].values())) == N
    # One new file changes exactly one bucket's list and no other.
    new = folder / "forward" / "fwd_D999.csv"
    new.write_bytes((folder / "forward" / "fwd_D001.csv").read_bytes().replace(b"D001,", b"D999,"))
    try:
        after = make_plan(config).buckets["forward"]
    finally:
        new.unlink()
    changed = [b for b in after if after[b] != plan.buckets["forward"].get(b)]
    assert len(changed) == 1 and str(new) in after[changed[0]]

    r = subprocess.run([sys.executable, "-m", "snakemake", "-s", str(ROOT / "Snakefile"),
                        "--cores", "1", "--directory", str(tmp_path), "--dry-run", "--quiet",
                        "rules", "--config", f"reel={folder}", f"results={tmp_path}",
                        "max_jobs_per_dataset=8"],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr + r.stdout
    jobs = {p[0]: int(p[1]) for line in (r.stdout + r.stderr).splitlines()
            if len(p := line.split()) == 2 and p[1].isdigit()}
    assert jobs["parse"] <= 4 * 8 and jobs["total"] < 60
