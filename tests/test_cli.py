"""The kinset command: extraction on the demo reel, and errors that name the place."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.io.output import read_result
from kinset.quantities import forward_voltage_tempco

ROOT = Path(__file__).resolve().parents[1]
CONTRACT_FORWARD = ["device", "status", "note", "reason_code", "is_A", "n", "rs_ohm", "points",
                    "fit_rms_V", "self_heating_K"]


def kinset(*args):
    return subprocess.run([sys.executable, "-m", "kinset", *map(str, args)],
                          capture_output=True, text=True, timeout=120)


def test_extract_forward_on_demo_reel(tmp_path):
    out = tmp_path / "forward.csv"
    r = kinset("extract", "forward", "--reel", ROOT / "data_demo", "-o", out)
    assert r.returncode == 0, r.stderr
    table = read_result(out)
    assert list(table.columns[:len(CONTRACT_FORWARD)]) == CONTRACT_FORWARD
    assert (tmp_path / "forward_readings.csv").is_file()
    truth = pd.read_csv(ROOT / "data_demo" / "truth.csv", comment="#", dtype={"device": str})
    # Every device of the demo's forward files is in the table, none dropped.
    assert set(table["device"]) == set(truth.loc[truth["forward_batch"].notna(), "device"])
    # Common practice: a silicon small-signal diode's forward voltage falls about
    # 2 mV/K near 1 mA; the fitted models of the demo parts must say so too.
    fitted = table[table["is_A"].notna()]
    g = forward_voltage_tempco(fitted, 1e-3, 298.15).value
    assert len(g) > 100 and np.all((g > -2.5e-3) & (g < -1.5e-3))


def test_bad_input_is_one_clear_error(tmp_path):
    reel = tmp_path / "reel"
    (reel / "forward").mkdir(parents=True)
    (reel / "reel.yaml").write_text("material: silicon\n")
    bad = reel / "forward" / "a.csv"
    bad.write_text("device,voltage_V,current_A\nD1,0.6,1e-3\nD2,0,6,2e-3\n")
    r = kinset("extract", "forward", "--reel", reel, "-o", tmp_path / "o.csv")
    assert r.returncode == 2
    assert str(bad) in r.stderr and "line 3" in r.stderr
    assert "Traceback" not in r.stderr
    (reel / "reel.yaml").write_text("material: silicon\nreference_temperatur_C: 25\n")
    r = kinset("extract", "forward", "--reel", reel, "-o", tmp_path / "o.csv")
    assert r.returncode == 2 and "reference_temperatur_C" in r.stderr and "line 2" in r.stderr
