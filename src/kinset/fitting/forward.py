"""Fitting IS, N and RS of the forward diode law to every device of a reel at once.

The model is :func:`kinset.physics.forward.voltage_from_log_current` with the SPICE
IS(T) law, so points taken at different temperatures (per row) fit one set of
parameters reported at the reel's reference temperature. Residuals are in voltage,
the quantity measured at a forced current (and the one matched later).

Method: starting values from the linear least-squares fit of
:math:`V + XTI\\,V_t\\ln(T/T_0) + (T/T_0-1)E_G` against
:math:`[V_t \\ln I,\\; -V_t,\\; I]` (exact when :math:`I \\gg I_S`), then
Levenberg–Marquardt iterations (K. Levenberg, Q. Appl. Math. 2, 164-168, 1944;
D. W. Marquardt, J. SIAM 11(2), 431-441, 1963, doi:10.1137/0111030) on the full
model, solved for all devices together as a stack of 3×3 normal equations, with
RS kept non-negative by projection.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.fitting.batch import (group_summer, grouped_normal_equations, inverse_diagonal,
                                  solve_stack)
from kinset.format import si
from kinset.physics.constants import ZERO_CELSIUS, thermal_voltage
from kinset.physics.forward import forward_voltage_tempco

# Plateau at the top of a sweep: points within this fraction of the device's
# largest current, spread over more than PLATEAU_V in voltage, sat at a current limit.
PLATEAU_REL = 2e-3
PLATEAU_V = 2e-3            # [V]
POOR_FIT_RMS_V = 5e-3       # [V] rms residual above which the law does not describe the part
SELF_HEATING_SHIFT_V = 0.5e-3   # [V] warn above this forward-voltage shift (issue 2)
TEMPCO_NO_MODEL = -2e-3     # [V/K] silicon near 1 mA, common practice; used without a fit
N_BOUNDS = (0.2, 20.0)
SE_FRACTION = 1e-2          # converged when a step is below this fraction of each standard error
USUAL_N = (0.8, 4.0)        # outside this, a junction diode's N is suspicious (common practice)


@dataclass
class ForwardSettings:
    """What the fit needs from reel.yaml (all SI)."""

    reference_temperature: float   # [K]
    ambient_temperature: float     # [K], for rows without a temperature
    activation_energy: float       # EG [eV]
    xti: float                     # [1]
    thermal_resistance: float      # [K/W]
    correct_self_heating: bool = False   # junction at ambient + I·V·Rth per reading


def _model(lnis, n, rs, lni, cur, lt, theta_m1, vt, xti, eg):
    """Voltage, and its derivatives with respect to (ln IS0, N, RS), per point."""
    ln_is_t = lnis + (xti / n) * lt + theta_m1 * eg / (n * vt)
    x = lni - ln_is_t
    # softplus ln(1 + e^x) and its derivative, the logistic function, from one exp.
    e = np.exp(-np.abs(x))
    sp = np.maximum(x, 0.0) + np.log1p(e)
    sig = np.where(x >= 0, 1.0, e) / (1.0 + e)
    v = n * vt * sp + cur * rs
    d_lnis = -n * vt * sig
    d_n = vt * sp + sig * (vt * xti * lt + theta_m1 * eg) / n
    return v, np.stack([d_lnis, d_n, cur], axis=1)


def _linear(idx, k, lni, cur, y, vt, summer):
    """Linear least squares of y on [Vt ln I, -Vt, I] per device: (N, N ln IS0, RS)."""
    x = np.stack([vt * lni, -vt, cur], axis=1)
    jtj, jtr = grouped_normal_equations(idx, x, y, k, summer)
    c = solve_stack(jtj, jtr)
    neg = ~(c[:, 2] >= 0)              # RS < 0 or NaN: refit with RS = 0
    if neg.any():
        c[neg, :2] = solve_stack(jtj[neg][:, :2, :2], jtr[neg][:, :2])
        c[neg, 2] = 0.0
    n = np.clip(c[:, 0], *N_BOUNDS)
    return np.stack([c[:, 1] / c[:, 0], n, c[:, 2]], axis=1)


def _start(idx, k, lni, cur, vadj, vt, lt, theta_m1, xti, eg):
    r"""Starting values: the linear fit, then once more with the ln(1 + I/IS) correction.

    With :math:`I \gg I_S` the model is linear in (N, N ln IS0, RS); the term
    :math:`N V_t[\ln(1 + e^{x}) - x]` it leaves out matters only within a few decades of
    IS, and one fixed-point pass with it taken from the first fit removes most of it.
    """
    summer = group_summer(idx, k)
    p = _linear(idx, k, lni, cur, vadj, vt, summer)
    ln_is_t = p[idx, 0] + (xti / p[idx, 1]) * lt + theta_m1 * eg / (p[idx, 1] * vt)
    x = lni - ln_is_t
    # softplus(x) − x, written so that neither term overflows
    correction = p[idx, 1] * vt * (np.log1p(np.exp(-np.abs(x))) - np.minimum(x, 0.0))
    good = np.isfinite(correction)
    return _linear(idx, k, lni, cur, vadj - np.where(good, correction, 0.0), vt, summer)


def levenberg_marquardt(idx, k, lni, cur, volt, lt, theta_m1, vt, xti, eg, p0,
                        max_iter=100, rtol=1e-8):
    """Fit (ln IS0, N, RS) per group by Levenberg–Marquardt, all groups at once.

    Each iteration works only on the groups that have not converged yet. Returns
    the parameters (k, 3), the sum of squared residuals per group, the number of
    points per group and whether the start was usable.
    """
    p = p0.copy()
    m = np.bincount(idx, minlength=k)
    ok = np.isfinite(p).all(axis=1)
    p[~ok] = [-30.0, 1.5, 0.0]
    order = np.argsort(idx, kind="stable")          # rows grouped by device
    bounds = np.concatenate([[0], np.cumsum(m)])
    lam = np.full(k, 1e-3)
    active = ok.copy()

    def rows_of(groups):
        if len(groups) == k:
            return order
        return np.concatenate([order[bounds[g]:bounds[g + 1]] for g in groups]) if len(groups) < 64 \
            else order[np.repeat(bounds[groups], m[groups]) + _ranks(m[groups])]

    def evaluate(par, groups, rows, local):
        v, jac = _model(par[local, 0], par[local, 1], par[local, 2], lni[rows], cur[rows],
                        lt[rows], theta_m1[rows], vt[rows], xti, eg)
        return v - volt[rows], jac

    groups = np.flatnonzero(active)
    rows = rows_of(groups)
    local_of = np.full(k, -1)
    local_of[groups] = np.arange(len(groups))
    r, jac = evaluate(p[groups], groups, rows, local_of[idx[rows]])
    ssr = np.full(k, np.nan)
    li = local_of[idx[rows]]
    total = group_summer(li, len(groups))
    ssr[groups] = total(r * r)
    for _ in range(max_iter):
        if not len(groups):
            break
        g = len(groups)
        jtj, jtr = grouped_normal_equations(li, jac, r, g, total)
        diag = np.einsum("kii->ki", jtj)
        a = jtj + lam[groups, None, None] * np.eye(3)[None] * diag[:, :, None]
        step = solve_stack(a, -jtr)
        bad = ~np.isfinite(step).all(axis=1)
        step[bad] = 0.0
        trial = p[groups] + step
        trial[:, 1] = np.clip(trial[:, 1], *N_BOUNDS)
        trial[:, 2] = np.maximum(trial[:, 2], 0.0)
        r_new, jac_new = evaluate(trial, groups, rows, li)
        new = total(r_new * r_new)
        old = ssr[groups]
        better = new < old
        gain = np.where(better, (old - new) / np.maximum(old, 1e-300), 0.0)
        p[groups[better]] = trial[better]
        ssr[groups[better]] = new[better]
        lam[groups] = np.where(better, lam[groups] / 5.0, lam[groups] * 5.0)
        small = (np.abs(step) <= 1e-9 * (1.0 + np.abs(p[groups]))).all(axis=1)
        # An accepted step far below every parameter's standard error changes nothing
        # that could be measured: stop there (the SE from the undamped JᵀJ).
        dof = m[groups] - 3
        with np.errstate(invalid="ignore", divide="ignore"):
            se = np.sqrt(np.where(dof > 0, old / np.maximum(dof, 1), np.nan)[:, None]
                         * inverse_diagonal(jtj))
        negligible = (np.abs(step) <= SE_FRACTION * se).all(axis=1)
        finished = (better & (gain < rtol)) | negligible | (lam[groups] > 1e10) | small | bad
        # Keep the residuals and Jacobian of the accepted points for the next step.
        keep_row = better[li]
        r = np.where(keep_row, r_new, r)
        jac = np.where(keep_row[:, None], jac_new, jac)
        if finished.any():
            stay = ~finished
            groups = groups[stay]
            row_keep = stay[li]
            rows, r, jac = rows[row_keep], r[row_keep], jac[row_keep]
            local_of[:] = -1
            local_of[groups] = np.arange(len(groups))
            li = local_of[idx[rows]]
            total = group_summer(li, len(groups))
    return p, ssr, m, ok


def _ranks(sizes):
    """0..n-1 within each consecutive block of the given sizes."""
    starts = np.repeat(np.cumsum(sizes) - sizes, sizes)
    return np.arange(int(sizes.sum())) - starts


class _Segments:
    """Per-device reductions over points sorted by device (contiguous blocks)."""

    def __init__(self, codes: np.ndarray, n: int):
        self.counts = np.bincount(codes, minlength=n)
        self.starts = np.concatenate([[0], np.cumsum(self.counts)[:-1]])
        self.codes = codes

    def max(self, x):
        return np.fmax.reduceat(x, self.starts)

    def min(self, x):
        return np.fmin.reduceat(x, self.starts)

    def count(self, mask):
        return np.add.reduceat(mask.astype(np.int64), self.starts)

    def spread(self, x, mask):
        """max − min of x over the masked points of each device (NaN where none)."""
        y = np.where(mask, x, np.nan)
        return self.max(y) - self.min(y)

    def each(self, per_device):
        return per_device[self.codes]

    def distinct(self, x, mask):
        """Number of distinct values of x among the masked points of each device."""
        sel = np.flatnonzero(mask)
        order = np.lexsort((x[sel], self.codes[sel]))
        d, v = self.codes[sel][order], x[sel][order]
        new = np.ones(len(d), dtype=bool)
        new[1:] = (d[1:] != d[:-1]) | (v[1:] != v[:-1])
        return np.bincount(d[new], minlength=len(self.counts))


def _plateaus(seg: _Segments, cur, volt, usable):
    """Points at an instrument's limit: a top-of-sweep plateau in current or voltage."""
    imax = seg.each(seg.max(np.where(usable, cur, np.nan)))
    near_i = usable & (cur >= imax * (1 - PLATEAU_REL))
    at_current_limit = near_i & (seg.each(seg.spread(volt, near_i)) > PLATEAU_V)
    vmax = seg.each(seg.max(np.where(usable, volt, np.nan)))
    near_v = usable & (volt >= vmax - 1e-4) & ~at_current_limit
    log_i = np.log(np.where(near_v, cur, np.nan))
    at_voltage_limit = near_v & (seg.each(seg.spread(log_i, near_v)) > np.log(1.01))
    return at_current_limit, at_voltage_limit


def fit_forward(points: pd.DataFrame, settings: ForwardSettings
                ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Extract IS, N, RS for every device in a table of forward readings.

    Parameters
    ----------
    points : DataFrame
        ``device, voltage [V], current [A], temperature [K] (NaN: ambient),
        position, source, line`` — as from :func:`kinset.io.datasets.read_forward`.
    settings : ForwardSettings

    Returns
    -------
    devices : DataFrame
        One row per device, sorted by id: ``device, status, note, is_A, n, rs_ohm,
        points, fit_rms_V, self_heating_K`` and the standard errors, current and
        temperature ranges and the constants the parameters hold with.
    readings : DataFrame
        Every reading, grouped by device in input order, with ``used`` (whether it
        entered the fit), for the report and for single readings.
    """
    s = settings
    codes, names = pd.factorize(points["device"].astype(str).to_numpy(), sort=True)
    order = np.argsort(codes, kind="stable")
    dev_codes = codes[order]
    n_dev = len(names)
    seg = _Segments(dev_codes, n_dev)
    cur = points["current"].to_numpy(dtype=float)[order]
    volt = points["voltage"].to_numpy(dtype=float)[order]
    temp = points["temperature"].to_numpy(dtype=float)[order]
    temp = np.where(np.isfinite(temp), temp, s.ambient_temperature)
    finite = np.isfinite(cur) & np.isfinite(volt)
    nonpos = finite & (cur <= 0)
    usable = finite & (cur > 0)
    at_ilim, at_vlim = _plateaus(seg, cur, volt, usable)
    used = usable & ~at_ilim & ~at_vlim
    d_t = np.where(usable, cur * volt * s.thermal_resistance, 0.0)
    if s.correct_self_heating:
        temp = temp + d_t      # steady-state DC reading: the junction runs warmer

    n_total = seg.counts
    n_nonpos, n_used = seg.count(nonpos), seg.count(used)
    n_ilim, n_vlim = seg.count(at_ilim), seg.count(at_vlim)
    all_reversed = seg.count(finite & (cur < 0) & (volt < 0)) == n_total
    # Distinct currents among used points decide whether a fit is possible.
    with np.errstate(divide="ignore", invalid="ignore"):
        distinct = seg.distinct(np.round(np.log(cur), 6), used)
    fit_dev = distinct >= 3

    params = np.full((n_dev, 3), np.nan)
    se = np.full((n_dev, 3), np.nan)
    rms = np.full(n_dev, np.nan)
    rows = used & fit_dev[dev_codes]
    if rows.any():
        sel = np.flatnonzero(rows)
        fit_ids = np.flatnonzero(fit_dev)
        remap = np.full(n_dev, -1)
        remap[fit_ids] = np.arange(len(fit_ids))
        idx = remap[dev_codes[sel]]
        k = len(fit_ids)
        c, v, t = cur[sel], volt[sel], temp[sel]
        lni = np.log(c)
        vt = thermal_voltage(t)
        lt = np.log(t / s.reference_temperature)
        theta_m1 = t / s.reference_temperature - 1.0
        vadj = v + s.xti * vt * lt + theta_m1 * s.activation_energy
        p0 = _start(idx, k, lni, c, vadj, vt, lt, theta_m1, s.xti, s.activation_energy)
        p, ssr, m, ok = levenberg_marquardt(idx, k, lni, c, v, lt, theta_m1, vt, s.xti,
                                            s.activation_energy, p0)
        _, jac = _model(p[idx, 0], p[idx, 1], p[idx, 2], lni, c, lt, theta_m1, vt,
                        s.xti, s.activation_energy)
        jtj, _ = grouped_normal_equations(idx, jac, np.zeros(len(idx)), k)
        dof = m - 3
        with np.errstate(invalid="ignore", divide="ignore"):
            s2 = np.where(dof > 0, ssr / np.maximum(dof, 1), np.nan)
            cov_diag = inverse_diagonal(jtj, rcond=1e-15)
            params[fit_ids] = np.where(ok[:, None], p, np.nan)
            se[fit_ids] = np.sqrt(s2[:, None] * cov_diag)
            rms[fit_ids] = np.sqrt(ssr / m)

    # Self-heating: dT = I V Rth at each used point, and the shift it causes.
    p_pt = params[dev_codes]
    have = used & np.isfinite(p_pt).all(axis=1)
    tempco = np.full(len(cur), TEMPCO_NO_MODEL)
    if have.any() and s.thermal_resistance > 0:
        tempco[have] = forward_voltage_tempco(
            cur[have], np.exp(p_pt[have, 0]), p_pt[have, 1], p_pt[have, 2], temp[have],
            s.reference_temperature, s.activation_energy, s.xti)
    shift = np.where(used, np.abs(tempco) * d_t, 0.0)
    heat_k = seg.max(np.where(used, d_t, np.nan))
    shift_max = seg.max(shift)
    top = np.flatnonzero((shift == seg.each(shift_max)) & used)
    shift_at = np.full(n_dev, np.nan)
    shift_at[dev_codes[top[::-1]]] = cur[top[::-1]]      # first such point per device
    i_limit = seg.max(np.where(at_ilim, cur, np.nan))
    i_min = seg.min(np.where(used, cur, np.nan))
    i_max = seg.max(np.where(used, cur, np.nan))
    t_min = seg.min(np.where(used, temp, np.nan))
    t_max = seg.max(np.where(used, temp, np.nan))
    pos = points["position"].to_numpy(dtype=float)[order]
    pos_min, pos_max = seg.min(pos), seg.max(pos)
    # Each file's rows are contiguous in the input, so after the stable sort a device's
    # rows change file exactly (files − 1) times.
    src = points["source"].astype(str).to_numpy()[order]
    change = np.zeros(len(src), dtype=bool)
    change[1:] = (src[1:] != src[:-1]) & (dev_codes[1:] == dev_codes[:-1])
    n_files = 1 + seg.count(change)

    fitted_ok = np.isfinite(params).all(axis=1)
    status, notes = [], []
    for d in range(n_dev):
        note: list[str] = []
        st = "ok"
        if n_nonpos[d]:
            note.append(f"{n_nonpos[d]} reading(s) with zero or negative current ignored")
        if n_ilim[d]:
            note.append(f"{n_ilim[d]} reading(s) at the current limit near "
                        f"{si(i_limit[d], 'A')} left out")
        if n_vlim[d]:
            note.append(f"{n_vlim[d]} reading(s) at the voltage limit left out")
        if n_files[d] > 1:
            note.append(f"readings from {n_files[d]} files combined")
        if np.isfinite(pos_min[d]) and pos_min[d] != pos_max[d]:
            st = "warning"
            note.append(f"conflicting tape positions {pos_min[d]:.0f} and {pos_max[d]:.0f}")
        if n_used[d] == 0:
            st = "rejected"
            if all_reversed[d]:
                note.insert(0, "every reading has negative voltage and current: reversed "
                            "leads or sign convention (forward readings are positive)")
            else:
                note.insert(0, "no usable forward reading")
        elif not fit_dev[d]:
            st = "warning"
            if distinct[d] == 1:
                note.insert(0, f"single point at {si(i_min[d], 'A')}, cannot see crossing "
                            f"curves; usable only at its own current")
            else:
                note.insert(0, f"two points ({si(i_min[d], 'A')}, {si(i_max[d], 'A')}): too "
                            f"few to fit; usable only at their own currents")
        elif not fitted_ok[d]:
            st = "rejected"
            note.insert(0, "the fit did not converge: readings do not follow a diode law")
        else:
            if rms[d] > POOR_FIT_RMS_V and n_files[d] > 1:
                # Files that each follow a diode law but not together: most often one id
                # written on two parts. Their mixture must not be matched as one part.
                st = "rejected"
                files = ", ".join(sorted({Path(f).name for f in src[dev_codes == d]}))
                note.insert(0, f"readings in {n_files[d]} files ({files}) disagree: the "
                            f"fit to all of them is off by {si(rms[d], 'V')} rms; one id on "
                            f"two parts? Check the files")
            elif rms[d] > POOR_FIT_RMS_V:
                st = "warning"
                note.append(f"poor fit: rms residual {si(rms[d], 'V')} (noisy readings or "
                            f"not a single junction)")
            if not USUAL_N[0] <= params[d, 1] <= USUAL_N[1]:
                st = "warning"
                note.append(f"ideality N = {params[d, 1]:.3g} is outside the usual "
                            f"{USUAL_N[0]}–{USUAL_N[1]}")
            if params[d, 2] == 0.0:
                note.append("series resistance not resolved (RS at 0)")
        if n_used[d] and shift_max[d] > SELF_HEATING_SHIFT_V and s.correct_self_heating:
            note.append(f"junction temperature corrected for self-heating of up to "
                        f"{heat_k[d]:.2g} K ({si(shift_max[d], 'V', 2)} at {si(shift_at[d], 'A')})")
        elif n_used[d] and shift_max[d] > SELF_HEATING_SHIFT_V:
            if st == "ok":
                st = "warning"
            note.append(f"self-heating up to {heat_k[d]:.2g} K shifts the forward voltage by "
                        f"about {si(shift_max[d], 'V', 2)} at {si(shift_at[d], 'A')}; pulse "
                        f"the test, lower the current, or set 'self_heating: correct' "
                        f"for DC readings")
        status.append(st)
        notes.append("; ".join(note))

    is_a = np.exp(params[:, 0])
    out = pd.DataFrame({
        "device": names.astype(str),
        "status": status,
        "note": notes,
        "is_A": is_a,
        "n": params[:, 1],
        "rs_ohm": params[:, 2],
        "points": n_used,
        "fit_rms_V": rms,
        "self_heating_K": heat_k,
        "is_A_se": is_a * se[:, 0],
        "n_se": se[:, 1],
        "rs_ohm_se": se[:, 2],
        "i_min_A": i_min,
        "i_max_A": i_max,
        "t_min_C": t_min - ZERO_CELSIUS,
        "t_max_C": t_max - ZERO_CELSIUS,
        "position": pos_min,
        "reference_temperature_C": s.reference_temperature - ZERO_CELSIUS,
        "eg_eV": s.activation_energy,
        "xti": s.xti,
    })
    readings = pd.DataFrame({
        "device": np.asarray(names, dtype=object)[dev_codes],
        "current_A": cur, "voltage_V": volt, "temperature_C": temp - ZERO_CELSIUS,
        "used": used.astype(int),
        "source": points["source"].astype(str).to_numpy()[order],
        "line": points["line"].to_numpy()[order],
    })
    return out, readings
