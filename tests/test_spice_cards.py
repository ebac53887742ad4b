"""models.lib holds cards only from fitted models (issue 15, item 3), checked with ngspice.

Outside sources, named beside each check:

* ngspice 39 (Debian package ``ngspice``), the reference circuit simulator. The parts of
  the reel are its own simulations: the forward sweeps in
  ``tests/reference/ngspice/forward`` (each from a known SPICE diode card, see
  ``regenerate.py`` there). kinset fits them, writes models.lib, and ngspice runs the
  written cards at the same currents: each card must give back its part's readings.
* The contract (``models.lib``): a part without a fitted model gets a comment line saying
  why, never a card of simulator defaults.

The reel: four ngspice-simulated sweeps and two "meter" parts, each a single reading at
1 mA taken from one of the sweeps (a bench meter's reading of a part with that card).
A stand-in grouping (``report_tools.stand_in_match``) places all six in pairs by forward
voltage at 1 mA, so sets hold readings-only parts beside fitted ones.
"""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kinset.io.datasets import read_forward
from kinset.io.output import read_result
from kinset.report import write_report

from ngspice_tools import model_cards, requires_ngspice, run_deck
from report_tools import extract_results, stand_in_match

REFERENCE = Path(__file__).resolve().parent / "reference" / "ngspice" / "forward"
SWEEPS = ("si_switching_a", "si_switching_b", "si_low_current", "bj_card_sweep")
METERS = {"meter_a": "si_switching_a", "meter_b": "si_switching_b"}   # part -> its card
# Largest difference between the voltage ngspice gives from a written card and the
# part's own reading at the same current: the fit leaves under 1e-5 V rms on these sweeps
# (tests/test_forward_ngspice.py, RMS_MAX_V). Measured: 3.7e-7 V at most (bj_card_sweep).
CARD_TOL_V = 1e-5

PROFILE = """\
# Test profile: pairs by forward voltage at 1 mA, the current the meter parts were read
# at; the tolerance is wide so that every part is placed (set forming is not tested here).
name: meter pair (test)
set_size: 2
match:
  - {quantity: forward_voltage, at_current_A: 1.0e-3, tolerance_V: 0.5}
guard_band: none
"""


@pytest.fixture(scope="module")
def placed(tmp_path_factory):
    """The reel extracted and matched; the report written. (results, app folder, forward)"""
    base = tmp_path_factory.mktemp("spice_cards")
    reel = base / "reel"
    (reel / "forward").mkdir(parents=True)
    (reel / "reel.yaml").write_text("material: silicon\nthermal_resistance_K_per_W: 0\n")
    for name in SWEEPS:
        shutil.copy(REFERENCE / f"{name}.csv", reel / "forward" / f"{name}.csv")
    lines = ["# single readings at 1 mA (rows of the ngspice sweeps)",
             "device,current_A,voltage_V,temperature_C"]
    for meter, card in METERS.items():
        sweep = read_forward(REFERENCE / f"{card}.csv")
        row = sweep.loc[np.isclose(sweep["current"], 1e-3, rtol=1e-9)].iloc[0]
        lines.append(f"{meter},{row['current']:.10e},{row['voltage']:.10e},25")
    (reel / "forward" / "meter.csv").write_text("\n".join(lines) + "\n")
    results = extract_results(reel, base / "results")
    profile = base / "meter_pair.yaml"
    profile.write_text(PROFILE)
    folder = results / "meter_pair"
    stand_in_match(results, str(profile), folder)
    write_report(results, str(profile), folder)
    return results, folder, read_result(results / "forward.csv").set_index("device")


def _sets(folder):
    return read_result(folder / "sets.csv")


def test_every_part_is_placed(placed):
    """Precondition of the checks below: the readings-only parts sit in sets."""
    _, folder, fwd = placed
    assert set(_sets(folder)["device"]) == set(SWEEPS) | set(METERS)
    for meter in METERS:        # the single reading gave no fitted model
        assert not np.isfinite(fwd.loc[meter, ["is_A", "n"]].astype(float)).any(), meter


def test_readings_only_part_gets_a_comment_and_no_card(placed):
    """Contract (models.lib): the part without a fitted model has the comment line and no
    .model card; every card belongs to a part with fitted IS and N; the report's set table
    says 'no card' beside the part."""
    _, folder, fwd = placed
    lib = (folder / "models.lib").read_text(encoding="ascii")
    cards = model_cards(lib)
    carded = {re.match(r"\.model\s+(\S+)\s+D", c, re.I).group(1) for c in cards}
    assert carded == set(SWEEPS)
    for meter in METERS:
        assert re.search(rf"^\* no card for {meter}: IS and N not fitted \(single point at "
                         r"1 mA, cannot see crossing curves\)$", lib, re.M), lib
    for name in carded:
        assert np.isfinite(fwd.loc[name, ["is_A", "n", "rs_ohm"]].astype(float)).all()
        assert fwd.loc[name, "status"] != "rejected"
    assert not re.search(r"D\(TNOM=[^ )]*\)", lib)         # no card of defaults alone
    page = (folder / "report.html").read_text(encoding="utf-8")
    sets = _sets(folder)
    for meter in METERS:
        s = sets.loc[sets["device"] == meter, "set"].iloc[0]
        section = page.split(f'id="set-{s}"', 1)[1].split("</section>", 1)[0]
        assert "no card: IS and N not fitted (single point at 1 mA" in section, meter


@requires_ngspice
@pytest.mark.ngspice
def test_written_cards_load_in_ngspice_and_give_back_their_parts(placed):
    """ngspice 39 loads models.lib as written; each card driven with its part's own sweep
    currents (1 uA to 10 mA, 8 per decade, as the reference netlists) gives the part's
    ngspice-simulated voltages within CARD_TOL_V."""
    _, folder, _ = placed
    names = list(SWEEPS)
    lines = ["* kinset test: every card of models.lib at the reference sweep's currents",
             ".include models.lib", "Vx x 0 DC 0"]
    for k, name in enumerate(names):
        lines += [f"B{k} 0 a{k} I = 1e-6 * pow(10, V(x))", f"D{k} a{k} 0 {name}"]
    lines += [".options tnom=25 temp=25 reltol=1e-9 abstol=1e-18 vntol=1e-12", ".control",
              "dc Vx 0 4 0.125", "wrdata cards.txt " + " ".join(f"v(a{k})" for k in range(len(names))),
              ".endc", ".end"]
    table = run_deck("\n".join(lines) + "\n",
                     extra_files={"models.lib": (folder / "models.lib").read_text()}
                     ).table("cards.txt")
    worst = {}
    for k, name in enumerate(names):
        part = read_forward(REFERENCE / f"{name}.csv")
        assert len(part) == len(table)
        np.testing.assert_allclose(1e-6 * 10 ** table.scale, part["current"], rtol=1e-9)
        worst[name] = float(np.max(np.abs(table[f"v(a{k})"] - part["voltage"].to_numpy())))
    print("largest |V(card) - V(part)| per part [V]:", worst)
    # ngspice 39 (Debian): the written card reproduces the ngspice-simulated part.
    assert max(worst.values()) < CARD_TOL_V, worst


def test_a_card_says_when_vj_and_m_were_not_determined():
    """The C–V fit's `vj_m_not_determined` (biases 4–5 V only) reaches the card as a line
    above it naming the bias range the C(V) law holds over; a determined fit adds none."""
    from kinset.report.spice import device_model
    fwd = {"status": "ok", "note": "", "reason_code": "fitted", "is_A": 2.5e-9, "n": 1.8,
           "rs_ohm": 0.6, "i_min_A": 1e-5, "i_max_A": 1e-2, "reference_temperature_C": 25.0,
           "eg_eV": 1.11, "xti": 3.0, "rs_fixed": 0}
    cap = {"status": "warning", "note": "", "reason_code": "fitted;vj_m_not_determined",
           "cj0_F": 2e-12, "vj_V": 0.7, "m": 0.45, "vr_min_V": 4.0, "vr_max_V": 5.0}
    model = device_model("X", {"forward": fwd, "capacitance": cap}, {})
    assert any("VJ and M not determined" in line and "4 to 5 V" in line for line in model.fixed)
    cap["reason_code"] = "fitted"
    model = device_model("X", {"forward": fwd, "capacitance": cap}, {})
    assert not any("VJ and M" in line for line in model.fixed)
