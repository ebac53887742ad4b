"""Application profiles: the shipped ones, schema errors, units, and the guard band rule."""

import math
from pathlib import Path

import numpy as np
import pytest

from kinset.errors import InputError
from kinset.matching.criteria import (combined_uncertainty, guard_cap, instrument_uncertainty,
                                     pair_guard)
from kinset.io.profiles import shipped_profiles
from kinset.matching.profile import load_profile

SIX = {"ring_mixer_quad", "detector_pair", "audio_clipper_pair", "germanium_clipper_pair",
       "varactor_tracking_pair", "sampling_bridge_quad"}


def test_six_shipped_profiles_load_and_explain_every_number():
    shipped = shipped_profiles()
    assert SIX <= set(shipped)
    for name in SIX:
        profile = load_profile(name)
        assert profile.dimensions and profile.set_size >= 2
        lines = Path(shipped[name]).read_text(encoding="utf-8").splitlines()
        for i, line in enumerate(lines):
            if line.strip().startswith("- {quantity"):
                # every criterion and limit has a comment right above it saying why
                assert lines[i - 1].strip().startswith("#"), f"{name}: line {i + 1} has no reason"


def test_conditions_expand_to_dimensions_and_units_convert(write):
    p = write("p.yaml", "set_size: 2\nmatch:\n"
                        "  - {quantity: forward_voltage, at_current_A: [1.0e-5, 1.0e-3], tolerance_mV: 2}\n"
                        "  - {quantity: capacitance, at_reverse_voltage_V: 4, tolerance_pF: 0.05, weight: 0.5}\n"
                        "screen:\n  - {quantity: reverse_current, at_reverse_voltage_V: 20, max_nA: 50}\n")
    prof = load_profile(str(p))
    assert [d.name for d in prof.dimensions] == ["forward_voltage_at_10uA", "forward_voltage_at_1mA",
                                                 "capacitance_at_4V"]
    assert prof.dimensions[0].tolerance == pytest.approx(2e-3)
    assert prof.dimensions[2].tolerance == pytest.approx(5e-14)
    assert prof.screens[0].maximum == pytest.approx(5e-8)
    assert prof.name == "p"


@pytest.mark.parametrize("text,words,line", [
    ("set_size: 2\nmatch:\n  - {quantity: forward_volts, tolerance_V: 1}\n", "forward_volts", 3),
    ("set_size: 2\nmach: []\n", "unknown key 'mach'", 2),
    ("set_size: 2\nmatch:\n  - {quantity: forward_voltage, at_current_A: 1.0e-3, tolerance_A: 1}\n",
     "not V", 3),
    ("set_size: 2\nmatch:\n  - {quantity: forward_voltage, tolerance_V: 0.001}\n", "needs 'at_current_A'", 3),
    ("set_size: 2\nmatch:\n  - {quantity: recovery_time, at_current_A: 1.0e-3, tolerance_s: 1e-9}\n",
     "does not apply", 3),
    ("set_size: 2\nmatch:\n  - {quantity: ideality, tolerance: 0.1, tolerance_percent: 1}\n",
     "exactly one tolerance", 3),
    ("set_size: 2\nmatch:\n  - {quantity: ideality, tolerence: 0.1}\n", "tolerence", 3),
])
def test_profile_errors_name_key_and_line(write, text, words, line):
    p = write("bad.yaml", text)
    with pytest.raises(InputError) as err:
        load_profile(str(p))
    assert words in str(err.value)
    assert err.value.line == line
    assert str(p) in str(err.value)


def test_unknown_profile_name_lists_shipped_ones():
    with pytest.raises(InputError, match="ring_mixer_quad"):
        load_profile("no_such_profile")


def test_guard_band_rectangular_rule():
    # JCGM 100:2008 §4.3.7: a spec of ±(0.01 % + 100 µV) read as a rectangular
    # distribution of half-width a = 1e-4 × 0.6 V + 100 µV = 160 µV: u = a/√3 = 92.38 µV.
    # The difference of two readings: u·√2 = 130.6 µV; JCGM 106:2012 guarded acceptance
    # with k = 2: guard = 261.3 µV, so a 3 mV tolerance accepts spreads up to 2.739 mV.
    accuracy = {"voltage": {"gain": 1e-4, "offset_V": 1e-4}}
    u = float(instrument_uncertainty("forward_voltage", 0.6, accuracy))
    assert u == pytest.approx(160e-6 / math.sqrt(3), rel=1e-12)
    guard = pair_guard(u, u)
    assert guard == pytest.approx(261.3e-6, abs=0.05e-6)
    assert 3e-3 - guard == pytest.approx(2.7387e-3, abs=0.05e-6)


def test_guarded_acceptance_of_two_readings_with_their_own_uncertainties():
    # JCGM 106:2012 §8 (guarded acceptance, guard w = k·u of the measured quantity, k = 2),
    # worked by hand: two forward voltages 0.6012 V and 0.6000 V, the first from a thin fit
    # (fit part 300 µV), the second from a full sweep (fit part 40 µV), both read on a
    # meter of ±(0.01 % + 100 µV) (rectangular, JCGM 100:2008 §4.3.7).
    #   u_inst(0.6012 V) = (60.12 + 100) µV/√3 = 92.445 µV; u_a = √(92.445² + 300²) = 313.92 µV
    #   u_inst(0.6000 V) = (60.00 + 100) µV/√3 = 92.376 µV; u_b = √(92.376² + 40²)  = 100.66 µV
    #   u(difference) = √(u_a² + u_b²) = 329.67 µV; guard 2·u = 659.3 µV
    #   measured spread 1.2 mV + 659.3 µV = 1.859 mV: accepted for a 2 mV tolerance,
    #   not for 1.8 mV.
    accuracy = {"voltage": {"gain": 1e-4, "offset_V": 1e-4}}
    u_a, u_b = combined_uncertainty("forward_voltage", np.array([0.6012, 0.6000]),
                                    np.array([300e-6, 40e-6]), accuracy)
    assert u_a == pytest.approx(313.92e-6, abs=0.01e-6)
    assert u_b == pytest.approx(100.66e-6, abs=0.01e-6)
    guard = pair_guard(u_a, u_b)
    assert guard == pytest.approx(659.3e-6, abs=0.1e-6)
    spread = 0.6012 - 0.6000
    assert spread + guard <= 2e-3
    assert spread + guard > 1.8e-3


def test_guard_cap_keeps_the_most_parts_times_tolerance():
    # Closed form of the rule in kinset.matching.criteria.guard_cap: with tolerance 3 mV,
    # 98 parts at u = 100 µV and two thin ones at 500 µV, capping at 100 µV keeps
    # 98·(3 − 0.283) = 266.3 (mV·parts), capping at 500 µV keeps 100·(3 − 1.414) = 158.6:
    # the thin ones are left out. Ten parts of 120 µV among ninety of 100 µV are kept:
    # 100·(3 − 0.339) = 266.1 > 90·(3 − 0.283) = 244.5.
    u = np.r_[np.full(98, 100e-6), 500e-6, 500e-6]
    assert guard_cap(u, 3e-3) == pytest.approx(100e-6)
    u = np.r_[np.full(90, 100e-6), np.full(10, 120e-6)]
    assert guard_cap(u, 3e-3) == pytest.approx(120e-6)
    assert guard_cap(np.array([]), 3e-3) == 0.0
