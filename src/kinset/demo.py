"""A synthetic reel folder for trying kinset: ``kinset demo --out PATH``.

The scenario is invented: a small workshop sorts one reel of small-signal silicon
switching diodes (glass axial) for a batch of balanced mixers and overdrive stages.
Every device gets parameters drawn with realistic spreads and correlations, and every
reading is computed from kinset's own physics models plus instrument noise:

* forward V–I (``kinset.physics.forward``) with the SPICE IS(T) law and the
  self-heating ΔT = I·V·Rth of the fixture in the junction temperature of each point;
* reverse leakage (``kinset.physics.leakage``): shunt, generation in the depletion
  layer (same VJ and M as the capacitance) and, for a few parts, avalanche breakdown
  inside the sweep, ending at the instrument's current limit;
* junction capacitance (``kinset.physics.capacitance``) as C–V tables and as VNA
  one-port reflection files of the packaged diode in a fixture;
* reverse recovery waveforms (``kinset.physics.recovery``) with scope noise and
  ringing.

The output is deterministic: the same ``devices`` and ``seed`` give byte-identical
files (fixed number formats, sorted rows, no timestamps). The parameters each device
was drawn with are written to ``truth.csv`` at the top of the folder, which kinset
does not read; :func:`demo_parameters` returns the same table.

How the parameters are drawn (standard normals z, independent per device unless
shared; ``clip`` keeps each inside the range typical of the part):

====================  =====================================================================
N                     clip(1.87 + 0.025 z_n, 1.80, 1.95)
IS at 25 °C           from N and the junction voltage at 1 mA, V1 = 0.6145 V + 2.5 mV z_v
                      + 1.5 mV z_life − 3 mV z_area + 2 mV·(reel drift −½..½), so IS
                      (≈ 2–4 nA) rises with N as it does across one part number
RS                    clip(0.75 + 0.12 z_rs, 0.45, 1.05) Ω
CJO                   clip(2.0 pF·exp(0.07 z_area + 0.04 z_c), 1.5 pF, 2.5 pF)
VJ, M                 clip(0.65 + 0.06 z_1, 0.5, 0.8) V, clip(0.40 + 0.04 (0.6 z_1 + 0.8 z_2),
                      0.3, 0.5): correlated (ρ = 0.6), as the doping profile sets both
TT                    clip(6.3 ns·exp(0.18 z_life + 0.08 z_t), 4 ns, 10 ns)
recovery tau          0.16 TT·exp(0.15 z_tau)
generation current    0.6 nA·exp(−0.35 z_life + 0.07 z_area + 0.2 z_g) at zero bias, 25 °C:
                      a longer lifetime means longer TT, less leakage and a lower IS
shunt resistance      30 GΩ·exp(0.4 z_r); damaged parts: set for 20–100× the reel's median
                      leakage at 20 V (25 °C)
BV                    clip(100 + 6 z_bv, 85, 120) V; breakdown parts 58–76 V; NBV = 30·exp(0.1 z)
package inductance    1.0 nH·exp(0.05 z_l)
====================  =====================================================================
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.io.output import write_text
from kinset.io.reel import MATERIAL_DEFAULTS
from kinset.physics.capacitance import (junction_capacitance, reflection_coefficient,
                                        series_rlc_impedance)
from kinset.physics.constants import ZERO_CELSIUS, thermal_voltage
from kinset.physics.forward import (current_from_voltage, saturation_current_at,
                                    voltage_from_current)
from kinset.physics.leakage import (generation_temperature_factor,
                                    leakage_temperature_factor, reverse_current)
from kinset.physics.recovery import recovery_waveform

DEFAULT_DEVICES = 240
DEFAULT_SEED = 412

T_REF = 25.0 + ZERO_CELSIUS                 # [K] reel reference temperature
THERMAL_RESISTANCE = 300.0                  # [K/W] fixture, junction to ambient
EG = MATERIAL_DEFAULTS["silicon"]["eg_eV"]  # [eV] SPICE IS(T) law, as the fitter uses
XTI = MATERIAL_DEFAULTS["silicon"]["xti"]   # [1]

FORWARD_CURRENTS = np.geomspace(1e-5, 2e-2, 23)    # [A] sweep
FORWARD_NOISE_V = 70e-6                            # [V] rms, voltage readings
DIODE_CHECK_CURRENT = 0.63e-3                      # [A] the meter's test current
SUPPLIES = (5.0, 10.0)                             # [V] nominal bench supplies
RESISTORS = (1.0e3, 10.0e3, 100.0e3)               # [Ohm] nominal series resistors
LEAKAGE_VOLTAGES = np.array([1, 2, 3, 5, 7, 10, 15, 20, 25, 30, 35, 40, 45, 50,
                             55, 60, 65, 70, 75, 80], dtype=float)   # [V]
LEAKAGE_COMPLIANCE = 1e-3                          # [A] current limit of the source
BREAKDOWN_CURRENT = 1e-4                           # [A] IBV, as reel.yaml's breakdown_current_A
CV_VOLTAGES = np.array([0, 0.5, 1, 2, 3, 5, 7, 10], dtype=float)     # [V]
CV_FREQUENCY = 1e6                                 # [Hz]
VNA_VOLTAGES = (0.0, 2.0, 5.0)                     # [V]
VNA_FREQUENCIES = np.linspace(10e6, 1e9, 51)       # [Hz]
VNA_NOISE = 2e-4                                   # rms per part of S11 [1]
FIXTURE_CAPACITANCE = 0.30e-12                     # [F]
FIXTURE_LOSS_TANGENT = 2e-3                        # [1]
Z0 = 50.0                                          # [Ohm]
RECOVERY_CURRENT = 10e-3                           # [A] IF = IR
RECOVERY_STEP = 0.1e-9                             # [s]
RECOVERY_SAMPLES = 320
RECOVERY_START = -4.0e-9                           # [s], zero crossing near 0

# Which share of the reel goes into each forward batch, in tape order.
FORWARD_BATCHES = (
    ("batch_a_sweep", 0.30),          # sweep at 25 C, SI columns
    ("batch_b_sweep_mA", 0.30),       # sweep at 25 C, current_mA / voltage_mV
    ("batch_c_sweep_warm", 0.20),     # sweep at 35 C
    ("batch_d_diode_check", 0.10),    # one reading per device at 0.63 mA
    ("batch_e_supply", 0.10),         # supply + resistor readings
)

_BATCH_TITLES = {
    "batch_a_sweep": "batch A",
    "batch_b_sweep_mA": "batch B",
    "batch_c_sweep_warm": "batch C (warm)",
    "batch_d_diode_check": "batch D (diode check)",
    "batch_e_supply": "batch E (supply and resistor)",
}

_OWNED = ("reel.yaml", "truth.csv", "forward/batch_*.csv", "leakage/leak_*.csv",
          "capacitance/cv_*.csv", "capacitance/index.csv", "capacitance/vna_*.s1p",
          "capacitance/open_*.s1p", "recovery/rr_*.csv", "forward/fwd_*.csv")


@dataclass(frozen=True)
class Scenario:
    """What one demo reel's bench looks like: the junction's IS(T) law, the forward
    batches and sweep, the leakage sweep, the C–V and VNA set-up, the recovery bench.

    :data:`SILICON` is the workshop reel of ``data_demo/``; :mod:`kinset.demo_rf` holds
    the RF Schottky reel's. The writers below take one, so both reels come from the same
    code.
    """

    material: str = "silicon"
    thermal_resistance: float = THERMAL_RESISTANCE                    # [K/W]
    forward_currents: tuple = tuple(FORWARD_CURRENTS)                 # [A]
    forward_batches: tuple = FORWARD_BATCHES
    forward_noise_v: float = FORWARD_NOISE_V                          # [V] rms
    sweep_text: str = "10 uA..20 mA"
    leakage_voltages: tuple = tuple(LEAKAGE_VOLTAGES)                 # [V]
    leakage_chunk: int = 60                                           # devices per file
    cv_voltages: tuple = tuple(CV_VOLTAGES)                           # [V]; () for none
    vna_voltages: tuple = VNA_VOLTAGES                                # [V]
    vna_frequencies: tuple = tuple(VNA_FREQUENCIES)                   # [Hz]
    vna_noise: float = VNA_NOISE                                      # rms per part of S11
    fixture_capacitance: float = FIXTURE_CAPACITANCE                  # [F]

    @property
    def eg(self) -> float:
        """EG [eV] of the IS(T) law, as the fitter takes it from reel.yaml's material."""
        return MATERIAL_DEFAULTS[self.material]["eg_eV"]

    @property
    def xti(self) -> float:
        return MATERIAL_DEFAULTS[self.material]["xti"]


SILICON = Scenario()

# Layouts: the workshop reel (mixed instruments and formats, small batches), or a
# production reel of every part on every station (kinset.demo_production), in batch
# files or one file per part.
LAYOUTS = ("workshop", "batches", "per-part")


# --------------------------------------------------------------------------- formatting

def fixed_text(values, decimals: int) -> list[str]:
    """Fixed-point text, rounded first so that no '-0.000' appears."""
    v = np.round(np.asarray(values, dtype=float).ravel(), decimals) + 0.0
    return [f"{x:.{decimals}f}" for x in v]


def sci_text(values, digits: int) -> list[str]:
    return [f"{x:.{digits}e}" for x in np.asarray(values, dtype=float).ravel()]


def _sig(values, digits: int) -> list[str]:
    """Shortest text with ``digits`` significant digits (no exponent in the demo's ranges)."""
    return [f"{x:.{digits}g}" for x in np.asarray(values, dtype=float).ravel()]


def as_read(text: list[str]) -> np.ndarray:
    """The numbers as a reader will see them (inputs are computed from these)."""
    return np.array([float(s) for s in text])


def _csv(comments: list[str], header: list[str], columns: list[list[str]]) -> str:
    lines = [f"# {c}" if c else "#" for c in comments]
    lines.append(",".join(header))
    lines.extend(",".join(row) for row in zip(*columns))
    return "\n".join(lines) + "\n"


def _write(path: Path, text: str) -> None:
    write_text(path, text, "ascii")


def _chunks(n: int, size: int) -> list[slice]:
    """Split range(n) into nearly equal consecutive slices of at most ``size``."""
    parts = max(1, math.ceil(n / size))
    bounds = np.linspace(0, n, parts + 1).round().astype(int)
    return [slice(a, b) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


# --------------------------------------------------------------------------- the devices

def demo_parameters(devices: int = DEFAULT_DEVICES, seed: int = DEFAULT_SEED) -> pd.DataFrame:
    """The parameters the demo reel's devices are generated with (SI, at 25 °C).

    Parameters
    ----------
    devices : int
        Number of devices on the reel (at least 20).
    seed : int
        Seed of ``numpy.random.default_rng``.

    Returns
    -------
    DataFrame
        One row per device, in tape order: ``device, position, forward_batch,
        capacitance, recovery, role`` and the model parameters (``is_A, n, rs_ohm,
        cjo_F, vj_V, m, tt_s, recovery_tau_s, generation_current_A,
        shunt_resistance_ohm, bv_V, nbv, package_inductance_H``).
        ``role`` is ``damaged leaky`` or ``breakdown in sweep`` for the special parts.
    """
    n = int(devices)
    if n < 20:
        raise ValueError(f"the demo reel needs at least 20 devices (got {devices})")
    rng = np.random.default_rng([seed, 0])
    (z_area, z_life, z_n, z_v, z_rs, z_c, z_1, z_2, z_t, z_tau, z_g, z_r, z_bv, z_nbv,
     z_l) = rng.standard_normal((15, n))
    position = np.arange(1, n + 1)
    width = max(3, len(str(n)))
    names = [f"D{p:0{width}d}" for p in position]
    drift = (position - 1) / (n - 1) - 0.5

    ideality = np.clip(1.87 + 0.025 * z_n, 1.80, 1.95)
    v_1ma = 0.6145 + 0.0025 * z_v + 0.0015 * z_life - 0.0030 * z_area + 0.002 * drift
    sat = 1e-3 / np.expm1(v_1ma / (ideality * thermal_voltage(T_REF)))
    rs = np.clip(0.75 + 0.12 * z_rs, 0.45, 1.05)
    cjo = np.clip(2.0e-12 * np.exp(0.07 * z_area + 0.04 * z_c), 1.5e-12, 2.5e-12)
    vj = np.clip(0.65 + 0.06 * z_1, 0.50, 0.80)
    m = np.clip(0.40 + 0.04 * (0.6 * z_1 + 0.8 * z_2), 0.30, 0.50)
    tt = np.clip(6.3e-9 * np.exp(0.18 * z_life + 0.08 * z_t), 4e-9, 10e-9)
    tau = 0.16 * tt * np.exp(0.15 * z_tau)
    gen = 0.6e-9 * np.exp(-0.35 * z_life + 0.07 * z_area + 0.2 * z_g)
    rsh = 30e9 * np.exp(0.4 * z_r)
    bv = np.clip(100.0 + 6.0 * z_bv, 85.0, 120.0)
    nbv = 30.0 * np.exp(0.1 * z_nbv)
    ls = 1.0e-9 * np.exp(0.05 * z_l)

    plan = np.random.default_rng([seed, 1])
    role = np.array([""] * n, dtype=object)
    n_damaged, n_breakdown = max(1, round(n / 48)), max(1, round(n / 60))
    special = plan.choice(n, n_damaged + n_breakdown, replace=False)
    damaged, breakdown = np.sort(special[:n_damaged]), np.sort(special[n_damaged:])
    role[damaged], role[breakdown] = "damaged leaky", "breakdown in sweep"
    # A damaged part leaks 20-100 times the reel's median at 20 V, through its shunt.
    factor = plan.uniform(20.0, 100.0, n_damaged)
    typical_20 = np.median(reverse_current(20.0, rsh, gen, vj, m, T_REF))
    own_generation_20 = reverse_current(20.0, np.inf, gen[damaged], vj[damaged], m[damaged],
                                        T_REF)
    rsh[damaged] = 20.0 / (factor * typical_20 - own_generation_20)
    bv[breakdown] = plan.uniform(58.0, 76.0, n_breakdown)

    bounds = np.round(np.cumsum([0.0] + [f for _, f in FORWARD_BATCHES]) * n).astype(int)
    batch = np.empty(n, dtype=object)
    for (name, _), a, b in zip(FORWARD_BATCHES, bounds[:-1], bounds[1:]):
        batch[a:b] = name

    n_vna = min(20, n // 4)
    without_cv = plan.choice(n, max(1, round(0.05 * n)), replace=False)
    with_cv = np.setdiff1d(np.arange(n), without_cv)
    vna = plan.choice(with_cv, n_vna, replace=False)
    capacitance = np.array(["cv"] * n, dtype=object)
    capacitance[without_cv] = ""
    capacitance[vna] = "cv+vna"
    recovery = np.zeros(n, dtype=bool)
    recovery[plan.choice(n, round(n * 100 / 240), replace=False)] = True

    return pd.DataFrame({
        "device": names, "position": position, "forward_batch": batch,
        "capacitance": capacitance, "recovery": recovery, "role": role,
        "is_A": sat, "n": ideality, "rs_ohm": rs, "cjo_F": cjo, "vj_V": vj, "m": m,
        "tt_s": tt, "recovery_tau_s": tau, "generation_current_A": gen,
        "shunt_resistance_ohm": rsh, "bv_V": bv, "nbv": nbv, "package_inductance_H": ls,
    })


# --------------------------------------------------------------------------- forward

def _self_heated(solve, ambient, rth: float = THERMAL_RESISTANCE):
    """Fixed point of T = Ta + I·V·Rth for a solver (T -> (I, V)); returns I, V, T."""
    t = ambient
    for _ in range(8):      # contraction factor ~ |dV/dT|·I·Rth < 0.02: 8 steps suffice
        i, v = solve(t)
        t = ambient + i * v * rth
    i, v = solve(t)
    return i, v, t


def sweep_voltages(p: pd.DataFrame, current, ambient, sc: Scenario = SILICON):
    """Terminal voltage at forced currents, with self-heating; arrays (devices, points)."""
    is0, n, rs = (p[c].to_numpy()[:, None] for c in ("is_A", "n", "rs_ohm"))

    def solve(t):
        i_s = saturation_current_at(is0, t, T_REF, n, sc.eg, sc.xti)
        return current, voltage_from_current(current, i_s, n, rs, t)

    return _self_heated(solve, ambient, sc.thermal_resistance)[1]


def forward_files(p: pd.DataFrame, seed: int, reel: str,
                  sc: Scenario = SILICON) -> dict[str, str]:
    """The forward batch files of the parts in ``p`` (name -> text)."""
    rng = np.random.default_rng([seed, 2])
    out = {}
    cur_text = sci_text(np.array(sc.forward_currents), 4)
    cur = as_read(cur_text)
    k = len(cur)
    for name, _ in sc.forward_batches:
        sel = p[p["forward_batch"] == name]
        nd = len(sel)
        if nd == 0:
            continue
        dev = sel["device"].to_numpy()
        pos = [str(x) for x in sel["position"]]
        first, last = sel["position"].iloc[0], sel["position"].iloc[-1]
        head = [f"kinset demo reel {reel}: synthetic data (every value is invented)",
                f"forward readings, {_BATCH_TITLES[name]}, tape pockets {first}-{last}, "
                f"{nd} devices"]
        if name in ("batch_a_sweep", "batch_b_sweep_mA", "batch_c_sweep_warm"):
            warm = name == "batch_c_sweep_warm"
            base, spread = (35.0, 0.2) if warm else (25.0, 0.15)
            amb_text = fixed_text(base + spread * rng.standard_normal(nd), 1)
            amb = as_read(amb_text)[:, None] + ZERO_CELSIUS
            volt = sweep_voltages(sel, cur[None, :], amb, sc)
            volt = volt + sc.forward_noise_v * rng.standard_normal(volt.shape)
            rows_dev = np.repeat(dev, k)
            rows_pos = np.repeat(pos, k)
            rows_t = np.repeat(amb_text, k)
            head += [f"source-measure unit, {k} log-spaced forced currents "
                     f"{sc.sweep_text}, DC (the part self-heats in the fixture)",
                     "temperature_C is the fixture temperature read before each device"]
            if warm:
                head.append("this batch was measured in the warm afternoon: "
                            "fixture near 35 C")
            if name == "batch_b_sweep_mA":
                cols = [list(rows_dev), list(rows_pos), _sig(np.tile(cur, nd) * 1e3, 5),
                        fixed_text(volt.ravel() * 1e3, 2), list(rows_t)]
                header = ["device", "position", "current_mA", "voltage_mV", "temperature_C"]
            else:
                cols = [list(rows_dev), list(rows_pos), list(np.tile(cur_text, nd)),
                        fixed_text(volt.ravel(), 5), list(rows_t)]
                header = ["device", "position", "current_A", "voltage_V", "temperature_C"]
        elif name == "batch_d_diode_check":
            i_text = fixed_text(np.full(nd, DIODE_CHECK_CURRENT * 1e3), 2)
            i = as_read(i_text) * 1e-3
            volt = sweep_voltages(sel, i[:, None], T_REF, sc)[:, 0]
            volt = volt + sc.forward_noise_v * rng.standard_normal(nd)
            head += ["bench meter, diode-check function: one reading per device at its "
                     "0.63 mA test current",
                     "room at 25 C; no temperature column (kinset takes the reel's ambient)"]
            cols = [list(dev), pos, i_text, fixed_text(volt * 1e3, 1)]
            header = ["device", "position", "current_mA", "voltage_mV"]
        else:  # supply and resistor readings
            supply_set = np.array(SUPPLIES) + rng.normal(0.0, 2e-3, len(SUPPLIES))
            res_text = fixed_text(np.array(RESISTORS) * (1 + rng.normal(0, 3e-3, len(RESISTORS))), 1)
            res = as_read(res_text)
            grid_s = np.repeat(np.arange(len(SUPPLIES)), len(RESISTORS))
            grid_r = np.tile(np.arange(len(RESISTORS)), len(SUPPLIES))
            m = len(grid_s)
            sup_text = fixed_text(supply_set[grid_s][None, :] + rng.normal(0, 2e-4, (nd, m)), 4)
            sup = as_read(sup_text).reshape(nd, m)
            r = res[grid_r][None, :]
            is0, n, rs = (sel[c].to_numpy()[:, None] for c in ("is_A", "n", "rs_ohm"))

            def solve(t):
                i_s = saturation_current_at(is0, t, T_REF, n, sc.eg, sc.xti)
                i = current_from_voltage(sup, i_s, n, rs + r, t)
                return i, sup - i * r

            _, volt, _ = _self_heated(solve, T_REF, sc.thermal_resistance)
            volt = volt + sc.forward_noise_v * rng.standard_normal(volt.shape)
            head += ["bench supply (5 V and 10 V) through a series resistor (1 k, 10 k, "
                     "100 k; measured values); the meter reads the diode voltage",
                     "the current is (supply_V - voltage_V) / resistance_ohm; room at 25 C"]
            cols = [list(np.repeat(dev, m)), list(np.repeat(pos, m)), sup_text,
                    list(np.tile(np.array(res_text)[grid_r], nd)), fixed_text(volt.ravel(), 5)]
            header = ["device", "position", "supply_V", "resistance_ohm", "voltage_V"]
        out[f"forward/{name}.csv"] = _csv(head, header, cols)
    return out


# --------------------------------------------------------------------------- leakage

def leakage_readings(p: pd.DataFrame, voltages: np.ndarray, rng, sc: Scenario = SILICON):
    """Fixture temperatures (text), model arguments per device, true and measured currents
    at ``voltages`` (devices, points), and the noise of each compliance reading.

    A p-n junction's reverse current is generation in the depletion layer; a Schottky
    barrier's is thermionic emission over it (the same law as its forward IS: N = 1,
    the reel's EG and XTI), which is how the leakage fit reads each material."""
    n = len(p)
    temp_text = fixed_text(25.0 + 0.2 * rng.standard_normal(n), 1)
    temp = as_read(temp_text) + ZERO_CELSIUS
    emission = {}
    if sc.material == "schottky":
        factor = leakage_temperature_factor(temp, T_REF, sc.eg, sc.xti, 1.0)
        emission = {"generation_ideality": 1.0}
    else:
        factor = generation_temperature_factor(temp, T_REF)
    gen = p["generation_current_A"].to_numpy() * factor
    args = dict(**emission, shunt_resistance=p["shunt_resistance_ohm"].to_numpy()[:, None],
                generation_current=gen[:, None], vj=p["vj_V"].to_numpy()[:, None],
                m=p["m"].to_numpy()[:, None], temperature=temp[:, None],
                breakdown_voltage=p["bv_V"].to_numpy()[:, None],
                breakdown_current=BREAKDOWN_CURRENT,
                breakdown_ideality=p["nbv"].to_numpy()[:, None])
    cur = reverse_current(voltages[None, :], **args)
    noisy = cur * (1 + 5e-3 * rng.standard_normal(cur.shape)) \
        + 5e-12 * rng.standard_normal(cur.shape)
    noisy = np.abs(noisy)
    v_noise = rng.standard_normal(n)
    i_noise = rng.standard_normal(n)
    return temp_text, args, cur, noisy, v_noise, i_noise


def compliance_voltage(args: dict, d: int, lo: float, hi: float) -> float:
    """Reverse voltage at which device ``d`` draws the source's current limit [V]."""
    from scipy.optimize import brentq
    one = {k: (v[d, 0] if isinstance(v, np.ndarray) else v) for k, v in args.items()}
    return brentq(lambda v: float(reverse_current(v, **one)) - LEAKAGE_COMPLIANCE,
                  lo, hi, xtol=1e-9)


def leakage_files(p: pd.DataFrame, seed: int, reel: str,
                  sc: Scenario = SILICON) -> dict[str, str]:
    """The leakage sweep files of the parts in ``p`` (name -> text)."""
    rng = np.random.default_rng([seed, 3])
    out = {}
    n = len(p)
    voltages = np.array(sc.leakage_voltages)
    temp_text, args, cur, noisy, v_noise, i_noise = leakage_readings(p, voltages, rng, sc)
    dev_rows, v_rows, i_rows, t_rows = [], [], [], []
    for d in range(n):
        over = np.flatnonzero(cur[d] >= LEAKAGE_COMPLIANCE)
        stop = over[0] if over.size else len(voltages)
        v_txt = fixed_text(voltages[:stop], 3)
        i_txt = sci_text(noisy[d, :stop], 4)
        if over.size:   # the source hits its current limit and reports the voltage reached
            lo = voltages[stop - 1] if stop else 0.0
            v_c = compliance_voltage(args, d, lo, voltages[stop])
            v_txt += fixed_text([v_c + 1e-3 * v_noise[d]], 3)
            i_txt += sci_text([LEAKAGE_COMPLIANCE * (1 + 2e-4 * i_noise[d])], 4)
        dev_rows += [p["device"].iloc[d]] * len(v_txt)
        v_rows += v_txt
        i_rows += i_txt
        t_rows += [temp_text[d]] * len(v_txt)
    dev_rows = np.array(dev_rows, dtype=object)
    for j, sl in enumerate(_chunks(n, sc.leakage_chunk), start=1):
        names = set(p["device"].iloc[sl])
        keep = np.flatnonzero([x in names for x in dev_rows])
        head = [f"kinset demo reel {reel}: synthetic data (every value is invented)",
                f"reverse leakage, devices {p['device'].iloc[sl.start]}-"
                f"{p['device'].iloc[sl.stop - 1]}: source-measure unit, reverse sweep "
                f"{voltages[0]:g}..{voltages[-1]:g} V, current limit 1 mA",
                "a sweep that reaches the current limit stops there; its last row is the "
                "voltage reached at the limit"]
        cols = [[dev_rows[i] for i in keep], [v_rows[i] for i in keep],
                [i_rows[i] for i in keep], [t_rows[i] for i in keep]]
        out[f"leakage/leak_{j:02d}.csv"] = _csv(
            head, ["device", "reverse_voltage_V", "reverse_current_A", "temperature_C"], cols)
    return out


# --------------------------------------------------------------------------- capacitance

def cv_readings(sel: pd.DataFrame, rng) -> np.ndarray:
    """Measured C at CV_VOLTAGES (devices, biases) [F]: LCR meter gain and offset noise."""
    c = junction_capacitance(CV_VOLTAGES[None, :], sel["cjo_F"].to_numpy()[:, None],
                             sel["vj_V"].to_numpy()[:, None], sel["m"].to_numpy()[:, None])
    return c * (1 + 2e-3 * rng.standard_normal(c.shape)) + 3e-15 * rng.standard_normal(c.shape)


def capacitance_files(p: pd.DataFrame, seed: int, reel: str,
                      sc: Scenario = SILICON) -> dict[str, str]:
    """C–V tables of the parts whose ``capacitance`` holds ``cv`` (none when the
    scenario has no C–V biases), VNA files of those whose holds ``vna`` (name -> text)."""
    rng = np.random.default_rng([seed, 4])
    out = {}
    sel = p[p["capacitance"].str.contains("cv")].reset_index(drop=True)
    if sc.cv_voltages:
        out.update(_cv_tables(sel, rng, reel))
    out.update(_vna_files(p[p["capacitance"].str.contains("vna")], seed, reel, sc))
    return out


def _cv_tables(sel: pd.DataFrame, rng, reel: str) -> dict[str, str]:
    out = {}
    c = cv_readings(sel, rng)
    k = len(CV_VOLTAGES)
    for j, sl in enumerate(_chunks(len(sel), 80), start=1):
        part = sel.iloc[sl]
        nd = len(part)
        head = [f"kinset demo reel {reel}: synthetic data (every value is invented)",
                f"C-V, devices {part['device'].iloc[0]}-{part['device'].iloc[-1]}: LCR meter "
                f"at 1 MHz, 30 mV test signal, open-corrected, room at 25 C"]
        cols = [list(np.repeat(part["device"].to_numpy(), k)),
                fixed_text(np.tile(CV_VOLTAGES, nd), 1),
                fixed_text(c[sl].ravel() * 1e12, 4),
                [f"{CV_FREQUENCY:.0f}"] * (nd * k)]
        out[f"capacitance/cv_{j:02d}.csv"] = _csv(
            head, ["device", "reverse_voltage_V", "capacitance_pF", "frequency_Hz"], cols)
    return out


def _vna_files(vna: pd.DataFrame, seed: int, reel: str, sc: Scenario) -> dict[str, str]:
    """One-port reflection of the packaged diode (RS, LS, Cj in series) in a fixture
    whose own capacitance is in parallel; one empty-fixture ("open") file per bias."""
    import skrf

    rng = np.random.default_rng([seed, 5])
    out = {}
    f = np.array(sc.vna_frequencies)
    freq = skrf.Frequency.from_f(f, unit="Hz")
    w = 2 * np.pi * f
    y_fixture = w * sc.fixture_capacitance * (FIXTURE_LOSS_TANGENT + 1j)
    index_rows = []

    def touchstone(name, gamma, comment):
        noisy = gamma + sc.vna_noise * (rng.standard_normal(len(f))
                                     + 1j * rng.standard_normal(len(f)))
        net = skrf.Network(frequency=freq, s=noisy.reshape(-1, 1, 1), z0=Z0,
                           comments=comment, name=name[:-4])
        return net.write_touchstone(return_string=True, skrf_comment=False, form="ri",
                                    format_spec_A="{:.6f}", format_spec_B="{:.6f}",
                                    format_spec_freq="{:.0f}")

    for vr in sc.vna_voltages:
        name = f"open_{vr:g}V.s1p"
        gamma = reflection_coefficient(1.0 / y_fixture, Z0)
        out[f"capacitance/{name}"] = touchstone(
            name, gamma, f"kinset demo reel {reel}: synthetic data\nempty fixture (open), "
                   f"bias supply at {vr:g} V\ncalibrated at the fixture reference plane")
        index_rows.append((name, "open", vr))
    for _, d in vna.iterrows():
        for vr in sc.vna_voltages:
            name = f"vna_{d['device']}_{vr:g}V.s1p"
            cj = junction_capacitance(vr, d["cjo_F"], d["vj_V"], d["m"])
            z = series_rlc_impedance(f, d["rs_ohm"], d["package_inductance_H"], cj)
            gamma = reflection_coefficient(1.0 / (1.0 / z + y_fixture), Z0)
            out[f"capacitance/{name}"] = touchstone(
                name, gamma, f"kinset demo reel {reel}: synthetic data\n{d['device']} at "
                       f"{vr:g} V reverse bias in the fixture\ncalibrated at the "
                       f"fixture reference plane")
            index_rows.append((name, d["device"], vr))
    head = [f"kinset demo reel {reel}: synthetic data (every value is invented)",
            f"VNA one-port reflection files: {len(f)} points {f[0] / 1e6:g} MHz.."
            f"{f[-1] / 1e9:g} GHz, 50 ohm; device 'open' is the empty fixture at that bias"]
    cols = [[r[0] for r in index_rows], [r[1] for r in index_rows],
            fixed_text([r[2] for r in index_rows], 1), ["reflection"] * len(index_rows)]
    out["capacitance/index.csv"] = _csv(
        head, ["file", "device", "reverse_voltage_V", "fixture"], cols)
    return out


# --------------------------------------------------------------------------- recovery

def recovery_readings(sel: pd.DataFrame, t: np.ndarray, rng) -> np.ndarray:
    """Scope samples of the recovery current at times ``t`` (1, samples) [A], per device."""
    nd = len(sel)
    col = lambda name: sel[name].to_numpy()[:, None]
    t0 = 0.05e-9 * rng.standard_normal((nd, 1))            # trigger jitter
    fall = 0.6e-9 * (1 + 0.03 * rng.standard_normal((nd, 1)))
    i = recovery_waveform(t, RECOVERY_CURRENT, RECOVERY_CURRENT, col("tt_s"),
                          col("recovery_tau_s"), fall, switch_time=t0)
    # Ringing of the test fixture, excited by the edge: a damped oscillation that
    # starts smoothly at the zero crossing.
    amp = 0.02 * RECOVERY_CURRENT * (1 + 0.2 * rng.standard_normal((nd, 1)))
    f_ring = 750e6 * (1 + 0.03 * rng.standard_normal((nd, 1)))
    dt = t - t0
    onset = 0.5 * (1 + np.tanh(2.0 * dt / fall))
    ring = amp * onset * np.exp(-np.maximum(dt, 0.0) / 1.0e-9) * np.sin(2 * np.pi * f_ring * dt)
    i = i + ring + 0.01 * RECOVERY_CURRENT * rng.standard_normal(i.shape)
    return i


def recovery_files(p: pd.DataFrame, seed: int, reel: str) -> dict[str, str]:
    """The recovery waveform files of the parts whose ``recovery`` is set (name -> text)."""
    rng = np.random.default_rng([seed, 6])
    out = {}
    sel = p[p["recovery"]].reset_index(drop=True)
    nd = len(sel)
    if not nd:
        return out
    t_text = fixed_text((RECOVERY_START + RECOVERY_STEP * np.arange(RECOVERY_SAMPLES)) * 1e9, 1)
    t = as_read(t_text)[None, :] * 1e-9
    i = recovery_readings(sel, t, rng)
    k = RECOVERY_SAMPLES
    for j, sl in enumerate(_chunks(nd, 25), start=1):
        part = sel.iloc[sl]
        m = len(part)
        head = [f"kinset demo reel {reel}: synthetic data (every value is invented)",
                f"reverse recovery, {m} devices: IF = IR = 10 mA (see reel.yaml), "
                f"sampling scope at 10 GS/s, current from the voltage across 50 ohm",
                "time_ns is 0 near the zero crossing of the current; positive current "
                "is forward"]
        cols = [list(np.repeat(part["device"].to_numpy(), k)), list(np.tile(t_text, m)),
                fixed_text(i[sl].ravel() * 1e3, 3)]
        out[f"recovery/rr_{j:02d}.csv"] = _csv(head, ["device", "time_ns", "current_mA"],
                                               cols)
    return out


# --------------------------------------------------------------------------- reel.yaml

_YAML_MARK = "# kinset demo reel:"   # first line of a demo reel.yaml; guards against overwriting


def _reel_yaml(reel: str, devices: int, seed: int) -> str:
    return f"""\
{_YAML_MARK} synthetic data written by `kinset demo` ({devices} devices,
# seed {seed}). The workshop, the reel and every reading are invented; the devices
# follow kinset's own physics models plus instrument noise (see truth.csv).
reel: {reel}
part: small-signal switching diode, silicon, glass axial
material: silicon
reference_temperature_C: 25
thermal_resistance_K_per_W: 300
# The forward sweeps are slow DC sweeps: each reading's junction sits at the fixture
# temperature plus I*V*Rth, which kinset corrects for before fitting.
self_heating: correct
accuracy:
  voltage: {{gain: 1.0e-4, offset_V: 1.0e-4}}
  current: {{gain: 5.0e-4, offset_A: 1.0e-9}}
  capacitance: {{gain: 1.0e-3, offset_F: 1.0e-14}}
  time: {{gain: 1.0e-2, offset_s: 5.0e-11}}
recovery:
  forward_current_A: 0.01
  reverse_current_A: 0.01
  end: {{fraction_of_peak: 0.1}}
leakage:
  report_at_V: [20]
  breakdown_current_A: 1.0e-4
# The workshop's two jobs this week: overdrive clipper pairs first (these silicon parts
# are made for them), then what is left offered to the mixer-quad profile, which is made
# for Schottky parts and says so at the top of its report.
applications: [audio_clipper_pair, ring_mixer_quad]
"""


def _truth_file(p: pd.DataFrame, reel: str) -> str:
    head = [f"kinset demo reel {reel}: the parameters each device was generated with",
            "(SI, at 25 C; not an input: kinset does not read this file)"]
    cols = [list(p["device"]), [str(x) for x in p["position"]], list(p["forward_batch"]),
            list(p["capacitance"]), ["yes" if x else "" for x in p["recovery"]],
            list(p["role"])]
    header = ["device", "position", "forward_batch", "capacitance", "recovery", "role"]
    for name in ("is_A", "n", "rs_ohm", "cjo_F", "vj_V", "m", "tt_s", "recovery_tau_s",
                 "generation_current_A", "shunt_resistance_ohm", "bv_V", "nbv",
                 "package_inductance_H"):
        header.append(name)
        cols.append(sci_text(p[name], 5))
    return _csv(head, header, cols)


KINDS = ("switching", "rf")


def write_demo(out: str | Path, devices: int | None = None, seed: int | None = None,
               layout: str | None = None, kind: str = "switching") -> Path:
    """Write a complete synthetic reel folder.

    Parameters
    ----------
    out : str or Path
        Folder to write; created if needed. Files a previous demo wrote there (the
        names this function uses) are replaced; other files are left alone. A
        ``reel.yaml`` that the demo did not write is never overwritten.
    devices : int, optional
        Number of devices on the reel (at least 20); default 240 (switching), 320 (rf).
    seed : int, optional
        Seed for ``numpy.random.default_rng``; the same seed, device count and layout
        give byte-identical files. Default 412 (switching), 917 (rf).
    layout : {"workshop", "batches", "per-part"}, optional
        ``workshop``: the small reel of mixed instruments described above. ``batches``:
        every part on every station at production point counts, in batch files of 250
        part numbers; ``per-part``: the same, one file per part and station (see
        :mod:`kinset.demo_production`). Default: ``workshop`` up to the default 240
        devices, ``batches`` above. The rf reel has the workshop layout only.
    kind : {"switching", "rf"}
        ``switching``: silicon switching diodes (``data_demo/``); ``rf``: small-signal
        RF Schottky diodes (``data_demo_rf/``, :mod:`kinset.demo_rf`).

    Returns
    -------
    Path
        The folder.

    Raises
    ------
    FileExistsError
        When ``out`` holds a ``reel.yaml`` that is not a demo's.
    """
    out = Path(out)
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {', '.join(KINDS)} (got {kind!r})")
    if kind == "rf":
        from kinset.demo_rf import DEFAULT_DEVICES as rf_devices, DEFAULT_SEED as rf_seed
        devices, seed = rf_devices if devices is None else devices, \
            rf_seed if seed is None else seed
    devices = int(DEFAULT_DEVICES if devices is None else devices)
    seed = int(DEFAULT_SEED if seed is None else seed)
    if seed < 0:
        raise ValueError(f"seed must be a non-negative integer (got {seed})")
    if layout is None:
        layout = "workshop" if devices <= DEFAULT_DEVICES or kind == "rf" else "batches"
    if layout not in LAYOUTS or (kind == "rf" and layout != "workshop"):
        allowed = "workshop" if kind == "rf" else ", ".join(LAYOUTS)
        raise ValueError(f"layout must be one of {allowed} (got {layout!r})")
    p, files = _reel_files(kind, devices, seed, layout)
    existing = out / "reel.yaml"
    if existing.is_file() and not existing.read_bytes().startswith(_YAML_MARK.encode()):
        raise FileExistsError(f"{existing} exists and was not written by kinset demo; "
                              f"choose a new or empty folder for the demo reel")
    out.mkdir(parents=True, exist_ok=True)
    for pattern in _OWNED:
        for old in out.glob(pattern):
            if old.is_file():
                old.unlink()
    for name in sorted(files):
        _write(out / name, files[name])
    if layout != "workshop":
        from kinset.demo_production import write_production
        write_production(out, p, seed, f"demo-{seed:04d}", layout)
    return out


def _reel_files(kind: str, devices: int, seed: int, layout: str):
    """The parameters and the files (name -> text) of one demo reel; a production layout's
    station files are written afterwards (:func:`kinset.demo_production.write_production`)."""
    files: dict[str, str] = {}
    if kind == "rf":
        from kinset.demo_rf import RF, rf_parameters, rf_reel_yaml
        p = rf_parameters(devices, seed)
        reel = f"demo-rf-{seed:04d}"
        files.update(forward_files(p, seed, reel, RF))
        files.update(leakage_files(p, seed, reel, RF))
        files.update(capacitance_files(p, seed, reel, RF))
        files["reel.yaml"] = rf_reel_yaml(_YAML_MARK, reel, devices, seed)
        files["truth.csv"] = _truth_file(p, reel)
        return p, files
    p = demo_parameters(devices, seed)
    reel = f"demo-{seed:04d}"
    if layout == "workshop":
        files.update(forward_files(p, seed, reel))
        files.update(leakage_files(p, seed, reel))
        files.update(capacitance_files(p, seed, reel))
        files.update(recovery_files(p, seed, reel))
        note = ""
    else:
        from kinset.demo_production import production_parameters
        p = production_parameters(p, seed)
        note = f"# Layout '{layout}': every part on every station, as a tester exports them.\n"
    files["reel.yaml"] = _reel_yaml(reel, devices, seed).replace("\nreel:", f"\n{note}reel:", 1)
    files["truth.csv"] = _truth_file(p, reel)
    return p, files
