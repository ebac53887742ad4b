"""The report's figures, written as inline SVG.

The many and the large ones (one per drawn set, the reel's distributions) are written
directly by :mod:`kinset.report.svgchart`, which keeps matplotlib's look and tick choice
at a small fraction of its cost; the yield funnel and the tolerance scan are drawn with
matplotlib's object API, as follows.

No pyplot and no global backend: each figure is a :class:`matplotlib.figure.Figure`
drawn on the SVG canvas inside a private ``rc_context``, so a report never changes
the caller's matplotlib state. The SVG is deterministic: a fixed ``svg.hashsalt``,
no date or creator metadata, text kept as text (``svg.fonttype: none``). Element ids
get a per-figure prefix, so several figures can sit in one page without two
elements sharing an id; the style sheet matplotlib writes into each SVG (which
would apply to the whole page) is dropped, the page's own CSS scopes it instead.
"""

from __future__ import annotations

import functools
import io
import math
import re
from dataclasses import dataclass, field

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import FuncFormatter, LogLocator, MaxNLocator, NullLocator

from kinset.format import si
from kinset.report import svgchart
from kinset.si import ZERO_CELSIUS, display_prefix
from kinset.physics.capacitance import junction_capacitance
from kinset.physics.forward import saturation_current_at, voltage_from_current
from kinset.physics.recovery import recovery_waveform

# kinset's own plain, print-friendly look: dark ink on white, thin rules, a palette of
# well-separated mid-dark hues that stay distinct in greyscale print by marker shape.
INK, GRID = svgchart.INK, svgchart.GRID
ALL_PARTS = "#b9c3cb"
PLACED = "#2f5d7c"
LIMIT = "#b5421f"
DAMAGED = "#a8173a"
MEMBER_COLORS = ("#2f5d7c", "#c46a1b", "#3f7f4a", "#7d4a8c", "#8a7420", "#2f8a8f",
                 "#a8173a", "#5b5b5b")
MEMBER_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<")

STYLE = {
    "svg.hashsalt": "kinset-report",
    "svg.fonttype": "none",
    "font.size": 7.5,
    "axes.titlesize": 8,
    "axes.labelsize": 7.5,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "axes.linewidth": 0.6,
    "axes.grid": True,
    "axes.axisbelow": True,
    "grid.color": GRID,
    "grid.linewidth": 0.5,
    "xtick.color": INK,
    "ytick.color": INK,
    "xtick.labelsize": 6.5,
    "ytick.labelsize": 6.5,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "legend.fontsize": 6.5,
    "legend.frameon": False,
    "lines.linewidth": 1.1,
    "lines.markersize": 3.2,
    "path.simplify": True,
}
SVG_METADATA = {"Date": None, "Creator": None, "Format": None, "Type": None}

_PROLOG = re.compile(r"^.*?(?=<svg\b)", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>\s*", re.S)
_STYLE = re.compile(r"<style[^>]*>.*?</style>\s*", re.S)
# matplotlib names its whole fallback font list in every text element; the page's CSS
# sets one generic family for all plots instead (smaller, and looks like the page).
_FONT_FAMILY = re.compile(r"font-family: [^;\"]*(?:; )?")
_ATTRIBUTE = re.compile(r'(?<=[a-z])="([^"]*)"')
_DECIMALS = re.compile(r"(\d+\.\d{2})\d+")
_NO_ROTATION = re.compile(r' transform="rotate\(-0 [^"]*\)"')
_INDENT = re.compile(r"\n\s+")


def _short_attribute(match: re.Match) -> str:
    """Coordinates to 0.01 pt (1/7200 inch, far below what print or screen shows)."""
    return '="' + _DECIMALS.sub(r"\1", match.group(1)).replace(" \n", " ") + '"'


def styled(draw):
    """Run a figure function inside the report's matplotlib style (and only there)."""
    @functools.wraps(draw)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(STYLE):
            return draw(*args, **kwargs)
    return wrapper


def svg_text(fig: Figure, key: str, label: str, css_class: str = "plot") -> str:
    """The figure as an ``<svg>`` element for inlining in HTML, ids prefixed with ``key``."""
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata=SVG_METADATA)
    text = _STYLE.sub("", _METADATA.sub("", _PROLOG.sub("", buf.getvalue(), count=1)))
    text = _FONT_FAMILY.sub("", _NO_ROTATION.sub("", text))
    text = _INDENT.sub("\n", _ATTRIBUTE.sub(_short_attribute, text))
    text = text.replace(' id="', f' id="{key}-').replace('href="#', f'href="#{key}-') \
               .replace("url(#", f"url(#{key}-")
    label = label.replace("&", "&amp;").replace('"', "&quot;").replace("<", "&lt;")
    return text.replace("<svg ", f'<svg class="{css_class}" role="img" aria-label="{label}" ',
                        1).strip()


def _figure(width: float, height: float) -> Figure:
    # Fixed margins, not a layout engine: constrained layout measures every tick label
    # twice and was most of the report's run time.
    return Figure(figsize=(width, height))


def _margins(fig: Figure, rows: int, left: float = 0.62, bottom: float = 0.42,
             top: float = 0.24, right: float = 0.12, hspace: float = 0.62,
             wspace: float = 0.62) -> None:
    """Subplot margins in inches (converted to the figure fractions matplotlib takes)."""
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=left / w, right=1 - right / w, bottom=bottom / h, top=1 - top / h,
                        hspace=hspace / ((h - top - bottom) / rows),
                        wspace=wspace / (w / 2))


def _log_axis(axis, unit: str, numticks: int = 6) -> None:
    """A log axis with SI-labelled decades and no minor ticks (small, quick SVG)."""
    axis.set_major_locator(LogLocator(numticks=numticks))
    axis.set_minor_locator(NullLocator())
    axis.set_major_formatter(_si_formatter(unit))


def _prefix(values, unit: str) -> tuple[float, str]:
    """A display factor and unit for an axis (0.6 V -> 1e-3, 'mV')."""
    finite = np.abs(np.asarray(values, dtype=float))
    finite = finite[np.isfinite(finite) & (finite > 0)]
    if not len(finite):
        return 1.0, unit
    factor, prefix = display_prefix(float(np.median(finite)))
    return factor, prefix + unit


def _si_label(unit: str):
    """A log axis's tick label: the value with an SI prefix (blank at or below zero)."""
    return lambda v: si(v, unit, 3) if v > 0 else ""


def _si_formatter(unit: str) -> FuncFormatter:
    return FuncFormatter(lambda v, _pos: _si_label(unit)(v))


# --------------------------------------------------------------------------- yield

@styled
def funnel_figure(stages: list[tuple[str, int]], key: str) -> str:
    """Horizontal bars: parts at each step from 'seen' to 'placed in sets'."""
    fig = _figure(6.2, 0.55 + 0.3 * len(stages))
    ax = fig.add_subplot()
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=2.1 / w, right=1 - 0.15 / w, bottom=0.4 / h, top=1 - 0.08 / h)
    labels = [s for s, _ in stages][::-1]
    counts = np.array([n for _, n in stages][::-1], dtype=float)
    top = max(counts.max() if len(counts) else 0, 1)
    ax.barh(np.arange(len(counts)), counts, color=[PLACED] + [ALL_PARTS] * (len(counts) - 1),
            height=0.62, edgecolor=INK, linewidth=0.4)
    for y, n in enumerate(counts):
        ax.text(n + top * 0.01, y, f"{int(n)}", va="center", ha="left", color=INK)
    ax.set_yticks(np.arange(len(counts)), labels)
    ax.set_xlim(0, top * 1.12)
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))   # parts are counted whole
    ax.set_xlabel("parts")
    ax.grid(axis="y", visible=False)
    return svg_text(fig, key, "yield: parts seen, with data, passing screening, placed in sets",
                    "plot narrow")


@styled
def scan_figure(lines: list[tuple[str, list[float], list[int], list[bool]]], key: str) -> str:
    """Sets against tolerance scale, one line per criterion (name, scales, sets, whether
    each point is an estimate: drawn hollow); the profile's tolerance (1x) marked."""
    fig = _figure(6.2, 2.6)
    ax = fig.add_subplot()
    w, h = fig.get_size_inches()
    fig.subplots_adjust(left=0.62 / w, right=1 - 2.3 / w, bottom=0.42 / h, top=1 - 0.12 / h)
    for i, (name, scales, sets, est) in enumerate(lines):
        color = MEMBER_COLORS[i % len(MEMBER_COLORS)]
        marker = MEMBER_MARKERS[i % len(MEMBER_MARKERS)]
        ax.plot(scales, sets, color=color, marker=marker, label=name, markersize=3.6)
        hollow = [j for j, flag in enumerate(est) if flag]
        ax.plot([scales[j] for j in hollow], [sets[j] for j in hollow], linestyle="none",
                marker=marker, markerfacecolor="white", markeredgecolor=color, markersize=3.6)
    ax.axvline(1.0, color=LIMIT, linestyle="--", linewidth=0.8,
               label="the profile's tolerance (1x)")
    ax.plot([], [], linestyle="none", marker="o", markerfacecolor="white",
            markeredgecolor=INK, label="hollow: estimate (a lower bound)")
    ax.yaxis.set_major_locator(MaxNLocator(integer=True))
    top = max([max(sets) for _, _, sets, _ in lines if sets] + [1])
    ax.set_ylim(0, top * 1.08 + 0.5)         # an all-zero scan still gets 0 and 1 as ticks
    ax.set_xlabel("tolerance scale (this criterion alone; the others as in the profile)")
    ax.set_ylabel("sets")
    ax.legend(loc="upper left", bbox_to_anchor=(1.02, 1.0))
    return svg_text(fig, key, "sets against tolerance scale, one line per criterion", "plot")


# --------------------------------------------------------------------------- distributions

@dataclass
class Panel:
    """One histogram of the reel: every part, the placed ones, limits, damaged parts."""

    title: str
    unit: str
    values: np.ndarray            # SI, one per device (NaN where not available)
    placed: np.ndarray            # bool per device
    damaged: np.ndarray           # bool per device
    log: bool = False
    limits: list[tuple[str, float]] = field(default_factory=list)   # ("max", value)


def distributions_figure(panels: list[Panel], key: str, columns: int = 3) -> str:
    """One histogram per panel, written by :mod:`kinset.report.svgchart` (a matplotlib
    figure of ten histograms took 0.7 s of a 10,000-part report)."""
    rows = math.ceil(len(panels) / columns)
    width, height = 7.2, 0.3 + 2.0 * rows
    # room between panels for each one's "parts" label beside its neighbour's ticks
    axes = svgchart.grid(rows, columns, width, height, left=0.5, right=0.12, bottom=0.42,
                         top=0.5, wspace=0.8, hspace=0.7)
    for ax, p in zip(axes, panels):
        _histogram_panel(ax, p)
    legend = [(ALL_PARTS, {"patch": True}, "all parts"), (PLACED, {"patch": True}, "placed in sets"),
              (LIMIT, {"linestyle": "--", "linewidth": 1.2}, "screening limit"),
              (DAMAGED, {"marker": "x", "markersize": 4.5}, "possible damage (leakage)")]
    return svgchart.figure_svg(axes[:len(panels)], width, height, key,
                               "distributions of the reel with screening limits", legend=legend)


def _histogram_panel(ax, p: Panel) -> None:
    """Every part, the placed ones over them, limits dashed, damaged parts marked at 0."""
    v = np.asarray(p.values, dtype=float)
    ok = np.isfinite(v) & ((v > 0) if p.log else True)
    x = v[ok]
    lims = [val for _, val in p.limits]
    if p.log:
        pos = [val for val in lims if val > 0]
        lo, hi = np.log10(min([x.min()] + pos)), np.log10(max([x.max()] + pos))
        lo, hi = (lo - 0.5, hi + 0.5) if hi - lo < 1e-9 else (lo - 0.05, hi + 0.05)
        bins = np.logspace(lo, hi, 41)
        ax.set_xscale("log")
        ax.x.numticks = 5
        ax.set_formatter("x", _si_label(p.unit))
        factor, unit = 1.0, p.unit
    else:
        factor, unit = _prefix(x, p.unit)
        lo, hi = min([x.min()] + lims), max([x.max()] + lims)
        span = hi - lo if hi > lo else max(abs(hi), 1e-30) * 0.01
        bins = np.linspace(lo - 0.02 * span, hi + 0.02 * span, 41) / factor
    xs = x if p.log else x / factor
    ax.hist(xs, bins, color=ALL_PARTS)
    placed = p.placed[ok]
    if placed.any():
        ax.hist(xs[placed], bins, color=PLACED)
    for _kind, val in p.limits:
        ax.axvline(val if p.log else val / factor, color=LIMIT, linewidth=1.2, linestyle="--")
    dmg = p.damaged[ok]
    if dmg.any():
        ax.plot(xs[dmg], np.zeros(int(dmg.sum())), linestyle="none", marker="x",
                color=DAMAGED, markersize=4.5, clip_on=False)
    ax.set_title(f"{p.title} ({len(x)} parts)", loc="left")
    ax.set_xlabel(unit or "[1]")
    ax.set_ylabel("parts")
    # parts are counted whole
    ax.set_locator("y", lambda lo, hi: MaxNLocator(integer=True).tick_values(lo, hi))


# --------------------------------------------------------------------------- one set

@dataclass
class Member:
    """What one set member's panels are drawn from (SI; NaN where absent)."""

    device: str
    forward: dict | None = None          # forward.csv row
    readings: tuple | None = None        # (current, voltage, used, temperature [K]) arrays
    capacitance: dict | None = None      # capacitance.csv row
    cv_points: tuple | None = None       # (reverse voltage, capacitance, used) arrays
    recovery: dict | None = None         # recovery.csv row


def _f(row: dict | None, col: str) -> float:
    if row is None:
        return math.nan
    try:
        return float(row.get(col, math.nan))
    except (TypeError, ValueError):
        return math.nan


def _label(device: str) -> str:
    """A device id as legend text: '$' would start mathtext, a leading '_' hides the entry."""
    text = str(device).replace("$", r"\$")
    return " " + text if text.startswith("_") else text


def _fitted(row: dict | None) -> bool:
    return row is not None and str(row.get("status")) != "rejected" and all(
        math.isfinite(_f(row, c)) for c in ("is_A", "n", "rs_ohm", "i_min_A", "i_max_A"))


def _fwd_voltage(row: dict, current: np.ndarray, temperature: float | None = None) -> np.ndarray:
    t_ref = _f(row, "reference_temperature_C") + ZERO_CELSIUS
    t = t_ref if temperature is None else temperature
    i_s = _f(row, "is_A")
    if temperature is not None and math.isfinite(_f(row, "eg_eV")):
        i_s = saturation_current_at(i_s, t, t_ref, _f(row, "n"), _f(row, "eg_eV"), _f(row, "xti"))
    return voltage_from_current(current, i_s, _f(row, "n"), _f(row, "rs_ohm"), t)


def _forward_panel(ax, members, style, currents):
    """Measured readings (at TNOM) and fitted forward curves of each member."""
    for m in members:
        color, marker = style[m.device]
        if m.readings is not None:
            i, v, used, t = m.readings
            if _fitted(m.forward) and np.isfinite(t).all():
                # Readings taken warmer or cooler (or self-heated) moved to TNOM with the
                # part's own fitted law, so that every curve and point is at one temperature.
                v = v + _fwd_voltage(m.forward, i) - _fwd_voltage(m.forward, i, t)
            ax.plot(v[used], i[used], linestyle="none", marker=marker, color=color,
                    markerfacecolor="none", markeredgewidth=0.7)
            if (~used).any():
                ax.plot(v[~used], i[~used], linestyle="none", marker=marker, color=GRID,
                        markeredgewidth=0.7, markerfacecolor="none")
        if _fitted(m.forward):
            cur = np.logspace(np.log10(_f(m.forward, "i_min_A")),
                              np.log10(_f(m.forward, "i_max_A")), 60)
            ax.plot(_fwd_voltage(m.forward, cur), cur, color=color, label=_label(m.device))
        else:
            ax.plot([], [], color=color, marker=marker, linestyle="none",
                    markerfacecolor="none", label=f"{_label(m.device)} (points only)")
    for c in currents:
        ax.axhline(c, color=LIMIT, linewidth=0.6, linestyle=":")
    if currents:
        ax.plot([], [], color=LIMIT, linewidth=0.6, linestyle=":",
                label="profile's match currents")
    ax.set_yscale("log")
    ax.set_formatter("y", _si_label("A"))
    ax.set_formatter("x", lambda v: f"{v * 1e3:.0f}")
    ax.set_xlabel("forward voltage [mV]")
    ax.set_ylabel("current")
    ax.set_title("forward: readings (markers) and fitted model, at TNOM", loc="left")
    ax.legend(loc="upper left")


def _deviation_panel(ax, fitted, style, currents, temperature):
    """Each member's fitted forward voltage minus the set's mean, over the common range."""
    lo = max(_f(m.forward, "i_min_A") for m in fitted)
    hi = min(_f(m.forward, "i_max_A") for m in fitted)
    if hi > lo:
        cur = np.logspace(np.log10(lo), np.log10(hi), 80)
        volts = np.array([_fwd_voltage(m.forward, cur, temperature) for m in fitted])
        mean = volts.mean(axis=0)
        for m, v in zip(fitted, volts):
            ax.plot(cur, (v - mean) * 1e3, color=style[m.device][0], label=_label(m.device))
        ax.set_xscale("log")
        ax.set_formatter("x", _si_label("A"))
        for c in currents:
            ax.axvline(c, color=LIMIT, linewidth=0.6, linestyle=":")
    else:
        ax.text_center("the fitted ranges do not overlap")
    ax.set_xlabel("current")
    ax.set_ylabel("V \u2212 set mean [mV]")
    ax.set_title(f"V minus the set's mean, at {temperature - ZERO_CELSIUS:g} \u00b0C "
                 "(dotted: match currents)", loc="left")


def _cv_panel(ax, members, style):
    """C–V points and fitted depletion law of each member."""
    vmax = 0.0
    for m in members:
        color, marker = style[m.device]
        if m.cv_points is not None:
            vr, c, used = m.cv_points
            ax.plot(vr[used], c[used] * 1e12, linestyle="none", marker=marker, color=color,
                    markerfacecolor="none", markeredgewidth=0.7)
            vmax = max(vmax, float(np.nanmax(vr)) if len(vr) else 0.0)
        cap = m.capacitance
        if cap is not None and str(cap.get("status")) != "rejected" and all(
                math.isfinite(_f(cap, k)) for k in ("cj0_F", "vj_V", "m")):
            top = _f(cap, "vr_max_V")
            top = top if math.isfinite(top) and top > 0 else max(vmax, 1.0)
            vmax = max(vmax, top)
            vr = np.linspace(max(_f(cap, "vr_min_V"), 0.0) if math.isfinite(
                _f(cap, "vr_min_V")) else 0.0, top, 60)
            c = junction_capacitance(vr, _f(cap, "cj0_F"), _f(cap, "vj_V"), _f(cap, "m"))
            cp = _f(cap, "cp_F")
            ax.plot(vr, (c + (cp if math.isfinite(cp) else 0.0)) * 1e12, color=color,
                    label=_label(m.device))
    ax.set_xlabel("reverse voltage [V]")
    ax.set_ylabel("capacitance [pF]")
    ax.set_title("C\u2013V: points (markers) and fitted law (line)", loc="left")


def _recovery_panel(ax, members, style):
    """The recovery model of each member's fit, with a marker at trr."""
    rec = [m for m in members if m.recovery is not None and math.isfinite(_f(m.recovery, "tt_s"))]
    t0 = min(_f(m.recovery, "t0_s") if math.isfinite(_f(m.recovery, "t0_s")) else 0.0
             for m in rec)
    span = max(_f(m.recovery, "trr_s") if math.isfinite(_f(m.recovery, "trr_s")) else
               3 * _f(m.recovery, "tt_s") for m in rec)
    t = np.linspace(t0 - 0.3 * span, t0 + 1.8 * span, 240)
    for m in rec:
        r = m.recovery
        i_f = _f(r, "if_A") if math.isfinite(_f(r, "if_A")) else _f(r, "if_set_A")
        i_r = _f(r, "ir_A") if math.isfinite(_f(r, "ir_A")) else _f(r, "ir_set_A")
        tau = _f(r, "decay_tau_s")
        sw = _f(r, "t0_s") if math.isfinite(_f(r, "t0_s")) else 0.0
        if not all(math.isfinite(x) for x in (i_f, i_r)):
            continue
        i = recovery_waveform(t, i_f, i_r, _f(r, "tt_s"), tau if math.isfinite(tau) else 0.0,
                              0.0, switch_time=sw)
        color, marker = style[m.device]
        ax.plot((t - t0) * 1e9, i * 1e3, color=color, label=_label(m.device))
        trr = _f(r, "trr_s")
        if math.isfinite(trr):
            k = np.argmin(np.abs(t - (sw + trr)))
            ax.plot([(t[k] - t0) * 1e9], [i[k] * 1e3], marker=marker, color=color,
                    markerfacecolor="none", linestyle="none")
    ax.set_xlabel("time from the current's zero crossing [ns]")
    ax.set_ylabel("current [mA]")
    ax.set_title("recovery: model of each part's fit, marker at trr", loc="left")


def set_figure(members: list[Member], currents: list[float], temperature: float,
               key: str, label: str) -> str:
    """Forward curves (measured and fitted), their deviation from the set's mean,
    C–V and recovery overlays of one set.

    Written as SVG by :mod:`kinset.report.svgchart` (the same panels, sizes, colours and
    tick choice as a matplotlib figure here, at a hundredth of its cost: a page draws
    thirty of these)."""
    has_cv = any(m.cv_points is not None or m.capacitance is not None for m in members)
    has_rr = any(m.recovery is not None and math.isfinite(_f(m.recovery, "tt_s"))
                 for m in members)
    fitted = [m for m in members if _fitted(m.forward)]
    has_fwd = any(m.readings is not None or _fitted(m.forward) for m in members)
    n_panels = has_fwd + (len(fitted) >= 2) + has_cv + has_rr
    if not n_panels:
        return ""
    cols = 2 if n_panels > 1 else 1
    rows = math.ceil(n_panels / cols)
    width, height = (7.2 if cols == 2 else 3.8), 2.4 * rows
    # margins as _margins gives; the right panels' y labels clear the left ticks
    axes = svgchart.grid(rows, cols, width, height, left=0.62, right=0.12, bottom=0.42,
                         top=0.24, wspace=0.85, hspace=0.62)[:n_panels]
    style = {m.device: (MEMBER_COLORS[i % len(MEMBER_COLORS)],
                        MEMBER_MARKERS[i % len(MEMBER_MARKERS)]) for i, m in enumerate(members)}
    it = iter(axes)

    if has_fwd:
        ax = next(it)
        _forward_panel(ax, members, style, currents)

    if len(fitted) >= 2:
        ax = next(it)
        _deviation_panel(ax, fitted, style, currents, temperature)

    if has_cv:
        ax = next(it)
        _cv_panel(ax, members, style)

    if has_rr:
        ax = next(it)
        _recovery_panel(ax, members, style)

    return svgchart.figure_svg(axes, width, height, key, label)
