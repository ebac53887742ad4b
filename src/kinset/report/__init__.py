"""The per-application report: one self-contained HTML page, SPICE model cards, a pick list.

``kinset report`` and the workflow's report rule call :func:`write_report`.

* :mod:`kinset.report.inputs` reads what the page is made from (match outputs,
  extraction tables, reel settings, the profile) and fingerprints every file;
* :mod:`kinset.report.spice` writes ``models.lib``;
* :mod:`kinset.report.picklist` writes ``pick_list.csv``;
* :mod:`kinset.report.plots` draws the figures as inline SVG, deterministically;
* :mod:`kinset.report.html` assembles the page.

Importing the package is light: :func:`write_report` (and with it matplotlib) is loaded
when first asked for, so the circuit step, which uses :mod:`kinset.report.inputs` and
:mod:`kinset.report.spice`, does not pay for the page's plotting (0.7 s at start-up).
"""

__all__ = ["write_report"]


def __getattr__(name: str):
    if name == "write_report":
        from kinset.report.build import write_report
        return write_report
    raise AttributeError(f"module 'kinset.report' has no attribute {name!r}")
