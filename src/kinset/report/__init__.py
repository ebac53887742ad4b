"""The per-application report: one self-contained HTML page, SPICE model cards, a pick list.

``kinset report`` and the workflow's report rule call :func:`write_report`.

* :mod:`kinset.report.inputs` reads what the page is made from (match outputs,
  extraction tables, reel settings, the profile) and fingerprints every file;
* :mod:`kinset.report.spice` writes ``models.lib``;
* :mod:`kinset.report.picklist` writes ``pick_list.csv``;
* :mod:`kinset.report.plots` draws the figures as inline SVG, deterministically;
* :mod:`kinset.report.html` assembles the page.
"""

from kinset.report.build import write_report

__all__ = ["write_report"]
