"""Junction capacitance: the C–V fit of every device to its capacitance points.

:func:`fit_capacitance` fits the SPICE depletion law Cj = CJO/(1 + VR/VJ)^M (optionally
plus a constant package capacitance CP) to every device's reverse-bias points, C–V table
points and VNA points (one per Touchstone file, from the series R–L–C element fit of
:mod:`kinset.fitting.touchstone`) together, weighted by the instrument's capacitance
accuracy. Start: for a grid of VJ the law is linear in (ln CJO, M) after taking
logarithms, so each device's best grid point comes from stacked 2×2 weighted least
squares. Then Levenberg–Marquardt iterations (K. Levenberg, Q. Appl. Math. 2, 164-168,
1944; D. W. Marquardt, J. SIAM 11(2), 431-441, 1963, doi:10.1137/0111030) on the
capacitance itself for all devices together, with VJ, M and CP kept inside their bounds
by projection.

Stages: :func:`_prepare` (points sorted by device once, with the masks of what enters
the fit), :func:`_solve` (arrays in, parameters out), :func:`_summarise` and
:func:`_diagnose` (per-device figures through :class:`kinset.fitting.batch.Groups`, and
the codes of :data:`kinset.fitting.capacitance_notes.CAPACITANCE` as findings), :func:`_tables` (status, note and
``reason_code`` composed once by :func:`kinset.outcomes.compose`).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.fitting.batch import (Groups, correlations, grouped_normal_equations, inverse_stack,
                                  solve_stack)
from kinset.fitting.capacitance_notes import CAPACITANCE
from kinset.fitting.plausible import CAPACITANCE as PLAUSIBLE_CAPACITANCE, beyond, column_names
from kinset.fitting.touchstone import point_status
from kinset.format import si
from kinset.outcomes import Finding, compose
from kinset.si import ZERO_CELSIUS

# --------------------------------------------------------------------------- C–V fit
VJ_RANGE_V = (0.1, 3.0)       # [V] default bounds of VJ (the reel.yaml key overrides)
M_BOUNDS = (0.01, 3.0)        # grading coefficient: abrupt 1/2, graded 1/3, hyperabrupt to ~2
USUAL_M_MAX = 2.5             # above this a depletion law is suspicious
VJ_GRID = 64                  # VJ values tried for the start
POOR_FIT = 1.0                # weighted rms residual (in units of the accuracy) that warns
SOURCES_DISAGREE = 1.0        # mean difference of C–V and VNA points, in accuracies, that warns
TEMPERATURE_WARN_K = 5.0      # [K] points this far from the reference are not corrected
SAME_BIAS_V = 1e-6            # [V] biases closer than this count as one
# VJ and M trade off against each other over a narrow bias range: not determined when VJ's
# relative standard error exceeds VJ_REL_SE or M's standard error exceeds M_SE (about a
# ±20 % / ±0.1 interval at 95 %). Over the demo's 0–10 V they are below 4.3 % and 0.009.
VJ_REL_SE = 0.10
M_SE = 0.05


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



def _fit_law(idx, k, vr, c, sigma, s: CapacitanceSettings, lo, hi):
    """Start on the VJ grid, then LM on (ln CJO, ln VJ, M), then with CP when it is fitted.

    Returns parameters (k, 4), weighted SSR (k,) and the final Jacobian rows.
    """
    p0 = _start(idx, k, vr, c, sigma, s.vj_range)
    free = np.array([True, True, True, False])
    par, ssr, jac = _levenberg_marquardt(idx, k, vr, c, sigma, p0, free, lo, hi)
    if s.package_capacitance:
        hi4 = np.broadcast_to(hi, (k, 4)).copy()
        hi4[:, 3] = Groups(idx, k).min(c)       # CP below the smallest capacitance
        lo4 = np.broadcast_to(lo, (k, 4))
        free = np.ones(4, dtype=bool)
        par, ssr, jac = _levenberg_marquardt(idx, k, vr, c, sigma, par, free, lo4, hi4)
    return par, ssr, jac


@dataclass
class _Points:
    """The points of named devices sorted by device once, and which of them the fit uses."""

    frame: pd.DataFrame          # points of named devices, sorted by device
    rest: pd.DataFrame           # points of no device (Touchstone files no index row names)
    names: np.ndarray            # device ids, sorted
    groups: Groups               # per-device reductions over ``frame``
    vr: np.ndarray               # [V] reverse voltage
    cap: np.ndarray              # [F]
    temp: np.ndarray             # [K], ambient where not given
    sigma: np.ndarray            # [F] capacitance accuracy
    vna: np.ndarray              # a VNA point (else a C–V table point)
    rejected: np.ndarray         # a VNA point whose codes reject it
    warned: np.ndarray           # a VNA point whose codes warn
    nonpos: np.ndarray           # zero or negative capacitance
    forward: np.ndarray          # forward bias
    used: np.ndarray             # enters the fit (if the device has enough biases)
    implausible: Finding         # C–V readings no small-signal part gives (rejects the part)


@dataclass
class _Fit:
    """What the solve gives per device (parameters in the fit's units) and per point."""

    n_par: int
    fit_dev: np.ndarray          # the device has enough distinct biases for a fit
    params: np.ndarray           # (n, 4) ln CJO, ln VJ, M, CP (NaN: no fit)
    se: np.ndarray               # (n, 4) their standard errors
    corr: np.ndarray             # (n, 6) their correlations, upper triangle in row order
    wrms: np.ndarray             # weighted rms residual, in accuracies
    model: np.ndarray            # [F] the fitted law at each point (NaN where not fitted)
    lo: np.ndarray               # bounds of the parameters
    hi: np.ndarray


def fit_capacitance(points: pd.DataFrame, settings: CapacitanceSettings
                    ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Fit CJO, VJ, M (and CP) of every device to its capacitance points.

    Parameters
    ----------
    points : DataFrame
        ``device, kind ('cv' | 'vna'), reverse_voltage [V], capacitance [F],
        frequency [Hz], temperature [K] (NaN: ambient), source, line``, and for VNA
        points ``status``, ``note`` and ``reason_code`` (and the other columns of
        :func:`kinset.fitting.touchstone.fit_touchstone`; which VNA points are rejected or
        warn is read from their codes). Rows with an empty device (Touchstone files the
        index does not name) are reported in the points table only.
    settings : CapacitanceSettings

    Returns
    -------
    devices : DataFrame
        One row per device, sorted: ``device, status, note, reason_code, cj0_F, vj_V, m,
        fit_rms_F``, standard errors ``cj0_F_se, vj_V_se, m_se``, ``cp_F, cp_F_se`` (when
        the package capacitance is fitted), ``points, cv_points, vna_points, vr_min_V,
        vr_max_V, sources, reference_temperature_C``.
    points : DataFrame
        Every capacitance point in SI with ``used`` (0/1), the fit residual and, for VNA
        points, their ``reason_code``, for the report and for serving devices that have
        too few biases for a fit.
    """
    pt = _prepare(points, settings)
    fit = _solve(pt, settings)
    stats = _summarise(pt, fit, settings)
    return _tables(pt, fit, stats, _diagnose(pt, fit, stats, settings), settings)


def _prepare(points: pd.DataFrame, s: CapacitanceSettings) -> _Points:
    """Default columns, points sorted by device, the masks of what the fit may use."""
    pts = points.reset_index(drop=True)
    for col, default in (("kind", "cv"), ("status", ""), ("note", ""), ("reason_code", ""),
                         ("frequency", np.nan), ("temperature", np.nan)):
        if col not in pts:
            pts[col] = default
        elif isinstance(default, str):
            pts[col] = pts[col].where(pts[col].notna(), default).astype(str)
    dev_all = pts["device"].astype(str).to_numpy()
    known = dev_all != ""
    codes, names = pd.factorize(dev_all[known], sort=True)
    order = np.flatnonzero(known)[np.argsort(codes, kind="stable")]
    p = pts.iloc[order].reset_index(drop=True)
    vr = p["reverse_voltage"].to_numpy(dtype=float)
    cap = p["capacitance"].to_numpy(dtype=float)
    vna = p["kind"].astype(str).to_numpy() == "vna"
    worst = point_status(p["reason_code"])
    rejected = vna & (worst == "rejected")
    finite = np.isfinite(vr) & np.isfinite(cap) & ~rejected
    temp = p["temperature"].to_numpy(dtype=float)
    sigma = s.accuracy_gain * np.abs(cap) + s.accuracy_offset
    groups = Groups(np.sort(codes, kind="stable"), len(names))
    columns = p["column_capacitance"].to_numpy(dtype=object) if "column_capacitance" in p \
        else np.full(len(p), None, dtype=object)
    implausible = beyond("implausible_capacitance", PLAUSIBLE_CAPACITANCE, groups, cap,
                         column_names(columns, PLAUSIBLE_CAPACITANCE), finite & ~vna)
    finite &= ~groups.each(implausible.where)
    return _Points(
        frame=p, rest=pts.iloc[np.flatnonzero(~known)], names=np.asarray(names.astype(str)),
        groups=groups, vr=vr, cap=cap, implausible=implausible,
        temp=np.where(np.isfinite(temp), temp, s.ambient_temperature),
        sigma=np.where(sigma > 0, sigma, np.abs(cap) * 1e-3 + 1e-18),
        vna=vna, rejected=rejected, warned=vna & (worst == "warning"),
        nonpos=finite & (cap <= 0), forward=finite & (cap > 0) & (vr < 0),
        used=finite & (cap > 0) & (vr >= 0))


def _solve(pt: _Points, s: CapacitanceSettings) -> _Fit:
    """The depletion law of every device with enough distinct reverse biases."""
    g = pt.groups
    n_par = 4 if s.package_capacitance else 3
    fit_dev = g.distinct(np.round(pt.vr / SAME_BIAS_V), pt.used) >= n_par
    out = _Fit(n_par=n_par, fit_dev=fit_dev, params=np.full((g.n, 4), np.nan),
               se=np.full((g.n, 4), np.nan), corr=np.full((g.n, 6), np.nan),
               wrms=np.full(g.n, np.nan),
               model=np.full(len(pt.vr), np.nan),
               lo=np.array([-np.inf, np.log(s.vj_range[0]), M_BOUNDS[0], 0.0]),
               hi=np.array([np.inf, np.log(s.vj_range[1]), M_BOUNDS[1], 0.0]))
    fit_rows = pt.used & fit_dev[g.codes]
    if not fit_rows.any():
        return out
    sel = np.flatnonzero(fit_rows)
    ids = np.flatnonzero(fit_dev)
    remap = np.full(g.n, -1)
    remap[ids] = np.arange(len(ids))
    idx, k = remap[g.codes[sel]], len(ids)
    v, c = pt.vr[sel], pt.cap[sel]
    par, ssr, jac = _fit_law(idx, k, v, c, pt.sigma[sel], s, out.lo, out.hi)
    jtj, _ = grouped_normal_equations(idx, jac, np.zeros(len(idx)), k)
    m_k = Groups(idx, k).counts
    dof = m_k - n_par
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(dof > 0, ssr / np.maximum(dof, 1), np.nan)
        inv = inverse_stack(jtj, rcond=1e-15)
        cov = np.einsum("kii->ki", inv) * s2[:, None]
    ok = np.isfinite(par).all(axis=1) & np.isfinite(ssr)
    out.params[ids] = np.where(ok[:, None], par, np.nan)
    out.se[ids, :n_par] = np.sqrt(cov)
    full = np.full((k, 4, 4), np.nan)
    full[:, :n_par, :n_par] = inv
    out.corr[ids] = correlations(full)
    out.wrms[ids] = np.sqrt(ssr / m_k)
    out.model[sel] = _law(par[idx], v)[0]
    return out


def _summarise(pt: _Points, fit: _Fit, s: CapacitanceSettings) -> dict[str, np.ndarray]:
    """Per-device figures of the table and the diagnosis (one Groups reduction each)."""
    g, vna, used = pt.groups, pt.vna, pt.used
    fit_rows = used & fit.fit_dev[g.codes]
    resid = pt.cap - fit.model
    n_used, n_cv, n_vna = g.count(used), g.count(used & ~vna), g.count(used & vna)

    def mean(x, mask, count):
        return g.sum(np.where(mask, x, 0.0)) / np.maximum(count, 1)

    src = pt.frame["source"].astype(str).to_numpy()
    files, paths = pd.factorize(src)
    # Each distinct file's name once (not per point: 2.3 s of pathlib on a 10,000-part
    # reel); the codes are those of factorizing the rows' names, first seen first.
    cv_names = pd.factorize(np.asarray([Path(f).name for f in paths], dtype=object))[0][files]
    z, rel = resid / pt.sigma, resid / pt.cap
    return {
        "resid": resid, "n_used": n_used, "n_cv": n_cv, "n_vna": n_vna,
        "rms_f": np.where(fit.fit_dev, np.sqrt(g.sum(np.where(fit_rows, resid ** 2, 0.0))
                                               / np.maximum(n_used, 1)), np.nan),
        "vr_min": g.min(np.where(used, pt.vr, np.nan)),
        "vr_max": g.max(np.where(used, pt.vr, np.nan)),
        "dt": g.max(np.where(used, np.abs(pt.temp - s.reference_temperature), np.nan)),
        "mean_cv": mean(z, fit_rows & ~vna, n_cv), "mean_vna": mean(z, fit_rows & vna, n_vna),
        "rel_cv": mean(rel, fit_rows & ~vna, n_cv), "rel_vna": mean(rel, fit_rows & vna, n_vna),
        "n_nonpos": g.count(pt.nonpos), "n_forward": g.count(pt.forward),
        "n_rejected": g.count(pt.rejected), "n_warned": g.count(pt.warned),
        "cv_files": g.distinct(files, ~vna),
        "cv_names": g.distinct(cv_names, ~vna),
    }


def _diagnose(pt: _Points, fit: _Fit, st: dict, s: CapacitanceSettings) -> list[Finding]:
    """The codes of every device, in the order of its note (the deciding one first)."""
    g, par, lo, hi = pt.groups, fit.params, fit.lo, fit.hi
    some = st["n_used"] > 0
    few = some & ~fit.fit_dev
    fitted = some & fit.fit_dev & np.isfinite(par).all(axis=1)
    both = fitted & (st["n_cv"] > 0) & (st["n_vna"] > 0)
    poor = fitted & (fit.wrms > POOR_FIT)
    with np.errstate(invalid="ignore"):
        vj_bound = fitted & ((par[:, 1] <= lo[1] + 1e-9) | (par[:, 1] >= hi[1] - 1e-9))
        m_odd = fitted & ((par[:, 2] <= M_BOUNDS[0] + 1e-9) | (par[:, 2] > USUAL_M_MAX))
        se = fit.se
        loose = fitted & ~vj_bound & ~poor & ~((se[:, 1] <= VJ_REL_SE) & (se[:, 2] <= M_SE))
        disagree = both & (np.abs(st["mean_vna"] - st["mean_cv"]) > SOURCES_DISAGREE)
    src = pt.frame["source"].astype(str).to_numpy()
    notes = pt.frame["note"].astype(str).to_numpy()

    def block(d):
        return slice(g.starts[d], g.starts[d] + g.counts[d])

    def biases(d):
        return sorted(set(np.round(pt.vr[block(d)][pt.used[block(d)]], 6)))

    def joined(mask):
        return lambda d: "; ".join(notes[block(d)][mask[block(d)]])

    rms = {"rms": lambda d: si(st["rms_f"][d], "F")}
    return [
        pt.implausible,
        Finding("cv_files_disagree", poor & (st["cv_names"] > 1), {
            "count": st["cv_names"], **rms, "files": lambda d: ", ".join(sorted(
                {Path(f).name for f in src[block(d)][~pt.vna[block(d)]]}))}),
        Finding("no_usable_point", ~some & ~pt.implausible.where),
        Finding("too_few_biases", few, {
            "count": lambda d: len(biases(d)),
            "biases": lambda d: ", ".join(f"{x:g} V" for x in biases(d)),
            "parameters": "CJO, VJ, M" + (" and CP" if fit.n_par == 4 else "")}),
        Finding("fit_not_converged", some & fit.fit_dev & ~fitted),
        Finding("fitted_cv_vna", both, {
            "cv_points": st["n_cv"], "vna_points": st["n_vna"],
            "offset_pct": 100 * (st["rel_vna"] - st["rel_cv"])}),
        Finding("fitted", fitted & ~both, {
            "points": st["n_used"], "vr_min": st["vr_min"], "vr_max": st["vr_max"],
            "source": np.where(st["n_vna"] > 0, "VNA", "C–V table")}),
        Finding("nonpositive_points", st["n_nonpos"] > 0, {"count": st["n_nonpos"]}),
        Finding("forward_bias_points", st["n_forward"] > 0, {"count": st["n_forward"]}),
        Finding("sources_disagree", disagree),
        Finding("vj_at_bound", vj_bound, {"vj": lambda d: np.exp(par[d, 1]),
                                          "vj_min": s.vj_range[0], "vj_max": s.vj_range[1]}),
        Finding("m_unusual", m_odd, {"m": par[:, 2], "m_min": M_BOUNDS[0],
                                     "m_max": USUAL_M_MAX}),
        Finding("vj_m_not_determined", loose, {
            "low": st["vr_min"], "high": st["vr_max"],
            "vj_rel": lambda d: 100 * se[d, 1], "m_se": se[:, 2]}),
        Finding("poor_fit", poor & (st["cv_names"] <= 1), rms),
        Finding("touchstone_rejected", st["n_rejected"] > 0, {
            "file_word": np.where(st["n_rejected"] > 1, "files", "file"),
            "notes": joined(pt.rejected)}),
        Finding("touchstone_warning", st["n_warned"] > 0, {"notes": joined(pt.warned)}),
        Finding("cv_files_combined", st["cv_files"] > 1, {"count": st["cv_files"]}),
        Finding("temperature_uncorrected", some & (st["dt"] > TEMPERATURE_WARN_K),
                {"dt": st["dt"]}),
    ]


def _tables(pt: _Points, fit: _Fit, st: dict, findings: list[Finding],
            s: CapacitanceSettings) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The device table (notes composed from the findings) and the points table."""
    status, note, code = compose(pt.groups.n, findings, CAPACITANCE)
    par, se = fit.params, fit.se
    out = {
        "device": pt.names, "status": status.tolist(), "note": note.tolist(),
        "reason_code": code.tolist(),
        "cj0_F": np.exp(par[:, 0]), "vj_V": np.exp(par[:, 1]), "m": par[:, 2],
        "fit_rms_F": st["rms_f"],
        "cj0_F_se": np.exp(par[:, 0]) * se[:, 0], "vj_V_se": np.exp(par[:, 1]) * se[:, 1],
        "m_se": se[:, 2],
        # correlations of the fit (ln CJO, ln VJ, M), so that a capacitance at any bias
        # carries the fit's uncertainty (kinset.quantities)
        "corr_cj0_vj": fit.corr[:, 0], "corr_cj0_m": fit.corr[:, 1], "corr_vj_m": fit.corr[:, 3],
    }
    if s.package_capacitance:
        out.update({"cp_F": par[:, 3], "cp_F_se": se[:, 3], "corr_cj0_cp": fit.corr[:, 2],
                    "corr_vj_cp": fit.corr[:, 4], "corr_m_cp": fit.corr[:, 5]})
    n_cv, n_vna = st["n_cv"], st["n_vna"]
    out.update({
        "points": st["n_used"], "cv_points": n_cv, "vna_points": n_vna,
        "vr_min_V": st["vr_min"], "vr_max_V": st["vr_max"],
        "sources": np.where(n_cv > 0, np.where(n_vna > 0, "cv+vna", "cv"),
                            np.where(n_vna > 0, "vna", "")),
        "reference_temperature_C": s.reference_temperature - ZERO_CELSIUS,
    })
    n_rest = len(pt.rest)
    table = _points_table(pd.concat([pt.frame, pt.rest], ignore_index=True),
                          np.concatenate([pt.used, np.zeros(n_rest, dtype=bool)]),
                          np.concatenate([st["resid"], np.full(n_rest, np.nan)]))
    return pd.DataFrame(out), table


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
        "reason_code": text("reason_code"),
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
