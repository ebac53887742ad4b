"""Reverse recovery outcomes as codes: each waveform kinset refuses or remarks on carries
the code of its note in ``reason_code``, and a refused part's first code is its reason.

The waveforms are the charge-control shapes of ``test_recovery.py``
(``kinset.physics.recovery.recovery_waveform``: storage at −IR for TT·ln(1 + IF/IR),
Kingston 1954, then an exponential recovery of time constant tau), cut, rectified,
resampled or duplicated so that one condition of the analysis is met.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from kinset.fitting.recovery import CATALOGUE, REJECTIONS
from kinset.outcomes import CATALOGUES, first_code, split_codes
from kinset.physics.recovery import recovery_waveform
from test_recovery import IF, IR, frame, run, waveform


def codes(table, device):
    return split_codes([table.loc[device, "reason_code"]])[0]


def check_rejected_rows(table):
    """A rejected row's first code is a code that rejects, and its note opens with it."""
    rejected = table[table["status"] == "rejected"]
    for device, first in zip(rejected.index, first_code(rejected["reason_code"])):
        assert CATALOGUE[first].status == "rejected", (device, first)
    for device, row in table.iterrows():
        assert (row["reason_code"] == "") == (row["note"] == ""), device


def test_catalogue_is_registered_and_rejections_reject():
    assert CATALOGUES["recovery"] is CATALOGUE
    assert all(CATALOGUE[c].status == "rejected" for c in REJECTIONS)


def test_refused_waveforms_give_their_reason_first():
    """The inputs of test_recovery.test_waveforms_that_must_be_refused, and two more."""
    t, i = waveform(0.1e-9)
    # A forward level of IF/2 with a dip to -0.4 IF before it: the dip is below the
    # crossing threshold (half the smaller of IF and the reverse peak) with no forward
    # sample above it first, so there is no clear crossing.
    dip = waveform(0.1e-9, i_f=IF / 2)[1]
    dip[:8] = 0.0
    dip[5] = -0.4 * IF
    rows = [frame("never", t, np.abs(i)), frame("early_end", t[t < 4.5e-9], i[t < 4.5e-9]),
            frame("reversed", t[t > 1e-9], i[t > 1e-9]), frame("flat", t, np.full(len(t), IF)),
            frame("short", t[:5], i[:5]), frame("good", t, i),
            # the switch is at t = 0: from -0.15 ns on only one forward sample is left
            frame("at_switch", t[t > -0.15e-9], i[t > -0.15e-9]),
            frame("dip", t, dip)]
    table = run(pd.concat(rows, ignore_index=True))
    expected = {"never": "never_reverses", "flat": "never_reverses",
                "early_end": "ends_before_recovery", "reversed": "starts_reversed",
                "short": "too_few_samples", "at_switch": "no_forward_level",
                "dip": "no_zero_crossing"}
    for device, code in expected.items():
        assert codes(table, device) == [code], device
        assert table.loc[device, "status"] == "rejected"
    assert codes(table, "good") == [] and table.loc["good", "status"] == "ok"
    check_rejected_rows(table)


def test_end_level_above_the_peak():
    """Irrm = IR = 10 mA (charge control): an end level of 20 mA is never reached."""
    t, i = waveform(0.1e-9)
    table = run(frame("D", t, i), {"current_A": 20e-3})
    assert codes(table, "D") == ["peak_below_end_level"]
    check_rejected_rows(table)


def cut_in_decay(stop):
    """A sharp-cornered recovery (corner width 0, fall 0.1 ns) recorded until ``stop``.

    Storage lasts TT ln 2 = 4.159 ns from the crossing (IF = IR, Kingston 1954; the
    fall shifts it by about fall/4 = 25 ps, recovery_waveform Notes), then the
    current decays as exp(-t/tau) with tau = 1 ns: at 90 % of Irrm 0.105 ns later, at
    50 % 0.693 ns later, at 25 % 1.386 ns later (at 5.55 ns).
    """
    t = -4e-9 + 0.1e-9 * np.arange(int((stop + 4e-9) / 0.1e-9))
    return t, recovery_waveform(t, IF, IR, 6e-9, 1e-9, 0.1e-9, corner_width=0.0)


def test_record_cut_inside_the_decay_with_an_extrapolated_end():
    """Cut at 5.3 ns the 25 % point is missing; the IEC 60747-2 line through the 90 % and
    50 % points reaches zero 0.5/0.4 of their gap (0.588 ns) after the 50 % point, at
    5.587 ns: after the last sample."""
    t, i = cut_in_decay(5.3e-9)
    table = run(frame("D", t, i), {"extrapolate": [0.9, 0.5]})
    assert codes(table, "D") == ["decay_cut_short", "end_past_record"]
    assert table.loc["D", "status"] == "warning"
    beyond = float(table.loc["D", "note"].split("end lies ")[1].split(" ps")[0]) * 1e-12
    assert beyond == pytest.approx(4.159e-9 + 0.693e-9 + 0.588e-9 * 1.25 - t[-1], abs=0.05e-9)


def test_coarse_sampling():
    """trr = TT ln 2 + tau ln 10 = 4.4 ns for TT = 3 ns, tau = 1 ns (recovery to 10 %,
    kinset.physics.recovery.recovery_waveform Notes): under 5 samples at 1 ns."""
    table = run(frame("D", *waveform(1e-9, tt=3e-9)))
    assert codes(table, "D") == ["coarse_sampling"] and table.loc["D", "status"] == "warning"
    samples = float(table.loc["D", "note"].split("only ")[1].split(" samples")[0])
    assert samples == pytest.approx((3e-9 * np.log(2) + 1e-9 * np.log(10)) / 1e-9, abs=0.5)


def test_conditions_that_differ_from_the_waveform():
    """The inputs of test_recovery.test_conditions_from_columns_and_captures_from_two_files:
    a 20 mA forward level against reel.yaml's 10 mA; and a file whose reverse-current
    column says 5 mA for a waveform stored at IR = 10 mA."""
    t, i = waveform(0.1e-9, i_f=20e-3)
    table = run(pd.concat([frame("F", t, i),
                           frame("R", *waveform(0.1e-9), reverse_current=5e-3)],
                          ignore_index=True))
    assert codes(table, "F") == ["forward_level_differs"]
    assert "(reel.yaml recovery.forward_current_A)" in table.loc["F", "note"]
    assert codes(table, "R") == ["reverse_current_differs"]
    assert "(column reverse_current_A)" in table.loc["R", "note"]
    assert (table["status"] == "warning").all()


def test_what_was_done_to_a_capture_only_informs():
    """The input of test_recovery.test_uneven_time_steps_are_resampled (every 7th sample
    dropped), and a capture with three samples written twice."""
    t, i = waveform(0.05e-9)
    keep = np.ones(len(t), dtype=bool)
    keep[::7] = False
    twice = np.r_[10, 40, 90]
    table = run(pd.concat([frame("U", t[keep], i[keep]),
                           frame("T", np.r_[t, t[twice]], np.r_[i, i[twice]])],
                          ignore_index=True))
    assert codes(table, "U") == ["uneven_time_steps"]
    assert codes(table, "T") == ["repeated_time_stamps"]
    assert table.loc["T", "note"].startswith("3")
    assert (table["status"] == "ok").all()


def test_captures_in_several_files():
    """One id in two files: agreeing captures are averaged; a capture of TT = 12 ns next to
    one of 6 ns (storage TT ln 2 longer by 4.2 ns, Kingston 1954: about half the mean
    trr, over the 25 % allowed) is one id on two parts; refused captures are counted, or
    quoted when all are."""
    t, i = waveform(0.1e-9)
    t2, i2 = waveform(0.1e-9, tt=6.2e-9)
    t12, i12 = waveform(0.1e-9, tt=12e-9)
    table = run(pd.concat([
        frame("same", t, i), frame("same", t2, i2, source="b.csv"),
        frame("two_parts", t, i), frame("two_parts", t12, i12, source="b.csv"),
        frame("one_refused", t, np.abs(i)), frame("one_refused", t, i, source="b.csv"),
        frame("all_refused", t, np.abs(i)), frame("all_refused", t[:5], i[:5], source="b.csv"),
    ], ignore_index=True))
    assert codes(table, "same") == ["mean_of_captures", "capture_files"]
    assert table.loc["same", "status"] == "ok"
    assert codes(table, "two_parts") == ["captures_disagree", "mean_of_captures", "capture_files"]
    assert codes(table, "one_refused") == ["mean_of_usable_captures", "capture_files"]
    assert codes(table, "all_refused") == ["never_reverses", "capture_files"]
    assert "(all 2 captures rejected)" in table.loc["all_refused", "note"]
    assert table.loc[["two_parts", "all_refused"], "status"].eq("rejected").all()
    check_rejected_rows(table)


def test_a_sentence_two_captures_share_is_given_once():
    """Two captures of one id both cut before the 25 % point (at 5.3 and 5.5 ns):
    the shared remark once, each capture's own distance past the record."""
    t, i = cut_in_decay(5.3e-9)
    t2, i2 = cut_in_decay(5.5e-9)
    table = run(pd.concat([frame("D", t, i), frame("D", t2, i2, source="b.csv")],
                          ignore_index=True), {"extrapolate": [0.9, 0.5]})
    assert codes(table, "D") == ["decay_cut_short", "end_past_record", "end_past_record",
                                 "mean_of_captures", "capture_files"]
    assert table.loc["D", "note"].count("falls to 25 % of Irrm") == 1


def test_reason_code_follows_note():
    t, i = waveform(0.1e-9)
    columns = list(run(frame("D", t, i)).reset_index().columns)
    assert columns.index("reason_code") == columns.index("note") + 1
