"""Outcome codes of the capacitance dataset: every code its inputs trigger is in reason_code.

The inputs are those of the capacitance tests, with the same outside sources:

* L. W. Nagel, SPICE2, Memorandum ERL-M520, UC Berkeley, 1975: Cj = CJO/(1 + VR/VJ)^M,
  the law the C–V points are drawn from (``nagel`` of tests/test_capacitance.py).
* scikit-rf (``skrf.media.DefinedGammaZ0``) builds the Touchstone networks of
  tests/test_touchstone.py; the element values they were given are the truth.
* tests/test_corpus.py: the broken reels and the outcome each must give.

The codes of the inputs of tests/test_capacitance.py (test_every_device_gets_a_row) and
tests/test_touchstone.py (bad files, no empty fixture) are checked there.

A rejected row's first code is the reason it was rejected (``kinset.outcomes``), and a
device's diagnosis reads its points' codes: rewording every sentence of the catalogue
changes no status and no code.
"""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from kinset.demo import write_demo
from kinset.extract import extract_capacitance
from kinset.fitting.capacitance import CapacitanceSettings, fit_capacitance
from kinset.fitting.capacitance_notes import CAPACITANCE
from kinset.io.reel import load_reel
from kinset.outcomes import CATALOGUES, SEVERITY, first_code, split_codes
from test_capacitance import T25, cv_points, nagel
from test_corpus import CASES

SETTINGS = CapacitanceSettings(T25, T25)
VR = np.array([0, 0.5, 1, 2, 3, 5, 7, 10.0])


def codes_of(table: pd.DataFrame, device: str) -> list[str]:
    row = table[table["device"] == device]
    assert len(row) == 1, device
    return split_codes(row["reason_code"])[0]


def check_rows(table: pd.DataFrame) -> None:
    """Every row: codes of the catalogue, its status the most severe of theirs (ok if none),
    and a rejected row opens with a code that rejects."""
    for status, codes in zip(table["status"], split_codes(table["reason_code"])):
        assert all(c in CAPACITANCE for c in codes), codes
        worst = max((SEVERITY[CAPACITANCE[c].status] for c in codes), default=0)
        assert SEVERITY.get(status, 0) >= worst, (status, codes)
        if status == "rejected":
            assert CAPACITANCE[codes[0]].status == "rejected", codes


def test_catalogue_is_registered_under_the_dataset():
    assert CATALOGUES["capacitance"] is CAPACITANCE
    assert {n.status for n in CAPACITANCE.values()} <= set(SEVERITY)


def test_device_warnings_from_the_law_and_the_points():
    """Nagel's law with VJ below its range, M above the usual, noise beyond the accuracy,
    a hot reading, two agreeing C–V files, two disagreeing ones, a warned VNA point."""
    rng = np.random.default_rng(0)
    law = nagel(VR, 2e-12, 0.7, 0.4)
    frames = [cv_points({"VJLOW": (VR, nagel(VR, 2e-12, 0.02, 0.4)),
                         "MHIGH": (VR, nagel(VR, 20e-12, 2.5, 2.9)),
                         "POOR": (VR, law * (1 + 0.2 * rng.standard_normal(len(VR)))),
                         "TWOFILES": (VR, law), "DISAGREE": (VR, law), "MIX": (VR, law)}),
              cv_points({"TWOFILES": (VR, law), "DISAGREE": (VR, 2 * law)}).assign(source="b"),
              cv_points({"HOT": (VR, law)}).assign(temperature=T25 + 30)]
    # A VNA point that only warns (no empty fixture), and one 20 % off the C–V points.
    frames.append(pd.DataFrame({
        "device": ["MIX", "MIX"], "kind": "vna", "reverse_voltage": [1.0, 4.0],
        "capacitance": [nagel(1.0, 2e-12, 0.7, 0.4), 1.2 * nagel(4.0, 2e-12, 0.7, 0.4)],
        "status": ["warning", "ok"], "note": ["m1.s1p: C = x; no empty fixture", "m4.s1p: C = y"],
        "reason_code": ["series_rlc_fit;no_open_for_fixture", "series_rlc_fit"],
        "source": ["m1.s1p", "m4.s1p"], "line": [2, 3]}))
    table, _ = fit_capacitance(pd.concat(frames, ignore_index=True), SETTINGS)
    check_rows(table)
    assert codes_of(table, "VJLOW")[:2] == ["fitted", "vj_at_bound"]
    assert "m_unusual" in codes_of(table, "MHIGH")
    assert codes_of(table, "POOR") == ["fitted", "poor_fit"]
    assert codes_of(table, "HOT") == ["fitted", "temperature_uncorrected"]
    assert codes_of(table, "TWOFILES") == ["fitted", "cv_files_combined"]
    assert codes_of(table, "DISAGREE")[0] == "cv_files_disagree"
    mix = codes_of(table, "MIX")
    assert mix[0] == "fitted_cv_vna" and {"sources_disagree", "touchstone_warning"} <= set(mix)
    assert table.set_index("device").loc["DISAGREE", "status"] == "rejected"


def test_the_device_reads_point_codes_not_words():
    """A point whose words and status say nothing wrong but whose code rejects it is left
    out, and rewording every sentence of the catalogue changes no status and no code."""
    pts = cv_points({"A": (VR, nagel(VR, 2e-12, 0.7, 0.4))})
    vna = pd.DataFrame({"device": ["A"], "kind": ["vna"], "reverse_voltage": [4.0],
                        "capacitance": [5e-12], "status": ["ok"], "note": ["fine"],
                        "reason_code": ["touchstone_unusable"], "source": ["a.s1p"],
                        "line": [2]})
    points = pd.concat([pts, vna], ignore_index=True)
    table, pt = fit_capacitance(points, SETTINGS)
    assert codes_of(table, "A") == ["fitted", "touchstone_rejected"]
    assert pt.loc[pt["kind"] == "vna", "used"].tolist() == [0]
    old = CAPACITANCE.reword(lambda t: "reworded: " + t)
    try:
        again, pt_again = fit_capacitance(points, SETTINGS)
    finally:
        CAPACITANCE.restore(old)
    assert again["note"].tolist() != table["note"].tolist()
    for col in ("status", "reason_code", "cj0_F", "vj_V", "m"):
        assert again[col].tolist() == table[col].tolist(), col
    assert pt_again["used"].tolist() == pt["used"].tolist()


# The first code of each rejected device (and of its VNA point) in the corpus cases.
CORPUS_FIRST = {
    "cv_duplicate_id_conflicting": ("D001", "cv_files_disagree", None),
    "cv_negative_capacitance": ("D001", "no_usable_point", None),
    "touchstone_does_not_parse": ("D901", "no_usable_point", "touchstone_unusable"),
    "touchstone_empty_file": ("D901", "no_usable_point", "touchstone_unusable"),
    "touchstone_missing_file": ("D901", "no_usable_point", "touchstone_unusable"),
    "touchstone_wrong_port_count": ("D901", "no_usable_point", "touchstone_unusable"),
    "touchstone_not_listed": ("", None, "touchstone_not_listed"),
}


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return write_demo(tmp_path_factory.mktemp("demo") / "reel", devices=20, seed=412)


@pytest.mark.parametrize("case", [c for c in CASES if c.name in CORPUS_FIRST],
                         ids=lambda c: c.name)
def test_corpus_rejections_open_with_their_reason(case, demo, tmp_path):
    reel = tmp_path / "reel"
    shutil.copytree(demo, reel)
    case.mutate(reel)
    result = extract_capacitance(load_reel(reel), [])
    table, points = result.table, result.extras["points"]
    check_rows(table)
    check_rows(points)
    device, first, point_first = CORPUS_FIRST[case.name]
    if first is not None:
        assert first_code(table.loc[table["device"] == device, "reason_code"]).tolist() == [first]
    if point_first is not None:
        vna = points[(points["device"] == device) & (points["kind"] == "vna")]
        assert set(first_code(vna["reason_code"])) == {point_first}
    if first and point_first:          # its Touchstone rows are why: named in its codes
        assert "touchstone_rejected" in codes_of(table, device)
