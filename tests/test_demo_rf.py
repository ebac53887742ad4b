"""The RF Schottky demo reel (``kinset demo --kind rf``, committed as ``data_demo_rf/``).

It must be reproducible byte for byte, be valid input, read as a reel of small-signal
Schottky diodes measured as RF parts are (forward sweeps, leakage to a few volts,
capacitance from network-analyser files with the empty fixture), and form mixer quads
under the shipped ``ring_mixer_quad`` profile. The readings are checked against
outside references, each named beside its check.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import skrf
import yaml
from scipy import constants
from scipy.optimize import brentq

from kinset.cli import main
from kinset.demo import write_demo
from kinset.io.reel import load_reel

from report_tools import extract_results

ROOT = Path(__file__).resolve().parents[1]
COMMITTED = ROOT / "data_demo_rf"
REGENERATE = "kinset demo --kind rf --out data_demo_rf"
PROFILE = ROOT / "src" / "kinset" / "applications" / "ring_mixer_quad.yaml"


def _files(folder: Path) -> list[str]:
    return sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file())


def _table(path: Path) -> pd.DataFrame:
    return pd.read_csv(path, comment="#")


@pytest.fixture(scope="module")
def truth() -> pd.DataFrame:
    return _table(COMMITTED / "truth.csv").set_index("device")


def test_rf_demo_matches_committed_data_demo_rf(tmp_path):
    demo = write_demo(tmp_path / "reel", kind="rf")
    committed = _files(COMMITTED) if COMMITTED.is_dir() else []
    assert committed, f"data_demo_rf/ is empty; regenerate it with {REGENERATE}"
    assert _files(demo) == committed, f"file list differs; regenerate with {REGENERATE}"
    differ = [n for n in committed if (demo / n).read_bytes() != (COMMITTED / n).read_bytes()]
    assert not differ, f"{len(differ)} file(s) differ, e.g. {differ[:3]}; {REGENERATE}"


def test_rf_reel_is_schottky_with_no_recovery_data():
    reel = load_reel(COMMITTED)
    assert reel.settings["material"] == "schottky"
    # EG and XTI follow the material: 0.69 eV and 2 for a Schottky barrier (the usual
    # SPICE model values, from memory)
    assert reel.eg == pytest.approx(0.69) and reel.xti == pytest.approx(2.0)
    assert not (COMMITTED / "recovery").exists()
    apps = [a.profile for a in reel.applications]
    assert apps == ["ring_mixer_quad", "detector_pair"]


def test_forward_sweeps_follow_the_shockley_equation(truth):
    """Below 100 µA self-heating is under 0.02 K, so each reading is the Shockley equation
    with a series resistance at the fixture temperature, Vt = kT/q from scipy.constants;
    the SMU noise is 30 µV rms, so 0.2 mV is beyond 6 sigma."""
    for name in ("batch_a_sweep", "batch_c_sweep_warm"):
        f = _table(COMMITTED / "forward" / f"{name}.csv")
        f = f[f["current_A"] <= 1e-4]
        p = truth.loc[f["device"]]
        t = f["temperature_C"].to_numpy() + constants.zero_Celsius
        vt = constants.k * t / constants.e
        # IS(T) = IS(T0)·(T/T0)^(XTI/N)·exp(EG/(N·Vt)·(T/T0 − 1)) (SPICE diode model),
        # EG 0.69 eV, XTI 2 for a Schottky barrier
        t0 = 298.15
        n = p["n"].to_numpy()
        i_s = p["is_A"].to_numpy() * (t / t0) ** (2.0 / n) \
            * np.exp(0.69 / (n * vt) * (t / t0 - 1))
        i = f["current_A"].to_numpy()
        rs = p["rs_ohm"].to_numpy()
        v = np.array([brentq(lambda x: i_s[k] * np.expm1((x - i[k] * rs[k]) / (n[k] * vt[k]))
                             - i[k], 0.0, 1.0, xtol=1e-12) for k in range(len(i))])
        assert np.abs(f["voltage_V"].to_numpy() - v).max() < 2e-4, name


def test_touchstone_capacitance_with_the_open_removed_is_the_junction(truth):
    """scikit-rf reads each part's file at 0 V and the empty fixture's; the part's
    admittance is the difference, and at the lowest frequencies (ω²·LS·C below 1e-4)
    C = −1/(ω·Im Z) is the junction capacitance CJO."""
    index = _table(COMMITTED / "capacitance" / "index.csv")
    zero = index[index["reverse_voltage_V"] == 0.0]
    open_file = zero.loc[zero["device"] == "open", "file"].iloc[0]
    y_open = skrf.Network(str(COMMITTED / "capacitance" / open_file)).y[:4, 0, 0]
    errors = []
    for _, row in zero[zero["device"] != "open"].iterrows():
        net = skrf.Network(str(COMMITTED / "capacitance" / row["file"]))
        w = 2 * np.pi * net.f[:4]
        z = 1.0 / (net.y[:4, 0, 0] - y_open)
        c = np.mean(-1.0 / (w * z.imag))
        errors.append(c / truth.loc[row["device"], "cjo_F"] - 1)
    errors = np.abs(errors)
    assert len(errors) == len(truth)
    assert np.median(errors) < 0.01 and errors.max() < 0.05


def test_leakage_stays_below_breakdown_and_damaged_parts_stand_out(truth):
    """A healthy small-signal Schottky part leaks nanoamps to tens of nanoamps at 3 V
    (from memory); the sweep to 4 V never reaches the source's 1 mA limit, and each part
    the generator damaged is above the ring mixer profile's 1 µA screen at 3 V."""
    leak = pd.concat(_table(p) for p in sorted((COMMITTED / "leakage").glob("*.csv")))
    assert leak["reverse_voltage_V"].max() == 4.0 and leak["reverse_current_A"].max() < 1e-3
    at3 = leak[leak["reverse_voltage_V"] == 3.0].set_index("device")["reverse_current_A"]
    damaged = truth.index[truth["role"].fillna("") == "damaged leaky"]
    assert len(damaged) >= 1 and (at3[damaged] > 1e-6).all()
    healthy = at3.drop(damaged)
    assert (healthy < 1e-7).all() and (healthy > 1e-9).all()


def test_mixer_quads_form_and_each_meets_the_profile(tmp_path, capsys):
    """A small RF reel under the shipped ring_mixer_quad profile forms quads; every quad's
    spread of each criterion, recomputed by brute force from values.csv, is within the
    tolerance the profile file states (read here with PyYAML, not through kinset)."""
    reel = write_demo(tmp_path / "reel", devices=80, kind="rf")
    results = extract_results(reel, tmp_path / "results")
    out = tmp_path / "match"
    main(["match", "--results", str(results), "--application", "ring_mixer_quad",
          "-o", str(out)])
    sets = pd.read_csv(out / "sets.csv")
    values = pd.read_csv(out / "values.csv").set_index("device")
    assert sets["set"].nunique() >= 5          # 8 on this 80-part reel; 40 on data_demo_rf
    spec = yaml.safe_load(PROFILE.read_text(encoding="utf-8"))
    assert {c["quantity"] for c in spec["match"]} == {"forward_voltage", "capacitance"}
    for criterion in spec["match"]:
        unit = "V" if criterion["quantity"] == "forward_voltage" else "F"
        key = "at_current_A" if unit == "V" else "at_reverse_voltage_V"
        tol = criterion[f"tolerance_{unit}"]
        cols = [c for c in values.columns if c.startswith(criterion["quantity"] + "_at_")
                and not c.endswith("_u")]
        assert len(cols) == len(criterion[key])
        for _, members in sets.groupby("set"):
            v = values.loc[members["device"], cols].to_numpy(dtype=float)
            assert (v.max(axis=0) - v.min(axis=0) <= tol + 1e-15).all()
    assert "made for" not in capsys.readouterr().err     # a Schottky reel suits the profile
