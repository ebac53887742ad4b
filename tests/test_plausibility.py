"""Readings and tolerances no small-signal part gives, and the unit slip named for each.

References: SI prefixes are steps of 1000 (BIPM, The International System of Units, 9th
edition, 2019, Table 7), checked against scipy.constants; the forward sweeps follow the
diode law with series resistance (W. Shockley, Bell Syst. Tech. J. 28, 435-489, 1949,
V = N Vt ln(1 + I/IS) + I RS, as in tests/test_forward_fit.py). The bounds themselves
(kinset.fitting.plausible, kinset.matching.profile.TOLERANCE_RANGES) are common practice
or from memory, as each says; the tests check that a reading 1000× past its unit is
caught and named, and that the clean reading is not.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest
import scipy.constants as sc

from kinset.cli import main
from kinset.fitting.forward import ForwardSettings, fit_forward
from kinset.format import likely_unit
from kinset.io.datasets import read_forward
from kinset.io.reel import load_reel
from kinset.extract import extract_forward
from kinset.matching.profile import TOLERANCE_RANGES, load_profile
from kinset.outcomes import split_codes
from kinset.io.profiles import shipped_profiles

from test_corpus import demo  # noqa: F401  (the corpus' demo reel fixture)
from test_forward_fit import T25, one, sweep

# A DC fixture of 300 K/W: at amperes this would "self-heat" by thousands of kelvin.
HOT = ForwardSettings(T25, T25, 1.11, 3.0, thermal_resistance=300.0)


# ------------------------------------------------------------------- likely_unit

@pytest.mark.parametrize("value,unit,typical,limit,expected", [
    # 10 written under A, usually about 1 mA: 10 mA is one decade from it, 10 µA two.
    (10.0, "A", sc.milli, math.inf, "mA"),
    # 650 under V with a 3 V bound: V is past the bound, 650 mV is nearest 0.6 V.
    (650.0, "V", 0.6, 3.0, "mV"),
    # 5 under A for a leakage of about 10 nA: 5 nA is 0.3 decade away, 5 µA 2.7.
    (5.0, "A", 10 * sc.nano, 1.0, "nA"),
    # 2.2 under F for about 1 pF: 2.2 pF.
    (2.2, "F", sc.pico, sc.micro, "pF"),
    # 2.2 under µF (2.2e-6 F in SI): the number 2.2 again, so pF again.
    (2.2 * sc.micro, "uF", sc.pico, sc.micro, "pF"),
    # a plausible reading keeps its own unit
    (sc.milli, "A", sc.milli, 1.0, "A"),
    (10 * sc.milli, "mA", sc.milli, 1.0, "mA"),
    # nothing positive and finite to judge: the unit as written
    (0.0, "A", sc.milli, 1.0, "A"),
    (float("nan"), "mA", sc.milli, 1.0, "mA"),
])
def test_likely_unit_closed_forms(value, unit, typical, limit, expected):
    assert likely_unit(value, unit, typical, limit) == expected


# ------------------------------------------------------------------- forward readings

def test_milliamperes_under_an_ampere_column_reject_the_part_without_self_heating():
    clean = sweep("A", 2.7e-9, 1.85, 0.6)          # 10 µA .. 10 mA
    slipped = clean.copy()
    slipped["current"] *= 1e3                      # the numbers of mA, read as A
    slipped["column_current"] = "current_A"
    out, readings = fit_forward(slipped, HOT)
    row = one(out, "A")
    assert row["status"] == "rejected"
    assert split_codes([row["reason_code"]])[0] == ["implausible_current"]
    assert row["note"].startswith("forward currents up to 10 A in column current_A: "
                                  "this looks like mA written as A")
    # nothing is computed from currents the part never carried
    assert math.isnan(row["self_heating_K"]) and math.isnan(row["is_A"])
    assert not readings["used"].any()
    # the same sweep in its own unit is a part like any other
    ok = one(fit_forward(clean, HOT)[0], "A")
    assert "implausible" not in ok["reason_code"]


def test_a_column_in_mA_holding_amperes_times_1000_names_that_column():
    pts = sweep("A", 2.7e-9, 1.85, 0.6)
    pts["current"] *= 1e3                          # µA numbers under current_mA
    pts["column_current"] = "current_mA"
    row = one(fit_forward(pts, HOT)[0], "A")
    assert "in column current_mA: this looks like µA written as mA" in row["note"]


def test_supply_form_names_the_columns_the_current_came_from(tmp_path: Path):
    # 5 V over 1 Ω (meant 1 kΩ): Ohm's law gives about 4.3 A through the diode.
    f = tmp_path / "supply.csv"
    f.write_text("device,supply_V,resistance_ohm,voltage_V\n"
                 + "".join(f"D1,{s},1,{v}\n" for s, v in ((5, 0.70), (3, 0.68), (2, 0.66))))
    points = read_forward(f)
    row = one(fit_forward(points, HOT)[0], "D1")
    assert row["reason_code"].split(";")[0] == "implausible_current"
    assert "in column (supply_V \u2212 voltage_V)/resistance_ohm" in row["note"]


def test_millivolts_under_a_volt_column_name_the_material():
    pts = sweep("A", 2.7e-9, 1.85, 0.6)
    pts["voltage"] *= 1e3
    pts["column_voltage"] = "voltage_V"
    for material in ("silicon", "schottky", "germanium"):
        s = ForwardSettings(T25, T25, 1.11, 3.0, thermal_resistance=300.0, material=material)
        row = one(fit_forward(pts, s)[0], "A")
        assert row["reason_code"] == "implausible_voltage"
        assert "in column voltage_V: this looks like mV written as V" in row["note"]
        assert f"small-signal {material} diode" in row["note"]


def test_the_demo_reel_has_no_implausible_reading(demo):  # noqa: F811
    table = extract_forward(load_reel(demo), []).table
    assert not table["reason_code"].str.contains("implausible").any()


# ------------------------------------------------------------------- profile tolerances

def _profile(tmp_path: Path, criterion: str) -> Path:
    p = tmp_path / "mine.yaml"
    p.write_text(f"name: mine\nset_size: 2\nmatch:\n  - {{{criterion}}}\n", encoding="utf-8")
    return p


@pytest.mark.parametrize("criterion,words", [
    # 1 V meant as 1 mV: 1 × 10^-3 (BIPM Table 7)
    ("quantity: forward_voltage, at_current_A: 1.0e-3, tolerance_V: 1",
     "tolerance_V: 1 (line 4): forward voltage tolerances are usually 100 µV-100 mV; "
     "did you mean 1 mV (tolerance_V: 0.001)?"),
    ("quantity: capacitance, at_reverse_voltage_V: 0, tolerance_F: 1.0e-9",
     "did you mean 1 pF (tolerance_F: 1e-12)?"),
    ("quantity: capacitance, at_reverse_voltage_V: 0, tolerance_percent: 150",
     "tolerance_percent: 150 (line 4): capacitance tolerances in percent are usually"),
])
def test_implausible_tolerances_warn_with_the_likely_unit(tmp_path, criterion, words):
    profile = load_profile(str(_profile(tmp_path, criterion)))
    assert len(profile.warnings) == 1 and words in profile.warnings[0], profile.warnings
    assert profile.dimensions[0].tolerance > 0       # a warning, not an error


def test_plausible_tolerances_and_the_shipped_profiles_give_no_warning(tmp_path):
    ok = _profile(tmp_path, "quantity: forward_voltage, at_current_A: 1.0e-3, tolerance_mV: 2")
    assert load_profile(str(ok)).warnings == []
    for name in shipped_profiles():
        assert load_profile(name).warnings == [], name
    assert all(r.low < r.high and r.reason for r in TOLERANCE_RANGES.values())


def test_check_reel_prints_the_profile_warning(demo, tmp_path, capsys):  # noqa: F811
    reel = tmp_path / "reel"
    shutil.copytree(demo, reel)
    (reel / "profiles").mkdir()
    _profile(reel / "profiles", "quantity: forward_voltage, at_current_A: 1.0e-3, "
                                "tolerance_V: 1")
    yaml = reel / "reel.yaml"
    yaml.write_text(yaml.read_text(encoding="utf-8").replace(
        "applications: [audio_clipper_pair, ring_mixer_quad]",
        "applications: [profiles/mine.yaml]"), encoding="utf-8")
    assert "applications: [profiles/mine.yaml]" in yaml.read_text(encoding="utf-8")
    assert main(["check-reel", "--reel", str(reel)]) == 0
    err = capsys.readouterr().err
    assert "mine.yaml: warning: tolerance_V: 1" in err and "did you mean 1 mV" in err


def test_every_bound_is_above_its_typical_reading():
    from kinset.fitting import plausible
    bounds = [plausible.FORWARD_CURRENT, plausible.REVERSE_CURRENT, plausible.REVERSE_VOLTAGE,
              plausible.CAPACITANCE, *plausible.FORWARD_VOLTAGE.values()]
    assert all(b.limit > b.typical > 0 and b.reason for b in bounds)
    assert np.all([b.contract_column.endswith("_" + b.unit) for b in bounds])
