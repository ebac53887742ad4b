"""Clipper: an anti-parallel diode pair to ground behind a series resistor, sine-driven.

The circuit is the textbook shunt diode limiter (J. Millman and H. Taub, *Pulse, Digital
and Switching Waveforms*, McGraw-Hill, 1965, on clipping circuits; A. S. Sedra and
K. C. Smith, *Microelectronic Circuits*, limiter circuits): a sine source drives a series
resistor into the output node, which the two diodes clip (position 1 conducts on the
positive half-wave, anode at the output; position 2 on the negative half-wave, cathode
at the output) and a load resistor terminates. All circuits of a deck share the one
ideal source, so they see the same drive.

Figures, from a transient over whole periods after settling:

* the second harmonic relative to the fundamental [dBc]: a Hann-windowed DFT of the
  output over whole periods (coherent sampling, so each harmonic falls on one bin and
  the window's leakage reaches only the neighbouring bins; F. J. Harris, "On the use of
  windows for harmonic analysis with the discrete Fourier transform", Proc. IEEE 66(1),
  1978). Two equal diodes clip the half-waves alike and leave no even harmonic beyond
  the simulator's numerical floor (measured in tests/test_circuit_kinds.py);
* the DC shift [V]: the output's mean over those periods;
* the clipping asymmetry [V]: the positive peak minus the magnitude of the negative
  peak. Driven hard, it tends to N·Vt·ln(IS2/IS1) plus the difference of RS·I at the
  peak current (the Shockley law with series resistance).

The output is sampled on a uniform grid by ngspice's ``linearize`` (interpolating its own
time points); the largest step is a quarter of a grid interval (``MAX_STEP_DIVIDER``). What the circuit idealises: an
ideal source and resistors; leakage below breakdown is not modelled.
"""

from __future__ import annotations

import math

import numpy as np

from kinset.circuit.kinds.common import (card_lines, column, columns, head, settings,
                                         wrdata_lines)

POSITIONS = 2

PARAMETERS = {
    "amplitude_V": (4.0, "an op-amp stage's swing into the clipper of an overdrive stage, "
                         "a few volts peak (common practice): with the series resistor "
                         "it drives the diodes to about 0.7 mA, the top of the currents "
                         "the profile matches at"),
    "frequency_Hz": (1.0e3, "the usual audio test tone (common practice); the junction "
                            "capacitances do not matter at it"),
    "series_resistance_ohm": (4.7e3, "a typical series resistor of a diode clipper "
                                     "stage (common practice)"),
    "load_ohm": (1.0e5, "the input of the next stage, about 100 kOhm (common practice)"),
}

FIGURES = {
    "second_harmonic_dBc": "second harmonic of the output relative to the fundamental",
    "dc_shift_V": "mean of the output over whole periods (zero for a symmetric pair)",
    "clip_asymmetry_V": "positive clipping level minus the magnitude of the negative one",
}

#: Periods simulated before the analysed ones (the circuit has no long time constant:
#: the junction capacitances and resistors settle within microseconds at 1 kHz).
SETTLE_PERIODS = 1
#: Whole periods analysed.
PERIODS = 2
#: Grid points per period: the fundamental and second harmonic are bins PERIODS and
#: 2*PERIODS of the DFT, far below Nyquist.
POINTS_PER_PERIOD = 256
#: The simulator's largest time step is the grid interval divided by this. Its own time
#: points do not fall on the grid and differ between the half-waves; interpolating
#: between them (``linearize``) leaves an even-harmonic floor that falls with the step
#: squared (measured, equal cards without junction capacitance: -90 dBc and 20 uV of DC
#: shift at one step per grid interval, below -240 dBc and 5 nV at a quarter).
MAX_STEP_DIVIDER = 4


def deck(circuits, params, cards, temperature_C: float) -> str:
    """The deck: one sine source, every clipper on its own nodes, one transient."""
    p = settings(PARAMETERS, params)
    period = 1.0 / p["frequency_Hz"]
    step = period / POINTS_PER_PERIOD
    start, stop = SETTLE_PERIODS * period, (SETTLE_PERIODS + PERIODS) * period
    lines = head("clipper", card_lines(cards), temperature_C)
    lines.append(f"Vdrive drive 0 sin(0 {p['amplitude_V']:.10g} {p['frequency_Hz']:.10g})")
    vectors = []
    for c in circuits:
        out = f"{c.label}_out"
        m1, m2 = c.models[:POSITIONS]
        lines += [f"R{c.label}_s drive {out} {p['series_resistance_ohm']:.10g}",
                  f"R{c.label}_l {out} 0 {p['load_ohm']:.10g}",
                  f"D{c.label}_1 {out} 0 {m1}",
                  f"D{c.label}_2 0 {out} {m2}"]
        vectors.append(f"v({out})")
    lines += [".control",
              f"tran {step:.10g} {stop:.10g} {start:.10g} {step / MAX_STEP_DIVIDER:.10g}",
              "linearize"]
    lines += wrdata_lines("clipper", vectors)
    lines += [".endc", ".end"]
    return "\n".join(lines) + "\n"


def waveform_figures(v: np.ndarray | None) -> dict[str, float]:
    """The three figures of one output sampled uniformly over ``PERIODS`` whole periods.

    ``v`` holds ``PERIODS * POINTS_PER_PERIOD`` samples or one more (the end point,
    which repeats the first and is dropped). None gives NaN figures.
    """
    n = PERIODS * POINTS_PER_PERIOD
    if v is None or v.size < n:
        return dict.fromkeys(FIGURES, math.nan)
    x = np.asarray(v[:n], dtype=float)
    spectrum = np.abs(np.fft.rfft(x * np.hanning(n + 1)[:n]))     # periodic Hann
    fundamental, second = spectrum[PERIODS], spectrum[2 * PERIODS]
    h2 = 20.0 * math.log10(second / fundamental) if second > 0 and fundamental > 0 \
        else math.nan
    return {"second_harmonic_dBc": h2, "dc_shift_V": float(x.mean()),
            "clip_asymmetry_V": float(x.max() + x.min())}


def figures(result, circuits, params) -> list[dict[str, float]]:
    """The figures of each clipper; NaN where its output is missing or not finite."""
    cols = columns(result, "clipper")
    return [waveform_figures(column(cols, f"v({c.label}_out)")) for c in circuits]
