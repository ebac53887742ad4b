"""A small writer of line-and-marker charts as SVG, for the report's per-set figures.

A set figure is a few curves and points on two axes. Drawn with matplotlib, each one cost
about a quarter of a second (figure, axes and tick objects, text measured through the
font, a renderer per figure), and a page draws thirty of them: most of a 10,000-part
report's time. These charts are written as SVG text directly. :class:`Chart` takes the
few calls of matplotlib's ``Axes`` that the panels make (``plot``, ``axhline``,
``axvline``, ``text``, scales, labels, title, legend) with the same meaning, and the
panels keep the look of the report's other figures (``plots.STYLE``): same sizes in
points, colours, line widths, dash patterns and tick placement (matplotlib's own
``MaxNLocator`` and ``LogLocator`` choose the ticks, without an axis or a figure).

Text is never measured: it is anchored (start, middle, end) and the browser lays it out;
the one width the layout needs, of the widest y tick label, is estimated from its length.
Every element id starts with the figure's key, so many charts share one page.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from matplotlib.ticker import LogLocator, MaxNLocator

PT = 72.0                      # SVG user units are points: 72 per inch, as matplotlib's
FONT, TITLE, TICK = 7.5, 8.0, 6.5      # sizes in points (plots.STYLE)
TICK_LEN, TICK_PAD, LABEL_PAD, TITLE_PAD = 3.5, 3.5, 4.0, 6.0   # matplotlib's defaults
EM_WIDTH = 0.56                # average width of a sans-serif glyph, in em (estimate)
MARGIN = 0.05                  # data margin on each side, as axes.xmargin / ymargin
MINUS = "\u2212"
# the report's ink and grid (plots.py takes them from here for its matplotlib figures)
INK = "#222222"
GRID = "#d9d9d9"
LINE_WIDTH, MARKER_SIZE = 1.1, 3.2     # plots.STYLE lines.linewidth, lines.markersize


def _n(v: float) -> str:
    """A coordinate to 0.01 pt, as the report's other figures."""
    text = f"{v:.2f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def _esc(text: str) -> str:
    return str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;") \
        .replace('"', "&quot;")


def _dashes(style: str | None, width: float) -> str:
    """matplotlib's dash patterns (lines.dashed_pattern, dotted_pattern), scaled by width."""
    pattern = {"--": (3.7, 1.6), ":": (1.0, 1.65), "-.": (6.4, 1.6, 1.0, 1.6)}.get(style or "")
    if not pattern:
        return ""
    return f' stroke-dasharray="{",".join(_n(p * width) for p in pattern)}"'


# marker outlines for a marker of size 1 (scaled by the marker size), as closed paths
_MARKERS = {
    "s": [(-.5, -.5), (.5, -.5), (.5, .5), (-.5, .5)],
    "^": [(0, -.5), (.5, .5), (-.5, .5)],
    "v": [(0, .5), (.5, -.5), (-.5, -.5)],
    "<": [(-.5, 0), (.5, -.5), (.5, .5)],
    "D": [(0, -.5), (.5, 0), (0, .5), (-.5, 0)],
    "P": [(-.17, -.5), (.17, -.5), (.17, -.17), (.5, -.17), (.5, .17), (.17, .17), (.17, .5),
          (-.17, .5), (-.17, .17), (-.5, .17), (-.5, -.17), (-.17, -.17)],
    "X": [(-.5, -.38), (-.38, -.5), (0, -.12), (.38, -.5), (.5, -.38), (.12, 0), (.5, .38),
          (.38, .5), (0, .12), (-.38, .5), (-.5, .38), (-.12, 0)],
}


def _marker_path(marker: str, size: float) -> str:
    if marker == "x":                              # two strokes, nothing to fill
        r = size / 2
        return f"M {_n(-r)} {_n(-r)} L {_n(r)} {_n(r)} M {_n(-r)} {_n(r)} L {_n(r)} {_n(-r)}"
    if marker == "o":
        r = size / 2
        return f"M {_n(-r)} 0 A {_n(r)} {_n(r)} 0 1 0 {_n(r)} 0 A {_n(r)} {_n(r)} 0 1 0 {_n(-r)} 0 Z"
    pts = _MARKERS.get(marker, _MARKERS["s"])
    return "M " + " L ".join(f"{_n(x * size)} {_n(y * size)}" for x, y in pts) + " Z"


@dataclass
class _Scale:
    """One axis: linear or log, its data extent and how tick labels are written."""

    log: bool = False
    extent: list[float] = field(default_factory=list)
    formatter: object = None
    locator: object = None         # (lo, hi) -> ticks, instead of matplotlib's default
    numticks: int = 6              # of a log axis (LogLocator's numticks)
    sticky: list[float] = field(default_factory=list)   # the margin stops here (a bar's 0)

    def take(self, values) -> np.ndarray:
        v = np.asarray(values, dtype=float).ravel()
        v = v[np.isfinite(v) & ((v > 0) if self.log else True)]
        if len(v):
            self.extent += [float(v.min()), float(v.max())]
        return v

    def view(self) -> tuple[float, float]:
        """Data limits plus matplotlib's 5 % margin (in log10 on a log axis)."""
        if not self.extent:
            return (1.0, 10.0) if self.log else (0.0, 1.0)
        lo, hi = min(self.extent), max(self.extent)
        below = [v for v in self.sticky if v <= lo]
        above = [v for v in self.sticky if v >= hi]
        if self.log:
            lo, hi = math.log10(lo), math.log10(hi)
        if hi - lo <= 1e-12 * max(abs(lo), abs(hi), 1e-300):
            pad = 1.0 if self.log else (abs(lo) * 0.05 if lo else 0.1)
            lo, hi = lo - pad, hi + pad
        span = hi - lo
        lo, hi = lo - MARGIN * span, hi + MARGIN * span
        if self.log:
            lo, hi = 10 ** lo, 10 ** hi
        # as matplotlib: a margin never crosses a sticky edge the data reach
        return (max([lo] + below), min([hi] + above))

    def ticks(self, lo: float, hi: float, length: float, room: float) -> np.ndarray:
        """matplotlib's choice: a label needs ``room`` times the tick font size along the
        axis (3 on x, 2 on y: ``Axis.get_tick_space``), at most 9 intervals."""
        if self.locator is not None:
            t = self.locator(lo, hi)
        elif self.log:
            t = LogLocator(numticks=self.numticks).tick_values(lo, hi)
        else:
            bins = max(1, min(9, int(length // (TICK * room))))
            t = MaxNLocator(nbins=bins, steps=[1, 2, 2.5, 5, 10]).tick_values(lo, hi)
        tol = (math.log10(hi) - math.log10(lo) if self.log else hi - lo) * 1e-9
        keep = [(math.log10(v) if self.log else v) for v in t]
        edge = (math.log10(lo), math.log10(hi)) if self.log else (lo, hi)
        return np.array([v for v, k in zip(t, keep) if edge[0] - tol <= k <= edge[1] + tol])

    def label(self, value: float, ticks: np.ndarray) -> str:
        if self.formatter is not None:
            return self.formatter(value)
        step = float(np.min(np.diff(ticks))) if len(ticks) > 1 else abs(value) or 1.0
        digits = next((d for d in range(7) if abs(round(step, d) - step) <= step * 1e-6), 6)
        text = f"{value:.{digits}f}"
        return MINUS + text[1:] if text.startswith("-") and float(text) != 0 else \
            text.lstrip("-")


@dataclass
class _Item:
    kind: str                      # "line", "points", "hline", "vline", "text"
    x: object
    y: object
    color: str = "#000000"
    style: dict = field(default_factory=dict)
    label: str | None = None


class Chart:
    """One panel: the subset of matplotlib's ``Axes`` calls the set figures make."""

    def __init__(self, box: tuple[float, float, float, float]):
        self.box = box             # left, top, width, height in points
        self.x, self.y = _Scale(), _Scale()
        self.items: list[_Item] = []
        self.title = self.xlabel = self.ylabel = ""
        self.legend_on = False

    # --- matplotlib's Axes calls, same meaning
    def plot(self, x, y, color="#000000", marker=None, linestyle="-", label=None, **kw):
        x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        self.x.take(x), self.y.take(y)
        style = dict(kw, marker=marker, linestyle=None if linestyle == "none" else linestyle)
        self.items.append(_Item("plot", x, y, color, style, label))

    def axhline(self, y, color="#000000", linewidth=1.0, linestyle="-"):
        self.y.take([y])
        self.items.append(_Item("hline", None, y, color, dict(linewidth=linewidth,
                                                             linestyle=linestyle)))

    def axvline(self, x, color="#000000", linewidth=1.0, linestyle="-"):
        self.x.take([x])
        self.items.append(_Item("vline", x, None, color, dict(linewidth=linewidth,
                                                             linestyle=linestyle)))

    def hist(self, values, bins, color="#000000"):
        """A filled step outline of the counts in ``bins`` (``histtype="stepfilled"``)."""
        bins = np.asarray(bins, dtype=float)
        counts = np.histogram(np.asarray(values, dtype=float), bins)[0].astype(float)
        self.x.take(bins[[0, -1]]), self.y.take([0.0, counts.max() if len(counts) else 0.0])
        self.y.sticky.append(0.0)
        x = np.repeat(bins, 2)
        y = np.concatenate([[0.0], np.repeat(counts, 2), [0.0]])
        self.items.append(_Item("fill", x, y, color))

    def text_center(self, text: str):
        """A line of text at the middle of the panel (``transform=ax.transAxes``)."""
        self.items.append(_Item("text", 0.5, 0.5, style=dict(text=text)))

    def set_xscale(self, scale):
        self.x.log = scale == "log"

    def set_yscale(self, scale):
        self.y.log = scale == "log"

    def set_locator(self, which: str, ticks):
        """Tick positions of axis ``which``: ``ticks(lo, hi) -> array``."""
        getattr(self, which).locator = ticks

    def set_formatter(self, which: str, label):
        """Tick labels of axis ``which`` ("x" or "y"): ``label(value) -> str``."""
        getattr(self, which).formatter = label

    def set_xlabel(self, text):
        self.xlabel = text

    def set_ylabel(self, text):
        self.ylabel = text

    def set_title(self, text, loc="left"):
        self.title = text

    def legend(self, loc="upper left"):
        self.legend_on = True

    # --- drawing
    def _mapper(self):
        left, top, width, height = self.box
        (x0, x1), (y0, y1) = self.x.view(), self.y.view()
        fx = (lambda v: np.log10(v)) if self.x.log else (lambda v: v)
        fy = (lambda v: np.log10(v)) if self.y.log else (lambda v: v)
        ax0, ax1, ay0, ay1 = fx(x0), fx(x1), fy(y0), fy(y1)

        def px(v):
            with np.errstate(divide="ignore", invalid="ignore"):
                return left + (fx(np.asarray(v, dtype=float)) - ax0) / (ax1 - ax0) * width

        def py(v):
            with np.errstate(divide="ignore", invalid="ignore"):
                return top + height - (fy(np.asarray(v, dtype=float)) - ay0) / (ay1 - ay0) * height
        return (x0, x1), (y0, y1), px, py


def _polyline(xs: np.ndarray, ys: np.ndarray) -> str:
    """An SVG path through the points, broken where a point is not finite."""
    ok = np.isfinite(xs) & np.isfinite(ys)
    out, pen = [], "M"
    for x, y, good in zip(xs, ys, ok):
        if not good:
            pen = "M"
            continue
        out.append(f"{pen} {_n(x)} {_n(y)}")
        pen = "L"
    return " ".join(out)


def _axes_svg(c: Chart, px, py, xt, yt, xl, yl) -> list[str]:
    """Grid, frame, ticks and tick labels, axis labels and the title of one panel."""
    left, top, width, height = c.box
    bottom, right = top + height, left + width
    out = [f'<g stroke="{GRID}" stroke-width="0.5" fill="none">']
    out += [f'<path d="M {_n(x)} {_n(top)} V {_n(bottom)}"/>' for x in px(xt)]
    out += [f'<path d="M {_n(left)} {_n(y)} H {_n(right)}"/>' for y in py(yt)]
    out.append("</g>")
    ticks = [f"M {_n(x)} {_n(bottom)} v {_n(TICK_LEN)}" for x in px(xt)] + \
            [f"M {_n(left)} {_n(y)} h {_n(-TICK_LEN)}" for y in py(yt)]
    out.append(f'<path d="{" ".join(ticks)}" stroke="{INK}" stroke-width="0.6" fill="none"/>')
    base = bottom + TICK_LEN + TICK_PAD + 0.76 * TICK
    out.append(f'<g fill="{INK}" style="font-size: {_n(TICK)}px">')
    out += [f'<text x="{_n(x)}" y="{_n(base)}" text-anchor="middle">{_esc(s)}</text>'
            for x, s in zip(px(xt), xl)]
    edge = left - TICK_LEN - TICK_PAD
    out += [f'<text x="{_n(edge)}" y="{_n(y + 0.36 * TICK)}" text-anchor="end">{_esc(s)}</text>'
            for y, s in zip(py(yt), yl)]
    out.append("</g>")
    widest = max([len(s) for s in yl] + [1]) * EM_WIDTH * TICK
    ylab_x = edge - widest - LABEL_PAD
    out.append(f'<g fill="{INK}" style="font-size: {_n(FONT)}px">')
    out.append(f'<text x="{_n(left + width / 2)}" y="{_n(base + 0.24 * TICK + LABEL_PAD + 0.76 * FONT)}" '
               f'text-anchor="middle">{_esc(c.xlabel)}</text>')
    out.append(f'<text transform="translate({_n(ylab_x)} {_n(top + height / 2)}) rotate(-90)" '
               f'text-anchor="middle">{_esc(c.ylabel)}</text>')
    # a title longer than its panel (estimated) is squeezed to the panel's width, so it
    # neither runs into the next panel's title nor off the figure's edge
    fit = (f' textLength="{_n(width)}" lengthAdjust="spacingAndGlyphs"'
           if len(c.title) * EM_WIDTH * TITLE > width else "")
    out.append(f'<text x="{_n(left)}" y="{_n(top - TITLE_PAD)}" style="font-size: {_n(TITLE)}px"'
               f'{fit}>{_esc(c.title)}</text></g>')
    out.append(f'<rect x="{_n(left)}" y="{_n(top)}" width="{_n(width)}" height="{_n(height)}" '
               f'fill="none" stroke="{INK}" stroke-width="0.6"/>')
    return out


def _marker_use(key: str, marker: str, size: float, defs: dict) -> str:
    ident = f"{key}-m{marker_id(marker)}-{_n(size).replace('.', '_')}"
    if ident not in defs:
        defs[ident] = f'<path id="{ident}" d="{_marker_path(marker, size)}"/>'
    return ident


def marker_id(marker: str) -> str:
    return {"o": "o", "s": "s", "^": "u", "v": "d", "<": "l", "D": "D", "P": "P", "X": "X",
            "x": "x"}.get(marker, "s")


def _plot_svg(item: _Item, px, py, key: str, defs: dict) -> list[str]:
    s = item.style
    xs, ys = px(item.x), py(item.y)
    out = []
    if s.get("linestyle"):
        width = s.get("linewidth", LINE_WIDTH)
        out.append(f'<path d="{_polyline(xs, ys)}" fill="none" stroke="{item.color}" '
                   f'stroke-width="{_n(width)}"{_dashes(s["linestyle"], width)}/>')
    if s.get("marker"):
        size = s.get("markersize", MARKER_SIZE)
        ident = _marker_use(key, s["marker"], size, defs)
        face = s.get("markerfacecolor", item.color)
        face = "none" if face in (None, "none") else face
        edge = s.get("markeredgecolor", item.color)
        out.append(f'<g stroke="{edge}" fill="{face}" stroke-width="'
                   f'{_n(s.get("markeredgewidth", 1.0))}">')
        ok = np.isfinite(xs) & np.isfinite(ys)
        out += [f'<use href="#{ident}" x="{_n(x)}" y="{_n(y)}"/>' for x, y in zip(xs[ok], ys[ok])]
        out.append("</g>")
    return out


def _items_svg(c: Chart, px, py, key: str, clip: str, defs: dict) -> list[str]:
    left, top, width, height = c.box
    out = [f'<g clip-path="url(#{clip})">']
    for item in c.items:
        if item.kind == "fill":
            out.append(f'<path d="{_polyline(px(item.x), py(item.y))} Z" fill="{item.color}"/>')
        elif item.kind == "plot" and item.style.get("clip_on", True):
            out += _plot_svg(item, px, py, key, defs)
        elif item.kind in ("hline", "vline"):
            w = item.style["linewidth"]
            d = (f"M {_n(left)} {_n(float(py(item.y)))} h {_n(width)}" if item.kind == "hline"
                 else f"M {_n(float(px(item.x)))} {_n(top)} v {_n(height)}")
            out.append(f'<path d="{d}" fill="none" stroke="{item.color}" stroke-width="{_n(w)}"'
                       f'{_dashes(item.style["linestyle"], w)}/>')
    out.append("</g>")
    for item in c.items:
        if item.kind == "plot" and not item.style.get("clip_on", True):
            out += _plot_svg(item, px, py, key, defs)
        if item.kind == "text":
            out.append(f'<text x="{_n(left + width / 2)}" y="{_n(top + height / 2)}" '
                       f'text-anchor="middle" fill="{INK}" style="font-size: {_n(FONT)}px">'
                       f'{_esc(item.style["text"])}</text>')
    return out


def _legend_svg(c: Chart, key: str, defs: dict) -> list[str]:
    """Entries top-down in the upper left corner, as matplotlib's legend (no frame)."""
    entries = [i for i in c.items if i.kind == "plot" and i.label]
    left, top = c.box[0], c.box[1]
    size = TICK                                    # legend.fontsize
    x0, y = left + 0.5 * size + 0.4 * size, top + 0.5 * size + 0.4 * size
    out = [f'<g style="font-size: {_n(size)}px">']
    for item in entries:
        mid = y + 0.35 * size
        sample = _Item("plot", np.array([x0, x0 + 2 * size]), np.array([mid, mid]), item.color,
                       dict(item.style))
        out += _legend_sample(sample, key, defs)
        out.append(f'<text x="{_n(x0 + 2.8 * size)}" y="{_n(mid + 0.36 * size)}" '
                   f'fill="{INK}">{_esc(item.label)}</text>')
        y += 1.5 * size
    out.append("</g>")
    return out


def _row_legend(entries: list[tuple[str, dict, str]], width: float, key: str,
                defs: dict) -> list[str]:
    """A figure's legend: one row centred at the top (``fig.legend(loc="upper center",
    ncol=len(entries))``); entries (colour, style, label), ``style["patch"]`` a filled box."""
    size = TICK
    spans = [2 * size + 0.8 * size + len(label) * EM_WIDTH * size for _c, _s, label in entries]
    x = (width - sum(spans) - 2 * size * (len(entries) - 1)) / 2
    mid = 0.4 * size + 0.5 * size + 0.35 * size
    out = [f'<g style="font-size: {_n(size)}px">']
    for (color, style, label), span in zip(entries, spans):
        if style.get("patch"):
            out.append(f'<rect x="{_n(x)}" y="{_n(mid - 0.35 * size)}" width="{_n(2 * size)}" '
                       f'height="{_n(0.7 * size)}" fill="{color}"/>')
        else:
            out += _legend_sample(_Item("plot", np.array([x, x + 2 * size]), np.array([mid, mid]),
                                        color, dict(style)), key, defs)
        out.append(f'<text x="{_n(x + 2.8 * size)}" y="{_n(mid + 0.36 * size)}" '
                   f'fill="{INK}">{_esc(label)}</text>')
        x += span + 2 * size
    out.append("</g>")
    return out


def _legend_sample(sample: _Item, key: str, defs: dict) -> list[str]:
    """The line of an entry across its handle, its marker once, at the middle."""
    out = []
    same = lambda v: v          # noqa: E731 (the handle is drawn in figure points)
    if sample.style.get("linestyle"):
        line = _Item("plot", sample.x, sample.y, sample.color, dict(sample.style, marker=None))
        out += _plot_svg(line, same, same, key, defs)
    if sample.style.get("marker"):
        dot = _Item("plot", np.array([sample.x.mean()]), sample.y[:1], sample.color,
                    dict(sample.style, linestyle=None))
        out += _plot_svg(dot, same, same, key, defs)
    return out


def render(c: Chart, key: str, index: int, defs: dict) -> list[str]:
    """One panel's SVG elements (its clip path goes into ``defs``)."""
    (x0, x1), (y0, y1), px, py = c._mapper()
    left, top, width, height = c.box
    xt, yt = c.x.ticks(x0, x1, width, 3.0), c.y.ticks(y0, y1, height, 2.0)
    xl, yl = [c.x.label(v, xt) for v in xt], [c.y.label(v, yt) for v in yt]
    clip = f"{key}-clip{index}"
    defs[clip] = (f'<clipPath id="{clip}"><rect x="{_n(left)}" y="{_n(top)}" '
                  f'width="{_n(width)}" height="{_n(height)}"/></clipPath>')
    out = _axes_svg(c, px, py, xt, yt, xl, yl)
    out += _items_svg(c, px, py, key, clip, defs)
    if c.legend_on:
        out += _legend_svg(c, key, defs)
    return out


def grid(rows: int, cols: int, width: float, height: float, left: float, right: float,
         bottom: float, top: float, wspace: float, hspace: float) -> list[Chart]:
    """Panels placed as ``Figure.subplots`` with ``subplots_adjust`` places them.

    Sizes in inches; margins in inches; ``wspace``, ``hspace`` in inches between panels
    (converted as ``plots._margins`` converts them for matplotlib).
    """
    ws = wspace / (width / 2)
    hs = hspace / ((height - top - bottom) / rows)
    cell_w = (width - left - right) / (cols + ws * (cols - 1))
    cell_h = (height - top - bottom) / (rows + hs * (rows - 1))
    return [Chart(((left + c * cell_w * (1 + ws)) * PT, (top + r * cell_h * (1 + hs)) * PT,
                   cell_w * PT, cell_h * PT))
            for r in range(rows) for c in range(cols)]


def figure_svg(charts: list[Chart], width: float, height: float, key: str, label: str,
               css_class: str = "plot", legend: list | None = None) -> str:
    """The charts as one ``<svg>`` element for inlining in HTML (sizes in inches), with
    a figure legend (see :func:`_row_legend`) if given."""
    defs: dict[str, str] = {}
    body = []
    for i, c in enumerate(charts):
        body += render(c, key, i, defs)
    w, h = width * PT, height * PT
    if legend:
        body += _row_legend(legend, w, key, defs)
    head = (f'<svg class="{css_class}" role="img" aria-label="{_esc(label)}" '
            f'xmlns="http://www.w3.org/2000/svg" width="{_n(w)}pt" height="{_n(h)}pt" '
            f'viewBox="0 0 {_n(w)} {_n(h)}">')
    return "\n".join([head, "<defs>", *defs.values(), "</defs>",
                      f'<rect width="{_n(w)}" height="{_n(h)}" fill="#ffffff"/>', *body,
                      "</svg>"])
