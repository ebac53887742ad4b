"""Reverse-recovery analysis: conventions, invariances, and waveforms it must refuse.

The waveforms here are shapes from ``kinset.physics.recovery.recovery_waveform``
(charge-control storage, then an exponential recovery); the tests check properties
that must hold whatever the shape (sample rate, noise, row order) and conventions
from outside kinset. Accuracy against an outside reference is in
``test_recovery_ngspice.py``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

from kinset.extract import extract_recovery, recovery_settings
from kinset.fitting.recovery import RecoverySettings, fit_recovery
from kinset.io.reel import load_reel
from kinset.physics.recovery import recovery_waveform

IF = IR = 10e-3
FAST = settings(max_examples=25, deadline=None)


def waveform(dt, tt=6e-9, tau=1e-9, fall=0.5e-9, i_f=IF, i_r=IR, start=-4e-9, stop=30e-9,
             phase=0.0, t0=0.0):
    t = start + phase * dt + dt * np.arange(int((stop - start) / dt))
    return t, recovery_waveform(t, i_f, i_r, tt, tau, fall, switch_time=t0)


def frame(device, t, i, source="a.csv", **columns):
    out = pd.DataFrame({"device": device, "time": t, "current": i, "source": source,
                        "line": np.arange(len(t)) + 2})
    for k in ("forward_current", "reverse_current"):
        out[k] = columns.get(k, np.nan)
    return out


def run(points, end=None):
    s = RecoverySettings.from_end(IF, IR, end or {"fraction_of_peak": 0.1})
    return fit_recovery(points, s).set_index("device")


def test_default_end_is_the_small_signal_convention(tmp_path):
    """Default end: recovery to 0.1·Irrm, i.e. to 1 mA at IF = IR = 10 mA."""
    (tmp_path / "reel.yaml").write_text("material: silicon\n")
    s = recovery_settings(load_reel(tmp_path))
    # Common practice: small-signal switching diodes are specified at IF = IR = 10 mA,
    # recovery to 1 mA (0.1·IR).
    assert (s.forward_current, s.reverse_current) == (10e-3, 10e-3)
    assert (s.end_rule, s.end_value) == ("fraction_of_peak", (0.1,))
    t, i = waveform(10e-12, tau=0.8e-9)
    default = fit_recovery(frame("D1", t, i), s).iloc[0]
    at_1ma = run(frame("D1", t, i), {"current_A": 1e-3}).iloc[0]
    assert default["irrm_A"] == pytest.approx(IR, rel=0.01)
    assert default["trr_s"] == pytest.approx(at_1ma["trr_s"], abs=2 * 10e-12)


@FAST
@given(dt=st.floats(20e-12, 250e-12), phase=st.floats(0.0, 1.0), tt=st.floats(3e-9, 12e-9),
       tau_ratio=st.floats(0.08, 0.3), fall=st.floats(0.2e-9, 1.0e-9),
       ratio=st.sampled_from([0.5, 1.0, 2.0]))
def test_invariant_to_sample_rate(dt, phase, tt, tau_ratio, fall, ratio):
    """Resampled captures agree with a 5 ps capture within one sample period."""
    tau = tau_ratio * tt
    cond = {"forward_current": ratio * IR, "reverse_current": IR}
    t_f, i_f = waveform(5e-12, tt, tau, fall, i_f=ratio * IR)
    fine = run(frame("D", t_f, i_f, **cond))
    coarse = run(frame("D", *waveform(dt, tt, tau, fall, i_f=ratio * IR, phase=phase), **cond))
    assert (coarse["status"] != "rejected").all(), coarse["note"].iloc[0]
    a, b = fine.iloc[0], coarse.iloc[0]
    for col in ("trr_s", "ta_s", "tb_s", "t0_s"):
        assert abs(a[col] - b[col]) <= dt, col
    # A sharp peak sampled coarsely: within one sample of the peak the current changes
    # by at most its steepest slope there times the sample period.
    near = np.abs(t_f - t_f[np.argmin(i_f)]) <= dt
    slope = np.max(np.abs(np.diff(i_f[near]) / np.diff(t_f[near])))
    assert abs(b["irrm_A"] - a["irrm_A"]) <= max(0.01 * a["irrm_A"], slope * dt)
    assert abs(a["qrr_C"] - b["qrr_C"]) <= a["irrm_A"] * dt


@FAST
@given(seed=st.integers(0, 2**32 - 1), dt=st.floats(20e-12, 150e-12), tt=st.floats(3e-9, 12e-9),
       tau_ratio=st.floats(0.1, 0.3))
def test_invariant_to_white_noise(seed, dt, tt, tau_ratio):
    """White noise of 1 % of IF moves trr, Irrm and Qrr by a few percent at most.

    The bound on trr is the noise-limited resolution of its end point: at the 10 % level
    the decay falls by 0.1·IR per tau, so noise of 0.01·IF shifts the crossing by about
    tau/10 per sample before smoothing (a few percent of trr for the fastest parts).
    """
    t, i = waveform(dt, tt, tau_ratio * tt)
    clean = run(frame("D", t, i)).iloc[0]
    noisy_i = i + 0.01 * IF * np.random.default_rng(seed).standard_normal(len(i))
    noisy = run(frame("D", t, noisy_i)).iloc[0]
    assert noisy["status"] != "rejected", noisy["note"]
    assert noisy["trr_s"] == pytest.approx(clean["trr_s"], rel=0.05)
    assert noisy["irrm_A"] == pytest.approx(clean["irrm_A"], rel=0.03)
    assert noisy["qrr_C"] == pytest.approx(clean["qrr_C"], rel=0.02)
    assert abs(noisy["t0_s"] - clean["t0_s"]) <= 20e-12
    assert noisy["tt_s"] == pytest.approx(clean["tt_s"], rel=0.05)


@FAST
@given(seed=st.integers(0, 2**32 - 1))
def test_invariant_to_row_order(seed):
    """Shuffling the rows of a file with several devices changes nothing."""
    parts = [frame(f"D{k}", *waveform(0.1e-9, tt=(4 + k) * 1e-9, t0=0.1e-9 * k)) for k in range(4)]
    parts.append(frame("D9", *waveform(0.05e-9, tt=5e-9)))          # another length
    points = pd.concat(parts, ignore_index=True)
    shuffled = points.sample(frac=1.0, random_state=seed % 2**31).reset_index(drop=True)
    pd.testing.assert_frame_equal(run(points), run(shuffled))


def test_waveforms_that_must_be_refused():
    """Never crosses zero, ends before recovery, starts reversed: rejected with the reason."""
    t, i = waveform(0.1e-9)
    rows = [
        frame("never", t, np.abs(i)),
        frame("early_end", t[t < 4.5e-9], i[t < 4.5e-9]),
        frame("reversed", t[t > 1e-9], i[t > 1e-9]),
        frame("flat", t, np.full(len(t), IF)),
        frame("short", t[:5], i[:5]),
        frame("good", t, i),
    ]
    table = run(pd.concat(rows, ignore_index=True))
    assert sorted(table.index) == sorted(["never", "early_end", "reversed", "flat", "short", "good"])
    assert table.loc["good", "status"] == "ok"
    bad = table.drop(index="good")
    assert (bad["status"] == "rejected").all()
    assert bad[["trr_s", "irrm_A", "qrr_C"]].isna().all().all()
    assert "never reverses" in table.loc["never", "note"]
    assert "never reverses" in table.loc["flat", "note"]
    assert "ends before recovery" in table.loc["early_end", "note"]
    assert "already reversed" in table.loc["reversed", "note"]
    assert "too few" in table.loc["short", "note"]


def test_end_level_above_the_peak_is_refused():
    t, i = waveform(0.1e-9)
    row = run(frame("D", t, i), {"current_A": 20e-3}).iloc[0]
    assert row["status"] == "rejected" and "does not reach the end level" in row["note"]


def test_extrapolated_end_is_the_line_through_two_fractions():
    """IEC 60747-2 extrapolation: the line through 90 % and 25 % of Irrm, to zero current."""
    tau = 1e-9
    t, i = waveform(1e-12, tau=tau, tt=6e-9, fall=0.1e-9)
    row = run(frame("D", t, i), {"extrapolate": [0.9, 0.25]}).iloc[0]
    frac = run(frame("D", t, i), {"fraction_of_peak": 0.25}).iloc[0]
    # For an exponential decay the 90 % and 25 % points are tau·ln(0.9/0.25) apart; the
    # line through them reaches zero 0.25/(0.9-0.25) of that gap after the 25 % point
    # (geometry of the construction, IEC 60747-2).
    gap = tau * np.log(0.9 / 0.25)
    assert row["trr_s"] == pytest.approx(frac["trr_s"] + gap * 0.25 / 0.65, rel=0.02)


def test_conditions_from_columns_and_captures_from_two_files(tmp_path):
    """Test conditions from the file win over reel.yaml; two captures give their mean."""
    t, i = waveform(0.1e-9, i_f=20e-3)
    t2, i2 = waveform(0.1e-9, i_f=20e-3, tt=6.2e-9)
    points = pd.concat([frame("D1", t, i, forward_current=20e-3, reverse_current=10e-3),
                        frame("D1", t2, i2, source="b.csv", forward_current=20e-3,
                              reverse_current=10e-3)], ignore_index=True)
    table = run(points)
    row = table.loc["D1"]
    assert row["if_set_A"] == 20e-3 and row["status"] == "ok", row["note"]
    single = [run(frame("D1", *w)).loc["D1", "trr_s"] for w in ((t, i), (t2, i2))]
    assert row["trr_s"] == pytest.approx(np.mean(single), rel=1e-9)
    assert row["captures"] == 2 and "mean of 2 captures" in row["note"]
    # The files given one table each (as the extraction streams them): the same row.
    split = run([points[points["source"] == "b.csv"], points[points["source"] == "a.csv"],
                 frame("D2", t, i, source="b.csv")])
    pd.testing.assert_series_equal(split.loc["D1"], row)
    # Without the column, reel.yaml's 10 mA is the condition: the 20 mA level is noted.
    row = run(frame("D1", t, i)).loc["D1"]
    assert row["status"] == "warning" and "forward level" in row["note"]


def test_uneven_time_steps_are_resampled():
    t, i = waveform(0.05e-9)
    keep = np.ones(len(t), dtype=bool)
    keep[::7] = False                       # a scope export with dropped samples
    even = run(frame("D", t, i)).iloc[0]
    uneven = run(frame("D", t[keep], i[keep])).iloc[0]
    assert "resampled" in uneven["note"]
    assert uneven["trr_s"] == pytest.approx(even["trr_s"], abs=0.1e-9)


def test_demo_reel_recovery():
    """The demo reel: every waveform usable, trr as generated (data_demo/truth.csv)."""
    root = Path(__file__).resolve().parents[1] / "data_demo"
    table = extract_recovery(load_reel(root), []).table.set_index("device")
    truth = pd.read_csv(root / "truth.csv", comment="#", dtype={"recovery": str})
    truth = truth[truth["recovery"] == "yes"].set_index("device")
    assert sorted(table.index) == sorted(truth.index)
    assert (table["status"] == "ok").all()
    # data_demo/truth.csv, the generator's parameters: trr = TT ln 2 + tau ln 10 for
    # IF = IR and recovery to 10 % (kinset.physics.recovery.recovery_waveform, Notes).
    trr = truth["tt_s"] * np.log(2) + truth["recovery_tau_s"] * np.log(10)
    assert (table["trr_s"] / trr.loc[table.index] - 1).abs().max() < 0.05
    assert (table["tt_s"] / truth.loc[table.index, "tt_s"] - 1).abs().max() < 0.05
