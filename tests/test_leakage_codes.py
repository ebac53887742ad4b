"""Leakage outcomes as codes: each row's ``reason_code`` names the notes it carries.

The inputs are those of ``test_leakage.py`` and ``test_corpus.py``: the ngspice
reference sweeps (``tests/reference/ngspice/leakage``) edited the way instruments and
people edit them, and the demo reel with its generator's truth (``data_demo/truth.csv``).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from kinset.extract import extract_leakage
from kinset.fitting.leakage import NOTES, fit_leakage
from kinset.io.datasets import read_leakage
from kinset.io.reel import load_reel
from kinset.outcomes import CATALOGUES, SEVERITY, first_code, has_code, split_codes
from kinset.physics.constants import ZERO_CELSIUS
from test_leakage import _settings, _sweep   # the same reference sweeps and settings

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "data_demo"
T25 = 25.0 + ZERO_CELSIUS


def _codes(table: pd.DataFrame) -> dict[str, list[str]]:
    return dict(zip(table["device"], split_codes(table["reason_code"])))


def _status_follows_codes(table: pd.DataFrame) -> None:
    """Each row's status is the most severe least status of its codes (outcomes.compose)."""
    for status, codes in zip(table["status"], split_codes(table["reason_code"])):
        worst = max((SEVERITY[NOTES[c].status] for c in codes), default=0)
        assert SEVERITY[status] == worst, (status, codes)


def test_catalogue_is_registered_under_the_dataset():
    assert CATALOGUES["leakage"] is NOTES
    assert NOTES["possible_damage"].status == "warning"
    assert {NOTES[c].status for c in ("implausible_current", "no_usable_reading",
                                      "files_disagree")} == {"rejected"}


@pytest.fixture(scope="module")
def bad():
    """The bad sweeps of test_leakage.py, plus readings an instrument logs as zero."""
    good = _sweep("soft_68V", "good")
    zero = good.assign(device="zero", reverse_current=0.0)
    swapped = good.assign(device="swapped", reverse_current=good["reverse_voltage"],
                          reverse_voltage=good["reverse_current"])
    single = good[good["reverse_voltage"] == 20.0].assign(device="single")
    signed = good.assign(device="signed", reverse_voltage=-good["reverse_voltage"],
                         reverse_current=-good["reverse_current"])
    gaps = good.assign(device="gaps")
    gaps.loc[gaps.index[:2], "reverse_current"] = 0.0
    table = fit_leakage(pd.concat([good, zero, swapped, single, signed, gaps],
                                  ignore_index=True), _settings(report=(0.5, 20.0, 100.0)))
    return table


def test_a_rejected_row_starts_with_its_reason(bad):
    codes = _codes(bad)
    status = dict(zip(bad["device"], bad["status"]))
    # All currents zero: nothing usable. Voltage and current swapped: amperes of "leakage".
    assert status["zero"] == "rejected" and codes["zero"] == ["no_usable_reading"]
    assert status["swapped"] == "rejected" and codes["swapped"] == ["implausible_current"]
    why = dict(zip(bad["device"], first_code(bad["reason_code"])))
    assert why["zero"] == "no_usable_reading" and why["swapped"] == "implausible_current"
    _status_follows_codes(bad)


def test_sweep_edits_carry_their_codes(bad):
    codes = _codes(bad)
    # One voltage: no model; it is the first note and makes the warning.
    assert codes["single"][0] == "too_few_voltages"
    assert "signed_readings" in codes["signed"]
    assert "unusable_readings" in codes["gaps"] and "unusable_readings" not in codes["good"]
    # ngspice card soft_68V, swept 1 V .. 69.79 V: 0.5 V below the sweep, 100 V past
    # its breakdown (test_leakage.test_values_outside_the_sweep_are_empty_with_a_reason).
    assert codes["good"][:2] == ["ir_below_sweep", "ir_past_breakdown"]
    assert codes["signed"] == ["signed_readings"] + codes["good"]
    # A single reading at 20 V: 100 V lies beyond its sweep, and it never breaks down.
    assert {"ir_beyond_sweep", "no_breakdown"} <= set(codes["single"])
    assert not any(has_code(bad["reason_code"], "possible_damage"))


def test_compliance_set_points_and_a_lost_breakdown():
    """Instrument behaviour (issue 3): set-points at the current limit are left out."""
    clean = _sweep("soft_68V")
    last = clean.iloc[-1]
    extra = pd.DataFrame([dict(last, reverse_voltage=v) for v in (70.0, 75.0, 80.0)])
    padded = fit_leakage(pd.concat([clean, extra], ignore_index=True), _settings())
    assert split_codes(padded["reason_code"])[0][0] == "current_limit"
    assert padded["status"].iloc[0] == "ok"
    # Without its compliance reading the sweep never reaches the breakdown current.
    cut = fit_leakage(clean.iloc[:-1], _settings())
    assert has_code(cut["reason_code"], "no_breakdown").all()
    assert not has_code(fit_leakage(clean, _settings())["reason_code"], "no_breakdown").any()


def test_reading_at_the_breakdown_current_only_is_shorted():
    """ngspice: bv_point.csv is the card's current at exactly -BV, i.e. IBV = 100 µA."""
    row = fit_leakage(_sweep("bv_point"), _settings()).iloc[0]
    assert row["status"] == "warning"
    assert row["reason_code"].split(";")[:2] == ["shorted", "too_few_voltages"]


def test_warm_readings_are_normalised():
    """The 25 °C and 35 °C ngspice sweeps of one card, as one device."""
    both = pd.concat([_sweep("soft_68V", "D1"), _sweep("soft_68V_35C", "D1")],
                     ignore_index=True)
    row = fit_leakage(both, _settings()).iloc[0]
    assert split_codes([row["reason_code"]])[0][-1] == "temperature_normalised"
    cold = fit_leakage(_sweep("soft_68V"), _settings()).iloc[0]
    assert "temperature_normalised" not in cold["reason_code"]


@pytest.fixture(scope="module")
def demo():
    return extract_leakage(load_reel(DEMO), []).table


def test_damaged_parts_are_found_by_code(demo):
    """data_demo/truth.csv: the damaged parts, and only they, carry possible_damage first."""
    truth = pd.read_csv(DEMO / "truth.csv", comment="#", keep_default_na=False)
    damaged = set(truth.loc[truth["role"] == "damaged leaky", "device"])
    flagged = demo[has_code(demo["reason_code"], "possible_damage")]
    assert set(flagged["device"]) == damaged
    assert (first_code(flagged["reason_code"]) == "possible_damage").all()
    assert (flagged["status"] == "warning").all()
    assert list(demo.columns[2:4]) == ["note", "reason_code"]
    _status_follows_codes(demo)


def test_one_id_in_two_disagreeing_files_is_rejected_for_it():
    """test_corpus.py leak_duplicate_id_conflicting: D002's rows ×1000 filed as D001."""
    points = read_leakage(DEMO / "leakage" / "leak_01.csv")
    dup = points[points["device"] == "D002"].assign(
        device="D001", source="zz_dup.csv",
        reverse_current=lambda f: f["reverse_current"] * 1000.0)
    table = fit_leakage(pd.concat([points, dup], ignore_index=True), _settings())
    row = table.set_index("device").loc["D001"]
    assert row["status"] == "rejected" and row["reason_code"] == "files_disagree"
    assert row["note"].startswith("readings in 2 files (leak_01.csv, zz_dup.csv) disagree")
    assert (table["status"] == "rejected").sum() == 1
