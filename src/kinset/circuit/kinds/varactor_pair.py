"""Varactor pair: two parallel LC tanks, each tuned by one varactor on one tuning voltage.

The circuit (textbook varactor tuning, e.g. U. L. Rohde and D. P. Newkirk, *RF/Microwave
Circuit Design for Wireless Applications*, Wiley, 2000, varactor-tuned resonators): each
tank's inductor runs from the tuning-voltage source (an AC ground) to the tank node, the
varactor from the tank node to ground (cathode at the tank), so the tuning voltage
reverse-biases the varactor and the tank is L in parallel with the diode. An AC current
of 1 A into the tank node makes the node voltage the tank's impedance Z.

The resonance is the frequency where the tank's susceptance B = Im(1/Z) is zero (the
phase zero-crossing). For L parallel with a series RS-C branch, ω·B = ω²C/(1+(ωRSC)²) -
1/L: nearly linear in ω². The AC sweep is logarithmic over a band that holds every
tank's resonance (estimated from the cards' CJO, VJ and M at the bias extremes); the
zero is found between the two sweep points that bracket it by a quadratic in ω² through
the three nearest points, whose error is of the order (ωRSC)^4 times the bracket's
relative width, far below 1 ppm for small-signal varactors (the residual is measured
against the closed form in tests/test_circuit_kinds.py). All circuits of a deck share
the tuning source, so they see the same bias.

Figure: the largest relative difference of the two tanks' resonances over the tuning
points, relative to their mean [ppm]. The tuning points run geometrically from the least
to the largest tuning voltage. What the circuit idealises: a lossless inductor, an ideal
tuning source; leakage below breakdown is not modelled (the bias feed drops nothing).
"""

from __future__ import annotations

import math

import numpy as np

from kinset.circuit.kinds.common import (card_lines, card_values, column, columns,
                                         diode_nodes, head, settings, wrdata_lines)

POSITIONS = 2

PARAMETERS = {
    "inductance_H": (1.0e-7, "100 nH with tens of pF tunes near 100 MHz, a VHF front end "
                             "(common practice)"),
    "tuning_min_V": (1.0, "the least bias the profile matches capacitance at"),
    "tuning_max_V": (8.0, "the largest bias the profile matches capacitance at"),
    "tuning_points": (4.0, "1, 2, 4, 8 V: the biases the profile matches capacitance at"),
}

#: The tank is tuned by the depletion law alone: without its three parameters the
#: simulator's defaults (no capacitance, VJ 1 V, M 0.5) would tune it.
NEEDS = {"CJO": "the tuning capacitance (no C-V fit)", "VJ": "the C-V law's built-in "
         "potential (no C-V fit)", "M": "the C-V law's grading exponent (no C-V fit)"}

FIGURES = {
    "tracking_error_ppm": "largest relative difference of the two tanks' resonant "
                          "frequencies over the tuning range (of their mean)",
}

#: AC sweep points per decade. Coarse is enough: the quadratic refinement is exact to
#: far below 1 ppm at this spacing.
POINTS_PER_DECADE = 40
#: Sweep band when the cards give no capacitance law to estimate it from.
FALLBACK_BAND_HZ = (1.0e3, 1.0e11)


def tuning_voltages(p: dict) -> np.ndarray:
    """The tuning points: geometric from ``tuning_min_V`` to ``tuning_max_V``."""
    n = max(int(round(p["tuning_points"])), 1)
    return np.geomspace(p["tuning_min_V"], p["tuning_max_V"], n) if n > 1 \
        else np.array([p["tuning_min_V"]])


def _band(cards, models, p: dict) -> tuple[float, float]:
    """A sweep band holding every tank's resonance, from the depletion law of the cards."""
    values = card_values(cards)
    caps = []
    for m in set(models):
        card = values.get(m.lower(), {})
        cjo, vj, grading = card.get("CJO", 0.0), card.get("VJ", 1.0), card.get("M", 0.5)
        if cjo > 0 and vj > 0:
            caps += [cjo / (1 + v / vj) ** min(grading, 0.9)
                     for v in (p["tuning_min_V"], p["tuning_max_V"])]
    if not caps:
        return FALLBACK_BAND_HZ
    f = [1 / (2 * math.pi * math.sqrt(p["inductance_H"] * c)) for c in caps]
    return min(f) / 3.0, max(f) * 3.0


def deck(circuits, params, cards, temperature_C: float) -> str:
    """The deck: one tuning source, two tanks per pair, an AC sweep per tuning point."""
    p = settings(PARAMETERS, params)
    lines = head("varactor pair", card_lines(cards), temperature_C)
    lines.append(f"Vtune tune 0 dc {p['tuning_min_V']:.10g}")
    nodes = diode_nodes(circuits, POSITIONS)
    for node, model in nodes:
        lines += [f"L{node} tune {node} {p['inductance_H']:.10g}",
                  f"D{node} 0 {node} {model}", f"I{node} 0 {node} dc 0 ac 1"]
    vectors = [f"v({node})" for node, _ in nodes]
    lo, hi = _band(cards, [m for c in circuits for m in c.models], p)
    lines.append(".control")
    for j, v in enumerate(tuning_voltages(p)):
        lines += [f"alter vtune dc={v:.10g}",
                  f"ac dec {POINTS_PER_DECADE} {lo:.10g} {hi:.10g}"]
        lines += wrdata_lines(f"varactor_{j}", vectors)
    lines += [".endc", ".end"]
    return "\n".join(lines) + "\n"


def resonance(frequency: np.ndarray, z: np.ndarray | None) -> float:
    """Where Im(1/Z) crosses zero from below (inductive to capacitive); NaN if nowhere.

    The root of a quadratic in ω² through the three sweep points nearest the crossing.
    """
    if z is None or frequency is None or np.any(z == 0):
        return math.nan
    w2 = (2 * math.pi * np.real(frequency)) ** 2
    g = np.imag(1.0 / z) * np.sqrt(w2)                 # ω·B, ~ ω²C - 1/L
    up = np.flatnonzero((g[:-1] < 0) & (g[1:] >= 0))
    if up.size != 1:
        return math.nan
    k = int(up[0])
    idx = slice(max(k - 1, 0), max(k - 1, 0) + 3) if k + 2 < g.size else slice(k - 1, k + 2)
    x, y = w2[idx], g[idx]
    if x.size < 3:
        return math.nan
    scale = w2[k]
    roots = np.roots(np.polyfit(x / scale, y, 2))
    inside = [r.real * scale for r in roots
              if abs(r.imag) < 1e-12 and w2[k] <= r.real * scale <= w2[k + 1]]
    return math.sqrt(inside[0]) / (2 * math.pi) if len(inside) == 1 else math.nan


def figures(result, circuits, params) -> list[dict[str, float]]:
    """The tracking error of each pair; NaN where a resonance is missing."""
    p = settings(PARAMETERS, params)
    runs = [columns(result, f"varactor_{j}") for j in range(len(tuning_voltages(p)))]
    out = []
    for c in circuits:
        worst = 0.0
        for cols in runs:
            f = cols.get("frequency")
            f = np.real(f) if f is not None else None       # AC scale: written complex
            f1, f2 = (resonance(f, column(cols, f"v({c.label}_{k})")) for k in (1, 2))
            worst = max(worst, abs(f1 - f2) / ((f1 + f2) / 2) * 1e6) \
                if math.isfinite(f1) and math.isfinite(f2) else math.nan
            if not math.isfinite(worst):
                break
        out.append({"tracking_error_ppm": worst if runs else math.nan})
    return out
