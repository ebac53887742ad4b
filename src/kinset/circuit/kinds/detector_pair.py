"""Detector pair: a biased detector diode and its biased twin as the reference.

The circuit (common practice for temperature-compensated diode detectors; e.g. P. Horowitz
and W. Hill, *The Art of Electronics*, 3rd ed., Cambridge University Press, 2015, on
matched diodes cancelling each other's drift): each diode is biased from one supply
through its own resistor, cathode to ground; a differential amplifier of high input
impedance reads the difference of the two anode voltages. Position 1 is the detector,
position 2 the reference. With no RF input the output is the pair's offset, the
difference of their forward voltages at the bias current.

The drift is the change of that offset over the stated temperature span, centred on the
operating temperature, divided by the span: three operating points, each at its own
temperature (``option temp`` before each ``op``). A ``dc temp`` sweep is not used: in
ngspice 39 it gives other voltages than separate analyses at the same temperatures
(measured: 76 µV apart at 25 °C after a sweep from 0 °C, for a 10 µA bias), while the
separate analyses follow the SPICE diode temperature law (Nagel, SPICE2, 1975; the
temperature scaling of IS with EG and XTI), checked in tests/test_circuit_kinds.py.

The RF itself is not simulated: at zero input the detector sees none, which is the
figure asked for. What the circuit idealises: both bias resistors equal and without
temperature coefficient, the amplifier ideal, leakage below breakdown not modelled.
"""

from __future__ import annotations

import math

from kinset.circuit.kinds import Circuit
from kinset.circuit.kinds.common import (card_lines, column, columns, diode_nodes, head,
                                         settings, wrdata_lines)

POSITIONS = 2

PARAMETERS = {
    "supply_V": (5.0, "a common logic or amplifier rail, from which detectors are usually "
                      "biased through a resistor (common practice)"),
    "bias_resistance_ohm": (4.7e5, "470 kOhm from 5 V gives about 10 uA, the low end of the "
                                   "10-50 uA detector bias (common practice) and the "
                                   "current the profile matches the drift at"),
    "temperature_span_K": (50.0, "the range the profile's drift tolerance is reasoned over "
                                 "(20 uV/K is 1 mV over 50 K)"),
}

FIGURES = {
    "offset_V": "output offset at zero input: detector minus reference forward voltage "
                "at the bias, at the operating temperature",
    "offset_drift_V_per_K": "change of that offset over the temperature span (centred on "
                            "the operating temperature), per kelvin",
}

_RUNS = ("lo", "hi", "nom")


def _temperatures(p: dict, temperature_C: float) -> dict[str, float]:
    half = p["temperature_span_K"] / 2.0
    return {"lo": temperature_C - half, "hi": temperature_C + half, "nom": temperature_C}


def deck(circuits, params, cards, temperature_C: float) -> str:
    """The deck: every pair on its own nodes, one supply, three temperatures."""
    p = settings(PARAMETERS, params)
    lines = head("detector pair", card_lines(cards), temperature_C)
    lines.append(f"Vsupply sup 0 dc {p['supply_V']:.10g}")
    nodes = diode_nodes(circuits, POSITIONS)
    for node, model in nodes:
        lines += [f"R{node} sup {node} {p['bias_resistance_ohm']:.10g}",
                  f"D{node} {node} 0 {model}"]
    vectors = [f"v({node})" for node, _ in nodes]
    lines.append(".control")
    for run, t in _temperatures(p, temperature_C).items():
        lines += [f"option temp={t:.10g}", "op"] + wrdata_lines(f"detector_{run}", vectors)
    lines += [".endc", ".end"]
    return "\n".join(lines) + "\n"


def _offset(cols, c: Circuit) -> float:
    a = column(cols, f"v({c.label}_1)")
    b = column(cols, f"v({c.label}_2)")
    return float(a[0] - b[0]) if a is not None and b is not None else math.nan


def figures(result, circuits, params) -> list[dict[str, float]]:
    """Offset and drift of each pair; NaN where the run gave no finite voltage."""
    p = settings(PARAMETERS, params)
    runs = {r: columns(result, f"detector_{r}") for r in _RUNS}
    out = []
    for c in circuits:
        off = {r: _offset(runs[r], c) for r in _RUNS}
        drift = (off["hi"] - off["lo"]) / p["temperature_span_K"] \
            if p["temperature_span_K"] > 0 else math.nan
        out.append({"offset_V": off["nom"], "offset_drift_V_per_K": drift})
    return out
