"""The vectorised forward fit: recovery of known parameters, and awkward data."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st
from scipy.optimize import curve_fit

from kinset.fitting.forward import ForwardSettings, fit_forward
from kinset.physics.forward import saturation_current_at, voltage_from_current

T25, T35 = 298.15, 308.15
SI = ForwardSettings(reference_temperature=T25, ambient_temperature=T25,
                     activation_energy=1.11, xti=3.0, thermal_resistance=0.0)


def sweep(device, i_s, n, rs, temperature=T25, currents=None, noise=0.0, rng=None):
    currents = np.logspace(-5, -2, 25) if currents is None else np.asarray(currents, float)
    i_s_t = saturation_current_at(i_s, temperature, T25, n, 1.11, 3.0)
    v = voltage_from_current(currents, i_s_t, n, rs, temperature)
    if noise:
        v = v + rng.normal(0, noise, v.shape)
    return pd.DataFrame({"device": device, "voltage": v, "current": currents,
                         "temperature": temperature, "position": np.nan,
                         "source": "mem", "line": np.arange(len(v)) + 2})


def one(table, device):
    return table.set_index("device").loc[device]


def test_recovers_parameters_from_noiseless_sweeps_at_two_temperatures():
    pts = pd.concat([sweep("A", 2.7e-9, 1.85, 0.6), sweep("B", 2.7e-9, 1.85, 0.6, T35),
                     sweep("C", 1e-14, 1.0, 5.0), sweep("D", 5e-8, 1.05, 8.0, T35)])
    out, _ = fit_forward(pts, SI)
    for dev, (i_s, n, rs) in {"A": (2.7e-9, 1.85, 0.6), "B": (2.7e-9, 1.85, 0.6),
                              "C": (1e-14, 1.0, 5.0), "D": (5e-8, 1.05, 8.0)}.items():
        row = one(out, dev)
        assert row["status"] == "ok", row["note"]
        assert row["is_A"] == pytest.approx(i_s, rel=1e-6)
        assert row["n"] == pytest.approx(n, rel=1e-7)
        assert row["rs_ohm"] == pytest.approx(rs, rel=1e-6)
        assert row["points"] == 25


def test_parameters_are_reported_at_reference_temperature_not_measurement():
    # The same part measured at 35 °C reports the same IS as at 25 °C; a fit that
    # ignored the temperature would report IS(35 °C), several times larger.
    out, _ = fit_forward(sweep("W", 2.7e-9, 1.85, 0.6, T35), SI)
    assert one(out, "W")["is_A"] == pytest.approx(2.7e-9, rel=1e-6)
    assert one(out, "W")["t_min_C"] == pytest.approx(35.0)


def test_single_and_two_points_are_kept_without_a_fit():
    pts = pd.concat([sweep("S", 2.7e-9, 1.85, 0.6, currents=[0.63e-3]),
                     sweep("T", 2.7e-9, 1.85, 0.6, currents=[1e-4, 1e-3])])
    out, readings = fit_forward(pts, SI)
    s, t = one(out, "S"), one(out, "T")
    assert s["status"] == "warning" and "single point" in s["note"]
    assert "cannot see crossing curves" in s["note"]
    assert np.isnan(s["is_A"]) and s["points"] == 1
    assert t["status"] == "warning" and "two points" in t["note"]
    assert readings["used"].sum() == 3


def test_zero_and_negative_currents_are_ignored_with_a_note():
    pts = sweep("A", 2.7e-9, 1.85, 0.6)
    pts.loc[0, "current"] = 0.0
    pts.loc[1, "current"] = -1e-6
    out, readings = fit_forward(pts, SI)
    row = one(out, "A")
    assert "2 reading(s) with zero or negative current ignored" in row["note"]
    assert row["points"] == 23
    assert row["n"] == pytest.approx(1.85, rel=1e-6)
    assert len(readings) == 25  # nothing dropped from the readings table


def test_reversed_sign_convention_is_rejected_with_reason():
    pts = sweep("R", 2.7e-9, 1.85, 0.6)
    pts["current"] *= -1
    pts["voltage"] *= -1
    out, _ = fit_forward(pts, SI)
    row = one(out, "R")
    assert row["status"] == "rejected" and "reversed" in row["note"]


def test_compliance_plateau_is_left_out():
    # A voltage sweep that hits a 5 mA current limit: the instrument reports the
    # limit current while the programmed voltage keeps rising.
    pts = sweep("C", 2.7e-9, 1.85, 0.6, currents=np.logspace(-5, np.log10(5e-3), 20))
    top = pts.iloc[[-1] * 4].copy()
    top["voltage"] = top["voltage"].to_numpy() + np.array([0.01, 0.02, 0.03, 0.04])
    out, readings = fit_forward(pd.concat([pts, top]), SI)
    row = one(out, "C")
    assert "at the current limit" in row["note"]
    assert row["n"] == pytest.approx(1.85, rel=1e-4)
    assert row["points"] == 19
    assert readings["used"].sum() == 19


def test_duplicate_points_do_not_disturb_the_fit():
    pts = sweep("A", 2.7e-9, 1.85, 0.6)
    out, _ = fit_forward(pd.concat([pts, pts.iloc[:5]]), SI)
    assert one(out, "A")["rs_ohm"] == pytest.approx(0.6, rel=1e-6)


def test_self_heating_warning():
    # ΔT = I·V·Rth: 10 mA × ~0.75 V × 300 K/W ≈ 2.2 K; at about −2 mV/K (common
    # practice for silicon) that is ~4 mV, far above the 0.5 mV the issue allows.
    hot = ForwardSettings(T25, T25, 1.11, 3.0, thermal_resistance=300.0)
    out, _ = fit_forward(sweep("A", 2.7e-9, 1.85, 0.6), hot)
    row = one(out, "A")
    assert row["status"] == "warning" and "self-heating" in row["note"]
    v_top = voltage_from_current(1e-2, 2.7e-9, 1.85, 0.6, T25)
    assert row["self_heating_K"] == pytest.approx(1e-2 * v_top * 300.0, rel=1e-9)
    cool = ForwardSettings(T25, T25, 1.11, 3.0, thermal_resistance=300.0)
    out2, _ = fit_forward(sweep("B", 2.7e-9, 1.85, 0.6, currents=np.logspace(-6, -4, 10)), cool)
    assert one(out2, "B")["status"] == "ok"


def dc_heated_sweep(rth):
    """A DC sweep of device H whose junction runs at ambient + I·V·Rth (the junction law
    at that temperature, solved as a fixed point)."""
    currents = np.logspace(-5, np.log10(2e-2), 25)
    v = voltage_from_current(currents, 2.7e-9, 1.85, 0.6, T25)
    for _ in range(50):   # fixed point of V = f(I, T_amb + I·V·Rth)
        t = T25 + currents * v * rth
        v = voltage_from_current(currents, saturation_current_at(2.7e-9, t, T25, 1.85, 1.11, 3.0),
                                 1.85, 0.6, t)
    return pd.DataFrame({"device": "H", "voltage": v, "current": currents, "temperature": T25,
                         "position": np.nan, "source": "m", "line": 0})


def test_self_heating_correction_removes_the_bias():
    # A DC sweep heats the junction by I·V·Rth: simulate that (the junction law at
    # ambient + ΔT), then fit with and without the correction.
    rth = 300.0
    pts = dc_heated_sweep(rth)
    warn, _ = fit_forward(pts, ForwardSettings(T25, T25, 1.11, 3.0, rth))
    fixed, _ = fit_forward(pts, ForwardSettings(T25, T25, 1.11, 3.0, rth, correct_self_heating=True))
    assert one(warn, "H")["status"] == "warning"
    assert abs(one(warn, "H")["rs_ohm"] / 0.6 - 1) > 0.2      # heating fools the plain fit
    row = one(fixed, "H")
    assert row["status"] == "ok" and "corrected for self-heating" in row["note"]
    assert row["rs_ohm"] == pytest.approx(0.6, rel=1e-6)
    assert row["n"] == pytest.approx(1.85, rel=1e-7)


def test_standard_errors_match_curve_fit():
    # scipy.optimize.curve_fit (a reference library) on the same data, same model.
    rng = np.random.default_rng(5)
    pts = sweep("A", 2.7e-9, 1.85, 0.6, noise=2e-4, rng=rng)
    out, _ = fit_forward(pts, SI)
    row = one(out, "A")

    def model(i, ln_is, n, rs):
        return voltage_from_current(i, np.exp(ln_is), n, rs, T25)
    p, cov = curve_fit(model, pts["current"], pts["voltage"], p0=[np.log(2e-9), 1.8, 0.5])
    assert row["n"] == pytest.approx(p[1], rel=1e-5)
    assert row["rs_ohm"] == pytest.approx(p[2], rel=1e-4)
    assert row["n_se"] == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-3)
    assert row["rs_ohm_se"] == pytest.approx(np.sqrt(cov[2, 2]), rel=1e-3)


@settings(max_examples=40, deadline=None)
@given(log_is=st.floats(-16, -7), n=st.floats(1.0, 2.2), rs=st.floats(0.2, 30.0),
       warm=st.booleans(), seed=st.integers(0, 2**16))
def test_property_fit_recovers_simulated_parameters(log_is, n, rs, warm, seed):
    # fit(simulate(params)) over the realistic range of small-signal diodes, with
    # 50 µV of noise (a good bench meter) over 1 µA–20 mA.
    rng = np.random.default_rng(seed)
    t = T35 if warm else T25
    pts = sweep("P", 10 ** log_is, n, rs, t, currents=np.logspace(-6, np.log10(2e-2), 40),
                noise=50e-6, rng=rng)
    out, _ = fit_forward(pts, SI)
    row = one(out, "P")
    assert row["is_A"] == pytest.approx(10 ** log_is, rel=0.05)
    assert row["n"] == pytest.approx(n, rel=0.005)
    assert row["rs_ohm"] == pytest.approx(rs, rel=0.05, abs=0.02)
