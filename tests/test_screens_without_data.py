"""Screens without data: a reel of forward meter readings only, under the shipped audio
profile (a leakage screen at 20 V), says what is missing and how to proceed; an explicit
waiver forms sets marked unscreened; a reel with leakage data is screened part by part,
waiver or not.

The reels are invented and written by code: forward readings at set currents at 25 °C
(the profile's temperature) from the Shockley equation with a series resistance, and
leakage sweeps of a shunt plus depletion-layer generation.
"""

import json
from pathlib import Path

import networkx as nx
import numpy as np
import pandas as pd
import pytest

from kinset.cli import main
from kinset.errors import InputError
from kinset.io.config import validate
from kinset.io.output import read_result
from kinset.matching.profile import load_profile
from kinset.physics.forward import voltage_from_current
from kinset.physics.leakage import reverse_current
from kinset.workflow import make_plan

from chromium_tools import BrowserError, open_page, requires_chromium
from partner_view_tools import amount, blocks

T25 = 298.15
APP = "audio_clipper_pair"
SHIPPED = Path(__file__).resolve().parents[1] / "src" / "kinset" / "applications" / f"{APP}.yaml"
N_PARTS = 36
LEAKY = {"M004": 1.0e8, "M017": 2.0e8, "M029": 5.0e7}     # shunt resistance [Ohm]
NO_LEAKAGE = "M011"                                       # swept forward, never leakage-tested
LEAKAGE_VOLTAGES = np.array([1.0, 2, 5, 10, 15, 20, 25, 30, 40])   # [V]

REEL_YAML = """\
# invented test reel: forward meter readings at set currents, 25 C
reel: meter-only
part: small-signal silicon diode (test)
material: silicon
reference_temperature_C: 25
thermal_resistance_K_per_W: 50
leakage:
  report_at_V: [20]
"""


def write_reel(folder: Path, leakage: bool = False, seed: int = 15) -> Path:
    """A reel folder of forward readings at 8 currents per part (5 µA to 3 mA, 25 °C);
    with ``leakage``, reverse sweeps to 40 V of every part but one."""
    rng = np.random.default_rng(seed)
    (folder / "forward").mkdir(parents=True)
    (folder / "reel.yaml").write_text(REEL_YAML, encoding="utf-8")
    ids = [f"M{k:03d}" for k in range(1, N_PARTS + 1)]
    z = rng.normal(size=N_PARTS)
    i_s = 2.7e-9 * np.exp(0.5 * z)
    n = 1.86 + 0.006 * z + 0.003 * rng.normal(size=N_PARTS)
    rs = rng.uniform(0.5, 0.8, N_PARTS)
    currents = np.geomspace(5e-6, 3e-3, 8)
    lines = ["# bench meter readings at set currents, room at 25 C (invented)",
             "device,position,current_A,voltage_V,temperature_C"]
    for k, dev in enumerate(ids):
        v = voltage_from_current(currents, i_s[k], n[k], rs[k], T25)
        v = v + 50e-6 * rng.normal(size=len(v))
        lines += [f"{dev},{k + 1},{i:.5e},{u:.5f},25.0" for i, u in zip(currents, v)]
    (folder / "forward" / "meter.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    if leakage:
        lines = ["device,reverse_voltage_V,reverse_current_A,temperature_C"]
        for dev in ids:
            if dev == NO_LEAKAGE:
                continue
            cur = reverse_current(LEAKAGE_VOLTAGES, LEAKY.get(dev, 3e10), 6e-10, 0.65, 0.4, T25)
            cur = cur * (1 + 3e-3 * rng.normal(size=len(cur)))
            lines += [f"{dev},{v:.3f},{i:.5e},25.0" for v, i in zip(LEAKAGE_VOLTAGES, cur)]
        (folder / "leakage").mkdir()
        (folder / "leakage" / "sweep.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return folder


def kinset(capsys, *args) -> str:
    """Run the kinset command in this process; its stderr (the command must succeed)."""
    capsys.readouterr()
    code = main([str(a) for a in args])
    err = capsys.readouterr().err
    assert code == 0, err
    return err


def extract(capsys, reel: Path, results: Path) -> Path:
    """reel.json, the extraction tables and devices.csv, as the workflow's rules do."""
    kinset(capsys, "check-reel", "--reel", reel, "-o", results / "reel.json")
    tables = []
    for name in ("forward", "leakage"):
        if (reel / name).is_dir():
            kinset(capsys, "extract", name, "--reel", reel, "-o", results / f"{name}.csv")
            tables.append(results / f"{name}.csv")
    kinset(capsys, "devices", "-o", results / "devices.csv", *tables)
    return results


@pytest.fixture(scope="module")
def meter_only(tmp_path_factory):
    root = tmp_path_factory.mktemp("meter-only")
    return write_reel(root / "reel"), root / "results"


@pytest.fixture(scope="module")
def with_leakage(tmp_path_factory):
    root = tmp_path_factory.mktemp("with-leakage")
    return write_reel(root / "reel", leakage=True), root / "results"


def test_meter_readings_only_say_what_is_missing_before_matching(meter_only, capsys):
    reel, results = meter_only
    extract(capsys, reel, results)
    err = kinset(capsys, "match", "--results", results, "--application", APP,
                 "-o", results / "plain")
    lines = err.strip().splitlines()
    at = next(i for i, line in enumerate(lines) if " new sets of " in line)
    block, summary_line = "\n".join(lines[:at]), lines[at]
    assert summary_line.startswith(f"{APP}: 0 new sets")      # the notice comes first
    assert f"{APP}: this reel has no reverse leakage data" in block
    assert "screen on reverse current at 20 V cannot be applied" in block
    # both ways on: measure it (the folder the reel needs), or waive the screen explicitly
    assert "leakage/ folder" in block
    for form in ("waive_screens: [reverse_current]", "kinset match --waive-screens "
                 "reverse_current", "--config waive_screens=reverse_current"):
        assert form in block
    un = read_result(results / "plain" / "unmatched.csv")
    assert len(un) == N_PARTS and set(un["reason_code"]) == {"no_leakage_data"}
    summary = json.loads((results / "plain" / "summary.json").read_text())
    assert summary["unscreened"] == []
    assert [g["dataset"] for g in summary["missing_data"]] == ["leakage"]


def test_the_report_says_it_in_its_first_screen(meter_only, capsys):
    reel, results = meter_only
    if not (results / "plain" / "summary.json").is_file():
        test_meter_readings_only_say_what_is_missing_before_matching(meter_only, capsys)
    kinset(capsys, "report", "--results", results, "--application", APP,
           "-o", results / "plain")
    page = (results / "plain" / "report.html").read_text(encoding="utf-8")
    header = page.split("</header>")[0]
    assert 'id="missing-data"' in header
    assert "no reverse leakage data" in header and "leakage/ folder" in header
    assert "waive_screens: [reverse_current]" in header
    assert "unscreened: " not in header          # nothing waived: nothing unscreened


@requires_chromium
def test_the_notice_is_inside_the_first_screen_in_a_browser(meter_only, capsys):
    """Chromium's layout: the notice ends above the fold of a 1280×900 window."""
    reel, results = meter_only
    if not (results / "plain" / "report.html").is_file():
        test_the_report_says_it_in_its_first_screen(meter_only, capsys)
    url = (results / "plain" / "report.html").resolve().as_uri()
    try:
        page = open_page(url, width=1280, height=900, expression=(
            "document.getElementById('missing-data').getBoundingClientRect().bottom"))
    except BrowserError as exc:
        pytest.fail(f"headless Chromium failed: {exc}")
    assert page.errors == []
    assert 0 < page.value <= 900


def pairs_by_max_matching(values: pd.DataFrame, tolerance: dict) -> int:
    """Independent count: a maximum-cardinality matching (networkx, Edmonds' blossom
    algorithm) on the graph whose edges join parts within every tolerance."""
    dims = list(tolerance)
    v = values.dropna(subset=dims)
    g = nx.Graph()
    g.add_nodes_from(v["device"])
    rows = v[["device", *dims]].to_numpy()
    tol = np.array([tolerance[d] for d in dims])
    for a in range(len(rows)):
        for b in range(a + 1, len(rows)):
            diff = np.abs(rows[a, 1:].astype(float) - rows[b, 1:].astype(float))
            if np.all(diff <= tol * (1 + 1e-9)):
                g.add_edge(rows[a, 0], rows[b, 0])
    return len(nx.max_weight_matching(g, maxcardinality=True))


def test_the_waiver_forms_sets_and_marks_every_one(meter_only, capsys, tmp_path):
    reel, results = meter_only
    if not (results / "devices.csv").is_file():
        extract(capsys, reel, results)
    out = results / "waived"
    err = kinset(capsys, "match", "--results", results, "--application", APP, "-o", out,
                 "--waive-screens", "reverse_current")
    assert "screen on reverse current at 20 V: waived as stated" in err
    sets = read_result(out / "sets.csv")
    un = read_result(out / "unmatched.csv")
    summary = json.loads((out / "summary.json").read_text())
    values = read_result(out / "values.csv")
    assert len(sets) > 0 and set(sets["unscreened"]) == {"reverse_current_at_20V"}
    assert summary["unscreened"] == ["reverse_current_at_20V"]
    # every device once: in a set or unmatched with a reason
    devices = read_result(results / "devices.csv")["device"]
    assert sorted(list(sets["device"]) + list(un["device"])) == sorted(devices)
    assert (un["reason"].astype(str) != "").all()
    # the most pairs: as many as networkx's maximum matching on the same values
    tolerance = summary["tolerance_used"]
    assert sets["set"].nunique() == pairs_by_max_matching(values, tolerance)
    # every pair within every tolerance, recomputed from values.csv
    v = values.set_index("device")
    for _, block in sets.groupby("set"):
        members = v.loc[block["device"]]
        for dim, tol in tolerance.items():
            assert members[dim].max() - members[dim].min() <= tol * (1 + 1e-9)
    # the profile's own key gives the same sets as the command line
    profile = tmp_path / f"{APP}.yaml"
    profile.write_text(SHIPPED.read_text(encoding="utf-8")
                       + "waive_screens: [reverse_current]\n", encoding="utf-8")
    kinset(capsys, "match", "--results", results, "--application", profile,
           "-o", tmp_path / "by-key")
    pd.testing.assert_frame_equal(read_result(tmp_path / "by-key" / "sets.csv"), sets)
    # the report says it at the top and beside every set
    kinset(capsys, "report", "--results", results, "--application", APP, "-o", out)
    page = (out / "report.html").read_text(encoding="utf-8")
    header, rest = page.split("</header>")
    assert "unscreened: reverse current at 20 V" in header
    sets_part = rest.split('id="sets"')[1].split('id="unmatched"')[0]
    assert sets_part.count("unscreened: reverse current at 20 V") == sets["set"].nunique()


def test_the_waiver_changes_nothing_when_the_reel_has_leakage_data(with_leakage, capsys):
    reel, results = with_leakage
    extract(capsys, reel, results)
    plain = kinset(capsys, "match", "--results", results, "--application", APP,
                   "-o", results / "plain")
    waived = kinset(capsys, "match", "--results", results, "--application", APP,
                    "-o", results / "waived", "--waive-screens", "reverse_current")
    assert "this reel has no" not in plain + waived
    for name in ("sets.csv", "unmatched.csv", "values.csv"):
        pd.testing.assert_frame_equal(read_result(results / "waived" / name),
                                      read_result(results / "plain" / name))
    sets = read_result(results / "waived" / "sets.csv")
    un = read_result(results / "waived" / "unmatched.csv").set_index("device")
    assert len(sets) > 0 and sets["unscreened"].isna().all()
    assert json.loads((results / "waived" / "summary.json").read_text())["unscreened"] == []
    # Ohm's law: a shunt alone passes V/R at 20 V; 1e8 Ohm and less is above 50 nA
    for dev, r in LEAKY.items():
        assert 20.0 / r > 5.0e-8
        assert un.loc[dev, "reason_code"] == "screen_failed" and un.loc[dev, "stage"] == "screen"
    # the part without leakage data is still screened: left out, with its reason
    assert un.loc[NO_LEAKAGE, "reason_code"] == "no_leakage_data"
    values = read_result(results / "waived" / "values.csv").set_index("device")
    placed = values.loc[sets["device"], "reverse_current_at_20V"]
    assert placed.notna().all() and (placed <= 5.0e-8).all()


def test_a_match_criterion_cannot_be_waived(meter_only, capsys, tmp_path):
    reel, results = meter_only
    if not (results / "devices.csv").is_file():
        extract(capsys, reel, results)
    bad = tmp_path / "bad.yaml"
    bad.write_text(SHIPPED.read_text(encoding="utf-8") + "waive_screens: [ideality]\n",
                   encoding="utf-8")
    with pytest.raises(InputError) as err:
        load_profile(str(bad))
    text = str(err.value)
    assert str(bad) in text and "waive_screens" in text and "cannot be waived" in text
    assert f"line {len(SHIPPED.read_text().splitlines()) + 1}" in text
    bad.write_text(SHIPPED.read_text(encoding="utf-8") + "waive_screens: [capacitance]\n",
                   encoding="utf-8")
    with pytest.raises(InputError, match="has no screen on capacitance"):
        load_profile(str(bad))
    capsys.readouterr()
    assert main(["match", "--results", str(results), "--application", APP, "-o",
                 str(tmp_path / "x"), "--waive-screens", "forward_voltage"]) == 2
    assert "cannot be waived" in capsys.readouterr().err


def test_a_criterion_on_absent_data_is_named_as_not_waivable(meter_only, capsys, tmp_path):
    reel, results = meter_only
    if not (results / "devices.csv").is_file():
        extract(capsys, reel, results)
    profile = tmp_path / "with_capacitance.yaml"
    profile.write_text("set_size: 2\nmatch:\n"
                       "  - {quantity: forward_voltage, at_current_A: 1.0e-3, tolerance_V: 0.005}\n"
                       "  - {quantity: capacitance, at_reverse_voltage_V: 0, tolerance_percent: 5}\n",
                       encoding="utf-8")
    err = kinset(capsys, "match", "--results", results, "--application", profile,
                 "-o", tmp_path / "out", "--waive-screens", "reverse_current")
    assert "this reel has no junction capacitance data" in err
    assert "match criterion capacitance at 0 V cannot be applied, and cannot be waived" in err
    assert "capacitance/ folder" in err
    assert len(read_result(tmp_path / "out" / "sets.csv")) == 0


def test_the_workflow_config_reaches_the_match_rule(meter_only, tmp_path):
    """--config waive_screens=...: the match rule's options carry it, and the notice is
    said when the workflow is planned."""
    reel, _ = meter_only
    config = validate({"reel": str(reel), "results": str(tmp_path / "wf"),
                       "application": APP, "waive_screens": "reverse_current"},
                      "workflow", "--config")
    plan = make_plan(config)
    assert "--waive-screens reverse_current" in plan.match_options(APP)
    assert any("waived as stated" in n for n in plan.notices())
    config["waive_screens"] = None
    plan = make_plan(config)
    assert "--waive-screens" not in plan.match_options(APP)
    assert any("--config waive_screens=reverse_current" in n for n in plan.notices())
    config["waive_screens"] = ["ideality"]
    with pytest.raises(InputError, match="cannot be waived"):
        make_plan(config).notices()


def test_partners_are_judged_as_the_sets_were_formed(meter_only, capsys):
    """kinset partners after a waived match: the same screens are skipped (summary.json
    names them), so a part is not refused for the leakage data the reel never had."""
    reel, results = meter_only
    if not (results / "devices.csv").is_file():
        extract(capsys, reel, results)
    capsys.readouterr()
    assert main(["partners", "--results", str(results), "--application", APP,
                 "--device", "M001", "--all"]) == 2      # no match yet: refused, with why
    assert "no leakage data" in capsys.readouterr().err
    kinset(capsys, "match", "--results", results, "--application", APP,
           "-o", results / APP, "--waive-screens", "reverse_current")
    capsys.readouterr()
    assert main(["partners", "--results", str(results), "--application", APP,
                 "--device", "M001", "--all", "--top", "3"]) == 0
    first = blocks(capsys.readouterr().out)[0]["rows"][0]
    best = first["device"]
    # its difference at 1 mA, recomputed from values.csv, is the one listed (3 digits)
    values = read_result(results / APP / "values.csv").set_index("device")
    diff = abs(values.loc[best, "forward_voltage_at_1mA"] - values.loc["M001", "forward_voltage_at_1mA"])
    shown = amount(first["VF@1mA"], "V")
    assert shown == pytest.approx(diff, rel=5e-3, abs=1e-7)
