"""Sampling bridge: four diodes gate a hold capacitor, switched by opposite strobes.

The circuit is the textbook four-diode sampling gate (J. Millman and H. Taub, *Pulse,
Digital and Switching Waveforms*, McGraw-Hill, 1965, on sampling gates): the bridge's
top node A and bottom node B are driven by two opposite strobe pulses, each through its
own resistor. While the strobe is on, current flows in at A and out at B, the four
diodes conduct and the output follows the input; while off, A is pulled negative and B
positive, every diode is reverse-biased and the hold capacitor keeps its charge.

Positions: 1 from A to the input, 2 from A to the output, 3 from the input to B, 4 from
the output to B (anode first). The input is held at zero through its source resistance.

Figures: the pedestal, the held output at zero input after the gate has turned off (the
sample's error), and the tracking offset, the output while the gate conducts, read at the
end of the strobe. While on, the output sits at about half the sum of the forward-voltage
differences, ((V1 - V3) + (V4 - V2)) / 2 (node equations of the bridge with equal
strobe currents); at turn-off the junction capacitances and stored charges inject
what they do not cancel, so the pedestal differs from the tracking offset (measured:
1.5 times the IS at position 2 gives 9.1 mV of tracking offset and 9.5 mV of pedestal).
A stronger (lower forward voltage) diode in position 2 raises the output,
in position 4 lowers it (the bridge is symmetric under reflection: every voltage
negated, top and bottom swapped).

The hold capacitor starts at zero (``.ic``: the gate held the zero input before) and the
strobe turns on after a short delay. Held, the output drifts by the difference of the
cards' reverse saturation currents over the hold capacitance (1 nA into 100 pF is 10 V/s,
0.2 uV over the default hold time), part of the pedestal as read. What the circuit
idealises: ideal strobe sources and resistors, equal in both halves; leakage beyond the
cards' IS is not modelled (the cards do not model leakage below breakdown).

The stored charge TT·I of the output-side diodes (positions 2 and 4) sets most of the
pedestal when it differs: a card without TT (no recovery waveform; models.lib then says
TT = 0) beside one with TT gives a pedestal that is mostly that card's missing charge
(measured on the silicon demo reel's ring-mixer quads, which mix such cards: up to
0.13 V into 100 pF, against 1.4 mV of tracking offset).
"""

from __future__ import annotations

import math

import numpy as np

from kinset.circuit.kinds.common import (card_lines, column, columns, finite, head,
                                         settings, wrdata_lines)

POSITIONS = 4

PARAMETERS = {
    "strobe_V": (5.0, "strobe pulses of +/-5 V reverse-bias the off bridge by a few volts "
                      "(common practice)"),
    "strobe_resistance_ohm": (1.0e3, "with 5 V it gives about 4 mA through the bridge, "
                                     "inside the 1-10 mA gate current the profile "
                                     "matches forward voltage at"),
    "strobe_width_s": (1.0e-7, "100 ns: many times the ~6 ns in which the hold capacitor "
                               "settles through the source and the diodes"),
    "strobe_edge_s": (2.0e-9, "rise and fall of the strobes, a few ns (common practice for "
                              "a fast gate)"),
    "hold_capacitance_F": (1.0e-10, "100 pF, the hold capacitor the profile's leakage "
                                    "tolerance is reasoned with"),
    "source_resistance_ohm": (50.0, "a 50 Ohm signal source (common practice)"),
    "hold_time_s": (2.0e-8, "time after turn-off at which the held output is read: ten "
                            "edge times, after the turn-off transient and before the "
                            "cards' reverse currents droop the held value much"),
}

FIGURES = {
    "pedestal_V": "held output at zero input after the gate turns off",
    "tracking_offset_V": "output at zero input while the gate conducts (at the end of "
                         "the strobe): the pedestal less what turn-off injects",
}

#: Without TT the stored charge, which sets most of the pedestal, is the simulator's zero
#: (see above); without CJO, VJ and M the charge the junctions inject at turn-off is.
NEEDS = {"TT": "the stored charge sets most of the pedestal (no recovery data was fitted)",
         "CJO": "the junction charge injected at turn-off (no capacitance data was fitted)"}

DELAY_S_PER_EDGE = 5.0    # the strobe starts after this many edge times (off at t = 0)


def _timing(p: dict) -> tuple[float, float, float]:
    """(delay before the strobe, end of the strobe's top, time the held output is read)."""
    delay = DELAY_S_PER_EDGE * p["strobe_edge_s"]
    on_end = delay + p["strobe_edge_s"] + p["strobe_width_s"]
    return delay, on_end, on_end + p["strobe_edge_s"] + p["hold_time_s"]


def _strobes(p: dict, delay: float) -> list[str]:
    v, e, w = p["strobe_V"], p["strobe_edge_s"], p["strobe_width_s"]
    period = 10 * (delay + 2 * e + w + p["hold_time_s"])      # one pulse only
    timing = f"{delay:.10g} {e:.10g} {e:.10g} {w:.10g} {period:.10g}"
    return [f"Vstrobe_a strobe_a 0 pulse({-v:.10g} {v:.10g} {timing})",
            f"Vstrobe_b strobe_b 0 pulse({v:.10g} {-v:.10g} {timing})",
            "Vinput input 0 dc 0"]


def deck(circuits, params, cards, temperature_C: float) -> str:
    """The deck: two shared strobes, every bridge on its own nodes, one transient."""
    p = settings(PARAMETERS, params)
    delay, on_end, end = _timing(p)
    lines = head("sampling bridge", card_lines(cards), temperature_C) + _strobes(p, delay)
    vectors = []
    for c in circuits:
        a, b, i, o = (f"{c.label}_{n}" for n in ("a", "b", "in", "out"))
        m1, m2, m3, m4 = c.models[:POSITIONS]
        lines += [f"R{a} strobe_a {a} {p['strobe_resistance_ohm']:.10g}",
                  f"R{b} strobe_b {b} {p['strobe_resistance_ohm']:.10g}",
                  f"R{i} input {i} {p['source_resistance_ohm']:.10g}",
                  f"C{o} {o} 0 {p['hold_capacitance_F']:.10g}",
                  f"D{c.label}_1 {a} {i} {m1}", f"D{c.label}_2 {a} {o} {m2}",
                  f"D{c.label}_3 {i} {b} {m3}", f"D{c.label}_4 {o} {b} {m4}",
                  f".ic v({o})=0"]
        vectors.append(f"v({o})")
    step = p["strobe_edge_s"] / 10
    lines += [".control",
              f"tran {step:.10g} {end:.10g} {on_end - p['strobe_width_s'] / 4:.10g} "
              f"{p['strobe_edge_s'] / 4:.10g}"]
    lines += wrdata_lines("bridge", vectors)
    lines += [".endc", ".end"]
    return "\n".join(lines) + "\n"


def figures(result, circuits, params) -> list[dict[str, float]]:
    """Pedestal (the output's last value) and tracking offset (its value at the end of
    the strobe, interpolated) of each bridge; NaN where missing."""
    p = settings(PARAMETERS, params)
    cols = columns(result, "bridge")
    time = column(cols, "time")
    on_end = _timing(p)[1]
    out = []
    for c in circuits:
        v = column(cols, f"v({c.label}_out)")
        if v is None or time is None or not time[0] <= on_end <= time[-1]:
            out.append(dict.fromkeys(FIGURES, math.nan))
            continue
        out.append({"pedestal_V": finite(v[-1]),
                    "tracking_offset_V": finite(np.interp(on_end, time, v))})
    return out
