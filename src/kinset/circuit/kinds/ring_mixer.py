"""Double-balanced diode ring mixer between ideal centre-tapped transformers.

The circuit (the doubly balanced diode mixer of the textbooks [1]_, [2]_)::

    LO source, R  ->  LO transformer: primary 1 : each secondary half 1, ends A, B,
                      centre tap grounded
    RF source, R  ->  RF transformer: primary 1 : each secondary half 1, ends C, D,
                      centre tap = IF port, loaded by R to ground
    ring (position order): D1 A->C, D2 C->B, D3 B->D, D4 D->A (anode->cathode)

With four equal diodes the ring is symmetric under the exchange A<->B, C<->D, which
reverses the LO and the RF drive and leaves the IF node where it is; every IF term odd
in the LO (the LO's fundamental above all) then cancels [1]_. What is left at the IF
port at the LO frequency measures how unequal the four diodes are.

The transformers are ideal and built from controlled sources (each half-winding an
E source following the primary voltage, the primary an F source drawing the sum of
the halves' currents: v2 = v1, i1 = i2a + i2b, power conserved). Why not coupled
inductors: an ngspice K line couples exactly two inductors, so a centre-tapped
transformer needs three K lines with a coupling below 1, which brings leakage
inductance, a magnetising current and an L/R settling time that are not the diodes'
doing. The ideal transformer passes DC (a real winding shorts it); the DC offset at
the IF port is therefore the ring's rectified imbalance seen through the terminations.
This reference idealises the transformers on purpose: a real mixer's 35-40 dB LO-to-IF
isolation is mostly transformer imbalance (see the project's findings), so the figure
here is the part the diodes alone cause.

Figures come from one transient with the LO, a small RF tone at LO + IF and nothing
else; after ``settle_periods`` whole IF periods, one whole IF period is integrated
against each tone (rectangular window over whole periods of every tone: each tone
falls exactly on its bin, so no other window is needed), trapezoid rule on the
simulator's own time points.

References
----------
.. [1] S. A. Maas, *Microwave Mixers*, 2nd ed., Artech House, 1993 (the doubly
   balanced diode mixer: ring, baluns, LO-to-IF isolation from symmetry).
.. [2] D. M. Pozar, *Microwave Engineering*, 4th ed., Wiley, 2012, ch. 13 (mixers:
   conversion loss, isolation, the double-balanced mixer).
"""

from __future__ import annotations

import math

import numpy as np

from kinset.circuit.kinds import Circuit
from kinset.circuit.kinds.common import head

POSITIONS = 4

PARAMETERS: dict[str, tuple[float, str]] = {
    "lo_frequency_Hz": (1.0e7, "an HF mixer's LO; below 100 MHz the package and board "
                        "parasitics the cards leave out do not dominate (common practice)"),
    "lo_power_dBm": (7.0, "+7 dBm available into 50 ohm is the standard-level ring "
                     "mixer's LO drive (common practice)"),
    "impedance_ohm": (50.0, "every port of an RF mixer is specified in a 50 ohm system "
                      "(common practice)"),
    "if_frequency_Hz": (1.0e6, "RF = LO + IF; LO/IF must be a whole number so that every "
                        "tone falls on a bin of one IF period"),
    "rf_power_dBm": (-20.0, "conversion loss is quoted for a small RF signal, well below "
                     "the LO (common practice: 20-30 dB below the 1 dB compression point)"),
    "settle_periods": (1.0, "whole IF periods simulated before the window; the ring has "
                       "no element slower than R*CJ (~50 ps), so one period settles it "
                       "(measured: a second period changes the figures by < 0.01 dB)"),
    "points_per_lo_period": (200.0, "the simulator's largest time step is one LO period "
                             "over this; the Fourier integrals use its own points"),
}

FIGURES: dict[str, str] = {
    "lo_if_isolation_dB": "LO-to-IF isolation: available LO power over the LO-frequency "
                          "power in the IF load",
    "lo_rf_isolation_dB": "LO-to-RF isolation: available LO power over the LO-frequency "
                          "power in the RF port's termination",
    "if_dc_offset_V": "DC offset at the IF port (mean IF voltage over whole periods)",
    "conversion_loss_dB": "conversion loss: available RF power over the IF power in the "
                          "IF load, small RF tone",
}

#: Which way each figure is better (the report ranks sets by it; optional in a kind).
BETTER = {"lo_if_isolation_dB": "higher", "lo_rf_isolation_dB": "higher",
          "if_dc_offset_V": "smaller_magnitude", "conversion_loss_dB": "lower"}

TABLE = "ring_mixer.txt"


def timing(params: dict) -> dict[str, float]:
    """The deck's frequencies and times [Hz, s]; ``ValueError`` if the tones are not commensurate."""
    f_lo, f_if = float(params["lo_frequency_Hz"]), float(params["if_frequency_Hz"])
    ratio = f_lo / f_if
    if f_if <= 0 or f_lo <= f_if or abs(ratio - round(ratio)) > 1e-9 * ratio:
        raise ValueError(f"ring_mixer: lo_frequency_Hz / if_frequency_Hz must be a whole "
                         f"number above 1 (got {f_lo:g} / {f_if:g})")
    window = 1.0 / f_if
    start = max(1.0, round(float(params["settle_periods"]))) * window
    return {"f_lo": f_lo, "f_if": f_if, "f_rf": f_lo + f_if, "window": window,
            "start": start, "stop": start + window,
            "tmax": 1.0 / (f_lo * float(params["points_per_lo_period"]))}


def source_peak(power_dBm: float, impedance: float) -> float:
    """Open-circuit peak voltage [V] of a source of ``power_dBm`` available into ``impedance``.

    Available power P = Vpk^2 / (8 R) [2]_ (matched load, sine).
    """
    return math.sqrt(8.0 * impedance * 1e-3 * 10.0 ** (power_dBm / 10.0))


def transformer(name: str, primary: str, end_a: str, end_b: str, tap: str) -> list[str]:
    """An ideal 1:1:1 centre-tapped transformer from controlled sources.

    V(end_a) - V(tap) = V(tap) - V(end_b) = V(primary); the primary (to ground) draws the
    sum of the currents the two halves deliver, so power is conserved.
    """
    return [f"E{name}a {name}_xa {tap} {primary} 0 1",
            f"V{name}a {name}_xa {end_a} 0",
            f"E{name}b {tap} {name}_xb {primary} 0 1",
            f"V{name}b {end_b} {name}_xb 0",
            f"F{name}a {primary} 0 V{name}a 1",
            f"F{name}b {primary} 0 V{name}b 1"]


def circuit_lines(c: Circuit, t: dict, params: dict) -> list[str]:
    """The netlist of one ring, its nodes prefixed by the circuit's label."""
    if len(c.models) != POSITIONS:
        raise ValueError(f"ring_mixer: circuit {c.label} has {len(c.models)} diodes, "
                         f"needs {POSITIONS}")
    p, r = f"{c.label}_", float(params["impedance_ohm"])
    v_lo = source_peak(float(params["lo_power_dBm"]), r)
    v_rf = source_peak(float(params["rf_power_dBm"]), r)
    a, b, cc, d, lo, rf, ifn = (p + n for n in ("a", "b", "c", "d", "lop", "rfp", "if"))
    out = [f"* ring {c.label}",
           f"V{p}lo {p}los 0 SIN(0 {v_lo:.12g} {t['f_lo']:.12g})",
           f"R{p}lo {p}los {lo} {r:.12g}",
           f"V{p}rf {p}rfs 0 SIN(0 {v_rf:.12g} {t['f_rf']:.12g})",
           f"R{p}rf {p}rfs {rf} {r:.12g}",
           f"R{p}if {ifn} 0 {r:.12g}"]
    out += transformer(f"{p}tl", lo, a, b, "0")
    out += transformer(f"{p}tr", rf, cc, d, ifn)
    for k, (anode, cathode) in enumerate(((a, cc), (cc, b), (b, d), (d, a))):
        out.append(f"D{p}{k + 1} {anode} {cathode} {c.models[k]}")
    return out


def deck(circuits, params, cards, temperature_C) -> str:
    """One deck holding every ring of ``circuits``; one transient, one table."""
    t = timing(params)
    lines = head("ring mixer", cards, temperature_C)
    for c in circuits:
        lines += circuit_lines(c, t, params)
    vectors = " ".join(f"v({c.label}_if) v({c.label}_rfp)" for c in circuits)
    lines += [f".tran {t['tmax']:.6g} {t['stop']:.12g} {t['start']:.12g} {t['tmax']:.6g}",
              ".control", "run", f"wrdata {TABLE} {vectors}", ".endc", ".end"]
    return "\n".join(lines) + "\n"


def phasors(time: np.ndarray, values: np.ndarray, freqs, start: float,
            window: float) -> np.ndarray:
    """Fourier coefficients (peak amplitude, complex) of each column of ``values`` at each
    frequency, over ``[start, start + window]`` (whole periods of every frequency),
    trapezoid rule on the given points; frequency 0 gives the mean."""
    # numpy.trapezoid needs numpy 2 (pyproject allows 1.26); imported here, not at start-up
    from scipy.integrate import trapezoid
    keep = (time >= start - 1e-15) & (time <= start + window + 1e-15)
    tt, vv = time[keep], values[keep]
    out = []
    for f in freqs:
        kernel = np.exp(-2j * np.pi * f * (tt - start)) * (1.0 if f == 0 else 2.0)
        out.append(trapezoid(vv * kernel[:, None], tt, axis=0) / window)
    return np.array(out)


def figures(result, circuits, params) -> list[dict[str, float]]:
    """LO-to-IF and LO-to-RF isolation [dB], IF DC offset [V], conversion loss [dB]."""
    t = timing(params)
    table = result.table(TABLE)
    r = float(params["impedance_ohm"])
    p_lo = 1e-3 * 10.0 ** (float(params["lo_power_dBm"]) / 10.0)
    p_rf = 1e-3 * 10.0 ** (float(params["rf_power_dBm"]) / 10.0)
    cols = np.column_stack([table[f"v({c.label}_{n})"] for c in circuits
                            for n in ("if", "rfp")])
    dc, lo, if_ = phasors(table.scale, cols, (0.0, t["f_lo"], t["f_if"]), t["start"],
                          t["window"])
    power = lambda v: np.abs(v) ** 2 / (2.0 * r)  # noqa: E731  (peak phasor into r)
    with np.errstate(divide="ignore"):
        iso = 10 * np.log10(p_lo / power(lo))
        loss = 10 * np.log10(p_rf / power(if_))
    return [{"lo_if_isolation_dB": float(iso[2 * k]),
             "lo_rf_isolation_dB": float(iso[2 * k + 1]),
             "if_dc_offset_V": float(dc[2 * k].real),
             "conversion_loss_dB": float(loss[2 * k])} for k in range(len(circuits))]
