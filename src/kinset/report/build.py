"""Write one application's report.html, models.lib and pick_list.csv."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from kinset import __version__
from kinset.io.output import write_csv, write_text
from kinset.report.html import render_page
from kinset.report.inputs import load_inputs
from kinset.report.picklist import pick_list
from kinset.report.spice import models_lib

OUTPUTS = ("report.html", "models.lib", "pick_list.csv")


@dataclass
class ReportResult:
    folder: Path
    sets: int
    placed: int
    unmatched: int
    page_bytes: int


def write_report(results: str | Path, application: str, out: str | Path,
                 match_folder: str | Path | None = None, version: str = __version__,
                 progress: Callable[[str], None] | None = None) -> ReportResult:
    """Write ``report.html``, ``models.lib`` and ``pick_list.csv`` into ``out``.

    Parameters
    ----------
    results : path
        Folder of the extraction tables, ``devices.csv`` and ``reel.json``.
    application : str
        Shipped profile name or YAML path.
    out : path
        Output folder.
    match_folder : path, optional
        Where ``kinset match`` wrote ``sets.csv``, ``unmatched.csv`` and ``summary.json``;
        default ``out`` (the workflow writes both into ``results/<reel>/<application>/``).
    progress : callable, optional
        Called with a short line as each stage starts (``kinset report`` prints them:
        the page takes a while on a large reel); it changes no output.
    """
    say = progress or (lambda text: None)
    out = Path(out)
    say(f"report: reading the tables in {results}")
    inputs = load_inputs(results, application, out if match_folder is None else match_folder)
    out.mkdir(parents=True, exist_ok=True)
    title = (f"{inputs.profile.title} "
             f"({inputs.profile.name}), reel {inputs.reel_id}")
    n_sets = int(inputs.sets["set"].nunique()) if len(inputs.sets) else 0
    say(f"report: writing SPICE cards for {len(inputs.sets)} placed parts")
    lib, names, no_card = models_lib(inputs.sets, inputs.tables, inputs.reel, title, version)
    picks = pick_list(inputs.sets)
    say(f"report: drawing {n_sets} sets and {len(inputs.unmatched)} parts left out")
    page = render_page(inputs, names, picks, lib, version, no_card)
    write_text(out / "models.lib", lib, "ascii")
    write_csv(picks, out / "pick_list.csv")
    say(f"report: writing {out / 'report.html'} ({len(page.encode('utf-8')) / 1e6:.1f} MB)")
    write_text(out / "report.html", page)
    return ReportResult(out, n_sets, len(inputs.sets), len(inputs.unmatched),
                        len(page.encode("utf-8")))
