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

from kinset.format import si
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
MAX_PLAUSIBLE_A = 1.0       # [A] a reverse "leakage" reading above this is not leakage
FILES_DISAGREE = 3.0         # readings of one id in two files this far apart at one voltage
PLATEAU_REL = 2e-3          # top readings this close to the largest current sat at a limit


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


def _first_index(groups: np.ndarray, mask: np.ndarray, n: int) -> np.ndarray:
    """Per group, the flat index of its first masked element (-1 where none)."""
    first = np.full(n, np.iinfo(np.int64).max)
    sel = np.flatnonzero(mask)
    np.minimum.at(first, groups[sel], sel)
    return np.where(first == np.iinfo(np.int64).max, -1, first)


def _group_max(groups, x, n, empty=np.nan):
    """Per-group maximum of x; ``empty`` for groups without elements."""
    out = np.full(n, -np.inf)
    np.maximum.at(out, groups, x)
    return np.where(np.bincount(groups, minlength=n) > 0, out, empty)


def _group_min(groups, x, n, empty=np.nan):
    out = np.full(n, np.inf)
    np.minimum.at(out, groups, x)
    return np.where(np.bincount(groups, minlength=n) > 0, out, empty)


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
        One row per device, sorted by id: ``device, status, note``, ``ir_A_at_<V>V``
        for each report voltage, ``bv_V``, the model (``rsh_ohm, igen_A, gen_m,
        gen_vj_V, gen_n``), its fit (``fit_rms_log``, ``points``), the measured and
        modelled ranges (``sweep_min_V, sweep_max_V, model_max_V, current_max_A,
        sweep_t_min_C, sweep_t_max_C``), ``ir_ratio_to_median`` and the temperature
        law the values hold with (``law_eg_eV, law_xti, law_n``,
        ``reference_temperature_C``).
    """
    s = settings
    t_ref = s.reference_temperature
    codes, names = pd.factorize(points["device"].astype(str).to_numpy(), sort=True)
    n_dev = len(names)
    v_all = points["reverse_voltage"].to_numpy(dtype=float)
    i_all = points["reverse_current"].to_numpy(dtype=float)
    t_all = points["temperature"].to_numpy(dtype=float)
    t_all = np.where(np.isfinite(t_all), t_all, s.ambient_temperature)
    total = np.bincount(codes, minlength=n_dev)

    # Sign convention: a device whose every non-zero voltage (or current) is negative
    # was recorded as signed values; its magnitudes are the reverse sweep.
    flip_v = (np.bincount(codes, v_all > 0, n_dev) == 0) & (np.bincount(codes, v_all < 0, n_dev) > 0)
    flip_i = (np.bincount(codes, i_all > 0, n_dev) == 0) & (np.bincount(codes, i_all < 0, n_dev) > 0)
    v_all = np.where(flip_v[codes], -v_all, v_all)
    i_all = np.where(flip_i[codes], -i_all, i_all)
    usable = (v_all > 0) & (i_all > 0)
    implausible = np.bincount(codes, usable & (i_all > MAX_PLAUSIBLE_A), n_dev) > 0
    usable &= ~implausible[codes]

    sel = np.flatnonzero(usable)
    # by device and voltage; ties by temperature and current, so row order never matters
    order = sel[np.lexsort((i_all[sel], t_all[sel], v_all[sel], codes[sel]))]
    dc, v, cur, temp = codes[order], v_all[order], i_all[order], t_all[order]

    # Readings at the current limit: the instrument reported the voltage it reached at
    # its limit (valid, kept); further readings at the same current and higher
    # voltages are set-points it never reached (left out).
    imax = _group_max(dc, cur, n_dev)
    near = cur >= imax[dc] * (1 - PLATEAU_REL)
    n_near = np.bincount(dc, near, n_dev).astype(np.int64)
    first_near = _first_index(dc, near, n_dev)
    at_limit = near & (n_near[dc] >= 2) & (np.arange(len(dc)) != first_near[dc])
    n_limit = np.bincount(dc, at_limit, n_dev).astype(np.int64)
    keep = ~at_limit
    dc, v, cur, temp = dc[keep], v[keep], cur[keep], temp[keep]
    m_pts = len(dc)
    pos = np.arange(m_pts)
    factor = leakage_temperature_factor(temp, t_ref, s.activation_energy, s.law_xti, s.law_n)
    sigma = s.current_gain * cur + s.current_offset
    sigma = np.where(sigma > 0, sigma, cur)
    lni = np.log(cur)

    # Breakdown onset: the first step to a higher voltage that rises faster than the
    # model can (currents provisionally scaled to the reference temperature, so that
    # readings at several temperatures can be compared).
    same = dc[1:] == dc[:-1]
    d_lni, d_lnv = np.diff(lni - np.log(factor)), np.diff(np.log(v))
    steep = same & (d_lnv > 0) & (d_lni > BREAKDOWN_SLOPE * d_lnv + BREAKDOWN_MARGIN)
    onset = _first_index(dc[1:], steep, n_dev)
    onset = np.where(onset >= 0, onset + 1, np.iinfo(np.int64).max)
    in_model = pos < onset[dc]
    new_v = np.ones(m_pts, dtype=bool)
    new_v[1:] = ~same | (v[1:] != v[:-1])

    def fit(mask):
        distinct = np.bincount(dc, mask & new_v, n_dev)
        fitted = distinct >= MIN_MODEL_POINTS
        rows = mask & fitted[dc]
        g = np.full(n_dev, np.nan)
        ig, m = g.copy(), g.copy()
        if rows.any():
            local, k_ids = pd.factorize(dc[rows], sort=True)
            gg, ii, mm = fit_shunt_generation(local, len(k_ids), v[rows], cur[rows],
                                              factor[rows], temp[rows], sigma[rows])
            g[k_ids], ig[k_ids], m[k_ids] = gg, ii, mm
        return fitted, g, ig, m

    def log_residual(rows, g_, ig_, m_):
        r = np.full(m_pts, np.nan)
        dd = dc[rows]
        with np.errstate(divide="ignore", invalid="ignore"):
            r[rows] = lni[rows] - np.log(model_current(v[rows], g_[dd], ig_[dd], m_[dd],
                                                       factor[rows], temp[rows]))
        return r

    fitted, g, ig, m = fit(in_model)
    # A soft breakdown starts gently: the top readings of the model range may already
    # sit above the leakage law. Each round fits without each device's top reading and
    # leaves that reading out when it lies well above what the others predict.
    for _ in range(TRAILING_MAX_DROPPED):
        last = _group_max(dc[in_model], pos[in_model], n_dev, empty=-1).astype(np.int64)
        is_top = (pos == last[dc]) & in_model
        trial = in_model & ~is_top
        fitted_t, g_t, ig_t, m_t = fit(trial)
        rows = trial & fitted_t[dc]
        if not rows.any():
            break
        res = log_residual(rows | (is_top & fitted_t[dc]), g_t, ig_t, m_t)
        scale = MAD_TO_SIGMA * pd.Series(np.abs(res[rows])).groupby(dc[rows]).median()
        thr = np.full(n_dev, np.inf)
        thr[scale.index.to_numpy()] = np.maximum(TRAILING_SIGMAS * scale.to_numpy(), TRAILING_MIN)
        top_res = np.full(n_dev, -np.inf)
        top_res[dc[is_top]] = res[is_top]
        drop = fitted_t & (top_res > thr)
        if not drop.any():
            break
        in_model &= ~(is_top & drop[dc])
        g, ig, m = np.where(drop, g_t, g), np.where(drop, ig_t, ig), np.where(drop, m_t, m)
    model_rows = in_model & fitted[dc]
    with np.errstate(divide="ignore", invalid="ignore"):
        model_pts = model_current(v, g[dc], ig[dc], m[dc], factor, temp)
        res = np.where(model_rows, lni - np.log(model_pts), 0.0)
    n_model = np.bincount(dc, model_rows, n_dev).astype(np.int64)
    with np.errstate(invalid="ignore", divide="ignore"):
        rms = np.sqrt(np.bincount(dc, res * res, n_dev) / n_model)
    rms = np.where(fitted, rms, np.nan)

    # Normalise to the reference temperature: the generation part only (model), or
    # everything where there is no model.
    with np.errstate(invalid="ignore"):
        gen_part = np.where(fitted[dc], ig[dc] * generation_shape(v, GEN_VJ, m[dc], temp, GEN_N), np.nan)
        normal = np.where(fitted[dc], cur - (factor - 1.0) * gen_part, cur / factor)
        normal = np.where(normal > 0.1 * cur / np.maximum(factor, 1.0), normal, cur / factor)
    moved = np.abs(normal / cur - 1.0)
    moved_max = _group_max(dc, moved, n_dev, empty=0.0)

    # Repeated voltages (several sweeps, files or temperatures): geometric mean.
    seg = np.cumsum(new_v) - 1
    n_seg = int(seg[-1]) + 1 if m_pts else 0
    # ... unless readings of one id from different files disagree at the same voltage
    # (after the temperature normalisation): then the id most likely names two parts.
    src_codes, src_names = pd.factorize(points["source"].astype(str).to_numpy())
    src = src_codes[order][keep]
    ln_norm = np.log(normal)
    seg_hi = np.full(n_seg, -np.inf)
    seg_lo = np.full(n_seg, np.inf)
    np.maximum.at(seg_hi, seg, ln_norm)
    np.minimum.at(seg_lo, seg, ln_norm)
    pairs = np.unique(np.stack([dc, src]), axis=1) if m_pts else np.zeros((2, 0), dtype=int)
    n_files = np.bincount(pairs[0], minlength=n_dev)
    spread = (seg_hi - seg_lo)[seg] if m_pts else np.zeros(0)
    worst = _group_max(dc, spread, n_dev, empty=0.0)
    worst_v = np.full(n_dev, np.nan)
    top = np.flatnonzero(spread == worst[dc])
    worst_v[dc[top[::-1]]] = v[top[::-1]]
    conflict = (n_files > 1) & (worst > np.log(FILES_DISAGREE))
    lnn = np.bincount(seg, np.log(normal), n_seg) / np.bincount(seg, minlength=n_seg)
    first_of = np.flatnonzero(new_v)
    dm, vm = dc[first_of], v[first_of]
    cm = np.bincount(dm, minlength=n_dev)
    sm = np.concatenate([[0], np.cumsum(cm)[:-1]])
    v_lo = _group_min(dm, vm, n_dev)
    v_hi = _group_max(dm, vm, n_dev)

    def at_voltage(volt):
        """log-interpolated normalised current at ``volt`` per device (NaN outside)."""
        below = np.bincount(dm, vm < volt, n_dev).astype(np.int64)
        hi = sm + below
        inside = (cm > 0) & (below < cm)
        out = np.full(n_dev, np.nan)
        d = np.flatnonzero(inside)
        j = hi[d]
        exact = vm[j] == volt
        interp = ~exact & (below[d] > 0)
        out[d[exact]] = np.exp(lnn[j[exact]])
        jj, dd = j[interp], d[interp]
        w = (volt - vm[jj - 1]) / (vm[jj] - vm[jj - 1])
        out[dd] = np.exp(lnn[jj - 1] + w * (lnn[jj] - lnn[jj - 1]))
        return out

    report = {V: at_voltage(V) for V in s.report_voltages}

    # Breakdown: the first crossing of the breakdown current, log-interpolated.
    ln_bd = np.log(s.breakdown_current)
    first_bd = _first_index(dm, lnn >= ln_bd, n_dev) if len(dm) else np.full(n_dev, -1)
    bv = np.full(n_dev, np.nan)
    crossed = first_bd > sm
    j = first_bd[crossed]
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(lnn[j] > lnn[j - 1], (ln_bd - lnn[j - 1]) / (lnn[j] - lnn[j - 1]), 1.0)
    bv[crossed] = vm[j - 1] + w * (vm[j] - vm[j - 1])
    shorted = (first_bd == sm) & (cm > 0)
    bracket_ratio = np.full(n_dev, np.nan)
    bracket_ratio[crossed] = np.exp(lnn[j] - lnn[j - 1])
    bracket_lo = np.full(n_dev, np.nan)
    bracket_hi = np.full(n_dev, np.nan)
    bracket_lo[crossed], bracket_hi[crossed] = vm[j - 1], vm[j]

    # The reel's own distribution at each report voltage (median and MAD of ln I).
    flags: dict[float, np.ndarray] = {}
    ratios: dict[float, np.ndarray] = {}
    ratio_max = np.full(n_dev, np.nan)
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

    model_max = _group_max(dc[model_rows], v[model_rows], n_dev)
    t_min = _group_min(dc, temp, n_dev)
    t_max = _group_max(dc, temp, n_dev)
    i_top = _group_max(dm, np.exp(lnn), n_dev)
    n_bad = total - np.bincount(codes, usable, n_dev).astype(np.int64)
    factor_min = _group_min(dc, factor, n_dev)
    factor_max = _group_max(dc, factor, n_dev)

    status, notes = [], []
    for d in range(n_dev):
        note: list[str] = []
        st = "ok"
        if implausible[d]:
            status.append("rejected")
            notes.append(f"reverse currents up to {si(np.nanmax(i_all[codes == d]), 'A')}: "
                         f"not a leakage sweep (columns swapped or a wrong unit?)")
            continue
        if cm[d] == 0:
            status.append("rejected")
            notes.append(f"no usable reading: all {total[d]} have zero or negative voltage "
                         f"or current")
            continue
        if conflict[d]:
            files = ", ".join(sorted({Path(src_names[k]).name for k in pairs[1][pairs[0] == d]}))
            status.append("rejected")
            notes.append(f"readings in {n_files[d]} files ({files}) disagree: "
                         f"{np.exp(worst[d]):.3g}× apart at {worst_v[d]:g} V; one id on two "
                         f"parts? Check the files")
            continue
        if flip_v[d] or flip_i[d]:
            note.append("negative (signed) readings taken as reverse magnitudes")
        if n_bad[d]:
            note.append(f"{n_bad[d]} reading(s) with zero or negative voltage or current "
                        f"not used")
        if n_limit[d]:
            note.append(f"{n_limit[d]} reading(s) at the current limit "
                        f"{si(imax[d], 'A')} above the first one left out (set-points the "
                        f"source did not reach)")
        if not fitted[d]:
            st = "warning"
            note.insert(0, f"{cm[d]} distinct voltage(s): too few for a leakage model; values "
                        f"only at and between the readings")
        elif rms[d] > POOR_FIT_RMS:
            st = "warning"
            note.append(f"poor fit of the leakage model: rms {100 * rms[d]:.2g} % (noisy "
                        f"readings or another leakage mechanism)")
        if shorted[d]:
            st = "warning"
            note.insert(0, f"already {si(np.exp(lnn[sm[d]]), 'A')} at the lowest reading "
                        f"({v_lo[d]:g} V), above the breakdown current: shorted or "
                        f"badly damaged")
        for V, val in report.items():
            if np.isfinite(val[d]):
                continue
            if V < v_lo[d]:
                note.append(f"ir at {V:g} V not measured: the lowest reading is {v_lo[d]:g} V")
            elif np.isfinite(bv[d]) or shorted[d]:
                note.append(f"ir at {V:g} V not measured: the sweep stopped at "
                            f"{v_hi[d]:.4g} V in breakdown ({si(i_top[d], 'A')})")
            else:
                note.append(f"ir at {V:g} V not measured: the sweep ends at {v_hi[d]:.4g} V")
        if np.isfinite(bv[d]) and bracket_ratio[d] > 100.0:
            note.append(f"breakdown between the readings at {bracket_lo[d]:.4g} V and "
                        f"{bracket_hi[d]:.4g} V (current ×{bracket_ratio[d]:.2g}): bv_V "
                        f"interpolated across a wide step")
        elif not np.isfinite(bv[d]) and not shorted[d]:
            note.append(f"no breakdown up to {v_hi[d]:.4g} V "
                        f"({si(s.breakdown_current, 'A')} not reached)")
        flagged = [(V, ratios[V][d]) for V in flags if flags[V][d]]
        if flagged:
            st = "warning"
            parts = []
            for V, r in flagged:
                times = f"{r:.0f}" if r >= 10 else f"{r:.1f}"
                where = " (in breakdown)" if np.isfinite(bv[d]) and V >= bv[d] else ""
                parts.append(f"{times}\u00d7 the reel median at {V:g} V{where}")
            note.insert(0, "leakage " + ", ".join(parts) + ": possible damage")
        if moved_max[d] > NOTE_NORMALISED:
            lo_c, hi_c = t_min[d] - ZERO_CELSIUS, t_max[d] - ZERO_CELSIUS
            when = f"{lo_c:.3g} °C" if abs(hi_c - lo_c) < 0.05 else f"{lo_c:.3g}–{hi_c:.3g} °C"
            f_txt = (f"{factor_min[d]:.3g}" if abs(factor_max[d] - factor_min[d]) < 1e-3
                     else f"{factor_min[d]:.3g}–{factor_max[d]:.3g}")
            what = "generation part" if fitted[d] else "whole current (no model)"
            note.append(f"readings at {when} normalised to {t_ref - ZERO_CELSIUS:.3g} °C: "
                        f"{what} divided by {f_txt} ({s.law})")
        status.append(st)
        notes.append("; ".join(note))

    out = pd.DataFrame({"device": names.astype(str), "status": status, "note": notes})
    for V, val in report.items():
        out[report_column(V)] = val
    with np.errstate(divide="ignore"):
        rsh = np.where(fitted, np.where(g > 0, 1.0 / g, np.inf), np.nan)
    has_gen = fitted & (ig > 0)
    out["bv_V"] = bv
    out["rsh_ohm"] = rsh
    out["igen_A"] = np.where(fitted, ig, np.nan)
    out["gen_m"] = np.where(has_gen, m, np.nan)
    out["gen_vj_V"] = np.where(fitted, GEN_VJ, np.nan)
    out["gen_n"] = np.where(fitted, GEN_N, np.nan)
    out["fit_rms_log"] = rms
    out["points"] = n_model
    out["sweep_min_V"] = v_lo
    out["sweep_max_V"] = v_hi
    out["model_max_V"] = np.where(fitted, model_max, np.nan)
    out["current_max_A"] = i_top
    out["ir_ratio_to_median"] = ratio_max
    out["sweep_t_min_C"] = t_min - ZERO_CELSIUS
    out["sweep_t_max_C"] = t_max - ZERO_CELSIUS
    out["reference_temperature_C"] = t_ref - ZERO_CELSIUS
    out["law_eg_eV"] = s.activation_energy
    out["law_xti"] = s.law_xti
    out["law_n"] = s.law_n
    return out
