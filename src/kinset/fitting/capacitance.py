"""Junction capacitance: from VNA sweeps to capacitance points, and the C–V fit.

Two fits, both vectorised across the reel:

1. :func:`sweep_capacitance` turns each Touchstone sweep into one capacitance
   point. The device admittance follows from S and the fixture
   (:func:`kinset.physics.capacitance.fixture_admittance`); the empty fixture measured
   at the same bias is subtracted as an admittance; a series R–L–C is fitted to the
   impedance over the band where the measurement is well conditioned. The model is
   linear in (R, L, 1/C), so every sweep of a job is solved at once as a stack of 3×3
   weighted normal equations.

2. :func:`fit_capacitance` fits the SPICE depletion law
   Cj = CJO/(1 + VR/VJ)^M (optionally plus a constant package capacitance CP) to every
   device's reverse-bias points, C–V table points and VNA points together, weighted by
   the instrument's capacitance accuracy. Start: for a grid of VJ the law is linear in
   (ln CJO, M) after taking logarithms, so each device's best grid point comes from
   stacked 2×2 weighted least squares. Then Levenberg–Marquardt iterations (K.
   Levenberg, Q. Appl. Math. 2, 164-168, 1944; D. W. Marquardt, J. SIAM 11(2), 431-441,
   1963, doi:10.1137/0111030) on the capacitance itself for all devices together, with
   VJ, M and CP kept inside their bounds by projection.

Conditioning of a VNA measurement (how strongly noise on S is amplified into the
impedance) is :math:`\\sigma_Z/|Z| = |Z|\\,|dY/dS|` per unit noise on S. For a
reflection measurement of a small capacitance at low frequency, |Z| ≫ Z0 and S11 ≈ 1:
the ratio grows like |Z|/(2 Z0), and the series resistance is lost in the noise. The
band kept is where this ratio is within :data:`BAND_FACTOR` of its best value in the
sweep; inside it the points are weighted by 1/σ_Z.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.fitting.batch import grouped_normal_equations, inverse_diagonal, solve_stack
from kinset.format import si
from kinset.physics.capacitance import fixture_admittance
from kinset.physics.constants import ZERO_CELSIUS

# --------------------------------------------------------------------------- VNA sweeps
# Keep frequencies whose noise amplification σ_Z/|Z| is within this factor of the
# sweep's best (rule of thumb: a point 10 times noisier carries 1 % of the weight).
BAND_FACTOR = 10.0
MIN_BAND_POINTS = 5          # the band holds at least this many best-conditioned points
MIN_FREQUENCIES = 3          # below this no R, L and C can be fitted with a residual
# Residual of the R–L–C fit, expressed as the rms noise on S it implies, above which the
# sweep does not look like a series R–L–C (a calibrated analyser is near 1e-3 or better).
POOR_S_NOISE = 1e-2
UNCERTAIN_C_REL = 1e-2       # relative standard error of C above which a point warns


def _interp_complex(x, xp, fp):
    return np.interp(x, xp, fp.real) + 1j * np.interp(x, xp, fp.imag)


def _sweep_arrays(m):
    """Device admittance, its noise gain and the frequencies of one measurement.

    Returns (frequency, Y_device, |dY/dS| combined, open admittance or None, problem).
    """
    sw = m.sweep
    z0 = sw.reference_impedance
    if np.any(np.abs(z0.imag) > 1e-9 * np.abs(z0)) or np.any(z0.real <= 0):
        return None, None, None, None, (f"{m.file}: complex or non-positive reference "
                                        f"impedance; only real ones are supported")
    f = sw.frequency
    y, dy = fixture_admittance(sw.s, z0.real, m.fixture)
    gain = np.abs(dy)
    y_open = None
    if m.open_sweep is not None:
        op = m.open_sweep
        yo, dyo = fixture_admittance(op.s, op.reference_impedance.real, m.fixture)
        if len(op.frequency) != len(f) or not np.allclose(op.frequency, f, rtol=1e-9):
            inside = (f >= op.frequency[0]) & (f <= op.frequency[-1])
            f, y, gain = f[inside], y[inside], gain[inside]
            yo = _interp_complex(f, op.frequency, yo)
            dyo = np.interp(f, op.frequency, np.abs(dyo))
        y = y - yo
        gain = np.hypot(gain, np.abs(dyo))
        y_open = yo
    return f, y, gain, y_open, ""


def sweep_capacitance(measurements: list) -> pd.DataFrame:
    """One capacitance point per VNA measurement: series R–L–C fits, all at once.

    Parameters
    ----------
    measurements : list of :class:`kinset.io.touchstone.VnaMeasurement`
        Rows of the index with their sweeps (and empty-fixture sweeps) read.

    Returns
    -------
    DataFrame
        One row per measurement: ``device, kind ('vna'), reverse_voltage [V],
        capacitance [F], capacitance_se [F], resistance [Ohm], resistance_se,
        inductance [H], band_min, band_max [Hz], band_points, fit_rms_ohm, s_noise,
        fixture, temperature [K], frequency (NaN), open_file, open_capacitance [F],
        status (ok | warning | rejected), note, source (the Touchstone file), line
        (in index.csv), index``.
    """
    n = len(measurements)
    prob = [m.problem for m in measurements]
    arrays = [None] * n
    for i, m in enumerate(measurements):
        if not prob[i] and m.sweep is not None:
            f, y, gain, y_open, p = _sweep_arrays(m)
            if p:
                prob[i] = p
            elif len(f) < MIN_FREQUENCIES:
                prob[i] = (f"{m.file}: {len(f)} frequency point(s) (with its empty fixture); "
                           f"at least {MIN_FREQUENCIES} are needed for R, L and C")
            else:
                arrays[i] = (f, y, gain, y_open)
    fit = _fit_rlc([a for a in arrays if a is not None])
    cols = {k: np.full(n, np.nan) for k in (
        "capacitance", "capacitance_se", "resistance", "resistance_se", "inductance",
        "band_min", "band_max", "band_points", "fit_rms_ohm", "s_noise", "open_capacitance")}
    good = [i for i in range(n) if arrays[i] is not None]
    for k, v in fit.items():
        cols[k][good] = v
    status, note = [], []
    for i, m in enumerate(measurements):
        if prob[i]:
            status.append("rejected")
            note.append(prob[i])
            continue
        st, words = _point_words(m, {k: v[i] for k, v in cols.items()})
        status.append(st)
        note.append(words)
        if st == "rejected":
            cols["capacitance"][i] = np.nan
    return pd.DataFrame({
        "device": [m.device for m in measurements],
        "kind": "vna",
        "reverse_voltage": [m.reverse_voltage for m in measurements],
        **cols,
        "fixture": [m.fixture for m in measurements],
        "temperature": [m.temperature for m in measurements],
        "frequency": np.nan,
        "open_file": [m.open_file for m in measurements],
        "status": status,
        "note": note,
        "source": [m.path for m in measurements],
        "line": [m.line for m in measurements],
        "index": [m.index for m in measurements],
    }, index=pd.RangeIndex(n))


def _point_words(m, r) -> tuple[str, str]:
    """Status and note of one fitted VNA point."""
    c = r["capacitance"]
    if not np.isfinite(c) or c <= 0:
        what = "after the empty fixture is removed, " if m.open_file else ""
        return "rejected", (f"{m.file}: {what}the impedance shows no capacitive reactance in "
                            f"the band {si(r['band_min'], 'Hz')}–{si(r['band_max'], 'Hz')} "
                            f"(is the diode forward biased, shorted or missing?)")
    st = "ok"
    words = [f"{m.file}: C = {si(c, 'F', 4)} from a series R–L–C fit over "
             f"{si(r['band_min'], 'Hz')}–{si(r['band_max'], 'Hz')} "
             f"({r['band_points']:.0f} frequencies)"]
    if m.open_file:
        words.append(f"empty fixture {m.open_file} removed ({si(r['open_capacitance'], 'F')})")
    elif not m.fixture_has_open:
        st = "warning"
        words.append(f"no empty-fixture measurement for the {m.fixture} fixture: its "
                     f"parasitic capacitance is not removed")
    if r["s_noise"] > POOR_S_NOISE:
        st = "warning"
        words.append(f"the impedance does not follow a series R–L–C (the residual implies "
                     f"noise of {r['s_noise']:.2g} on S)")
    if r["capacitance_se"] > UNCERTAIN_C_REL * c:
        st = "warning"
        words.append(f"poorly conditioned: C uncertain by {100 * r['capacitance_se'] / c:.2g} %")
    if not (r["resistance"] > 2 * r["resistance_se"]):
        words.append("series resistance not resolved")
    return st, "; ".join(words)


def _fit_rlc(arrays: list) -> dict[str, np.ndarray]:
    """Weighted series R–L–C fits of many impedance sweeps at once.

    ``arrays``: per sweep (frequency [Hz], device admittance [S], noise gain |dY/dS| [S],
    empty-fixture admittance or None).
    """
    k = len(arrays)
    if not k:
        return {}
    sizes = np.array([len(a[0]) for a in arrays])
    g = np.repeat(np.arange(k), sizes)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    w = 2 * np.pi * np.concatenate([a[0] for a in arrays])
    y = np.concatenate([a[1] for a in arrays])
    gain = np.concatenate([a[2] for a in arrays])
    with np.errstate(divide="ignore", invalid="ignore"):
        z = 1.0 / y
        sz = np.abs(z) ** 2 * gain             # σ_Z per unit noise on S [Ohm]
        cond = sz / np.abs(z)                  # relative noise gain
    cond = np.where(np.isfinite(cond) & (cond > 0), cond, np.inf)
    # The band: within BAND_FACTOR of the best conditioning, and at least the
    # MIN_BAND_POINTS best points.
    best = np.minimum.reduceat(cond, starts)
    order = np.lexsort((cond, g))
    rank = np.empty(len(g), dtype=int)
    rank[order] = np.arange(len(g)) - starts[g[order]]
    band = np.isfinite(cond) & ((cond <= BAND_FACTOR * best[g]) | (rank < MIN_BAND_POINTS))
    gb, wb, zb, sb = g[band], w[band], z[band], sz[band]
    nb = np.bincount(gb, minlength=k)
    w_ref = np.exp(np.bincount(gb, np.log(wb), minlength=k) / np.maximum(nb, 1))
    x = wb / w_ref[gb]
    # Rows: Re Z = R and Im Z = ωL − 1/(ωC), in units of Ohm: unknowns
    # (R, L·ω_ref, ω_ref^-1/C), each row divided by its σ_Z.
    m = len(gb)
    idx = np.concatenate([gb, gb])
    jac = np.zeros((2 * m, 3))
    jac[:m, 0] = 1.0 / sb
    jac[m:, 1] = x / sb
    jac[m:, 2] = -1.0 / (x * sb)
    target = np.concatenate([zb.real, zb.imag]) / np.concatenate([sb, sb])
    jtj, jtr = grouped_normal_equations(idx, jac, target, k)
    p = solve_stack(jtj, jtr)
    used = np.ones((k, 3), dtype=bool)
    neg_l = ~(p[:, 1] >= 0)                   # negative or unresolved inductance: L = 0
    if neg_l.any():
        keep = [0, 2]
        sub = solve_stack(jtj[neg_l][:, keep][:, :, keep], jtr[neg_l][:, keep])
        p[neg_l] = np.column_stack([sub[:, 0], np.zeros(neg_l.sum()), sub[:, 1]])
        used[neg_l, 1] = False
    resid = np.einsum("ij,ij->i", jac, p[idx]) - target
    ssr = np.bincount(idx, resid ** 2, minlength=k)
    dof = 2 * nb - used.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        noise = np.sqrt(ssr / np.maximum(dof, 1))
        jtj_u = jtj * (used[:, :, None] & used[:, None, :]) + np.einsum(
            "ki,ij->kij", ~used, np.eye(3))
        cov = inverse_diagonal(jtj_u, rcond=1e-15) * noise[:, None] ** 2
        se = np.where(used, np.sqrt(cov), 0.0)
        d = p[:, 2] * w_ref                     # 1/C [1/F]
        c = 1.0 / d
        zfit = p[gb, 0] + 1j * (p[gb, 1] * x - p[gb, 2] / x)
        rms = np.sqrt(np.bincount(gb, np.abs(zb - zfit) ** 2, minlength=k) / np.maximum(nb, 1))
    # Open's capacitance at the band's centre, for the note: Im(Y)/ω.
    open_c = np.full(k, np.nan)
    for i, a in enumerate(arrays):
        if a[3] is not None:
            sel = band[starts[i]:starts[i] + sizes[i]]
            if sel.any():                       # no point in the band: no note value
                open_c[i] = np.median(a[3].imag[sel] / (2 * np.pi * a[0][sel]))
    return {
        "capacitance": c, "capacitance_se": np.abs(se[:, 2] * w_ref) * c ** 2,
        "resistance": p[:, 0], "resistance_se": se[:, 0],
        "inductance": p[:, 1] / w_ref,
        "band_min": np.fmin.reduceat(np.where(band, w, np.nan), starts) / (2 * np.pi),
        "band_max": np.fmax.reduceat(np.where(band, w, np.nan), starts) / (2 * np.pi),
        "band_points": nb.astype(float), "fit_rms_ohm": rms, "s_noise": noise,
        "open_capacitance": open_c,
    }


# --------------------------------------------------------------------------- C–V fit
VJ_RANGE_V = (0.1, 3.0)       # [V] default bounds of VJ (the reel.yaml key overrides)
M_BOUNDS = (0.01, 3.0)        # grading coefficient: abrupt 1/2, graded 1/3, hyperabrupt to ~2
USUAL_M_MAX = 2.5             # above this a depletion law is suspicious
VJ_GRID = 64                  # VJ values tried for the start
POOR_FIT = 1.0                # weighted rms residual (in units of the accuracy) that warns
SOURCES_DISAGREE = 1.0        # mean difference of C–V and VNA points, in accuracies, that warns
TEMPERATURE_WARN_K = 5.0      # [K] points this far from the reference are not corrected
SAME_BIAS_V = 1e-6            # [V] biases closer than this count as one


@dataclass
class CapacitanceSettings:
    """What the C–V fit needs from reel.yaml (all SI)."""

    reference_temperature: float        # [K]
    ambient_temperature: float          # [K], for points without a temperature
    accuracy_gain: float = 1e-2         # [1] ± gain × reading
    accuracy_offset: float = 2e-14      # [F] ± offset
    package_capacitance: bool = False   # fit a constant CP in parallel with the junction
    vj_range: tuple[float, float] = VJ_RANGE_V   # [V]


def _law(p, vr):
    """Capacitance and its derivatives w.r.t. (ln CJO, ln VJ, M, CP) per point."""
    ln_c0, ln_vj, m, cp = p[:, 0], p[:, 1], p[:, 2], p[:, 3]
    vj = np.exp(ln_vj)
    t = vr / vj
    ln_u = np.log1p(t)
    cj = np.exp(ln_c0 - m * ln_u)
    jac = np.stack([cj, cj * m * t / (1.0 + t), -cj * ln_u, np.ones_like(cj)], axis=1)
    return cj + cp, jac


def _start(idx, k, vr, c, sigma, vj_range):
    """Best (ln CJO, ln VJ, M) per device on a VJ grid, from weighted log-linear fits.

    For a fixed VJ, ln C = ln CJO − M ln(1 + VR/VJ) is a straight line in
    x = ln(1 + VR/VJ): each device's weighted 2×2 least squares is solved from sums
    gathered with ``bincount``, one grid value at a time for all devices.
    """
    y = np.log(c)
    wt = (c / sigma) ** 2                       # 1/σ² of ln C
    s0 = np.bincount(idx, wt, minlength=k)
    sy = np.bincount(idx, wt * y, minlength=k)
    syy = np.bincount(idx, wt * y * y, minlength=k)
    best = np.full(k, np.inf)
    out = np.zeros((k, 4))
    for vj in np.geomspace(vj_range[0], vj_range[1], VJ_GRID):
        x = np.log1p(vr / vj)
        sx = np.bincount(idx, wt * x, minlength=k)
        sxx = np.bincount(idx, wt * x * x, minlength=k)
        sxy = np.bincount(idx, wt * x * y, minlength=k)
        with np.errstate(invalid="ignore", divide="ignore"):
            m = np.clip(-(s0 * sxy - sx * sy) / (s0 * sxx - sx * sx), *M_BOUNDS)
            a = (sy + m * sx) / s0
            ssr = syy - 2 * a * sy + 2 * m * sxy + a * a * s0 - 2 * a * m * sx + m * m * sxx
        take = np.isfinite(ssr) & (ssr < best)
        best[take] = ssr[take]
        out[take, 0], out[take, 1], out[take, 2] = a[take], np.log(vj), m[take]
    none = ~np.isfinite(best)
    out[none] = [np.log(c.max()), np.log(np.sqrt(vj_range[0] * vj_range[1])), 0.5, 0.0]
    return out


def _levenberg_marquardt(idx, k, vr, c, sigma, p0, free, lower, upper, max_iter=200):
    """Projected LM on weighted capacitance residuals for all devices at once.

    ``free`` (4,) bool selects the parameters fitted; the others stay at ``p0``.
    Returns parameters (k, 4), weighted SSR (k,) and the final Jacobian rows.
    """
    p = p0.copy()
    cols = np.flatnonzero(free)
    q = len(cols)

    def evaluate(par):
        model, jac = _law(par[idx], vr)
        return (model - c) / sigma, jac[:, cols] / sigma[:, None]

    r, jac = evaluate(p)
    ssr = np.bincount(idx, r * r, minlength=k)
    lam = np.full(k, 1e-3)
    active = np.isfinite(ssr)
    eye = np.eye(q)[None]
    for _ in range(max_iter):
        if not active.any():
            break
        jtj, jtr = grouped_normal_equations(idx, jac, r, k)
        diag = np.einsum("kii->ki", jtj)
        step = solve_stack(jtj + lam[:, None, None] * eye * diag[:, :, None], -jtr)
        bad = ~np.isfinite(step).all(axis=1)
        step[bad | ~active] = 0.0
        small = (np.abs(step) <= 1e-12 * (1.0 + np.abs(p[:, cols]))).all(axis=1)
        trial = p.copy()
        trial[:, cols] += step
        trial = np.clip(trial, lower, upper)
        r_new, jac_new = evaluate(trial)
        new = np.bincount(idx, r_new * r_new, minlength=k)
        better = active & (new < ssr)
        gain = np.where(better, (ssr - new) / np.maximum(ssr, 1e-300), 0.0)
        p[better] = trial[better]
        lam = np.where(better, lam / 5.0, lam * 5.0)
        ssr = np.where(better, new, ssr)
        row_better = better[idx]
        r = np.where(row_better, r_new, r)
        jac = np.where(row_better[:, None], jac_new, jac)
        done = (better & (gain < 1e-12)) | (lam > 1e10) | bad | (small & ~better)
        active &= ~done
    return p, ssr, jac


def _segments(codes, n):
    counts = np.bincount(codes, minlength=n)
    return counts, np.concatenate([[0], np.cumsum(counts)[:-1]])


def _distinct(codes, x, mask, n):
    sel = np.flatnonzero(mask)
    order = np.lexsort((x[sel], codes[sel]))
    d, v = codes[sel][order], x[sel][order]
    new = np.ones(len(d), dtype=bool)
    new[1:] = (d[1:] != d[:-1]) | (v[1:] != v[:-1])
    return np.bincount(d[new], minlength=n)


def fit_capacitance(points: pd.DataFrame, settings: CapacitanceSettings
                    ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Fit CJO, VJ, M (and CP) of every device to its capacitance points.

    Parameters
    ----------
    points : DataFrame
        ``device, kind ('cv' | 'vna'), reverse_voltage [V], capacitance [F],
        frequency [Hz], temperature [K] (NaN: ambient), source, line``, and for VNA
        points ``status`` and ``note`` (and the other columns of
        :func:`sweep_capacitance`). Rows with an empty device (Touchstone files the index
        does not name) are reported in the points table only.
    settings : CapacitanceSettings

    Returns
    -------
    devices : DataFrame
        One row per device, sorted: ``device, status, note, cj0_F, vj_V, m, fit_rms_F``,
        standard errors ``cj0_F_se, vj_V_se, m_se``, ``cp_F, cp_F_se`` (when the package
        capacitance is fitted), ``points, cv_points, vna_points, vr_min_V, vr_max_V,
        sources, reference_temperature_C``.
    points : DataFrame
        Every capacitance point in SI with ``used`` (0/1) and the fit residual, for the
        report and for serving devices that have too few biases for a fit.
    """
    s = settings
    pts = points.reset_index(drop=True)
    for col, default in (("kind", "cv"), ("status", ""), ("note", ""), ("frequency", np.nan),
                         ("temperature", np.nan)):
        if col not in pts:
            pts[col] = default
        elif isinstance(default, str):
            pts[col] = pts[col].where(pts[col].notna(), default).astype(str)
    dev_all = pts["device"].astype(str).to_numpy()
    known = dev_all != ""
    codes, names = pd.factorize(dev_all[known], sort=True)
    n_dev = len(names)
    rows = np.flatnonzero(known)
    order = rows[np.argsort(codes, kind="stable")]
    codes = np.sort(codes, kind="stable")
    p = pts.iloc[order].reset_index(drop=True)
    vr = p["reverse_voltage"].to_numpy(dtype=float)
    cap = p["capacitance"].to_numpy(dtype=float)
    kind = p["kind"].astype(str).to_numpy()
    pstat = p["status"].astype(str).to_numpy()
    vna = kind == "vna"
    rejected = vna & (pstat == "rejected")
    finite = np.isfinite(vr) & np.isfinite(cap) & ~rejected
    nonpos = finite & (cap <= 0)
    forward = finite & (cap > 0) & (vr < 0)
    used = finite & (cap > 0) & (vr >= 0)
    temp = p["temperature"].to_numpy(dtype=float)
    temp = np.where(np.isfinite(temp), temp, s.ambient_temperature)
    sigma = s.accuracy_gain * np.abs(cap) + s.accuracy_offset
    sigma = np.where(sigma > 0, sigma, np.abs(cap) * 1e-3 + 1e-18)

    n_par = 4 if s.package_capacitance else 3
    distinct = _distinct(codes, np.round(vr / SAME_BIAS_V), used, n_dev)
    fit_dev = distinct >= n_par
    params = np.full((n_dev, 4), np.nan)
    se = np.full((n_dev, 4), np.nan)
    wrms = np.full(n_dev, np.nan)
    model = np.full(len(p), np.nan)
    lo = np.array([-np.inf, np.log(s.vj_range[0]), M_BOUNDS[0], 0.0])
    hi = np.array([np.inf, np.log(s.vj_range[1]), M_BOUNDS[1], 0.0])
    fit_rows = used & fit_dev[codes]
    if fit_rows.any():
        sel = np.flatnonzero(fit_rows)
        ids = np.flatnonzero(fit_dev)
        remap = np.full(n_dev, -1)
        remap[ids] = np.arange(len(ids))
        idx, k = remap[codes[sel]], len(ids)
        v, c, sg = vr[sel], cap[sel], sigma[sel]
        p0 = _start(idx, k, v, c, sg, s.vj_range)
        free = np.array([True, True, True, False])
        par, ssr, jac = _levenberg_marquardt(idx, k, v, c, sg, p0, free, lo, hi)
        if s.package_capacitance:
            cmin = np.fmin.reduceat(c, _segments(idx, k)[1])
            hi4 = np.broadcast_to(hi, (k, 4)).copy()
            hi4[:, 3] = cmin
            lo4 = np.broadcast_to(lo, (k, 4))
            free = np.ones(4, dtype=bool)
            par, ssr, jac = _levenberg_marquardt(idx, k, v, c, sg, par, free, lo4, hi4)
        jtj, _ = grouped_normal_equations(idx, jac, np.zeros(len(idx)), k)
        m_k = np.bincount(idx, minlength=k)
        dof = m_k - n_par
        with np.errstate(invalid="ignore", divide="ignore"):
            s2 = np.where(dof > 0, ssr / np.maximum(dof, 1), np.nan)
            cov = inverse_diagonal(jtj, rcond=1e-15) * s2[:, None]
        ok = np.isfinite(par).all(axis=1) & np.isfinite(ssr)
        params[ids] = np.where(ok[:, None], par, np.nan)
        se[ids, :n_par] = np.sqrt(cov)
        wrms[ids] = np.sqrt(ssr / m_k)
        model[sel] = _law(par[idx], v)[0]

    resid = cap - model
    counts, starts = _segments(codes, n_dev)

    def per_dev(x, mask, fn=np.add):
        y = np.where(mask, x, 0.0 if fn is np.add else np.nan)
        return fn.reduceat(y, starts) if len(y) else np.zeros(n_dev)

    n_used = per_dev(np.ones(len(p)), used).astype(int)
    n_cv = per_dev(np.ones(len(p)), used & ~vna).astype(int)
    n_vna = per_dev(np.ones(len(p)), used & vna).astype(int)
    ssr_f = per_dev(resid ** 2, fit_rows)
    rms_f = np.where(fit_dev, np.sqrt(ssr_f / np.maximum(n_used, 1)), np.nan)
    vr_min = per_dev(vr, used, np.fmin)
    vr_max = per_dev(vr, used, np.fmax)
    dt = per_dev(np.abs(temp - s.reference_temperature), used, np.fmax)
    z = resid / sigma
    mean_cv = per_dev(z, fit_rows & ~vna) / np.maximum(n_cv, 1)
    mean_vna = per_dev(z, fit_rows & vna) / np.maximum(n_vna, 1)
    rel_cv = per_dev(resid / cap, fit_rows & ~vna) / np.maximum(n_cv, 1)
    rel_vna = per_dev(resid / cap, fit_rows & vna) / np.maximum(n_vna, 1)
    n_nonpos, n_forward = per_dev(np.ones(len(p)), nonpos), per_dev(np.ones(len(p)), forward)
    src = p["source"].astype(str).to_numpy()
    notes_of = p["note"].astype(str).to_numpy()

    status, notes = [], []
    for d in range(n_dev):
        a, b = starts[d], starts[d] + counts[d]
        note: list[str] = []
        st = "ok"
        bad_vna = [notes_of[i] for i in range(a, b) if rejected[i]]
        warn_vna = [notes_of[i] for i in range(a, b) if vna[i] and pstat[i] == "warning"]
        if n_nonpos[d]:
            note.append(f"{n_nonpos[d]:.0f} point(s) with zero or negative capacitance ignored")
        if n_forward[d]:
            note.append(f"{n_forward[d]:.0f} forward-bias point(s) left out (the depletion law "
                        f"is fitted on reverse bias)")
        if n_used[d] == 0:
            st = "rejected"
            note.insert(0, "no usable capacitance point")
        elif not fit_dev[d]:
            st = "warning"
            biases = sorted(set(np.round(vr[a:b][used[a:b]], 6)))
            note.insert(0, f"only {len(biases)} reverse bias(es) "
                        f"({', '.join(f'{x:g} V' for x in biases)}): too few to fit CJO, VJ, M"
                        f"{' and CP' if n_par == 4 else ''}; the measured values serve only "
                        f"at their own bias")
        elif not np.isfinite(params[d]).all():
            st = "rejected"
            note.insert(0, "the fit did not converge: the points do not follow a depletion law")
        else:
            if n_cv[d] and n_vna[d]:
                agree = rel_vna[d] - rel_cv[d]
                note.insert(0, f"fitted to {n_cv[d]} C–V table and {n_vna[d]} VNA points "
                            f"together (one fit, each point weighted by the capacitance "
                            f"accuracy); VNA points lie {100 * agree:+.2g} % from the C–V "
                            f"points on average")
                if abs(mean_vna[d] - mean_cv[d]) > SOURCES_DISAGREE:
                    st = "warning"
                    note.append("C–V table and VNA points disagree by more than the "
                                "capacitance accuracy (check the open correction of both)")
            else:
                note.insert(0, f"fitted to {n_used[d]} {'VNA' if n_vna[d] else 'C–V table'} "
                            f"points, {vr_min[d]:g}–{vr_max[d]:g} V")
            vj = np.exp(params[d, 1])
            if params[d, 1] <= lo[1] + 1e-9 or params[d, 1] >= hi[1] - 1e-9:
                st = "warning"
                note.append(f"VJ at the bound {vj:.3g} V of its range "
                            f"{s.vj_range[0]:g}–{s.vj_range[1]:g} V: VJ and M are not "
                            f"separately resolved by these biases")
            if params[d, 2] <= M_BOUNDS[0] + 1e-9 or params[d, 2] > USUAL_M_MAX:
                st = "warning"
                note.append(f"grading coefficient M = {params[d, 2]:.3g} is outside the "
                            f"usual {M_BOUNDS[0]:g}–{USUAL_M_MAX:g}")
            if wrms[d] > POOR_FIT:
                cv_files = sorted({Path(src[i]).name for i in range(a, b) if not vna[i]})
                if len(cv_files) > 1:
                    # Tables that do not agree with each other: one id on two parts?
                    st = "rejected"
                    note.insert(0, f"C–V points in {len(cv_files)} files "
                                f"({', '.join(cv_files)}) disagree: the fit to all of them is "
                                f"off by {si(rms_f[d], 'F')} rms, beyond the capacitance "
                                f"accuracy; one id on two parts? Check the files")
                else:
                    st = "warning"
                    note.append(f"poor fit: rms residual {si(rms_f[d], 'F')} exceeds the "
                                f"capacitance accuracy")
        if bad_vna:
            if st == "ok":
                st = "warning"
            note.append(f"Touchstone file{'s' if len(bad_vna) > 1 else ''} rejected: "
                        + "; ".join(bad_vna))
        if warn_vna:
            if st == "ok":
                st = "warning"
            note.append("; ".join(warn_vna))
        files = sorted({src[i] for i in range(a, b) if not vna[i]})
        if len(files) > 1:
            note.append(f"C–V points from {len(files)} files combined")
        if n_used[d] and dt[d] > TEMPERATURE_WARN_K:
            if st == "ok":
                st = "warning"
            note.append(f"measured up to {dt[d]:.3g} K away from the reference temperature; "
                        f"capacitance is not corrected for temperature")
        status.append(st)
        notes.append("; ".join(note))

    out = {
        "device": names.astype(str), "status": status, "note": notes,
        "cj0_F": np.exp(params[:, 0]), "vj_V": np.exp(params[:, 1]), "m": params[:, 2],
        "fit_rms_F": rms_f,
        "cj0_F_se": np.exp(params[:, 0]) * se[:, 0], "vj_V_se": np.exp(params[:, 1]) * se[:, 1],
        "m_se": se[:, 2],
    }
    if s.package_capacitance:
        out.update({"cp_F": params[:, 3], "cp_F_se": se[:, 3]})
    out.update({
        "points": n_used, "cv_points": n_cv, "vna_points": n_vna,
        "vr_min_V": vr_min, "vr_max_V": vr_max,
        "sources": np.where(n_cv > 0, np.where(n_vna > 0, "cv+vna", "cv"),
                            np.where(n_vna > 0, "vna", "")),
        "reference_temperature_C": s.reference_temperature - ZERO_CELSIUS,
    })
    devices = pd.DataFrame(out)
    table = _points_table(pd.concat([p, pts.iloc[np.flatnonzero(~known)]], ignore_index=True),
                          np.concatenate([used, np.zeros((~known).sum(), dtype=bool)]),
                          np.concatenate([resid, np.full((~known).sum(), np.nan)]))
    return devices, table


def _points_table(p: pd.DataFrame, used: np.ndarray, resid: np.ndarray) -> pd.DataFrame:
    """The points in the SI column names of the result tables."""
    col = lambda name: p[name].to_numpy() if name in p else np.full(len(p), np.nan)  # noqa: E731
    text = lambda name: (p[name].where(p[name].notna(), "").astype(str).to_numpy()  # noqa: E731
                         if name in p else np.full(len(p), "", dtype=object))
    status = np.where(text("kind") == "vna", text("status"), "ok")
    status = np.where((status == "ok") & ~used, "unused", status)
    return pd.DataFrame({
        "device": text("device"), "kind": text("kind"),
        "reverse_voltage_V": col("reverse_voltage"), "capacitance_F": col("capacitance"),
        "used": used.astype(int), "residual_F": resid, "status": status, "note": text("note"),
        "frequency_Hz": col("frequency"),
        "temperature_C": col("temperature") - ZERO_CELSIUS,
        "fixture": text("fixture"),
        "capacitance_F_se": col("capacitance_se"), "rs_ohm": col("resistance"),
        "ls_H": col("inductance"), "band_min_Hz": col("band_min"),
        "band_max_Hz": col("band_max"), "band_points": col("band_points"),
        "fit_rms_ohm": col("fit_rms_ohm"), "s_noise": col("s_noise"),
        "open_file": text("open_file"),
        "open_capacitance_F": col("open_capacitance"),
        "source": text("source"), "line": col("line"),
    })
