"""The report page: one self-contained HTML5 file per application.

Everything is on the page: figures are inline SVG, the style sheet is inline, there
is no script, and a Content-Security-Policy forbids loading anything from anywhere,
so the page looks the same on a laptop without a network, in a browser's print
preview, and in a bundled workflow report. Every piece of text that comes from the
data (device ids, notes, reasons, file names, the profile's YAML) is escaped.
"""

from __future__ import annotations

import html
import itertools
import json
import math

import numpy as np
import pandas as pd

from kinset import quantities as qty
from kinset.format import si
from kinset.outcomes import has_code
from kinset.matching.coverage import notice, suit_notice
from kinset.matching.profile import dimension_name
from kinset.quantities import QUANTITIES
from kinset.registry import BY_NAME, NAMES
from kinset.si import ZERO_CELSIUS
from kinset.report import plots
from kinset.report.circuit import circuit_section
from kinset.report.inputs import ReportInputs, rows_by_device
from kinset.report.picklist import position_text

# Sets drawn with figures; the rest are tabulated (keeps a big reel's page small: each
# drawn set is about 55 kB of SVG; 30 keep a 10,000-part reel's page under 5 MB).
MAX_DRAWN_SETS = 30
LONG_TABLE = 40      # rows above which a table scrolls in its own box (whole in print)

STAGES = {
    "data": "lacks the data the profile needs",
    "screen": "failed a screening limit",
    "guard": "too uncertain to verify a tolerance (guard band)",
    "taken": "placed by an earlier application",
    "no_set": "passed, but no set could take it",
}

CSS = """
:root { --ink: #222; --muted: #5c5c5c; --rule: #cfd4d8; --band: #f3f5f6; --accent: #2f5d7c;
        --warn: #b5421f; --ok: #3f7f4a; }
* { box-sizing: border-box; }
html { background: #fff; color: var(--ink); }
body { font: 15px/1.45 sans-serif; margin: 0 auto; max-width: 1120px; padding: 0 20px 40px; }
header { border-top: 6px solid var(--accent); padding-top: 14px; margin-bottom: 10px; }
h1 { font-size: 1.55em; margin: 0 0 4px; }
h2 { font-size: 1.2em; margin: 30px 0 8px; padding-bottom: 3px; border-bottom: 1px solid var(--rule); }
h3 { font-size: 1.02em; margin: 20px 0 6px; }
p, ul { margin: 6px 0; }
.muted { color: var(--muted); }
.nowrap { white-space: nowrap; }
.lead { font-size: 1.05em; }
.facts { display: flex; flex-wrap: wrap; gap: 8px; margin: 10px 0; padding: 0; list-style: none; }
.facts li { border: 1px solid var(--rule); background: var(--band); padding: 6px 12px; min-width: 120px; }
.facts b { display: block; font-size: 1.35em; }
nav { font-size: 0.92em; margin: 8px 0 0; }
nav a { margin-right: 14px; color: var(--accent); }
table { border-collapse: collapse; margin: 6px 0 10px; font-size: 0.9em; }
th, td { text-align: left; padding: 2px 10px 2px 0; border-bottom: 1px solid var(--rule); vertical-align: top; }
th { font-weight: 600; border-bottom: 1.5px solid var(--ink); }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
table.n1 td:nth-child(1), table.n1 th:nth-child(1),
table.n2 td:nth-child(2), table.n2 th:nth-child(2),
table.n3 td:nth-child(3), table.n3 th:nth-child(3),
table.n4 td:nth-child(4), table.n4 th:nth-child(4),
table.n5 td:nth-child(5), table.n5 th:nth-child(5),
table.n6 td:nth-child(6), table.n6 th:nth-child(6),
table.n7 td:nth-child(7), table.n7 th:nth-child(7),
table.n8 td:nth-child(8), table.n8 th:nth-child(8),
table.n9 td:nth-child(9), table.n9 th:nth-child(9),
table.n10 td:nth-child(10), table.n10 th:nth-child(10),
table.n11 td:nth-child(11), table.n11 th:nth-child(11),
table.n12 td:nth-child(12), table.n12 th:nth-child(12) { text-align: right; font-variant-numeric: tabular-nums; }
tbody tr:nth-child(even) td { background: var(--band); }
code, pre, .id { font-family: monospace; font-size: 0.95em; }
pre { background: var(--band); border: 1px solid var(--rule); padding: 8px 10px; overflow-x: auto; white-space: pre-wrap; }
.meter { position: relative; display: inline-block; width: 140px; height: 10px; border: 1px solid var(--ink); vertical-align: middle; background: #fff; }
.meter .fill { position: absolute; left: 0; top: 0; bottom: 0; background: var(--accent); }
.meter .guard { position: absolute; top: -3px; bottom: -3px; width: 0; border-left: 2px solid var(--warn); }
.set { border-left: 3px solid var(--accent); padding-left: 12px; margin: 18px 0; }
.cautions { border: 1.5px solid var(--warn); padding: 8px 14px; }
.gaps { border: 1.5px solid var(--warn); background: #fdf4f0; padding: 6px 14px; margin: 10px 0; }
.gaps ul { margin: 2px 0 6px; }
.unscreened { color: var(--warn); font-weight: 600; }
figure { margin: 8px 0; }
figcaption { font-size: 0.85em; color: var(--muted); }
svg.plot { width: 100%; max-width: 900px; height: auto; display: block; }
svg.plot.narrow { max-width: 640px; }
svg.plot * { stroke-linejoin: round; stroke-linecap: butt; }
svg.plot text { font-family: sans-serif; }
.wide { overflow-x: auto; }
.long { max-height: 30em; overflow-y: auto; border-bottom: 1px solid var(--rule); }
.long thead th { position: sticky; top: 0; background: #fff; }
@page { margin: 14mm; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  nav { display: none; }
  .long { max-height: none; overflow: visible; border: 0; }
  a { color: inherit; text-decoration: none; }
  h2 { break-after: avoid; }
  .set, figure, tr { break-inside: avoid; }
  thead { display: table-header-group; }
  tbody tr:nth-child(even) td { background: none; }
}
"""

CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:"


def e(value) -> str:
    """Escaped text for HTML content and attribute values."""
    return html.escape("" if value is None else str(value), quote=True)


def _isnum(v) -> bool:
    return isinstance(v, (int, float, np.integer, np.floating)) and math.isfinite(float(v))


def _num(v, unit: str = "", digits: int = 4) -> str:
    if not _isnum(v):
        return "\u2013"
    return si(float(v), unit, digits) if unit else f"{float(v):.{digits}g}"


def _table(headers: list[str], rows, numeric: set[int] = frozenset(), ident: str = "",
           cls: str = "") -> str:
    """A table; ``rows`` are lists of already escaped cell HTML. A table of more than
    :data:`LONG_TABLE` rows scrolls in its own box on screen and prints whole."""
    rows = list(rows)
    # numeric columns are right-aligned by the table's classes n1..n12 (one rule per column
    # in the page's style), not a class on every cell: a 10,000-part pick list stays small
    classes = " ".join([cls] * bool(cls) + [f"n{i + 1}" for i in sorted(numeric) if i < 12])
    attrs = (f' id="{e(ident)}"' if ident else "") + (f' class="{classes}"' if classes else "")
    head = "".join(f'<th class="num">{h}</th>' if i in numeric and i >= 12 else f"<th>{h}</th>"
                   for i, h in enumerate(headers))
    body = "\n".join("<tr>" + "".join(f'<td class="num">{c}</td>' if i in numeric and i >= 12
                                      else f"<td>{c}</td>" for i, c in enumerate(r)) + "</tr>"
                     for r in rows)
    box = "wide long" if len(rows) > LONG_TABLE else "wide"
    return f"<div class=\"{box}\"><table{attrs}><thead><tr>{head}</tr></thead>\n<tbody>\n{body}\n</tbody></table></div>"


# --------------------------------------------------------------------------- sections

def _header(inp: ReportInputs, picks: pd.DataFrame) -> str:
    s = inp.summary
    p = inp.profile
    title = p.title
    n_sets = int(s.get("sets", inp.sets["set"].nunique() if len(inp.sets) else 0))
    k = int(s.get("set_size", p.set_size))
    facts = [
        ("sets formed", n_sets),
        ("parts per set", k),
        ("parts placed", s.get("parts_used", len(inp.sets))),
        ("parts seen", s.get("parts_seen", len(inp.devices))),
        ("not placed", len(inp.unmatched)),
    ]
    if "upper_bound" in s:
        facts.append(("new sets at most (bound)" if s.get("kept_sets") else
                      "sets at most (bound)", s["upper_bound"]))
    lis = "".join(f"<li><b>{e(v)}</b>{e(k_)}</li>" for k_, v in facts)
    desc = p.description
    kept = [("kept", "Kept sets")] if s.get("kept_sets") else []
    nav = "".join(f'<a href="#{a}">{e(t)}</a>' for a, t in (
        ("yield", "Yield"), ("scan", "What would it take"), ("circuit", "In the circuit"), *kept, ("pick-list", "Pick list"),
        ("distributions", "Distributions"),
        ("sets", "Sets"), ("unmatched", "Unmatched parts"), ("models", "SPICE models"),
        ("provenance", "Provenance"), ("cautions", "Cautions")))
    return (f"<header><h1>{e(title)}: matched sets from reel {e(inp.reel_id)}</h1>"
            + (f'<p class="muted">{e(desc)}</p>' if desc else "")
            + "".join(f'<p class="lead">Profile warning: {e(w)}</p>'
                      for w in p.warnings)
            + f'<p class="lead">{e(n_sets)} set(s) of {e(k)} parts'
            + (f", {e(s.get('kept_sets'))} of them kept from earlier (listed apart)"
               if s.get("kept_sets") else "")
            + (f". Pull the {len(picks)} parts of the pick list in tape order and put each "
               "into the bin of its set; why every other part was left out is listed under "
               "Unmatched parts.</p>" if len(picks) else
               ". Nothing to pull: why each part was left out is under Yield, first reason "
               "first, and every part's reasons under Unmatched parts.</p>")
            + binding_line(inp) + _suit_box(inp) + _gaps_box(inp)
            + f'<ul class="facts">{lis}</ul><nav>{nav}</nav></header>')


def _unscreened_text(inp: ReportInputs, names) -> str:
    """The screens named (sets.csv's ``unscreened``, summary.json's) in words."""
    words = {s.name: s.describe() for s in inp.profile.screens}
    return ", ".join(words.get(n, n) for n in names)


def _gaps_box(inp: ReportInputs) -> str:
    """What the reel lacks for this profile and how to proceed (the match's notice,
    :func:`kinset.matching.coverage.notice`), and the screens not applied."""
    s = inp.summary
    said = notice(inp.profile.name, s.get("missing_data") or [])
    if said is None:
        return ""
    skipped = s.get("unscreened") or []
    head = (f'<p class="unscreened">unscreened: {e(_unscreened_text(inp, skipped))}. Every '
            "set below was formed without this screen (waived: the reel has no data for it); "
            "sets.csv says so in its column unscreened.</p>") if skipped else ""
    return _notice_box(said, "missing-data", head)


def _notice_box(said, box_id: str, head: str = "") -> str:
    """A notice (:class:`kinset.matching.coverage.Notice`) as a box on the first screen."""
    items = "".join(f"<li>{e(i)}</li>" for i in said.items)
    ways = "".join(f"<li>{e(w)}</li>" for w in said.proceed)
    return (f'<div class="gaps" id="{box_id}">{head}<p><b>{e(said.headline)}</b></p>'
            f"<ul>{items}</ul><p><b>How to proceed</b></p><ul>{ways}</ul></div>")


def _suit_box(inp: ReportInputs) -> str:
    """How the profile does not suit the reel (the match's notice,
    :func:`kinset.matching.coverage.suit_notice`), first on the page."""
    said = suit_notice(inp.profile.name, inp.summary.get("unsuited") or [])
    return "" if said is None else _notice_box(said, "unsuited")


CHECKS = {
    "ok": "meets every tolerance with the newest data",
    "broken": "a member was retired: replace it (kinset replace)",
    "member_refused": "a member now lacks data or fails a screen",
    "out_of_tolerance": "a spread is now beyond its tolerance",
}


def _kept_section(inp: ReportInputs) -> str:
    """The kept sets (the ledger), each re-checked against the newest data; the broken
    ones with the free parts that would make them valid again."""
    sets = inp.sets
    if "state" not in sets or not (sets["state"].astype(str) == "kept").any():
        return ""
    kept = sets[sets["state"].astype(str) == "kept"]
    proposals = inp.summary.get("broken_sets", {}) or {}
    rows = []
    for number, block in kept.groupby("set", sort=True):
        check = str(block["check"].iloc[0])
        offer = "; ".join(", ".join(p["devices"]) for p in proposals.get(str(number), []))
        rows.append([e(number), ", ".join(f'<span class="id">{e(d)}</span>'
                                          for d in block["device"]),
                     e(CHECKS.get(check, check)), e(offer or "\u2013")])
    to_check = [r for r in rows if r[2] != e(CHECKS["ok"])]
    return ('<section id="kept"><h2>Kept sets</h2>'
            f"<p>{len(rows)} set(s) recorded as pulled or built (the reel's ledger.csv); kinset "
            f"never changes them, and re-checks each against the newest data: "
            f"{len(to_check)} need a look.</p>"
            + _table(["set", "members", "check", "free parts that complete it (best first)"],
                     rows, {0}, "kept-sets") + "</section>")


def _model_cells(names: dict[str, str], no_card: dict[str, str]) -> dict[str, str]:
    """The model column's cell of each placed part: its card's name in models.lib, or
    why it has no card."""
    cells = {d: f"<code>{e(n)}</code>" for d, n in names.items()}
    cells.update({d: f'<span class="no-card">no card: {e(why)}</span>'
                  for d, why in no_card.items()})
    return cells


def _pick_section(picks: pd.DataFrame, cells: dict[str, str]) -> str:
    rows = [[e(r.order), e(r.set), f'<span class="id">{e(r.device)}</span>', e(r.position),
             cells.get(r.device, "")] for r in picks.itertuples()]
    return ('<section id="pick-list"><h2>Pick list</h2>'
            "<p>One pass along the tape: pocket positions ascending, parts without a position "
            "last. The same list is in <code>pick_list.csv</code>, the model cards in "
            "<code>models.lib</code> (model names below).</p>"
            + _table(["order", "set", "device", "position", "model"], rows, {0, 1, 3}, "picks")
            + "</section>")


def _yield_section(inp: ReportInputs) -> str:
    s = inp.summary
    left = s.get("parts_left", {}) or {}
    seen = int(s.get("parts_seen", len(inp.devices)))
    stages = [("parts seen", seen),
              ("with the data the profile needs", int(s.get("parts_with_data", seen - left.get("data", 0)))),
              ("passed screens and guard bands", int(s.get("parts_passed_screen", 0))),
              ("placed in sets", int(s.get("parts_used", len(inp.sets))))]
    fig = plots.funnel_figure(stages, "fig-yield")
    un = inp.unmatched
    counts = _reason_groups(un)
    order = {k: i for i, k in enumerate(STAGES)}
    if len(counts):
        counts["o"] = counts["stage"].map(lambda x: order.get(x, len(order)))
        counts = counts.sort_values(["o", "n", "kind"], ascending=[True, False, True], kind="stable")
    rows = [[f'<span class="nowrap" title="{e(STAGES.get(r.stage, ""))}">'
             f'{e(_stage_word(r.stage))}</span>', e(r.kind), e(r.n)] for r in counts.itertuples()]
    check = ""
    total = int(s.get("parts_used", len(inp.sets))) + len(un)
    if total != seen:
        check = (f'<p class="muted">Note: placed ({s.get("parts_used")}) plus not placed '
                 f"({len(un)}) is {total}, not the {seen} parts seen.</p>")
    left_text = ", ".join(f"{n} {STAGES.get(k, k)}" for k, n in left.items()) or "none"
    return ('<section id="yield"><h2>Yield</h2>'
            f"<figure>{fig}<figcaption>From every part seen in any dataset to the parts placed in "
            f"sets. Left out: {e(left_text)}.</figcaption></figure>{check}"
            "<h3>Why parts were left out</h3><p class=\"muted\">Each part counted once, under its "
            "first reason, shown for one of them; every part's full reason is under Unmatched "
            "parts. Stages: " + e("; ".join(f"{k.replace('_', ' ')}: {v}" for k, v in STAGES.items()))
            + ".</p>"
            + _table(["stage", "reason", "parts"], rows, {2}, "reasons") + "</section>")


def _stage_word(stage: str) -> str:
    return stage.replace("_", " ") if stage else "\u2013"


def binding_line(inp: ReportInputs) -> str:
    """The verdict's last word: which criterion binds (from the tolerance scan)."""
    s = inp.summary
    info = s.get("tolerance_scan", {}) or {}
    binding = s.get("binding_criterion")
    if not info:
        return ""
    named = {d.name: d.describe() for d in inp.profile.dimensions}
    if not binding:
        return ('<p class="lead">What binds: no single criterion; loosening any one alone '
                f"to {info.get('binding_scale', 2):g}\u00d7 gains no set "
                '(<a href="#scan">what would it take</a>).</p>')
    how = " (estimated)" if info.get("method") == "estimate" else ""
    return (f'<p class="lead">What binds: <b>{e(named.get(binding, binding))}</b>; loosened '
            f"alone to {info.get('binding_scale', 2):g}\u00d7 its tolerance gains "
            f"{e(info.get('binding_gain'))} sets{how} "
            '(<a href="#scan">what would it take</a>).</p>')


def _scan_section(inp: ReportInputs) -> str:
    """What would it take: sets as each tolerance alone is scaled (tolerance_scan.csv)."""
    scan, s = inp.scan, inp.summary
    if scan is None or not len(scan):
        return ""
    named = {d.name: d.describe() for d in inp.profile.dimensions}
    lines = [(named.get(name, name), rows["scale"].tolist(), rows["sets"].astype(int).tolist(),
              (rows["method"] == "estimate").tolist())
             for name, rows in scan.groupby("criterion", sort=False)]
    fig = plots.scan_figure(lines, "fig-scan")
    info = s.get("tolerance_scan", {}) or {}
    binding = s.get("binding_criterion")
    top = f"{info.get('binding_scale', 2):g}\u00d7"
    said = (f"<b>{e(named.get(binding, binding))}</b> binds: loosened alone to {top} its "
            "tolerance gains "
            f"{e(info.get('binding_gain'))} sets, more than any other criterion."
            if binding else f"No single criterion binds: loosening any one alone to {top} "
            "gains no set.")
    quota = (f" The counts ignore the quota of {e(s.get('sets_wanted'))} sets."
             if s.get("sets_wanted") else "")
    return ('<section id="scan"><h2>What would it take</h2>'
            f'<p class="lead">{said}</p><figure>{fig}<figcaption>New sets as one '
            "criterion's tolerance is scaled (0.5\u00d7 to 2\u00d7), the others as in the "
            "profile; the guard band stays as computed (effective tolerance = scale \u00d7 "
            "tolerance \u2212 guard). Counted, like the match itself, on the parts this "
            "application is offered: parts in kept sets (the ledger) and parts taken by "
            "earlier applications are not counted. Filled points: the matcher itself; hollow: "
            "a fast greedy estimate, a lower bound (its method is named in "
            "<code>tolerance_scan.csv</code>)." + quota + "</figcaption></figure></section>")


def _reason_groups(un: pd.DataFrame) -> pd.DataFrame:
    """Parts not placed, counted per (stage, code, criterion) of their first reason.

    The groups come from codes alone; each is shown with its first member's first reason,
    named ("e.g. D005: ..."), so no value in it is cut or masked.
    """
    cols = ["stage", "code", "criterion", "kind", "n"]
    if not len(un):
        return pd.DataFrame(columns=cols)
    text = lambda c: un[c].astype(object).fillna("").astype(str).to_numpy()   # noqa: E731
    keys = pd.DataFrame({"stage": text("stage"), "code": text("reason_code"),
                         "criterion": text("criterion"), "reason": un["reason"].to_numpy(),
                         "device": text("device")})
    grouped = keys.groupby(["stage", "code", "criterion"], sort=False)
    counts = grouped.size().reset_index(name="n")
    first = grouped[["device", "reason"]].first().to_numpy()
    counts["kind"] = [f"e.g. {d}: {str(r).split('; ')[0].strip()}" for d, r in first]
    return counts[cols]


def _damaged(inp: ReportInputs) -> set[str]:
    """Parts whose leakage flags possible damage (code ``possible_damage``)."""
    leak = inp.table("leakage")
    if leak is None or not len(leak) or "reason_code" not in leak:
        return set()
    flag = has_code(leak["reason_code"], "possible_damage")
    return set(leak.loc[flag, "device"].astype(str))


def _values(ev, universe: pd.Index) -> np.ndarray:
    if ev is None:
        return np.full(len(universe), np.nan)
    s = pd.Series(np.asarray(ev.value, dtype=float), index=pd.Index(ev.device.astype(str)))
    s = s[~s.index.duplicated()]
    return s.reindex(universe).to_numpy(dtype=float)


def _compared(inp: ReportInputs, name: str, universe: pd.Index) -> np.ndarray | None:
    """A dimension's or screen's values as the matcher compared them (values.csv)."""
    if name not in inp.values:
        return None
    return inp.values[name].reindex(universe).to_numpy(dtype=float)


def _distribution_panels(inp: ReportInputs, universe: pd.Index, placed, damaged) -> dict:
    """The reel's distributions: what the profile compares (as values.csv holds it), then
    the fitted quantities an engineer looks at for any application."""
    p = inp.profile
    t = p.temperature
    panels: dict[tuple, plots.Panel] = {}

    def add(key, title, unit, log=False, values=None):
        if key in panels:
            return
        quantity, condition = key
        if values is None:
            values = _compared(inp, dimension_name(quantity, condition), universe)
        if values is None:
            values = _values(qty.evaluate(quantity, condition, inp.tables, t), universe)
        if np.isfinite(values).any():
            panels[key] = plots.Panel(title, unit, values, placed, damaged, log)

    temp = f"{t - ZERO_CELSIUS:g} \u00b0C"
    currents = sorted({d.condition for d in p.dimensions if d.quantity == "forward_voltage"}
                      | {s.condition for s in p.screens if s.quantity == "forward_voltage"})
    for c in currents:
        add(("forward_voltage", c), f"forward voltage at {si(c, 'A')}, {temp}", "V")
    add(("ideality", None), "ideality N", "")
    add(("series_resistance", None), "series resistance RS", "\u03a9")
    for name in NAMES:       # fitted columns each dataset's record asks to draw
        table = inp.table(name)
        for column, title, unit in BY_NAME[name].panel_columns if table is not None else ():
            add((column, None), title, unit,
                values=_values(qty.column_value(table, column, title), universe))
    add(("recovery_time", None), "recovery time trr", "s")
    volts = sorted({float(v) for v in (inp.reel.get("leakage") or {}).get("report_at_V", [])}
                   | {s.condition for s in p.screens if s.quantity == "reverse_current"})
    if inp.table("leakage") is not None:
        for v in volts:
            add(("reverse_current", v), f"reverse current at {v:g} V, {temp}", "A", log=True)
    for s in p.screens:       # screened quantities not drawn above get their own panel
        unit = {"ohm": "\u03a9", "V_per_K": "V/K"}.get(QUANTITIES[s.quantity].unit,
                                                       QUANTITIES[s.quantity].unit)
        add((s.quantity, s.condition), s.describe(), unit,
            log=s.quantity in ("reverse_current", "peak_reverse_current"))
        panel = panels.get((s.quantity, s.condition))
        if panel is not None:
            for kind, val in (("min", s.minimum), ("max", s.maximum)):
                if val is not None:
                    panel.limits.append((kind, float(val)))
    return panels


def _distributions_section(inp: ReportInputs) -> str:
    universe = pd.Index(inp.devices["device"].astype(str))
    placed = universe.isin(set(inp.sets["device"].astype(str)))
    damaged_set = _damaged(inp)
    panels = _distribution_panels(inp, universe, placed, universe.isin(damaged_set))
    if not panels:
        return ('<section id="distributions"><h2>Distributions</h2><p>No fitted quantity to '
                "draw.</p></section>")
    fig = plots.distributions_figure(list(panels.values()), "fig-dist")
    dmg = ""
    if damaged_set:
        ids = ", ".join(f'<span class="id">{e(d)}</span>' for d in sorted(damaged_set))
        dmg = f"<p>Flagged as possibly damaged by their leakage ({len(damaged_set)}): {ids}.</p>"
    return ('<section id="distributions"><h2>Distributions</h2>'
            f"<figure>{fig}<figcaption>Every part of the reel (light), the parts placed in sets "
            "(dark), screening limits (dashed) and parts whose leakage flags possible damage (\u00d7). "
            "Values from each part's fitted model at the profile's temperature, only inside what "
            f"was measured.</figcaption></figure>{dmg}</section>")


def _dim_columns(inp: ReportInputs):
    """(dimension, spread column, margin column, percent?) for each matched criterion."""
    out = []
    for d in inp.profile.dimensions:
        sp = next((c for c in inp.sets.columns if c.startswith(f"{d.name}_spread")), None)
        mg = next((c for c in inp.sets.columns if c.startswith(f"{d.name}_margin")), None)
        out.append((d, sp, mg, bool(sp and sp.endswith("_percent"))))
    return out


def _dim_value(v, d, percent: bool) -> str:
    if not _isnum(v):
        return "\u2013"
    if percent:
        return f"{float(v):.3g} %"
    unit = {"ohm": "\u03a9", "V_per_K": "V/K"}.get(d.unit, d.unit)
    return si(float(v), unit, 3) if unit else f"{float(v):.3g}"


def _criteria_table(inp: ReportInputs, row) -> str:
    used = inp.summary.get("tolerance_used", {}) or {}
    rows = []
    for d, sp, mg, percent in _dim_columns(inp):
        spread = row.get(sp) if sp else None
        tol = d.tolerance * (100 if d.relative else 1)
        eff = used.get(d.name)
        eff = float(eff) * (100 if d.relative else 1) if _isnum(eff) else None
        meter = ""
        if _isnum(spread) and tol > 0:
            fill = max(0.0, min(float(spread) / tol, 1.0)) * 100
            guard = (f'<span class="guard" style="left:{max(0.0, min(eff / tol, 1.0)) * 100:.1f}%">'
                     "</span>") if eff is not None else ""
            meter = (f'<span class="meter" title="spread as a share of the tolerance">'
                     f'<span class="fill" style="width:{fill:.1f}%"></span>{guard}</span> '
                     f"{float(spread) / tol * 100:.0f} %")
        rows.append([e(d.describe()), e(_dim_value(spread, d, percent)),
                     e(_dim_value(tol, d, d.relative)),
                     e(_dim_value(eff, d, d.relative)) if eff is not None else "\u2013",
                     e(_dim_value(row.get(mg) if mg else None, d, percent)), meter])
    return _table(["criterion", "spread", "tolerance", "after guard band", "margin",
                   "spread / tolerance (mark: guard band)"], rows, {1, 2, 3, 4})


def _groups(table: pd.DataFrame | None, wanted: set[str]) -> dict[str, pd.DataFrame]:
    if table is None or not len(table):
        return {}
    dev = table["device"].astype(str)
    sub = table[dev.isin(wanted)]
    return {k: g for k, g in sub.groupby(sub["device"].astype(str), sort=False)}


def _notes(dev: str, rows: dict[str, dict[str, dict]]) -> str:
    out = []
    for name in NAMES:
        r = rows[name].get(dev)
        if r is not None and str(r.get("status")) not in ("ok", "nan", "None"):
            out.append(f"{name} {r.get('status')}: {r.get('note')}")
    return "; ".join(out)


def _sets_section(inp: ReportInputs, cells: dict[str, str]) -> str:
    sets = inp.sets.copy()
    sets["device"] = sets["device"].astype(str)
    if not len(sets):
        return ('<section id="sets"><h2>Sets</h2><p>No set could be formed; the reasons are '
                "under Unmatched parts.</p></section>")
    p = inp.profile
    currents = sorted({d.condition for d in p.dimensions if d.quantity == "forward_voltage"})
    set_ids = sorted(sets["set"].unique())
    drawn = set(set_ids[:MAX_DRAWN_SETS])
    wanted = set(sets.loc[sets["set"].isin(drawn), "device"])
    rows = {k: rows_by_device(inp.table(k), wanted) for k in NAMES}
    readings = _groups(inp.table("forward_readings"), wanted)
    cv = _groups(inp.table("capacitance_points"), wanted)
    parts = ['<section id="sets"><h2>Sets</h2>']
    if len(set_ids) > MAX_DRAWN_SETS:
        parts.append(f"<p>The first {MAX_DRAWN_SETS} of {len(set_ids)} sets are drawn; the rest "
                     "are tabulated after them.</p>")
    for s in set_ids[:MAX_DRAWN_SETS]:
        block = sets[sets["set"] == s]
        members = []
        member_rows = []
        for r in block.to_dict("records"):
            dev = r["device"]
            f, c, rc = rows["forward"].get(dev), rows["capacitance"].get(dev), rows["recovery"].get(dev)
            g = readings.get(dev)
            rd = None if g is None else (
                g["current_A"].to_numpy(float), g["voltage_V"].to_numpy(float),
                g["used"].astype(bool).to_numpy() if "used" in g else np.ones(len(g), bool),
                g["temperature_C"].to_numpy(float) + ZERO_CELSIUS if "temperature_C" in g
                else np.full(len(g), np.nan))
            gc = cv.get(dev)
            cp = None if gc is None else (gc["reverse_voltage_V"].to_numpy(float),
                                          gc["capacitance_F"].to_numpy(float),
                                          gc["used"].astype(bool).to_numpy() if "used" in gc
                                          else np.ones(len(gc), bool))
            members.append(plots.Member(dev, f, rd, c, cp, rc))
            member_rows.append([
                f'<span class="id">{e(dev)}</span>', e(position_text(r.get("position"))),
                cells.get(dev, ""),
                e(_num(f and f.get("is_A"), "A")), e(_num(f and f.get("n"))),
                e(_num(f and f.get("rs_ohm"), "\u03a9")), e(_num(c and c.get("cj0_F"), "F")),
                e(_num(rc and rc.get("trr_s"), "s")), e(_notes(dev, rows))])
        fig = plots.set_figure(members, currents, p.temperature, f"fig-set-{s}",
                               f"set {s}: forward, C-V and recovery overlays")
        first = block.to_dict("records")[0]
        parts.append(
            f'<section class="set" id="set-{e(s)}"><h3>Set {e(s)}{_set_mark(inp, first)}</h3>'
            + _table(["device", "position", "model", "IS", "N", "RS", "CJO", "trr", "notes"],
                     member_rows, {1, 3, 4, 5, 6, 7})
            + _criteria_table(inp, first)
            + (f"<figure>{fig}</figure>" if fig else "") + "</section>")
    rest = set_ids[MAX_DRAWN_SETS:]
    if rest:
        dims = _dim_columns(inp)
        trows = []
        tail = sets[sets["set"].isin(set(rest))].sort_values("set", kind="stable")
        # plain dicts grouped in one pass: a DataFrame per set cost ~0.7 s at 2,500 quads
        for s, block in itertools.groupby(tail.to_dict("records"), key=lambda r: r["set"]):
            block = list(block)
            first = block[0]
            worst = []
            for d, sp, _mg, _pc in dims:
                v = first.get(sp) if sp else None
                tol = d.tolerance * (100 if d.relative else 1)
                if _isnum(v) and tol > 0:
                    worst.append(float(v) / tol)
            members = ", ".join(f'<span class="id">{e(r["device"])}</span> '
                                f'({e(position_text(r.get("position")))})' for r in block)
            trows.append([f'<span id="set-{e(s)}">{e(s)}</span>{_set_mark(inp, first)}', members,
                          f"{max(worst) * 100:.0f} %" if worst else "\u2013"])
        parts.append(f"<h3>Sets {e(rest[0])}\u2013{e(rest[-1])}</h3>"
                     + _table(["set", "members (position)", "largest spread / tolerance"],
                              trows, {2}, "more-sets"))
    parts.append("</section>")
    return "\n".join(parts)


def _set_mark(inp: ReportInputs, row) -> str:
    """Beside a set: the screens its members were not put through (sets.csv unscreened)."""
    names = [n for n in str(row.get("unscreened") or "").split(";")
             if n and n != "nan"]
    return (f' <span class="unscreened">unscreened: {e(_unscreened_text(inp, names))}</span>'
            if names else "")


def _unmatched_section(inp: ReportInputs) -> str:
    un = inp.unmatched
    rows = [[f'<span class="id">{e(r["device"])}</span>', e(position_text(r.get("position"))),
             e(STAGES.get(str(r.get("stage")), "\u2013")), e(r.get("reason"))]
            for r in un.to_dict("records")]
    return ('<section id="unmatched"><h2>Unmatched parts</h2>'
            f"<p>{len(un)} part(s) not placed in any set, with every reason.</p>"
            + _table(["device", "position", "stage", "reason"], rows, {1}, "unmatched-parts")
            + "</section>")


def _models_section(inp: ReportInputs, lib: str) -> str:
    first = lib.split("* ---- set", 2)
    example = ("* ---- set" + first[1]).strip() if len(first) > 1 else ""
    return ('<section id="models"><h2>SPICE models</h2>'
            "<p><code>models.lib</code> holds a diode <code>.model</code> card for every placed "
            "part with a fitted forward model, grouped by set: IS, N, RS, CJO, VJ, M, TT and "
            "BV/IBV where they were measured, EG and XTI as the fit assumed them, and TNOM, the "
            "temperature the parameters hold at. What was not measured is named in a comment "
            "and left to the simulator's defaults. A part without a fitted IS and N (single "
            "readings) gets no card, only a comment saying why (the model column of its set "
            "says so too). The first set's cards:</p>"
            + (f"<pre>{e(example)}</pre>" if example else "<p>No part was placed.</p>")
            + "</section>")


def _flatten(prefix: str, value, out: list):
    if isinstance(value, dict):
        for k in sorted(value):
            _flatten(f"{prefix}.{k}" if prefix else str(k), value[k], out)
    else:
        out.append((prefix, json.dumps(value, ensure_ascii=False) if not isinstance(value, str)
                    else value))


REEL_FIRST = ("reel", "part", "material", "reference_temperature_C", "ambient_temperature_C")


def _provenance_section(inp: ReportInputs, version: str) -> str:
    reel_rows: list = []
    _flatten("", inp.reel, reel_rows)
    rank = {k: i for i, k in enumerate(REEL_FIRST)}
    reel_rows.sort(key=lambda kv: (rank.get(kv[0], len(rank)), kv[0]))
    s = inp.summary
    match_rows = [[e(k), e(json.dumps(s[k]) if not isinstance(s[k], str) else s[k])]
                  for k in ("application", "goal", "method", "optimal", "upper_bound", "note")
                  if k in s]
    guard, used = s.get("guard_band", {}) or {}, s.get("tolerance_used", {}) or {}
    crit_rows = []
    for d in inp.profile.dimensions:
        scale = 100 if d.relative else 1
        g = guard.get(d.name)
        crit_rows.append([e(d.describe()), e(_dim_value(d.tolerance * scale, d, d.relative)),
                          e(_dim_value(g, d, False)) if _isnum(g) else "\u2013",
                          e(_dim_value(used[d.name] * scale, d, d.relative))
                          if _isnum(used.get(d.name)) else "\u2013", e(d.weight)])
    files = [[f"<code>{e(f.label)}</code>", e(f.size), f"<code>{e(f.sha256)}</code>"]
             for f in inp.files]
    return ('<section id="provenance"><h2>Provenance</h2>'
            f"<p>Written by kinset {e(version)} from the files below, each named with its "
            "size and SHA-256 digest. The same files give the same page, byte for byte.</p>"
            "<h3>Reel</h3>"
            + _table(["setting", "value"], [[f"<code>{e(k)}</code>", e(v)] for k, v in reel_rows])
            + "<h3>Matching</h3>" + _table(["", "value"], match_rows)
            + _table(["criterion", "tolerance", "guard band", "tolerance used", "weight"],
                     crit_rows, {1, 2, 3, 4})
            + "<p>Each guard band is 2·√2 times the standard uncertainty it was set at, so "
            "that any two parts within it pass guarded acceptance (JCGM 106:2012, k = 2); "
            "<code>values.csv</code> holds every part's own combined uncertainty "
            "(instrument, fit, temperature correction).</p>"
            + f"<h3>Application profile, as used</h3><p><code>{e(inp.profile_label)}</code></p>"
            + f"<pre>{e(inp.profile_text)}</pre>"
            + "<h3>Input files</h3>"
            + _table(["file", "bytes", "SHA-256"], files, {1}, "inputs")
            + "</section>")


CAUTIONS = """<section id="cautions" class="cautions"><h2>Cautions</h2><ul>
<li><b>High reverse voltage.</b> Leakage and breakdown tests take small parts to tens or hundreds
of volts: use a current-limited source, guarded fixtures and interlocks, and discharge the fixture
before touching it.</li>
<li><b>Hot parts.</b> Forward sweeps to tens of milliamps and breakdown tests heat small glass and
surface-mount packages; parts and fixtures can burn skin, and heat shifts what you measure.</li>
<li><b>Electrostatic discharge.</b> Small-signal and RF Schottky parts are damaged by discharges
well below what a person feels, and a damaged part can still pass a forward test. Pull the parts
on a grounded mat with a wrist strap, and keep each set in conductive packaging.</li>
</ul><p>These notes do not replace your site's safety rules: follow the local electrical codes
and your organisation's procedures, and leave high-voltage work to people qualified for it.</p>
</section>"""


def render_page(inp: ReportInputs, names: dict[str, str], picks: pd.DataFrame, lib: str,
                version: str, no_card: dict[str, str] | None = None) -> str:
    """The whole page as text. ``names``: each placed part's card name in ``lib``;
    ``no_card``: why each placed part without a card has none."""
    p = inp.profile
    cells = _model_cells(names, no_card or {})
    title = f"{p.title} \u2013 reel {inp.reel_id} \u2013 kinset report"
    body = "\n".join([
        _header(inp, picks),
        _yield_section(inp),          # the verdict first: how many, why the rest not,
        _scan_section(inp),           # and what would it take
        circuit_section(inp, _table),  # the sets in their reference circuit
        _kept_section(inp),
        _pick_section(picks, cells),
        _distributions_section(inp),
        _sets_section(inp, cells),
        _unmatched_section(inp),
        _models_section(inp, lib),
        _provenance_section(inp, version),
        CAUTIONS,
        f'<footer><p class="muted">kinset {e(version)} \u00b7 application {e(p.name)} \u00b7 '
        f"reel {e(inp.reel_id)}</p></footer>",
    ])
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            f'<meta http-equiv="Content-Security-Policy" content="{CSP}">\n'
            '<meta name="viewport" content="width=device-width, initial-scale=1">\n'
            f"<title>{e(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n{body}\n"
            "</body>\n</html>\n")
