"""Reverse leakage of every device of a reel: values at the report voltages, breakdown, model.

Per device, from its reverse sweep (positive magnitudes):

* ``ir_A_at_<V>V``: the current at each report voltage, interpolated linearly in
  log-current between the two bracketing readings; empty outside the measured range;
* ``bv_V``: where the current first reaches the breakdown current, interpolated the
  same way; empty when the sweep never reaches it;
* a leakage model, an ohmic shunt in parallel with generation in the depletion layer,

  .. math:: I_R(V) = \\frac{V}{R_{sh}} + f(T)\\, I_{gen}\\,
            \\left(1 + \\frac{V}{V_J}\\right)^{M}\\left(1 - e^{-V/(N_R V_t)}\\right)

  (:func:`kinset.physics.leakage.reverse_current`), fitted below the onset of
  breakdown, from which :func:`kinset.quantities.reverse_current` evaluates the
  current at any voltage inside the fitted range and any temperature.

Temperature: :math:`f(T)` is the generation law (:math:`n_i \\propto T^{3/2}
e^{-E_G/2kT}`; thermionic emission for a Schottky reel), so readings taken at other
temperatures fit the same model at the reference temperature. The reported readings
are normalised by removing the generation part's temperature excess,
:math:`I - (f(T) - 1)\\,I_{gen}\\,h(V)`: the ohmic shunt and the breakdown current
are left as measured. A device too short for a model is normalised as if all of its
current were generation current.

Method: the model is linear in (1/Rsh, Igen) for a given M, so for every M of a grid
the weighted linear least-squares problems of all devices are solved at once as a
stack of 2×2 normal equations, the non-negative solution with the least squares is
kept per device, and M is refined by a parabola through the three best grid values.
Weights are the instrument's accuracy, σ = gain·I + offset (reel.yaml ``accuracy``).
VJ is held at 0.7 V and N_R at 2: a reverse sweep alone cannot separate VJ from M
(rule of thumb: 0.7 V is a typical silicon junction potential).

Parts whose leakage lies far above the reel's own distribution (median and median
absolute deviation of log-current at a report voltage) get a warning; none is dropped.

The fit runs in stages: prepare (readings by device and voltage), solve (the model),
measure (the reported values), diagnose (each note as a code of :data:`NOTES`, where
it applies) and table (status, note and ``reason_code`` from the codes, once).

References
----------
.. [1] C.-T. Sah, R. N. Noyce and W. Shockley, Proc. IRE 45(9), 1228-1243, 1957.
   doi:10.1109/JRPROC.1957.278528
.. [2] F. R. Hampel, "The influence curve and its role in robust estimation", Journal
   of the American Statistical Association 69(346), 383-393, 1974 (the median absolute
   deviation, scaled by 1.4826 to estimate a normal standard deviation).
   doi:10.1080/01621459.1974.10482962
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.fitting.batch import ByDevice, Groups, factorize_runs
from kinset.fitting.plausible import REVERSE_CURRENT, REVERSE_VOLTAGE, beyond, column_names
from kinset.format import si
from kinset.outcomes import Catalogue, Finding, compose
from kinset.physics.constants import ZERO_CELSIUS
from kinset.physics.leakage import generation_shape, leakage_temperature_factor

GEN_VJ = 0.7                # [V] junction potential of the generation term (rule of thumb)
GEN_N = 2.0                 # [1] emission coefficient of generation at mid-gap centres [1]
M_GRID = np.linspace(0.0, 1.0, 51)   # exponent of the depletion width: 0 (flat) .. 1
# A step between consecutive readings that rises faster than V^3 (plus 10 %) is
# breakdown: the shunt grows as V^1, generation as V^M with M <= 1.
BREAKDOWN_SLOPE = 3.0
BREAKDOWN_MARGIN = np.log(1.1)
TRAILING_SIGMAS = 5.0       # trailing readings this many robust sigmas above the model ...
TRAILING_MIN = 0.03         # ... and at least 3 % above it are the start of breakdown
TRAILING_MAX_DROPPED = 2
MIN_MODEL_POINTS = 3        # distinct voltages needed for (1/Rsh, Igen, M)
POOR_FIT_RMS = 0.1          # rms of ln(I/model) above which the model does not describe the part
NOTE_NORMALISED = 0.01      # note the temperature normalisation when it moves a reading > 1 %
OUTLIER_SIGMAS = 5.0        # robust z-score of log-current above which a part is flagged ...
OUTLIER_RATIO = 3.0         # ... when it also leaks at least 3× the reel median
OUTLIER_MIN_DEVICES = 8     # fewer devices at a voltage give no meaningful reel statistics
MAD_TO_SIGMA = 1.4826       # Hampel [2]
FILES_DISAGREE = 3.0         # readings of one id in two files this far apart at one voltage
PLATEAU_REL = 2e-3          # top readings this close to the largest current sat at a limit

NOTES = Catalogue.load("leakage")


@dataclass
class LeakageSettings:
    """What the fit needs from reel.yaml (all SI)."""

    reference_temperature: float      # [K]
    ambient_temperature: float        # [K], rows without a temperature
    report_voltages: tuple[float, ...]   # [V]
    breakdown_current: float          # [A]
    activation_energy: float          # [eV] of the temperature law
    law_xti: float                    # [1]
    law_n: float                      # [1]
    law: str                          # words for the note
    current_gain: float = 5e-4        # [1] accuracy of the current readings
    current_offset: float = 1e-9      # [A]


def temperature_law(material: str, eg: float, xti: float) -> tuple[float, float, float, str]:
    """(EG, XTI, N, description) of the leakage temperature law for a junction material.

    A p-n junction's reverse current below breakdown is generation in the depletion
    layer, proportional to the intrinsic density (N = 2, XTI = 3, EG the band gap);
    a Schottky barrier's is thermionic emission (N = 1, XTI of the reel, EG the barrier).
    """
    if material == "schottky":
        return eg, xti, 1.0, "thermionic emission over the barrier"
    return eg, 3.0, GEN_N, "generation current \u221d ni \u221d T^1.5\u00b7exp(\u2212Eg/2kT)"


def report_column(voltage: float) -> str:
    """``ir_A_at_20V`` for 20 V, ``ir_A_at_2.5V`` for 2.5 V."""
    return f"ir_A_at_{voltage:g}V"


def _weighted_sums(idx, k, a, b, y):
    s = lambda x: np.bincount(idx, x, minlength=k)   # noqa: E731
    return s(a * a), s(a * b), s(b * b), s(a * y), s(b * y), s(y * y)


def _solve_nonnegative(sums):
    """Least squares of y on [a, b] with both coefficients >= 0, per group.

    Returns the coefficients (k, 2) and the sum of squared residuals of the best
    feasible candidate: both free, a only, b only.
    """
    saa, sab, sbb, say, sby, syy = sums
    with np.errstate(divide="ignore", invalid="ignore"):
        det = saa * sbb - sab * sab
        ga = (sbb * say - sab * sby) / det
        gb = (saa * sby - sab * say) / det
        ssr_full = syy - ga * say - gb * sby
        full_ok = (det > 1e-12 * saa * sbb) & (ga >= 0) & (gb >= 0)
        a_only = np.where(saa > 0, say / saa, 0.0)
        b_only = np.where(sbb > 0, sby / sbb, 0.0)
    ssr_a = syy - a_only * say
    ssr_b = syy - b_only * sby
    cand = np.stack([np.where(full_ok, ssr_full, np.inf), ssr_a, ssr_b])
    best = np.argmin(cand, axis=0)
    coef = np.stack([np.choose(best, [ga, a_only, np.zeros_like(ga)]),
                     np.choose(best, [gb, np.zeros_like(gb), b_only])], axis=1)
    coef = np.where(np.isfinite(coef), coef, 0.0)
    return coef, np.min(cand, axis=0)


def fit_shunt_generation(idx, k, voltage, current, factor, temperature, sigma):
    """Fit 1/Rsh, Igen and M of the leakage model to grouped readings, all groups at once.

    Parameters
    ----------
    idx : (m,) int, group of each reading
    k : number of groups
    voltage, current : (m,) reverse voltage [V] and current [A]
    factor : (m,) temperature factor f(T) of the generation current at each reading [1]
    temperature : (m,) junction temperature [K]
    sigma : (m,) standard uncertainty of each current [A]

    Returns
    -------
    conductance [S], generation current [A], M [1] : (k,) arrays
    """
    a = voltage / sigma
    y = current / sigma

    def shape(m):
        return factor * generation_shape(voltage, GEN_VJ, m, temperature, GEN_N) / sigma

    # On the grid, the factors of shape(m) that do not depend on M are computed once
    # (in generation_shape's order of operations, so the numbers are the same), and the
    # sums over a and y alone too. A loop over the grid, never over devices.
    width = 1.0 + voltage / GEN_VJ
    onset = generation_shape(voltage, GEN_VJ, 0.0, temperature, GEN_N)
    s = lambda x: np.bincount(idx, x, minlength=k)   # noqa: E731
    saa, say, syy = s(a * a), s(a * y), s(y * y)
    ssr = np.empty((len(M_GRID), k))
    for g, m in enumerate(M_GRID):
        b = factor * (width ** m * onset) / sigma
        ssr[g] = _solve_nonnegative((saa, s(a * b), s(b * b), say, s(b * y), syy))[1]
    best = np.argmin(ssr, axis=0)
    lo = np.clip(best - 1, 0, len(M_GRID) - 3)
    cols = np.arange(k)
    s0, s1, s2 = ssr[lo, cols], ssr[lo + 1, cols], ssr[lo + 2, cols]
    curv = s0 - 2 * s1 + s2
    step = M_GRID[1] - M_GRID[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        offset = np.where(curv > 0, 0.5 * (s0 - s2) / curv, 0.0)
    m_best = np.clip(M_GRID[lo + 1] + np.clip(offset, -1.0, 1.0) * step, 0.0, 1.0)
    coef, ssr_best = _solve_nonnegative(_weighted_sums(idx, k, a, shape(m_best[idx]), y))
    # The parabola's vertex is a refinement only when it beats the grid's best point.
    worse = ssr_best > ssr[best, cols]
    if worse.any():
        m_best = np.where(worse, M_GRID[best], m_best)
        coef, _ = _solve_nonnegative(_weighted_sums(idx, k, a, shape(m_best[idx]), y))
    return coef[:, 0], coef[:, 1], m_best


def model_current(voltage, conductance, generation, m, factor, temperature):
    """The leakage model at readings (arrays broadcast) [A]."""
    return conductance * voltage + generation * factor * generation_shape(
        voltage, GEN_VJ, m, temperature, GEN_N)


# ----------------------------------------------------------------------------- prepare

@dataclass
class _Readings:
    """Every device's usable readings, sorted by device then voltage (prepare's output)."""

    names: np.ndarray            # (n,) device ids, sorted
    groups: Groups              # the readings' devices
    v: np.ndarray                # (m,) reverse voltage [V]
    cur: np.ndarray              # (m,) reverse current [A]
    temp: np.ndarray             # (m,) temperature [K]
    source: np.ndarray           # (m,) index into source_names
    source_names: np.ndarray
    factor: np.ndarray           # (m,) f(T) of the generation law
    sigma: np.ndarray            # (m,) accuracy of the current [A]
    new_v: np.ndarray            # (m,) first reading of its voltage on its device
    dropped: dict                # per-device arrays about readings not used (for notes)

    @property
    def n(self) -> int:
        return self.groups.n

    @property
    def dc(self) -> np.ndarray:
        return self.groups.codes

    @property
    def lni(self) -> np.ndarray:
        return np.log(self.cur)

    @property
    def pos(self) -> np.ndarray:
        return np.arange(len(self.cur))


def _usable_points(points: pd.DataFrame, s: LeakageSettings):
    """All readings sorted by device, signs made positive, the unusable ones marked.

    Returns the device codes and names, the sorted (v, i, T, source index) arrays, the
    usable mask and per-device facts for the notes.
    """
    rows = ByDevice(points)
    names, by_device, every = rows.names, rows.order, rows.groups
    src, src_names = factorize_runs(points["source"].astype(str).to_numpy(), sort=False)
    v, i = rows.column("reverse_voltage"), rows.column("reverse_current")
    t = rows.temperature(s.ambient_temperature)
    # Sign convention: a device whose every non-zero voltage (or current) is negative
    # was recorded as signed values; its magnitudes are the reverse sweep.
    flip_v = (every.count(v > 0) == 0) & (every.count(v < 0) > 0)
    flip_i = (every.count(i > 0) == 0) & (every.count(i < 0) > 0)
    v = np.where(every.each(flip_v), -v, v)
    i = np.where(every.each(flip_i), -i, i)
    usable = (v > 0) & (i > 0)
    # Readings no small-signal part gives (plausible.py): the part is rejected for them.
    findings = [beyond("implausible_current", REVERSE_CURRENT, every, i, column_names(
                    rows.text("column_reverse_current"), REVERSE_CURRENT), usable),
                beyond("implausible_voltage", REVERSE_VOLTAGE, every, v, column_names(
                    rows.text("column_reverse_voltage"), REVERSE_VOLTAGE), usable)]
    implausible = findings[0].where | findings[1].where
    usable &= ~every.each(implausible)
    dropped = dict(signed=flip_v | flip_i, implausible=implausible, findings=findings,
                   total=every.counts, bad=every.counts - every.count(usable))
    return every.codes, names, (v, i, t, src[by_device], src_names), usable, dropped


def _prepare(points: pd.DataFrame, s: LeakageSettings) -> _Readings:
    """Usable readings by device and voltage, without set-points past the current limit."""
    codes, names, (v, i, t, src, src_names), usable, dropped = _usable_points(points, s)
    sel = np.flatnonzero(usable)
    # by device and voltage; ties by temperature and current, so row order never matters
    order = sel[np.lexsort((i[sel], t[sel], v[sel], codes[sel]))]
    dc, v, cur, temp, src = codes[order], v[order], i[order], t[order], src[order]
    # Readings at the current limit: the instrument reported the voltage it reached at
    # its limit (valid, kept); further readings at the same current and higher
    # voltages are set-points it never reached (left out).
    g = Groups(dc, len(names))
    dropped["limit_current"] = g.max(cur)
    near = cur >= g.each(dropped["limit_current"]) * (1 - PLATEAU_REL)
    first_near = g.min(np.where(near, np.arange(len(dc)), np.nan))
    at_limit = near & (g.each(g.count(near)) >= 2) & (np.arange(len(dc)) != g.each(first_near))
    dropped["limit"] = g.count(at_limit)
    keep = ~at_limit
    dc, v, cur, temp, src = dc[keep], v[keep], cur[keep], temp[keep], src[keep]
    factor = leakage_temperature_factor(temp, s.reference_temperature, s.activation_energy,
                                        s.law_xti, s.law_n)
    sigma = s.current_gain * cur + s.current_offset
    new_v = np.ones(len(dc), dtype=bool)
    new_v[1:] = (dc[1:] != dc[:-1]) | (v[1:] != v[:-1])
    return _Readings(names, Groups(dc, len(names)), v, cur, temp, src, src_names, factor,
                     np.where(sigma > 0, sigma, cur), new_v, dropped)


# ------------------------------------------------------------------------------- solve

@dataclass
class _Model:
    """The leakage model per device (solve's output)."""

    fitted: np.ndarray           # (n,) a model was fitted
    g: np.ndarray                # (n,) 1/Rsh [S]
    ig: np.ndarray               # (n,) Igen [A]
    m: np.ndarray                # (n,) M [1]
    rows: np.ndarray             # (m,) readings the model was fitted to
    rms: np.ndarray              # (n,) rms of ln(I/model)


def _below_breakdown(r: _Readings) -> np.ndarray:
    """Readings below the first step to a higher voltage that rises faster than the model can.

    Currents are provisionally scaled to the reference temperature, so that readings at
    several temperatures can be compared.
    """
    d_lni, d_lnv = np.diff(r.lni - np.log(r.factor)), np.diff(np.log(r.v))
    steep = np.zeros(len(r.v), dtype=bool)
    steep[1:] = ((r.dc[1:] == r.dc[:-1]) & (d_lnv > 0)
                 & (d_lni > BREAKDOWN_SLOPE * d_lnv + BREAKDOWN_MARGIN))
    onset = r.groups.min(np.where(steep, r.pos, np.nan))
    return r.pos < r.groups.each(np.where(np.isnan(onset), np.inf, onset))


def _fit_rows(r: _Readings, mask: np.ndarray):
    """(fitted, 1/Rsh, Igen, M) per device from the masked readings (NaN where unfitted)."""
    fitted = r.groups.count(mask & r.new_v) >= MIN_MODEL_POINTS
    rows = mask & r.groups.each(fitted)
    g = np.full(r.n, np.nan)
    ig, m = g.copy(), g.copy()
    if rows.any():
        local, k_ids = pd.factorize(r.dc[rows], sort=True)
        g[k_ids], ig[k_ids], m[k_ids] = fit_shunt_generation(
            local, len(k_ids), r.v[rows], r.cur[rows], r.factor[rows], r.temp[rows],
            r.sigma[rows])
    return fitted, g, ig, m


def _log_residual(r: _Readings, rows, g, ig, m) -> np.ndarray:
    """ln(I/model) at the given readings (NaN elsewhere)."""
    res = np.full(len(r.v), np.nan)
    dd = r.dc[rows]
    with np.errstate(divide="ignore", invalid="ignore"):
        res[rows] = r.lni[rows] - np.log(model_current(r.v[rows], g[dd], ig[dd], m[dd],
                                                       r.factor[rows], r.temp[rows]))
    return res


def _top_reading_above(r: _Readings, in_model: np.ndarray):
    """Whether each device's top model reading lies well above what the others predict.

    Returns the top readings (m,), the devices whose top reading breaks away (n,) and
    the fit without them (as :func:`_fit_rows`), or None when no device has a fit left.
    """
    last = r.groups.max(np.where(in_model, r.pos, np.nan))
    is_top = (r.pos == r.groups.each(last)) & in_model
    trial = in_model & ~is_top
    fitted_t, g_t, ig_t, m_t = _fit_rows(r, trial)
    rows = trial & r.groups.each(fitted_t)
    if not rows.any():
        return None
    res = _log_residual(r, rows | (is_top & r.groups.each(fitted_t)), g_t, ig_t, m_t)
    dc = r.dc
    scale = MAD_TO_SIGMA * pd.Series(np.abs(res[rows])).groupby(dc[rows]).median()
    thr = np.full(r.n, np.inf)
    thr[scale.index.to_numpy()] = np.maximum(TRAILING_SIGMAS * scale.to_numpy(), TRAILING_MIN)
    top_res = np.full(r.n, -np.inf)
    top_res[dc[is_top]] = res[is_top]
    return is_top, fitted_t & (top_res > thr), (g_t, ig_t, m_t)


def _solve(r: _Readings) -> _Model:
    """The leakage model of every device below its breakdown, and how well it fits."""
    in_model = _below_breakdown(r)
    fitted, g, ig, m = _fit_rows(r, in_model)
    # A soft breakdown starts gently: the top readings of the model range may already
    # sit above the leakage law. Each round fits without each device's top reading and
    # leaves that reading out when it lies well above what the others predict.
    for _ in range(TRAILING_MAX_DROPPED):
        trial = _top_reading_above(r, in_model)
        if trial is None or not trial[1].any():
            break
        is_top, drop, (g_t, ig_t, m_t) = trial
        in_model &= ~(is_top & r.groups.each(drop))
        g, ig, m = np.where(drop, g_t, g), np.where(drop, ig_t, ig), np.where(drop, m_t, m)
    rows = in_model & r.groups.each(fitted)
    with np.errstate(divide="ignore", invalid="ignore"):
        model_pts = model_current(r.v, g[r.dc], ig[r.dc], m[r.dc], r.factor, r.temp)
        res = np.where(rows, r.lni - np.log(model_pts), 0.0)
        rms = np.sqrt(r.groups.sum(res * res) / r.groups.count(rows))
    return _Model(fitted, g, ig, m, rows, np.where(fitted, rms, np.nan))


# -------------------------------------------------------------------------- the values

@dataclass
class _Sweep:
    """One reading per device and voltage, normalised to the reference temperature."""

    groups: Groups              # devices of the voltages
    v: np.ndarray                # (k,) distinct voltages [V], ascending per device
    lnn: np.ndarray              # (k,) ln of the normalised current there
    moved_max: np.ndarray        # (n,) largest relative change by the normalisation
    n_files: np.ndarray          # (n,) files the device's readings come from
    worst: np.ndarray            # (n,) largest ln spread at one voltage
    worst_v: np.ndarray          # (n,) where [V]

    @property
    def conflict(self) -> np.ndarray:
        """Readings of one id from different files that disagree: two parts, one id."""
        return (self.n_files > 1) & (self.worst > np.log(FILES_DISAGREE))


def _normalised(r: _Readings, model: _Model) -> np.ndarray:
    """Currents at the reference temperature: the generation part only (model), or
    everything where there is no model."""
    fit = r.groups.each(model.fitted)
    dc = r.dc
    with np.errstate(invalid="ignore"):
        gen_part = np.where(fit, model.ig[dc] * generation_shape(r.v, GEN_VJ, model.m[dc],
                                                                 r.temp, GEN_N), np.nan)
        normal = np.where(fit, r.cur - (r.factor - 1.0) * gen_part, r.cur / r.factor)
        return np.where(normal > 0.1 * r.cur / np.maximum(r.factor, 1.0), normal,
                        r.cur / r.factor)


def _sweep(r: _Readings, model: _Model) -> _Sweep:
    """Repeated voltages (several sweeps, files or temperatures) as their geometric mean.

    The spread of the repeats from different files is kept: readings of one id that
    disagree (after the temperature normalisation) most likely come from two parts.
    """
    normal = _normalised(r, model)
    moved = r.groups.max(np.abs(normal / r.cur - 1.0))
    seg = np.cumsum(r.new_v) - 1
    repeats = Groups(seg, int(seg[-1]) + 1 if len(seg) else 0)
    ln_norm = np.log(normal)
    spread = repeats.each(repeats.max(ln_norm) - repeats.min(ln_norm))
    worst = r.groups.max(spread)
    worst_v = r.groups.min(np.where(spread == r.groups.each(worst), r.v, np.nan))
    lnn = repeats.sum(ln_norm) / repeats.counts
    first = np.flatnonzero(r.new_v)
    return _Sweep(Groups(r.dc[first], r.n), r.v[first], lnn,
                  np.where(r.groups.counts > 0, moved, 0.0),
                  r.groups.distinct(r.source, np.ones(len(r.v), dtype=bool)),
                  np.where(r.groups.counts > 0, worst, 0.0), worst_v)


def _at_voltage(sw: _Sweep, volt: float) -> np.ndarray:
    """Log-interpolated normalised current at ``volt`` per device (NaN outside)."""
    cm, vm, lnn = sw.groups.counts, sw.v, sw.lnn
    below = sw.groups.count(vm < volt)
    hi = sw.groups.starts + below
    out = np.full(sw.groups.n, np.nan)
    d = np.flatnonzero((cm > 0) & (below < cm))
    j = hi[d]
    exact = vm[j] == volt
    interp = ~exact & (below[d] > 0)
    out[d[exact]] = np.exp(lnn[j[exact]])
    jj, dd = j[interp], d[interp]
    w = (volt - vm[jj - 1]) / (vm[jj] - vm[jj - 1])
    out[dd] = np.exp(lnn[jj - 1] + w * (lnn[jj] - lnn[jj - 1]))
    return out


def _breakdown(sw: _Sweep, breakdown_current: float) -> dict[str, np.ndarray]:
    """Breakdown: the first crossing of the breakdown current, log-interpolated.

    ``bv`` (NaN where none), ``shorted`` (already above it at the lowest reading) and the
    readings bracketing the crossing (``low``, ``high``, ``ratio`` of their currents).
    """
    g, vm, lnn = sw.groups, sw.v, sw.lnn
    ln_bd = np.log(breakdown_current)
    first = g.min(np.where(lnn >= ln_bd, np.arange(len(vm)), np.nan))
    crossed = first > g.starts
    j = first[crossed].astype(np.int64)
    out = {k: np.full(g.n, np.nan) for k in ("bv", "low", "high", "ratio")}
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(lnn[j] > lnn[j - 1], (ln_bd - lnn[j - 1]) / (lnn[j] - lnn[j - 1]), 1.0)
    out["bv"][crossed] = vm[j - 1] + w * (vm[j] - vm[j - 1])
    out["ratio"][crossed] = np.exp(lnn[j] - lnn[j - 1])
    out["low"][crossed], out["high"][crossed] = vm[j - 1], vm[j]
    out["shorted"] = (first == g.starts) & (g.counts > 0)
    return out


def _reel_outliers(report: dict[float, np.ndarray], n: int):
    """Parts far above the reel's own distribution at each report voltage.

    Median and MAD of ln I at each voltage with enough devices (Hampel [2]). Returns
    the flags and the ratios to the median by voltage, and each part's largest ratio.
    """
    flags: dict[float, np.ndarray] = {}
    ratios: dict[float, np.ndarray] = {}
    ratio_max = np.full(n, np.nan)
    for V, val in report.items():
        x = np.log(val)
        use = np.isfinite(x)
        if use.sum() >= OUTLIER_MIN_DEVICES:
            med = np.median(x[use])
            mad = MAD_TO_SIGMA * np.median(np.abs(x[use] - med))
            ratios[V] = np.exp(x - med)
            with np.errstate(divide="ignore", invalid="ignore"):
                z = np.where(mad > 0, (x - med) / mad, np.inf)
            flags[V] = use & (z > OUTLIER_SIGMAS) & (ratios[V] >= OUTLIER_RATIO)
            ratio_max = np.fmax(ratio_max, ratios[V])
    return flags, ratios, ratio_max


def _measure(r: _Readings, model: _Model, s: LeakageSettings) -> tuple[_Sweep, dict]:
    """The reported values: currents at the report voltages, breakdown, ranges, outliers."""
    sw = _sweep(r, model)
    report = {V: _at_voltage(sw, V) for V in s.report_voltages}
    flags, ratios, ratio_max = _reel_outliers(report, r.n)
    return sw, dict(
        report=report, bd=_breakdown(sw, s.breakdown_current), flags=flags, ratios=ratios,
        ratio_max=ratio_max, v_lo=sw.groups.min(sw.v), v_hi=sw.groups.max(sw.v),
        i_top=sw.groups.max(np.exp(sw.lnn)), t_min=r.groups.min(r.temp),
        t_max=r.groups.max(r.temp), f_min=r.groups.min(r.factor),
        f_max=r.groups.max(r.factor))


# ---------------------------------------------------------------------------- diagnose

def _rejections(r: _Readings, sw: _Sweep) -> list[Finding]:
    """Parts with nothing to report: each is rejected for one reason, alone in its note."""
    d = r.dropped
    implausible = d["implausible"]
    empty = (sw.groups.counts == 0) & ~implausible
    g = r.groups

    def files(i):
        mine = r.source[g.starts[i]:g.starts[i] + g.counts[i]]
        return ", ".join(sorted({Path(r.source_names[k]).name for k in mine}))

    return [
        *d["findings"],
        Finding("no_usable_reading", empty, {"count": d["total"]}),
        Finding("files_disagree", sw.conflict & ~implausible & ~empty,
                {"n_files": sw.n_files, "files": files, "voltage": sw.worst_v,
                 "ratio": lambda i: np.exp(sw.worst[i])}),
    ]


def _excess(flags, ratios, bv):
    """The words of the possible-damage note of part i: each voltage it leaks too much at."""
    def words(i):
        parts = []
        for V in flags:
            if flags[V][i]:
                r = ratios[V][i]
                times = f"{r:.0f}" if r >= 10 else f"{r:.1f}"
                where = " (in breakdown)" if np.isfinite(bv[i]) and V >= bv[i] else ""
                parts.append(f"{times}\u00d7 the reel median at {V:g} V{where}")
        return ", ".join(parts)
    return words


def _missing_values(live, vals) -> list[Finding]:
    """Why a report voltage has no value: below the sweep, past breakdown, beyond the end."""
    bd, v_lo, v_hi = vals["bd"], vals["v_lo"], vals["v_hi"]
    out = []
    for V, val in vals["report"].items():
        missing = live & ~np.isfinite(val)
        below = missing & (V < v_lo)
        past = missing & ~below & (np.isfinite(bd["bv"]) | bd["shorted"])
        out += [Finding("ir_below_sweep", below, {"voltage": V, "lowest": v_lo}),
                Finding("ir_past_breakdown", past,
                        {"voltage": V, "highest": v_hi,
                         "current": lambda i: si(vals["i_top"][i], "A")}),
                Finding("ir_beyond_sweep", missing & ~below & ~past,
                        {"voltage": V, "highest": v_hi})]
    return out


def _temperature_words(vals):
    """The temperatures and factors of the normalisation note, as words, for part i."""
    def when(i):
        lo_c, hi_c = vals["t_min"][i] - ZERO_CELSIUS, vals["t_max"][i] - ZERO_CELSIUS
        return f"{lo_c:.3g} °C" if abs(hi_c - lo_c) < 0.05 else f"{lo_c:.3g}–{hi_c:.3g} °C"

    def factor(i):
        lo, hi = vals["f_min"][i], vals["f_max"][i]
        return f"{lo:.3g}" if abs(hi - lo) < 1e-3 else f"{lo:.3g}–{hi:.3g}"
    return when, factor


def _diagnose(r: _Readings, model: _Model, sw: _Sweep, vals: dict,
              s: LeakageSettings) -> list[Finding]:
    """Every note of every part as findings, in the order a row gives its notes."""
    rejections = _rejections(r, sw)
    live = ~np.logical_or.reduce([f.where for f in rejections])
    d, bd = r.dropped, vals["bd"]
    flagged = np.logical_or.reduce([np.zeros(r.n, dtype=bool), *vals["flags"].values()])
    bv = bd["bv"]
    when, factor = _temperature_words(vals)
    return rejections + [
        Finding("possible_damage", live & flagged,
                {"excess": _excess(vals["flags"], vals["ratios"], bv)}),
        Finding("shorted", live & bd["shorted"],
                {"current": lambda i: si(np.exp(sw.lnn[sw.groups.starts[i]]), "A"),
                 "voltage": vals["v_lo"]}),
        Finding("too_few_voltages", live & ~model.fitted, {"count": sw.groups.counts}),
        Finding("signed_readings", live & d["signed"]),
        Finding("unusable_readings", live & (d["bad"] > 0), {"count": d["bad"]}),
        Finding("current_limit", live & (d["limit"] > 0),
                {"count": d["limit"], "limit": lambda i: si(d["limit_current"][i], "A")}),
        Finding("poor_fit", live & model.fitted & (model.rms > POOR_FIT_RMS),
                {"percent": 100 * model.rms}),
        *_missing_values(live, vals),
        Finding("breakdown_wide_step", live & np.isfinite(bv) & (bd["ratio"] > 100.0),
                {"low": bd["low"], "high": bd["high"], "ratio": bd["ratio"]}),
        Finding("no_breakdown", live & ~np.isfinite(bv) & ~bd["shorted"],
                {"highest": vals["v_hi"], "current": si(s.breakdown_current, "A")}),
        Finding("temperature_normalised", live & (sw.moved_max > NOTE_NORMALISED),
                {"when": when, "factor": factor, "law": s.law,
                 "reference": s.reference_temperature - ZERO_CELSIUS,
                 "part": np.where(model.fitted, "generation part", "whole current (no model)")}),
    ]


# ------------------------------------------------------------------------------- table

def _table(r: _Readings, model: _Model, vals: dict, findings: list[Finding],
           s: LeakageSettings) -> pd.DataFrame:
    """One row per device: status, note and reason_code from the findings, then the values."""
    status, note, code = compose(r.n, findings, NOTES)
    out = pd.DataFrame({"device": r.names.astype(str), "status": status, "note": note,
                        "reason_code": code})
    for V, val in vals["report"].items():
        out[report_column(V)] = val
    fitted, g = model.fitted, model.g
    with np.errstate(divide="ignore"):
        rsh = np.where(fitted, np.where(g > 0, 1.0 / g, np.inf), np.nan)
    out["bv_V"] = vals["bd"]["bv"]
    out["rsh_ohm"] = rsh
    out["igen_A"] = np.where(fitted, model.ig, np.nan)
    out["gen_m"] = np.where(fitted & (model.ig > 0), model.m, np.nan)
    out["gen_vj_V"] = np.where(fitted, GEN_VJ, np.nan)
    out["gen_n"] = np.where(fitted, GEN_N, np.nan)
    out["fit_rms_log"] = model.rms
    out["points"] = r.groups.count(model.rows)
    out["sweep_min_V"] = vals["v_lo"]
    out["sweep_max_V"] = vals["v_hi"]
    out["model_max_V"] = np.where(fitted, r.groups.max(np.where(model.rows, r.v, np.nan)),
                                  np.nan)
    out["current_max_A"] = vals["i_top"]
    out["ir_ratio_to_median"] = vals["ratio_max"]
    out["sweep_t_min_C"] = vals["t_min"] - ZERO_CELSIUS
    out["sweep_t_max_C"] = vals["t_max"] - ZERO_CELSIUS
    out["reference_temperature_C"] = s.reference_temperature - ZERO_CELSIUS
    out["law_eg_eV"] = s.activation_energy
    out["law_xti"] = s.law_xti
    out["law_n"] = s.law_n
    return out


def fit_leakage(points: pd.DataFrame, settings: LeakageSettings) -> pd.DataFrame:
    """Leakage values, breakdown voltage and model of every device in a table of readings.

    Parameters
    ----------
    points : DataFrame
        ``device, reverse_voltage [V], reverse_current [A], temperature [K] (NaN:
        ambient), source, line`` — as from :func:`kinset.io.datasets.read_leakage`.
    settings : LeakageSettings

    Returns
    -------
    DataFrame
        One row per device, sorted by id: ``device, status, note, reason_code`` (the
        codes of :data:`NOTES`), ``ir_A_at_<V>V`` for each report voltage, ``bv_V``,
        the model (``rsh_ohm, igen_A, gen_m, gen_vj_V, gen_n``), its fit
        (``fit_rms_log``, ``points``), the measured and modelled ranges (``sweep_min_V,
        sweep_max_V, model_max_V, current_max_A, sweep_t_min_C, sweep_t_max_C``),
        ``ir_ratio_to_median`` and the temperature law the values hold with
        (``law_eg_eV, law_xti, law_n``, ``reference_temperature_C``).
    """
    readings = _prepare(points, settings)
    model = _solve(readings)
    sweep, values = _measure(readings, model, settings)
    findings = _diagnose(readings, model, sweep, values, settings)
    return _table(readings, model, values, findings, settings)
