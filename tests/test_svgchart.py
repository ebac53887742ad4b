"""The set figures' SVG charts against matplotlib (the library they stand in for) and an
XML parser.

kinset.report.svgchart promises matplotlib's view limits (autoscale with 5 % margins,
in log10 on a log axis) and tick choice (AutoLocator / LogLocator(numticks=6) for an axis
of the same length in points) without building a figure: checked here against
matplotlib's own Axes, drawn at the same size.
"""

import xml.etree.ElementTree as ET

import numpy as np
import pytest
from matplotlib.figure import Figure
from matplotlib.ticker import LogLocator

from kinset.report import plots, svgchart

SVG = "{http://www.w3.org/2000/svg}"


def _matplotlib_axes(chart, draw):
    """A matplotlib Axes with the chart's size in points (reference), drawn by ``draw``."""
    left, top, width, height = chart.box
    fig = Figure(figsize=(8, 6))
    ax = fig.add_axes((left / 576, 1 - (top + height) / 432, width / 576, height / 432))
    with plots.matplotlib.rc_context(plots.STYLE):
        draw(ax)
        return ax, ax.get_xlim(), ax.get_ylim(), ax.get_xticks(), ax.get_yticks()


def _in(ticks, lo, hi):
    lo, hi = min(lo, hi), max(lo, hi)
    return np.array([t for t in ticks if lo - 1e-9 * (hi - lo) <= t <= hi + 1e-9 * (hi - lo)])


@pytest.mark.parametrize("log_x, log_y", [(False, False), (True, False), (False, True)])
def test_view_and_ticks_as_matplotlib(log_x, log_y):
    # reference: matplotlib's Axes.autoscale_view and the AutoLocator / LogLocator ticks
    rng = np.random.default_rng(7)
    x = np.logspace(-5, -1.7, 40) if log_x else np.linspace(-1.3, 7.9, 40)
    y = 10 ** rng.uniform(-6, -2, 40) if log_y else rng.normal(0.2, 0.4, 40)
    chart = svgchart.Chart((50.0, 20.0, 210.0, 150.0))

    def draw(ax):
        ax.plot(x, y)
        ax.axhline(float(np.median(y)))
        ax.set_xscale("log" if log_x else "linear")
        ax.set_yscale("log" if log_y else "linear")
        for axis, log in ((getattr(ax, "xaxis", None), log_x), (getattr(ax, "yaxis", None), log_y)):
            if axis is not None and log:     # the report's log axes: decades, numticks=6
                axis.set_major_locator(LogLocator(numticks=6))

    draw(chart)
    _ax, xlim, ylim, xticks, yticks = _matplotlib_axes(chart, draw)
    (x0, x1), (y0, y1) = chart.x.view(), chart.y.view()
    assert np.allclose([x0, x1], xlim, rtol=1e-9) and np.allclose([y0, y1], ylim, rtol=1e-9)
    assert np.allclose(chart.x.ticks(x0, x1, 210.0, 3.0), _in(xticks, *xlim))
    assert np.allclose(chart.y.ticks(y0, y1, 150.0, 2.0), _in(yticks, *ylim))


def test_figure_is_wellformed_svg_with_every_point():
    # reference: the XML parser of the standard library (the page inlines this element)
    charts = svgchart.grid(1, 2, 7.2, 2.4, left=0.62, right=0.12, bottom=0.42, top=0.24,
                           wspace=0.85, hspace=0.62)
    x = np.array([0.1, 0.2, np.nan, 0.4, 0.5])
    charts[0].plot(x, x ** 2, color="#2f5d7c", marker="o", markerfacecolor="none", label="a&b")
    charts[0].legend()
    charts[1].plot([1, 2, 3], [3, 1, 2], color="#c46a1b", marker="^", linestyle="none")
    charts[1].text_center("a <note>")
    text = svgchart.figure_svg(charts, 7.2, 2.4, "fig-k", 'label "q"')
    root = ET.fromstring(text)
    ids = [el.get("id") for el in root.iter() if el.get("id")]
    assert ids and all(i.startswith("fig-k-") for i in ids) and len(ids) == len(set(ids))
    uses = [el for el in root.iter(f"{SVG}use")]
    assert len(uses) == 4 + 1 + 3        # finite points, the legend's marker, the triangles
    texts = [el.text for el in root.iter(f"{SVG}text")]
    assert "a&b" in texts and "a <note>" in texts
    assert root.get("aria-label") == 'label "q"'


def test_histogram_view_as_matplotlib():
    # reference: matplotlib's Axes.hist(histtype="stepfilled"): bars stand on 0 (a sticky
    # edge, no margin below), 5 % margin above and on both sides of the bins
    rng = np.random.default_rng(3)
    values = rng.normal(0.6, 0.01, 500)
    bins = np.linspace(values.min(), values.max(), 41)
    chart = svgchart.Chart((50.0, 20.0, 150.0, 110.0))
    chart.hist(values, bins)
    ref, xlim, ylim, _xt, _yt = _matplotlib_axes(
        chart, lambda ax: ax.hist(values, bins=bins, histtype="stepfilled"))
    assert np.allclose(chart.x.view(), xlim, rtol=1e-9)
    assert np.allclose(chart.y.view(), ylim, rtol=1e-9) and chart.y.view()[0] == 0.0


def test_set_figure_edge_cases_are_wellformed_svg():
    # reference: the standard library's XML parser. A part with points but no fit (legend
    # "points only"), two fits whose current ranges do not overlap, one panel alone.
    i = np.logspace(-5, -2, 6)
    readings = (i, 0.6 + 0.05 * np.log10(i / 1e-5), np.ones(6, bool), np.full(6, 298.15))
    fit = {"is_A": 1e-9, "n": 1.9, "rs_ohm": 1.0, "reference_temperature_C": 25.0}
    low = plots.Member("A", dict(fit, i_min_A=1e-6, i_max_A=1e-5), readings)
    high = plots.Member("B", dict(fit, i_min_A=1e-3, i_max_A=1e-2))
    alone = plots.Member("C", None, readings)
    for members in ([low, high, alone], [alone]):
        root = ET.fromstring(plots.set_figure(members, [1e-3], 298.15, "fig-e", "edge"))
        texts = " ".join(el.text or "" for el in root.iter(f"{SVG}text"))
        assert "C (points only)" in texts
    assert "do not overlap" in plots.set_figure([low, high], [], 298.15, "fig-f", "f")
