"""The report's first screen, as its user opens it: a Chromium screenshot at 1400×900
of the first application's page of each demo reel kind (a small RF Schottky reel's ring
mixer quads, a silicon switching-diode reel's clipper pairs) shows the sets formed, the
yield and what binds, all above the fold; printed (CSS print media, A4 width) its long tables
print whole and nothing runs off the sheet. The screenshots are kept as test artifacts in
``test-artifacts/`` (ignored by git) for a person to look at."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from chromium_tools import BrowserError, find_chromium, open_page
from kinset.cli import main
from kinset.demo import write_demo
from report_tools import extract_results

ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"

# Bottom edge [px] of each element, as Chromium lays the page out in a 1400×900 window.
LAYOUT = """JSON.stringify({
  facts: document.querySelector('ul.facts').getBoundingClientRect().bottom,
  binds: [...document.querySelectorAll('p.lead')].filter(p => p.textContent
           .startsWith('What binds')).map(p => p.getBoundingClientRect().bottom)[0] ?? -1,
  yield_top: document.getElementById('yield').getBoundingClientRect().top,
  sets_text: document.querySelector('ul.facts li b').textContent
})"""


@pytest.mark.skipif(find_chromium() is None, reason="chromium is not installed")
@pytest.mark.parametrize("kind, application", [("rf", "ring_mixer_quad"),
                                               ("switching", "audio_clipper_pair")])
def test_first_screen_shows_sets_yield_and_what_binds(tmp_path, kind, application):
    """Each demo reel's first application (its reel.yaml lists it first)."""
    reel = write_demo(tmp_path / "reel", devices=80, kind=kind)
    results = extract_results(reel, tmp_path / "results")
    out = tmp_path / application
    main(["match", "--results", str(results), "--application", application, "-o", str(out)])
    main(["report", "--results", str(results), "--application", application, "-o", str(out)])
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    sets = pd.read_csv(out / "sets.csv")["set"].nunique()
    try:
        page = open_page((out / "report.html").resolve().as_uri(), width=1400, height=900,
                         shot_height=900, expression=LAYOUT)
    except BrowserError as exc:
        pytest.fail(f"headless Chromium failed: {exc}")
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / f"first_screen_{application}.png").write_bytes(page.screenshot)
    layout = json.loads(page.value)
    assert page.errors == []
    assert summary["sets"] == sets > 0 and int(layout["sets_text"]) == sets
    assert 0 < layout["facts"] <= 900             # the counts of sets and parts
    assert 0 < layout["binds"] <= 900             # what binds (tolerance scan)
    assert 0 < layout["yield_top"] < 900          # the yield starts on the first screen

    # The same page printed (CSS print media, A4 at 96 px/in: 794 px wide): long tables,
    # which scroll in their own box on screen, print whole, and nothing is wider than the sheet.
    try:
        printed = open_page((out / "report.html").resolve().as_uri(), width=794, height=1123,
                            shot_height=1123, expression=PRINT_LAYOUT, media="print")
    except BrowserError as exc:
        pytest.fail(f"headless Chromium failed: {exc}")
    (ARTIFACTS / f"print_{application}.png").write_bytes(printed.screenshot)
    boxes = json.loads(printed.value)
    assert printed.errors == []
    assert boxes["long"] > 0, "the page has no long table to check"
    assert boxes["hidden_rows_px"] == 0           # every row of every long table is laid out
    assert boxes["page_width"] <= 794              # no table or figure runs off the sheet


# In print media: how many tables are long (scroll on screen), how many pixels of them
# their boxes still hide, and the page's laid-out width.
PRINT_LAYOUT = """JSON.stringify({
  long: document.querySelectorAll('.long').length,
  hidden_rows_px: Math.max(0, ...[...document.querySelectorAll('.long')].map(
      b => b.scrollHeight - b.clientHeight)),
  page_width: document.documentElement.scrollWidth
})"""
