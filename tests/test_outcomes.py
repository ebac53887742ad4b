"""Outcomes as codes: programs read codes, people read the sentences made from them.

The end-to-end check rewords every sentence template kinset has (every registered
catalogue: each dataset's notes, the quantities' refusals, the matcher's reasons) and
shows that extraction, matching and the report decide exactly the same things: statuses,
codes, values, sets, stages, the report's groupings, pick list and model cards.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from kinset.outcomes import (CATALOGUES, Catalogue, Finding, Note, compose, first_clause,
                             has_code, split_codes)
from report_tools import demo_results, stand_in_match


def test_compose_orders_notes_and_takes_the_most_severe_status():
    cat = Catalogue("test-compose", [Note("a", "ok", "note a {x}"), Note("b", "warning", "b"),
                                     Note("c", "rejected", "c at {v:.2g} V")])
    status, note, code = compose(4, [
        Finding("c", np.array([0, 1, 0, 0], bool), {"v": np.array([0, 1.234, 0, 0])}),
        Finding("a", np.array([1, 1, 0, 0], bool), {"x": lambda i: f"#{i}"}),
        Finding("b", np.array([1, 1, 0, 1], bool)),
    ], cat)
    assert list(status) == ["warning", "rejected", "ok", "warning"]
    assert list(note) == ["note a #0; b", "c at 1.2 V; note a #1; b", "", "b"]
    assert list(code) == ["a;b", "c;a;b", "", "b"]
    assert list(has_code(code, "c")) == [False, True, False, False]
    assert split_codes(pd.Series(["a;b", np.nan, ""])) == [["a", "b"], [], []]
    assert first_clause("single point at 1 mA, cannot see; usable only") == "single point at 1 mA, cannot see"


def test_a_note_needs_a_code_and_a_known_status():
    with pytest.raises(ValueError):
        Note("Has Space", "ok", "x")
    with pytest.raises(ValueError):
        Note("fine_code", "maybe", "x")
    with pytest.raises(ValueError):
        Catalogue("test-twice", [Note("a", "ok", "x"), Note("a", "ok", "y")])


def _run(folder, apps):
    results = demo_results(folder, devices=40, markup_id=False)
    out = {"tables": {}, "match": {}, "report": {}}
    for name in ("forward", "forward_readings", "leakage", "capacitance",
                 "capacitance_points", "recovery", "devices"):
        path = results / f"{name}.csv"
        if path.is_file():
            out["tables"][name] = pd.read_csv(path, dtype=str, keep_default_na=False)
    from kinset.report import write_report
    from kinset.report.html import _damaged, _reason_groups
    from kinset.report.inputs import load_inputs
    for app in apps:
        folder_app = results / app
        stand_in_match(results, app, folder_app)
        write_report(results, app, folder_app)
        inputs = load_inputs(results, app, folder_app)
        page = (folder_app / "report.html").read_text(encoding="utf-8")
        out["match"][app] = {f: pd.read_csv(folder_app / f, dtype=str, keep_default_na=False)
                             for f in ("sets.csv", "unmatched.csv", "values.csv", "pick_list.csv")}
        lib = (folder_app / "models.lib").read_text(encoding="ascii")
        out["report"][app] = {
            "groups": _reason_groups(inputs.unmatched)[["stage", "code", "criterion", "n"]],
            "damaged": _damaged(inputs),
            "rows": {t: len(re.findall(r"<tr>", page.split(f'id="{t}"', 1)[1].split("</table>")[0]))
                     for t in ("picks", "reasons", "unmatched-parts") if f'id="{t}"' in page},
            "cards": [line for line in lib.splitlines() if not line.startswith("*")],
        }
    return out


PEOPLE = {"note", "reason"}      # the only columns rewording may change


def _for_people(column: str) -> bool:
    """A column of sentences (devices.csv prefixes them: ``forward_note``)."""
    return column in PEOPLE or column.endswith("_note")


def test_rewording_every_note_changes_no_decision(tmp_path):
    import kinset.fitting.capacitance, kinset.fitting.forward          # noqa: F401, E401
    import kinset.fitting.leakage, kinset.fitting.recovery             # noqa: F401, E401
    import kinset.matching.reasons, kinset.quantities                   # noqa: F401, E401
    apps = ("audio_clipper_pair", "ring_mixer_quad")
    before = _run(tmp_path / "before", apps)
    # every dataset's notes, the quantities' refusals and the matcher's reasons
    assert {"forward", "leakage", "capacitance", "recovery", "quantities", "matching"} \
        <= set(CATALOGUES)
    saved = {name: cat.reword(lambda t: "[reworded] " + t.replace(" ", "  ") + " [end]")
             for name, cat in CATALOGUES.items()}
    try:
        after = _run(tmp_path / "after", apps)
    finally:
        for name, old in saved.items():
            CATALOGUES[name].restore(old)
    reworded = 0
    for name, old in before["tables"].items():
        new = after["tables"][name]
        assert list(old.columns) == list(new.columns), name
        decide = [c for c in old.columns if not _for_people(c)]
        pd.testing.assert_frame_equal(old[decide], new[decide], obj=name)
        for c in set(old.columns) - set(decide):
            reworded += int((old[c] != new[c]).sum())
    for app in apps:
        for f, old in before["match"][app].items():
            new = after["match"][app][f]
            decide = [c for c in old.columns if not _for_people(c)]
            pd.testing.assert_frame_equal(old[decide], new[decide], obj=f"{app}/{f}")
            if "reason" in old:
                reworded += int((old["reason"] != new["reason"]).sum())
        b, a = before["report"][app], after["report"][app]
        pd.testing.assert_frame_equal(b["groups"].reset_index(drop=True),
                                      a["groups"].reset_index(drop=True))
        assert b["damaged"] == a["damaged"] and b["rows"] == a["rows"] and b["cards"] == a["cards"]
    # the rewording did reach what people read
    assert reworded > 40
    assert any(len(before["report"][app]["groups"]) > 1 for app in apps)


def test_every_shipped_code_is_given_somewhere_in_the_source():
    """A catalogue entry no code path can produce is a sentence nobody will read: each
    code in kinset/notes/*.yaml appears as a string in the source that gives it."""
    from pathlib import Path

    import yaml

    import kinset
    root = Path(kinset.__file__).parent
    source = "".join(p.read_text(encoding="utf-8") for p in root.rglob("*.py"))
    files = sorted((root / "notes").glob("*.yaml"))
    assert {f.stem for f in files} == {"forward", "leakage", "capacitance", "recovery",
                                       "quantities", "matching"}
    unused = [f"{f.name}: {code}" for f in files
              for code in yaml.safe_load(f.read_text(encoding="utf-8"))
              if f'"{code}"' not in source]
    assert not unused, unused
