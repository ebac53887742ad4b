"""Leakage extraction: conventions, instrument behaviour, bad sweeps, the demo reel.

Accuracy against the outside reference simulator is in ``test_leakage_ngspice.py``;
the sweeps used here as realistic input are those ngspice reference sweeps
(``tests/reference/ngspice/leakage``), edited the way instruments and people edit them.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from kinset.extract import extract_leakage, leakage_settings
from kinset.fitting.leakage import (LeakageSettings, fit_leakage, report_column,
                                    temperature_law)
from kinset.io.datasets import read_leakage
from kinset.io.reel import load_reel
from kinset.physics.constants import ZERO_CELSIUS
from kinset.physics.leakage import generation_temperature_factor, leakage_temperature_factor
from kinset.quantities import reverse_current

ROOT = Path(__file__).resolve().parents[1]
REFERENCE = ROOT / "tests" / "reference" / "ngspice" / "leakage"
DEMO = ROOT / "data_demo"
T25 = 25.0 + ZERO_CELSIUS


def _settings(report=(20.0,), material="silicon", eg=1.11, xti=3.0):
    eg, xti, n, law = temperature_law(material, eg, xti)
    return LeakageSettings(T25, T25, tuple(report), 1e-4, eg, xti, n, law)


def _sweep(name: str, device: str | None = None) -> pd.DataFrame:
    frame = read_leakage(REFERENCE / f"{name}.csv")
    if device:
        frame["device"] = device
    return frame


def test_silicon_leakage_doubles_about_every_10_K():
    factor = float(generation_temperature_factor(35.0 + ZERO_CELSIUS, T25, 1.11))
    # Common practice: silicon leakage roughly doubles every 10 K.
    assert 1.6 <= factor <= 2.6
    eg, xti, n, _ = temperature_law("silicon", 1.11, 3.0)
    assert float(leakage_temperature_factor(35.0 + ZERO_CELSIUS, T25, eg, xti, n)) == factor
    # Schottky: thermionic emission over a 0.69 eV barrier (SPICE defaults EG 0.69,
    # XTI 2, from memory) roughly doubles every 10 K too, a little faster than silicon's
    # generation current below 1 eV of activation: between 1.6 and 2.6 again.
    eg, xti, n, law = temperature_law("schottky", 0.69, 2.0)
    assert "thermionic" in law
    assert 1.6 <= float(leakage_temperature_factor(35.0 + ZERO_CELSIUS, T25, eg, xti, n)) <= 2.6


def test_report_column_names():
    assert report_column(20) == "ir_A_at_20V"
    assert report_column(2.5) == "ir_A_at_2.5V"


def test_values_outside_the_sweep_are_empty_with_a_reason():
    table = fit_leakage(_sweep("soft_68V"), _settings(report=(0.5, 20.0, 100.0))).iloc[0]
    assert np.isfinite(table["ir_A_at_20V"])
    assert np.isnan(table["ir_A_at_0.5V"]) and np.isnan(table["ir_A_at_100V"])
    assert "ir at 0.5 V not measured: the lowest reading is 1 V" in table["note"]
    assert "ir at 100 V not measured: the sweep stopped at 69.79 V in breakdown" in table["note"]


def test_compliance_reading_is_kept_and_unreached_set_points_are_not():
    """The voltage reached at the current limit is data; later set-points are not."""
    clean = _sweep("soft_68V")
    last = clean.iloc[-1]
    # Instrument behaviour (issue 3): in compliance a source reports the voltage it
    # reached at its current limit, a valid reading; some also report the remaining
    # set-points at the same limit current, voltages the part never saw.
    extra = pd.DataFrame([dict(last, reverse_voltage=v) for v in (70.0, 75.0, 80.0)])
    padded = pd.concat([clean, extra], ignore_index=True)
    a = fit_leakage(clean, _settings()).iloc[0]
    b = fit_leakage(padded, _settings()).iloc[0]
    assert b["bv_V"] == a["bv_V"]
    assert b["sweep_max_V"] == pytest.approx(last["reverse_voltage"])
    assert "3 reading(s) at the current limit" in b["note"]
    # Dropping the compliance reading loses the breakdown: it was needed.
    c = fit_leakage(clean.iloc[:-1], _settings()).iloc[0]
    assert np.isnan(c["bv_V"])


def test_bad_sweeps_are_rejected_with_a_reason_and_none_is_lost():
    good = _sweep("soft_68V", "good")
    zero = good.assign(device="zero", reverse_current=0.0)
    swapped = good.assign(device="swapped", reverse_current=good["reverse_voltage"],
                          reverse_voltage=good["reverse_current"])
    single = good[good["reverse_voltage"] == 20.0].assign(device="single")
    signed = good.assign(device="signed", reverse_voltage=-good["reverse_voltage"],
                         reverse_current=-good["reverse_current"])
    table = fit_leakage(pd.concat([good, zero, swapped, single, signed], ignore_index=True),
                        _settings()).set_index("device")
    assert sorted(table.index) == ["good", "signed", "single", "swapped", "zero"]
    assert table.loc["zero", "status"] == "rejected"
    assert "no usable reading" in table.loc["zero", "note"]
    assert table.loc["swapped", "status"] == "rejected"
    # the note names the column (the contract's, as this table has no header) and the
    # two likely slips: a unit, or the columns swapped
    assert "in column reverse_current_A" in table.loc["swapped", "note"]
    assert "columns swapped?" in table.loc["swapped", "note"]
    assert table.loc["single", "status"] == "warning"
    assert table.loc["single", "ir_A_at_20V"] == table.loc["good", "ir_A_at_20V"]
    assert "too few for a leakage model" in table.loc["single", "note"]
    assert table.loc["signed", "ir_A_at_20V"] == table.loc["good", "ir_A_at_20V"]
    assert table.loc["signed", "bv_V"] == table.loc["good", "bv_V"]
    assert "signed" in table.loc["signed", "note"]
    ev = reverse_current(table.reset_index(), 20.0, T25)
    why = dict(zip(ev.device, ev.reason))
    assert why["good"] == "" and "rejected" in why["zero"] and "too few" in why["single"]


def test_two_temperatures_of_one_part_combine():
    """The 25 °C and 35 °C ngspice sweeps of one card, as one device, give the 25 °C value."""
    both = pd.concat([_sweep("soft_68V", "D1"), _sweep("soft_68V_35C", "D1")], ignore_index=True)
    row = fit_leakage(both, _settings()).iloc[0]
    cold = fit_leakage(_sweep("soft_68V"), _settings()).iloc[0]
    # ngspice 39 reference simulator (intrinsic-density law for the card's N=2, XTI=3).
    assert row["ir_A_at_20V"] == pytest.approx(cold["ir_A_at_20V"], rel=0.01)
    assert row["sweep_t_min_C"] == 25 and row["sweep_t_max_C"] == 35


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 2**31 - 1))
def test_invariant_to_row_order(seed):
    points = read_leakage(DEMO / "leakage" / "leak_01.csv")
    shuffled = points.sample(frac=1.0, random_state=seed).reset_index(drop=True)
    pd.testing.assert_frame_equal(fit_leakage(points, _settings()),
                                  fit_leakage(shuffled, _settings()))


@pytest.fixture(scope="module")
def demo():
    reel = load_reel(DEMO)
    return extract_leakage(reel, []).table.set_index("device"), reel


def test_demo_reel_leakage(demo):
    """data_demo/truth.csv (the generator's parameters): damaged parts and breakdown parts."""
    table, reel = demo
    truth = pd.read_csv(DEMO / "truth.csv", comment="#", keep_default_na=False).set_index("device")
    assert sorted(table.index) == sorted(truth.index)
    damaged = set(truth.index[truth["role"] == "damaged leaky"])
    breakdown = set(truth.index[truth["role"] == "breakdown in sweep"])
    assert damaged == {"D079", "D084", "D104", "D199", "D238"}
    assert breakdown == {"D041", "D061", "D086", "D224"}
    flagged = set(table.index[table["note"].str.contains("possible damage")])
    assert flagged == damaged
    assert set(table.index[table["status"] != "ok"]) == damaged
    for d in damaged:
        assert "× the reel median at 20 V: possible damage" in table.loc[d, "note"]
    assert set(table.index[table["bv_V"].notna()]) == breakdown
    # truth.csv: BV is where the breakdown term alone reaches 100 µA (the reel's
    # breakdown current); the leakage beside it is a few nA.
    bv = table.loc[sorted(breakdown), "bv_V"] / truth.loc[sorted(breakdown), "bv_V"].astype(float)
    assert (bv - 1).abs().max() < 0.01
    assert leakage_settings(reel).report_voltages == (20.0,)
