"""The report's circuit section: every set's figures in its reference circuit.

Reads ``circuit.csv`` (written by ``kinset circuit`` beside ``sets.csv``) and shows,
for the profile's ``circuit:``, the figures' distribution over all sets beside the
ideally matched reference and the profile's stated expectation, a histogram of the
first figure, the sets ranked by it, and the sets that miss a ``circuit.limits`` entry.
"""

from __future__ import annotations

import html

import numpy as np
import pandas as pd

from kinset.circuit.kinds import kind_module
from kinset.circuit.words import PLAIN_UNITS, figure_label, figure_unit, figure_value
from kinset.errors import InputError
from kinset.report import plots
from kinset.si import display_prefix

# How a kind may say which way a figure is better (optional ``BETTER`` in its module):
# "higher", "lower", or by default "smaller_magnitude" (offsets, differences).
DEFAULT_BETTER = "smaller_magnitude"


def e(value) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def read_circuit(path) -> pd.DataFrame | None:
    """circuit.csv, or None when it is absent (an older results folder)."""
    try:
        return pd.read_csv(path, comment="#", keep_default_na=False, na_values=[""])
    except FileNotFoundError:
        return None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read circuit.csv: {exc}", path) from None


def badness(values: np.ndarray, better: str) -> np.ndarray:
    """A key that sorts the worst first."""
    if better == "higher":
        return values
    if better == "lower":
        return -values
    return -np.abs(values)


@plots.styled
def histogram_figure(values: np.ndarray, reference: float, limit: float | None, label: str,
                     unit: str, key: str) -> str:
    """Sets per bin of one figure, the ideally matched reference's median and the limit."""
    from matplotlib.figure import Figure    # only when there is something to draw
    fig = Figure(figsize=(6.2, 2.0))
    fig.subplots_adjust(left=0.09, right=0.98, bottom=0.24, top=0.95)
    ax = fig.add_subplot()
    finite = values[np.isfinite(values)]
    if unit not in PLAIN_UNITS and len(finite) and np.abs(finite).max() > 0:
        # an SI unit is drawn with the prefix of the largest value (µV, not 1e-6 V)
        factor, prefix = display_prefix(float(np.abs(finite).max()))
        finite, unit = finite / factor, prefix + unit
        reference = reference / factor
        limit = None if limit is None else limit / factor
    ax.hist(finite, bins=min(30, max(5, len(finite) // 3)), color=plots.PLACED,
            edgecolor=plots.INK, linewidth=0.4)
    if limit is not None:
        ax.axvline(limit, color=plots.LIMIT, linewidth=1.0, linestyle="--", label="limit")
    span = np.ptp(finite) if len(finite) else 0.0
    # the reference is drawn where it shares the sets' scale (an ideal ring's isolation is
    # the simulator's floor, far off it: the caption gives its value instead)
    if np.isfinite(reference) and len(finite) and \
            finite.min() - span <= reference <= finite.max() + span:
        ax.axvline(reference, color=plots.INK, linewidth=1.0, label="ideally matched")
    ax.set_xlabel(f"{label} [{unit}]")
    ax.set_ylabel("sets")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="upper right")
    return plots.svg_text(fig, key, f"histogram of {label} over the sets", "plot narrow")


def _stats_rows(table: pd.DataFrame, module, spec) -> list[list[str]]:
    limits = {f: f"{'≥' if s == 'min' else '≤'} {figure_value(b, f, 4)}"
              for f, s, b in spec.limit_pairs()}
    rows = []
    for f in module.FIGURES:
        v = table[f].to_numpy(dtype=float)
        r = table[f"reference_{f}"].to_numpy(dtype=float)
        q = (np.nanpercentile(v, [50, 10, 90]) if np.isfinite(v).any() else [np.nan] * 3)
        worst = v[np.argmin(badness(np.nan_to_num(v, nan=np.inf), _better(module, f)))] \
            if np.isfinite(v).any() else np.nan
        rows.append([e(figure_label(module, f))]
                    + [e(figure_value(x, f, 4)) for x in (*q, worst)]
                    + [e(figure_value(np.nanmedian(r), f, 4) if np.isfinite(r).any() else "–"),
                       e(limits.get(f, ""))])
    return rows


def _better(module, figure: str) -> str:
    return getattr(module, "BETTER", {}).get(figure, DEFAULT_BETTER)


def _text(value) -> str:
    return "" if value is None or (isinstance(value, float) and np.isnan(value)) else str(value)


def _ranked_rows(table: pd.DataFrame, module, first: str) -> list[list[str]]:
    v = table[first].to_numpy(dtype=float)
    order = np.argsort(badness(np.where(np.isfinite(v), v, np.inf), _better(module, first)),
                       kind="stable")
    rows = []
    records = table.to_dict("records")      # a Series per row cost ~0.3 ms (4,895 pairs: 1.5 s)
    for rank, i in enumerate(order, 1):
        r = records[i]
        cells = [e(rank), f'<a href="#set-{e(r["set"])}">{e(r["set"])}</a>']
        for f in module.FIGURES:
            x, ref = r[f], r[f"reference_{f}"]
            cells.append("–" if pd.isna(x) else e(figure_value(x, f, 4))
                         + f' <span class="muted">({e(figure_value(ref, f, 4))})</span>')
        cells += [e(_text(r.get(k))) for k in ("reference_device", "limits", "note")]
        rows.append(cells)
    return rows


def circuit_section(inp, table_html) -> str:
    """The section; ``table_html(headers, rows, numeric, ident)`` draws a table as the page does."""
    spec = inp.profile.circuit
    head = '<section id="circuit"><h2>In the circuit</h2>'
    if spec is None:
        return (head + "<p>The profile names no reference circuit (no <code>circuit:</code> "
                "section), so the sets were not simulated.</p></section>")
    table = read_circuit(inp.match_folder / "circuit.csv")
    module = kind_module(spec.kind)
    params = ", ".join(f"{k} = {v:g}" for k, v in spec.params.items())
    intro = (f"<p>Each set simulated with ngspice in the profile's reference circuit, "
             f"<b>{e(spec.kind.replace('_', ' '))}</b> ({e(params)}), with its own fitted "
             "cards from <code>models.lib</code>, beside the same circuit built from four "
             "copies of the set's median part (the ideally matched reference; in brackets). "
             "Where symmetry cancels a figure in an ideally matched set (the LO at a "
             "balanced port), the reference shows the simulator's numerical floor, not a "
             "physical limit. The reference circuit idealises everything but the diodes; see "
             "<code>kinset.circuit.kinds." + e(spec.kind) + "</code>.</p>")
    if spec.expect:
        intro += f'<p><b>The profile expects:</b> {e(spec.expect)}</p>'
    if table is None or not len(table):
        note = "no circuit.csv beside sets.csv" if table is None else "no set to simulate"
        return head + intro + f"<p>{e(note)}.</p></section>"
    first = next(iter(module.FIGURES))
    done = table[first].notna()
    notes = sorted(set(table.loc[~done, "note"].map(_text)) - {""})
    body = intro + (f"<p class=\"muted\">{int((~done).sum())} sets not simulated: "
                    f"{e('; '.join(notes))}</p>" if (~done).any() else "")
    if not done.any():
        return head + body + "</section>"
    limit = next((b for f, s, b in spec.limit_pairs() if f == first), None)
    fig = histogram_figure(table[first].to_numpy(dtype=float),
                           float(np.nanmedian(table[f"reference_{first}"])), limit,
                           figure_label(module, first), figure_unit(first), "fig-circuit")
    ref = float(np.nanmedian(table[f"reference_{first}"]))
    body += (f"<figure>{fig}<figcaption>{e(figure_label(module, first))} over the "
             f"{int(done.sum())} simulated sets; ideally matched sets give "
             f"{e(figure_value(ref, first, 4))} (median)"
             + (f"; limit {e(figure_value(limit, first, 4))}" if limit is not None else "")
             + ".</figcaption></figure>")
    body += table_html(["figure", "median", "10th percentile", "90th percentile",
                        "worst", "ideally matched (median)", "limit"],
                       _stats_rows(table, module, spec), {1, 2, 3, 4, 5}, "circuit-figures")
    missed = table[table["limits"].map(_text) != ""]
    listed = ", ".join(f'<a href="#set-{e(x)}">{e(x)}</a>' for x in missed["set"])
    body += (f"<h3>Sets that miss a limit: {len(missed)}</h3>"
             + (f"<p>Sets {listed} (what each misses: <code>circuit_limits</code> in sets.csv, "
                "and the table below).</p>" if len(missed) else "") if spec.limits else
             "<p class=\"muted\">The profile states no limit on these figures.</p>")
    body += (f"<h3>Sets ranked by {e(figure_label(module, first))}, worst first</h3>"
             + table_html(["rank", "set", *[e(figure_label(module, f)) for f in module.FIGURES],
                           "median part",
                           "limits missed", "note"],
                          _ranked_rows(table, module, first), {0}, "circuit-ranked"))
    return head + body + "</section>"
