"""The C–V fit, capacitance at a bias, and whole reels of C–V tables and Touchstone files.

Outside sources:

* S. M. Sze and K. K. Ng, "Physics of Semiconductor Devices", 3rd ed., Wiley, 2007,
  section 2.3 (doi:10.1002/0470068329): for a one-sided abrupt junction
  1/C² = 2 (Vbi − 2kT/q + VR) / (q εs N A²), a straight line in VR whose voltage
  intercept is Vbi − 2kT/q; the SPICE form of it has M = 1/2.
* L. W. Nagel, SPICE2, Memorandum ERL-M520, UC Berkeley, 1975: Cj = CJO/(1 + VR/VJ)^M,
  written out below; hyperabrupt varactors follow it with M above 1/2.
* scikit-rf (``skrf.media.DefinedGammaZ0``) synthesises the one-port Touchstone files of
  the independent reel (see tests/test_touchstone.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.constants import epsilon_0, elementary_charge, k as boltzmann

from kinset.extract import extract_capacitance
from kinset.fitting.capacitance import CapacitanceSettings, fit_capacitance
from kinset.io.reel import load_reel
from kinset.quantities import capacitance
from test_touchstone import dut_one_port, media, write

ROOT = Path(__file__).resolve().parents[1]
T25 = 298.15
SETTINGS = CapacitanceSettings(T25, T25)


def nagel(vr, cjo, vj, m):
    """Nagel's SPICE2 depletion law for reverse bias."""
    return cjo / (1.0 + np.asarray(vr, dtype=float) / vj) ** m


def cv_points(curves: dict, noise=0.0, seed=1) -> pd.DataFrame:
    """Long C–V table from device -> (biases, capacitances); relative noise optional."""
    rng = np.random.default_rng(seed)
    frames = []
    for dev, (vr, c) in curves.items():
        c = np.asarray(c) * (1 + noise * rng.standard_normal(len(c)))
        frames.append(pd.DataFrame({"device": dev, "kind": "cv", "reverse_voltage": vr,
                                    "capacitance": c, "frequency": 1e6, "temperature": np.nan,
                                    "source": "test", "line": np.arange(len(vr)) + 2}))
    return pd.concat(frames, ignore_index=True)


def test_abrupt_junction_of_sze_gives_m_one_half():
    """Data with 1/C² linear in VR (Sze's abrupt junction) fit to M = 0.5 ± 0.01."""
    vr = np.array([0, 0.5, 1, 2, 3, 4, 5, 7, 10, 15, 20], dtype=float)
    # Sze & Ng 2.3: silicon, one-sided abrupt junction, N = 1e16 cm^-3, area 1e-4 cm²,
    # Vbi = 0.75 V, at 300 K.
    eps, n, area, vbi, t = 11.9 * epsilon_0, 1e22, 1e-8, 0.75, 300.0
    intercept = vbi - 2 * boltzmann * t / elementary_charge
    inv_c2 = 2 * (intercept + vr) / (elementary_charge * eps * n * area ** 2)
    c = 1 / np.sqrt(inv_c2)
    assert np.allclose(np.diff(inv_c2) / np.diff(vr), np.diff(inv_c2)[0] / np.diff(vr)[0])
    for noise, seed in ((0.0, 0), (2e-3, 5), (2e-3, 6)):
        row = fit_capacitance(cv_points({"A": (vr, c)}, noise, seed), SETTINGS)[0].iloc[0]
        assert row["status"] == "ok", row["note"]
        # Sze & Ng: an abrupt junction has M = 1/2 ...
        assert row["m"] == pytest.approx(0.5, abs=0.01)
        # ... and the voltage intercept of 1/C² is Vbi − 2kT/q.
        assert row["vj_V"] == pytest.approx(intercept, rel=0.05 if noise else 1e-6)


@pytest.mark.parametrize("m", [0.75, 1.0, 1.5, 2.0])
def test_hyperabrupt_varactors_fit(m):
    """Nagel's law with M well above 1/2, up to 2 (tuning varactors), 0.5-20 V."""
    vr = np.array([0, 0.5, 1, 2, 3, 4, 6, 8, 10, 12, 15, 20], dtype=float)
    cjo, vj = 40e-12, 1.5
    row = fit_capacitance(cv_points({"V": (vr, nagel(vr, cjo, vj, m))}, 1e-3, 2), SETTINGS)[0].iloc[0]
    assert row["status"] == "ok", row["note"]
    # Nagel (SPICE2): the law the data was drawn from.
    assert row["m"] == pytest.approx(m, rel=0.03)
    assert row["cj0_F"] == pytest.approx(cjo, rel=0.01)
    assert np.isfinite([row["cj0_F_se"], row["vj_V_se"], row["m_se"]]).all()


def test_package_capacitance_is_fitted_when_asked():
    """Nagel's law plus a constant parallel capacitance (capacitors in parallel add)."""
    vr = np.array([0, 0.5, 1, 2, 3, 5, 7, 10, 15, 20, 30], dtype=float)
    c = nagel(vr, 2e-12, 0.7, 0.5) + 0.3e-12
    pts = cv_points({"P": (vr, c)})
    with_cp = CapacitanceSettings(T25, T25, package_capacitance=True)
    row = fit_capacitance(pts, with_cp)[0].iloc[0]
    assert row["status"] == "ok", row["note"]
    assert row["cp_F"] == pytest.approx(0.3e-12, rel=0.02)
    assert row["cj0_F"] == pytest.approx(2e-12, rel=0.01)
    assert row["m"] == pytest.approx(0.5, abs=0.01)
    plain = fit_capacitance(pts, SETTINGS)[0].iloc[0]
    assert "cp_F" not in plain and row["fit_rms_F"] < 0.1 * plain["fit_rms_F"]


def test_every_device_gets_a_row():
    """Too few biases, forward bias only, negative values, a broken VNA file: all reported."""
    vr = np.array([0, 1, 2, 5, 10.0])
    pts = cv_points({"OK": (vr, nagel(vr, 2e-12, 0.7, 0.4)),
                     "TWO": ([1.0, 5.0], nagel([1.0, 5.0], 2e-12, 0.7, 0.4)),
                     "FWD": ([-0.2, -0.1], [2.3e-12, 2.1e-12]),
                     "NEG": ([1.0, 2.0, 3.0], [-1e-12, -1e-12, 0.0])})
    vna = pd.DataFrame({"device": ["BAD"], "kind": ["vna"], "reverse_voltage": [2.0],
                        "capacitance": [np.nan], "status": ["rejected"],
                        "note": ["x_2V.s1p: does not parse as a Touchstone file"],
                        "reason_code": ["touchstone_unusable"],
                        "source": ["x_2V.s1p"], "line": [4]})
    table, points = fit_capacitance(pd.concat([pts, vna], ignore_index=True), SETTINGS)
    t = table.set_index("device")
    assert sorted(t.index) == ["BAD", "FWD", "NEG", "OK", "TWO"]
    assert t.loc["OK", "status"] == "ok"
    assert t.loc["TWO", "status"] == "warning" and "too few" in t.loc["TWO", "note"]
    assert t.loc["FWD", "status"] == "rejected" and "forward-bias" in t.loc["FWD", "note"]
    assert t.loc["NEG", "status"] == "rejected" and "negative" in t.loc["NEG", "note"]
    assert t.loc["BAD", "status"] == "rejected" and "x_2V.s1p" in t.loc["BAD", "note"]
    assert (t["note"] != "").all()
    assert len(points) == len(pts) + 1
    # Codes beside the notes; a rejected row opens with the reason it was rejected.
    assert t["reason_code"].to_dict() == {
        "BAD": "no_usable_point;touchstone_rejected", "FWD": "no_usable_point;forward_bias_points",
        "NEG": "no_usable_point;nonpositive_points", "OK": "fitted", "TWO": "too_few_biases"}
    assert points.loc[points["device"] == "BAD", "reason_code"].tolist() == ["touchstone_unusable"]
    for frame in (table, points):
        assert list(frame.columns)[list(frame.columns).index("note") + 1] == "reason_code"


def test_capacitance_at_a_bias_inside_the_range_only():
    vr = np.array([0.5, 1, 2, 5, 10.0])
    pts = cv_points({"A": (vr, nagel(vr, 2e-12, 0.7, 0.4)),
                     "B": (vr[:3], nagel(vr[:3], 3e-12, 0.6, 0.5)),
                     "S": ([3.0], [1.1e-12])})
    table, points = fit_capacitance(pts, SETTINGS)
    ev = capacitance(table, 4.0, points)
    got = dict(zip(ev.device, ev.value))
    why = dict(zip(ev.device, ev.reason))
    # Nagel (SPICE2): the law of device A, at 4 V.
    assert got["A"] == pytest.approx(nagel(4.0, 2e-12, 0.7, 0.4), rel=1e-6)
    assert np.isnan(got["B"]) and "outside the measured reverse-bias range 0.5–2 V" in why["B"]
    assert np.isnan(got["S"]) and "no point measured at 4 V" in why["S"]
    at_own = capacitance(table, 3.0, points)
    assert dict(zip(at_own.device, at_own.value))["S"] == pytest.approx(1.1e-12)
    # Below the lowest measured bias is refused as well (no extrapolation to 0 V).
    below = capacitance(table, 0.0)
    assert np.isnan(below.value[list(below.device).index("A")])


# --------------------------------------------------------------------------- an independent reel

VNA_BIASES = (0.0, 1.0, 2.0, 5.0, 10.0)       # [V]
CV_BIASES = (0.0, 0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0)
FIXTURE_C = 0.35e-12                            # [F] parallel capacitance of the fixture
VNA_FREQ = np.linspace(10e6, 1e9, 51)


def _parts(n, seed):
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"device": [f"P{i:02d}" for i in range(n)],
                         "cjo": rng.uniform(0.8e-12, 12e-12, n), "vj": rng.uniform(0.45, 0.95, n),
                         "m": rng.uniform(0.3, 0.55, n), "rs": rng.uniform(0.4, 3.0, n),
                         "ls": rng.uniform(0.5e-9, 1.5e-9, n)})


def build_reel(folder: Path, parts: pd.DataFrame) -> None:
    """Half the parts as a C–V table (pF, 0.3 % noise), half as one-port Touchstone files
    of the packaged diode in a fixture with an empty-fixture file per bias (noise 2e-4)."""
    cap = folder / "capacitance"
    cap.mkdir(parents=True)
    (folder / "reel.yaml").write_text("reel: independent\nmaterial: silicon\n")
    half = len(parts) // 2
    rng = np.random.default_rng(11)
    lines = ["# independent reel: C-V meter at 1 MHz", "device,reverse_voltage_V,capacitance_pF"]
    for _, p in parts.iloc[:half].iterrows():
        for v in CV_BIASES:
            c = nagel(v, p.cjo, p.vj, p.m) * (1 + 3e-3 * rng.standard_normal())
            lines.append(f"{p.device},{v:g},{c * 1e12:.5f}")
    (cap / "cv_table.csv").write_text("\n".join(lines) + "\n")
    m = media(VNA_FREQ)
    index = ["file,device,reverse_voltage_V,fixture"]
    for k, v in enumerate(VNA_BIASES):
        name = f"empty_{v:g}V.s1p"
        write(m.shunt_capacitor(FIXTURE_C) ** m.open(), cap / name, noise=2e-4, seed=100 + k)
        index.append(f"{name},open,{v:g},reflection")
    for j, (_, p) in enumerate(parts.iloc[half:].iterrows()):
        for k, v in enumerate(VNA_BIASES):
            name = f"{p.device}_{v:g}V.s1p"
            net = m.shunt_capacitor(FIXTURE_C) ** dut_one_port(m, p.rs, p.ls, nagel(v, p.cjo, p.vj, p.m))
            write(net, cap / name, noise=2e-4, seed=1000 + 10 * j + k)
            index.append(f"{name},{p.device},{v:g},reflection")
    (cap / "index.csv").write_text("\n".join(index) + "\n")


def test_independent_reel(tmp_path):
    """Half C–V tables, half Touchstone files: CJO and C(5 V) within 3 % for every part."""
    parts = _parts(16, seed=7)
    build_reel(tmp_path / "reel", parts)
    cap = tmp_path / "reel" / "capacitance"
    (cap / "X99_2V.s1p").write_text("not a touchstone file\n")
    with open(cap / "index.csv", "a") as fh:
        fh.write("X99_2V.s1p,X99,2,reflection\n")
    result = extract_capacitance(load_reel(tmp_path / "reel"), [])
    t = result.table.set_index("device")
    assert sorted(t.index) == sorted(list(parts["device"]) + ["X99"])
    assert t.loc["X99", "status"] == "rejected" and "X99_2V.s1p" in t.loc["X99", "note"]
    c5 = capacitance(result.table, 5.0)
    c5 = dict(zip(c5.device, c5.value))
    worst_cjo = worst_c5 = 0.0
    for _, p in parts.iterrows():
        row = t.loc[p.device]
        assert row["status"] == "ok", f"{p.device}: {row['note']}"
        assert row["sources"] == ("cv" if p.name < len(parts) // 2 else "vna")
        # Nagel (SPICE2) law of each part, as synthesised (scikit-rf for the VNA half).
        e_cjo = row["cj0_F"] / p.cjo - 1
        e_c5 = c5[p.device] / nagel(5.0, p.cjo, p.vj, p.m) - 1
        assert abs(e_cjo) < 0.03, p.device
        assert abs(e_c5) < 0.03, p.device
        worst_cjo, worst_c5 = max(worst_cjo, abs(e_cjo)), max(worst_c5, abs(e_c5))
    print(f"independent reel: worst CJO error {100 * worst_cjo:.2f} %, "
          f"worst C(5 V) error {100 * worst_c5:.2f} %")
    vna = result.extras["points"]
    vna = vna[(vna["kind"] == "vna") & (vna["device"] != "X99")]
    assert (vna["open_file"] != "").all() and (vna["status"] == "ok").all()


def test_demo_reel_capacitance_covers_every_part():
    """data_demo: every part with C–V or Touchstone data has a row; both sources combined."""
    truth = pd.read_csv(ROOT / "data_demo" / "truth.csv", comment="#", dtype={"device": str},
                        keep_default_na=False)
    result = extract_capacitance(load_reel(ROOT / "data_demo"), [])
    t = result.table.set_index("device")
    with_data = truth.loc[truth["capacitance"] != "", "device"]
    assert set(t.index) == set(with_data) and len(t) == 228
    both = set(truth.loc[truth["capacitance"] == "cv+vna", "device"])
    assert set(t.index[t["sources"] == "cv+vna"]) == both and len(both) == 20
    assert (t.loc[sorted(both), "vna_points"] == 3).all()
    assert (t["status"] == "ok").all()
    for col in ("device", "status", "note", "cj0_F", "vj_V", "m", "fit_rms_F"):
        assert col in result.table.columns


def test_cli_parse_then_extract_equals_direct_extraction(tmp_path):
    """`kinset fit-touchstone` + `kinset parse capacitance` + `kinset extract capacitance`
    on the files they write give the same table as reading the reel at once."""
    import subprocess
    import sys

    from kinset.io.output import read_result

    def kinset(*args):
        r = subprocess.run([sys.executable, "-m", "kinset", *map(str, args)],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0, r.stderr
        return r

    parts = _parts(4, seed=5)
    reel = tmp_path / "reel"
    build_reel(reel, parts)
    kinset("fit-touchstone", "-o", tmp_path / "v.npz", reel / "capacitance" / "index.csv",
           "--devices", "P02", "P03")
    kinset("parse", "capacitance", "-o", tmp_path / "c.npz", reel / "capacitance" / "cv_table.csv")
    out = tmp_path / "out" / "capacitance.csv"
    kinset("extract", "capacitance", "--reel", reel, "-o", out, tmp_path / "c.npz", tmp_path / "v.npz")
    table = read_result(out)
    assert (out.parent / "capacitance_points.csv").is_file()
    direct = extract_capacitance(load_reel(reel), []).table
    assert list(table["device"]) == list(direct["device"]) == list(parts["device"])
    np.testing.assert_allclose(table[["cj0_F", "vj_V", "m"]], direct[["cj0_F", "vj_V", "m"]],
                               rtol=1e-8)


def test_vj_and_m_from_a_narrow_bias_range_are_not_determined():
    """The depletion law (Sze & Ng, eq. 2.3 generalised: C = CJO/(1 + VR/VJ)^M) sampled with
    0.1 % noise: over 0–10 V VJ and M are determined; over 4–5 V they trade off against each
    other (standard errors above VJ_REL_SE / M_SE), and the row says so with its code while
    C inside that range stays within 0.5 % of the law."""
    from kinset.fitting.capacitance import M_SE, VJ_REL_SE
    wide = np.linspace(0.0, 10.0, 11)
    narrow = np.linspace(4.0, 5.0, 6)
    curves = {"W": (wide, nagel(wide, 2e-12, 0.7, 0.45)),
              "T": (narrow, nagel(narrow, 2e-12, 0.7, 0.45))}
    table = fit_capacitance(cv_points(curves, 1e-3, 4), SETTINGS)[0].set_index("device")
    assert "vj_m_not_determined" not in table.loc["W", "reason_code"]
    assert table.loc["W", "vj_V_se"] / table.loc["W", "vj_V"] <= VJ_REL_SE
    t = table.loc["T"]
    assert "vj_m_not_determined" in t["reason_code"].split(";")
    assert t["vj_V_se"] / t["vj_V"] > VJ_REL_SE or t["m_se"] > M_SE
    assert "4–5 V" in t["note"]
    c = nagel(4.5, t["cj0_F"], t["vj_V"], t["m"])
    assert c == pytest.approx(nagel(4.5, 2e-12, 0.7, 0.45), rel=5e-3)
