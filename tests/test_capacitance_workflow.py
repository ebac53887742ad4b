"""The capacitance step of the Snakemake workflow: what runs, what a new file reruns.

The reel is the independent one of tests/test_capacitance.py (scikit-rf Touchstone files
and a C–V table); the physics is checked there, this file checks the workflow.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from test_capacitance import VNA_FREQ, _parts, build_reel, nagel
from test_touchstone import dut_one_port, media, write
from test_workflow import planned_jobs, snakemake

pytestmark = pytest.mark.workflow


def test_capacitance_workflow_and_reruns(tmp_path):
    parts = _parts(4, seed=3)
    build_reel(tmp_path / "reel", parts)
    r = snakemake(tmp_path)
    assert r.returncode == 0, r.stderr
    out = tmp_path / "results" / "independent"
    table = pd.read_csv(out / "capacitance.csv")
    assert sorted(table["device"]) == sorted(parts["device"])
    assert (table["status"] == "ok").all(), table["note"].tolist()
    assert (out / "capacitance_points.csv").is_file()
    devices = pd.read_csv(out / "devices.csv")
    assert {"cj0_F", "vj_V", "m"} <= set(devices.columns) and len(devices) == 4
    assert planned_jobs(tmp_path) == {}

    # A new Touchstone file and its index row: one R–L–C fit job, the C–V fit, the merge.
    cap = tmp_path / "reel" / "capacitance"
    m = media(VNA_FREQ)
    write(dut_one_port(m, 1.0, 1e-9, nagel(2.0, 3e-12, 0.7, 0.5)), cap / "NEW_2V.s1p")
    with open(cap / "index.csv", "a") as fh:
        fh.write("NEW_2V.s1p,NEW,2,reflection\n")
    jobs = planned_jobs(tmp_path)
    assert jobs == {"fit_touchstone": 1, "extract_capacitance": 1, "devices": 1, "all": 1}

    # A reel setting the fit reads reruns the fit, not the parsing.
    reel_yaml = tmp_path / "reel" / "reel.yaml"
    reel_yaml.write_text(reel_yaml.read_text() + "capacitance: {package_capacitance: fit}\n")
    jobs = planned_jobs(tmp_path)
    assert jobs.get("parse", 0) == 0 and jobs["fit_touchstone"] == 1
    assert jobs["extract_capacitance"] == 1

    # A path escaping the reel stops the workflow with an error naming index.csv and the line.
    with open(cap / "index.csv", "a") as fh:
        fh.write("../../elsewhere.s1p,BAD,2,reflection\n")
    r = snakemake(tmp_path, "--dry-run")
    assert r.returncode != 0
    text = r.stdout + r.stderr
    n_lines = len((cap / "index.csv").read_text().splitlines())
    assert "index.csv" in text and f"line {n_lines}" in text and "outside the reel" in text
    assert np.isfinite(table["cj0_F"]).all()
