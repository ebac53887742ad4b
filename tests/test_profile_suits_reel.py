"""A profile that does not suit the reel says so, before matching (``kinset match``
stderr, the workflow plan's notices) and at the top of the report: made for another
junction material (the profile key ``materials`` against reel.yaml's ``material``), or
a condition outside every part's measured range.

The reel is a small invented demo reel of silicon switching diodes (``kinset demo``,
40 parts); what was measured is read back from its own files with pandas, apart from
kinset, to check each range notice.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from kinset.cli import main
from kinset.demo import write_demo
from kinset.errors import InputError
from kinset.io.config import validate
from kinset.matching.profile import load_profile
from kinset.workflow import make_plan

from report_tools import extract_results


@pytest.fixture(scope="module")
def silicon(tmp_path_factory):
    folder = tmp_path_factory.mktemp("suits")
    reel = write_demo(folder / "reel", devices=40)
    return reel, extract_results(reel, folder / "results")


def _match(capsys, results: Path, application: str, out: Path) -> str:
    capsys.readouterr()
    main(["match", "--results", str(results), "--application", application, "-o", str(out)])
    return capsys.readouterr().err


def _profile(folder: Path, text: str) -> Path:
    path = folder / "custom.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_a_silicon_reel_under_the_mixer_profile_says_so(silicon, capsys, tmp_path):
    reel, results = silicon
    err = _match(capsys, results, "ring_mixer_quad", tmp_path / "rmq")
    assert "ring_mixer_quad: this profile does not suit this reel:" in err
    assert "made for schottky, this reel is silicon" in err
    # the way on names the shipped profiles made for silicon
    assert "audio_clipper_pair" in err and "ring_mixer_quad (" not in err
    # the notice comes before the summary line
    assert err.index("made for schottky") < err.index("ring_mixer_quad: 0 new sets")
    summary = json.loads((tmp_path / "rmq" / "summary.json").read_text())
    assert [u["kind"] for u in summary["unsuited"]] == ["material"]
    main(["report", "--results", str(results), "--application", "ring_mixer_quad",
          "-o", str(tmp_path / "rmq")])
    header = (tmp_path / "rmq" / "report.html").read_text(encoding="utf-8") \
        .split("</header>")[0]
    assert 'id="unsuited"' in header and "made for schottky, this reel is silicon" in header


def test_a_profile_made_for_the_reels_material_says_nothing(silicon, capsys, tmp_path):
    _, results = silicon
    err = _match(capsys, results, "audio_clipper_pair", tmp_path / "acp")
    assert "does not suit" not in err
    assert json.loads((tmp_path / "acp" / "summary.json").read_text())["unsuited"] == []


def test_a_profile_without_materials_suits_any_reel(silicon, capsys, tmp_path):
    _, results = silicon
    path = _profile(tmp_path, "set_size: 2\nmatch:\n  - {quantity: forward_voltage, "
                              "at_current_A: 1.0e-3, tolerance_V: 0.005}\n")
    assert load_profile(str(path)).materials == ()
    assert "does not suit" not in _match(capsys, results, str(path), tmp_path / "any")


def test_conditions_outside_every_parts_range_are_named(silicon, capsys, tmp_path):
    reel, results = silicon
    # What the reel's own files hold (read with pandas, apart from kinset): forward
    # currents up to 20 mA, C-V biases up to 10 V.
    fwd = pd.concat(pd.read_csv(p, comment="#") for p in (reel / "forward").glob("batch_a*"))
    assert fwd["current_A"].max() == pytest.approx(0.02, rel=1e-3)
    cv = pd.concat(pd.read_csv(p, comment="#") for p in (reel / "capacitance").glob("cv_*"))
    assert cv["reverse_voltage_V"].max() == 10.0
    path = _profile(tmp_path, (
        "materials: [silicon]\nset_size: 2\nmatch:\n"
        "  - {quantity: forward_voltage, at_current_A: [1.0e-3, 5.0e-2], tolerance_V: 0.005}\n"
        "  - {quantity: capacitance, at_reverse_voltage_V: 20, tolerance_F: 1.0e-13}\n"))
    err = _match(capsys, results, str(path), tmp_path / "far")
    assert "made for" not in err
    assert "forward voltage at 50 mA: outside every part's measured range" in err
    assert "capacitance at 20 V: outside every part's measured range" in err
    assert "10 V on this reel" in err                     # the span the reel was measured
    assert "forward voltage at 1 mA:" not in err          # inside: not named
    summary = json.loads((tmp_path / "far" / "summary.json").read_text())
    assert [u["kind"] for u in summary["unsuited"]] == ["range", "range"]


def test_the_workflow_plan_says_it_before_any_job(silicon, tmp_path):
    reel, _ = silicon
    config = validate({"reel": str(reel), "results": str(tmp_path / "wf"),
                       "application": "ring_mixer_quad"}, "workflow", "--config")
    notices = make_plan(config).notices()
    assert any("made for schottky, this reel is silicon" in n for n in notices)


def test_an_unknown_material_in_a_profile_is_an_error_naming_it(tmp_path):
    path = _profile(tmp_path, "materials: [gallium]\nset_size: 2\nmatch:\n"
                              "  - {quantity: ideality, tolerance: 0.05}\n")
    with pytest.raises(InputError, match="materials"):
        load_profile(str(path))
