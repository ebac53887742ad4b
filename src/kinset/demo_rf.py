"""The second demo reel: small-signal RF Schottky diodes, ``kinset demo --kind rf``.

The scenario is invented: a radio workshop sorts one reel of small-signal Schottky
barrier diodes (medium barrier, small surface-mount package) into quads for its
double-balanced ring mixers, and pairs of the rest for temperature-compensated
detectors. The files are written by the same writers as the switching-diode reel
(:mod:`kinset.demo`, with the :data:`RF` scenario), and the readings come from kinset's
own physics models plus instrument noise:

* forward sweeps from a source-measure unit, 1 µA to 20 mA, three batches (one in a
  warm afternoon), with self-heating of the small package in its socket;
* leakage to 4 V (a mixer diode sees about the LO swing in reverse, well below its
  breakdown of several volts, which the sweep never reaches);
* capacitance only from a network analyser: one-port reflection Touchstone files of the
  part in an RF fixture at five biases, and the empty (open) fixture at each bias, whose
  capacitance kinset subtracts; RF parts are not measured on a 1 MHz LCR meter, whose
  test fixture's stray capacitance is comparable to the part's;
* no recovery waveforms: a Schottky diode conducts by majority carriers and stores no
  minority charge, so there is no reverse-recovery time to measure; what is left (the
  RS·CJ time constant, a few picoseconds) is below what a recovery bench resolves.
  An RF engineer does not measure trr on these parts, and no profile for them asks it.

How the parameters are drawn (standard normals z, per device unless shared):

====================  =====================================================================
N                     clip(1.06 + 0.012 z_n, 1.02, 1.10): small-signal Schottky diodes
                      have N about 1.02-1.10 (from memory)
IS at 25 °C           from N and the voltage at 1 mA, V1 = 0.345 V + 3.5 mV z_phi
                      − 0.8 mV z_area + 2 mV·(reel drift −½..½): the barrier height varies
                      by a few mV across one lot (from memory), IS grows with the area
                      (a 3 % area spread is 0.8 mV), and the wafer position drifts along
                      the tape (common practice: a reel is cut from one wafer in order)
RS                    clip(6.0 Ω·exp(0.08 z_rs − 0.03 z_area), 4.5, 8.0): a few ohms for a
                      small mixer Schottky (from memory); a larger contact, a lower RS
CJO                   clip(0.75 pF·exp(0.03 z_area + 0.04 z_c), 0.6, 0.9): about 0.5-1 pF
                      for a mixer Schottky (from memory), growing with the area
VJ, M                 clip(0.50 + 0.02 z_1, 0.44, 0.56) V, clip(0.48 + 0.015 (0.6 z_1 +
                      0.8 z_2), 0.42, 0.54): a metal-semiconductor junction on uniform
                      epitaxy is nearly abrupt (M near ½, Sze ch. 5)
reverse current       thermionic emission, 1.5·IS·exp(0.1 z_g) at zero bias (the same
                      emission over the same barrier as the forward IS, Sze ch. 5; the
                      depletion-width factor of kinset's leakage law stands in for the
                      growth with bias that image-force lowering gives)
shunt resistance      1 TΩ·exp(0.4 z_r); damaged parts (ESD, common practice for RF
                      Schottky on a bench): set for 100-400× the reel's median at 3 V
BV                    clip(7.0 + 0.4 z_bv, 6, 8) V, NBV 5: never reached by the 4 V sweep
package inductance    0.6 nH·exp(0.05 z_l) (small surface-mount package, from memory)
====================  =====================================================================
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from kinset.demo import T_REF, Scenario
from kinset.physics.constants import thermal_voltage
from kinset.physics.leakage import reverse_current

DEFAULT_DEVICES = 320
DEFAULT_SEED = 917
BREAKDOWN_CURRENT = 1e-4        # [A] as reel.yaml's breakdown_current_A

RF = Scenario(
    material="schottky",
    # Small surface-mount package in a test socket, junction to ambient (from memory).
    thermal_resistance=500.0,
    forward_currents=tuple(np.geomspace(1e-6, 2e-2, 31)),
    forward_batches=(("batch_a_sweep", 0.40),        # sweep at 25 C, SI columns
                     ("batch_b_sweep_mA", 0.35),     # sweep at 25 C, mA / mV columns
                     ("batch_c_sweep_warm", 0.25)),  # sweep at 35 C
    forward_noise_v=30e-6,      # [V] rms: a source-measure unit at a few hundred mV
    sweep_text="1 uA..20 mA",
    leakage_voltages=(0.25, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0),
    leakage_chunk=80,
    cv_voltages=(),             # no LCR meter: C from the network analyser only
    vna_voltages=(0.0, 0.5, 1.0, 2.0, 3.0),
    vna_frequencies=tuple(np.linspace(50e6, 1e9, 20)),
    vna_noise=2e-4,
    fixture_capacitance=0.15e-12,   # [F] an RF test fixture's own capacitance
)


def rf_parameters(devices: int = DEFAULT_DEVICES, seed: int = DEFAULT_SEED) -> pd.DataFrame:
    """The parameters the RF demo reel's devices are generated with (SI, at 25 °C).

    The columns are those of :func:`kinset.demo.demo_parameters`; ``tt_s`` and
    ``recovery_tau_s`` are 0 (no stored charge) and ``recovery`` is False for every part.
    """
    n = int(devices)
    if n < 20:
        raise ValueError(f"the demo reel needs at least 20 devices (got {devices})")
    rng = np.random.default_rng([seed, 0])
    z_area, z_phi, z_n, z_rs, z_c, z_1, z_2, z_g, z_r, z_bv, z_l = rng.standard_normal((11, n))
    position = np.arange(1, n + 1)
    width = max(3, len(str(n)))
    drift = (position - 1) / (n - 1) - 0.5

    ideality = np.clip(1.06 + 0.012 * z_n, 1.02, 1.10)
    v_1ma = 0.345 + 0.0035 * z_phi - 0.0008 * z_area + 0.002 * drift
    sat = 1e-3 / np.expm1(v_1ma / (ideality * thermal_voltage(T_REF)))
    vj = np.clip(0.50 + 0.02 * z_1, 0.44, 0.56)
    m = np.clip(0.48 + 0.015 * (0.6 * z_1 + 0.8 * z_2), 0.42, 0.54)
    gen = 1.5 * sat * np.exp(0.1 * z_g)
    rsh = 1e12 * np.exp(0.4 * z_r)

    plan = np.random.default_rng([seed, 1])
    role = np.array([""] * n, dtype=object)
    damaged = np.sort(plan.choice(n, max(1, round(n / 40)), replace=False))
    role[damaged] = "damaged leaky"
    factor = plan.uniform(100.0, 400.0, len(damaged))
    args = dict(vj=vj, m=m, temperature=T_REF, generation_ideality=1.0)
    typical_3 = np.median(reverse_current(3.0, rsh, gen, **args))
    own_3 = reverse_current(3.0, np.inf, gen[damaged], vj[damaged], m[damaged], T_REF, 1.0)
    rsh[damaged] = 3.0 / (factor * typical_3 - own_3)

    bounds = np.round(np.cumsum([0.0] + [f for _, f in RF.forward_batches]) * n).astype(int)
    batch = np.empty(n, dtype=object)
    for (name, _), a, b in zip(RF.forward_batches, bounds[:-1], bounds[1:]):
        batch[a:b] = name
    return pd.DataFrame({
        "device": [f"S{p:0{width}d}" for p in position], "position": position,
        "forward_batch": batch, "capacitance": "vna", "recovery": False, "role": role,
        "is_A": sat, "n": ideality,
        "rs_ohm": np.clip(6.0 * np.exp(0.08 * z_rs - 0.03 * z_area), 4.5, 8.0),
        "cjo_F": np.clip(0.75e-12 * np.exp(0.03 * z_area + 0.04 * z_c), 0.6e-12, 0.9e-12),
        "vj_V": vj, "m": m, "tt_s": 0.0, "recovery_tau_s": 0.0,
        "generation_current_A": gen, "shunt_resistance_ohm": rsh,
        "bv_V": np.clip(7.0 + 0.4 * z_bv, 6.0, 8.0), "nbv": 5.0,
        "package_inductance_H": 0.6e-9 * np.exp(0.05 * z_l),
    })


def rf_reel_yaml(mark: str, reel: str, devices: int, seed: int) -> str:
    """reel.yaml of the RF reel (``mark``: the demo's first-line marker)."""
    return f"""\
{mark} synthetic data written by `kinset demo --kind rf` ({devices} devices,
# seed {seed}). The radio workshop, the reel and every reading are invented; the devices
# follow kinset's own physics models plus instrument noise (see truth.csv).
reel: {reel}
part: small-signal RF Schottky barrier diode, medium barrier, small surface-mount package
material: schottky
reference_temperature_C: 25
# Small package in a test socket, junction to ambient: 20 mA at ~0.5 V heats it ~5 K.
thermal_resistance_K_per_W: 500
self_heating: correct
accuracy:
  # Source-measure unit: 0.02 % + 150 uV on voltage, 0.03 % + 100 pA on current
  # (the order of a bench SMU's one-year specification, common practice).
  voltage: {{gain: 2.0e-4, offset_V: 1.5e-4}}
  current: {{gain: 3.0e-4, offset_A: 1.0e-10}}
  # Network analyser, one-port, calibrated at the fixture plane and open-subtracted:
  # about 1 % + 5 fF on a capacitance near 1 pF below 1 GHz (from memory).
  capacitance: {{gain: 1.0e-2, offset_F: 5.0e-15}}
leakage:
  report_at_V: [3]
  breakdown_current_A: 1.0e-4
# No recovery/ folder: a Schottky diode stores no minority charge, so it has no
# reverse-recovery time to measure (see kinset.demo_rf).
# The workshop's two jobs: 40 ring-mixer quads for this month's mixers first, then
# detector pairs from the rest of the reel.
applications:
  - {{profile: ring_mixer_quad, sets_wanted: 40}}
  - detector_pair
"""

