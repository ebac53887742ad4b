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

from kinset.fitting.batch import (ByDevice, Groups, correlations, group_summer,
                                  grouped_normal_equations, inverse_diagonal, inverse_stack,
                                  solve_stack)
from kinset.fitting.plausible import FORWARD_CURRENT, FORWARD_VOLTAGE, beyond, column_names
from kinset.format import si
from kinset.outcomes import Catalogue, Finding, compose
from kinset.physics.constants import ZERO_CELSIUS, thermal_voltage
from kinset.physics.forward import forward_voltage_tempco

NOTES = Catalogue.load("forward")

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
# Identifiability (issue 15): a parameter is determined when its 95 % confidence interval
# (Student t with the fit's degrees of freedom, from the covariance s²(JᵀJ)⁻¹ at the
# solution) is narrower than these fractions of its value. Measured on ngspice sweeps
# with 0.2 mV noise (tests/test_forward_identifiability.py): a 4-decade sweep gives N to
# ±0.1 % and RS to ±10 %; one decade at the top gives N ±1.3-2.2 % and RS ±30-45 %.
CONFIDENCE = 0.95
N_REL_CI = 0.01             # ±1 % of N (±0.018 at N = 1.8: a third of the shipped
                            # audio profile's 0.05 ideality tolerance)
RS_REL_CI = 0.25            # ±25 % of RS


@dataclass
class ForwardSettings:
    """What the fit needs from reel.yaml (all SI)."""

    reference_temperature: float   # [K]
    ambient_temperature: float     # [K], for rows without a temperature
    activation_energy: float       # EG [eV]
    xti: float                     # [1]
    thermal_resistance: float      # [K/W]
    correct_self_heating: bool = False   # junction at ambient + I·V·Rth per reading
    material: str = "silicon"      # reel.yaml's material: which forward voltages are plausible
    # [V] the smallest voltage the voltmeter vouches for (reel.yaml accuracy.voltage
    # offset_V): a drop I·RS below it is not seen, however smooth the readings.
    voltage_floor: float = 0.0


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


def _pin_rs(jtj, jtr, fixed):
    """Normal equations with RS held where ``fixed`` (per group): its row and column are
    the identity's, so RS's step is 0 and (ln IS, N) solve their own 2×2 system."""
    if fixed is None or not fixed.any():
        return jtj, jtr
    jtj, jtr = jtj.copy(), jtr.copy()
    jtj[fixed, 2, :] = 0.0
    jtj[fixed, :, 2] = 0.0
    jtj[fixed, 2, 2] = 1.0
    jtr[fixed, 2] = 0.0
    return jtj, jtr


def _linear(idx, k, lni, cur, y, vt, summer, fixed=None):
    """Linear least squares of y on [Vt ln I, -Vt, I] per device: (N, N ln IS0, RS);
    RS = 0 where ``fixed``."""
    x = np.stack([vt * lni, -vt, cur], axis=1)
    jtj, jtr = grouped_normal_equations(idx, x, y, k, summer)
    c = solve_stack(jtj, jtr)
    neg = ~(c[:, 2] >= 0)              # RS < 0 or NaN: refit with RS = 0
    if fixed is not None:
        neg |= fixed
    if neg.any():
        c[neg, :2] = solve_stack(jtj[neg][:, :2, :2], jtr[neg][:, :2])
        c[neg, 2] = 0.0
    n = np.clip(c[:, 0], *N_BOUNDS)
    return np.stack([c[:, 1] / c[:, 0], n, c[:, 2]], axis=1)


def _start(idx, k, lni, cur, vadj, vt, lt, theta_m1, xti, eg, fixed=None):
    r"""Starting values: the linear fit, then once more with the ln(1 + I/IS) correction.

    With :math:`I \gg I_S` the model is linear in (N, N ln IS0, RS); the term
    :math:`N V_t[\ln(1 + e^{x}) - x]` it leaves out matters only within a few decades of
    IS, and one fixed-point pass with it taken from the first fit removes most of it.
    """
    summer = group_summer(idx, k)
    p = _linear(idx, k, lni, cur, vadj, vt, summer, fixed)
    ln_is_t = p[idx, 0] + (xti / p[idx, 1]) * lt + theta_m1 * eg / (p[idx, 1] * vt)
    x = lni - ln_is_t
    # softplus(x) − x, written so that neither term overflows
    correction = p[idx, 1] * vt * (np.log1p(np.exp(-np.abs(x))) - np.minimum(x, 0.0))
    good = np.isfinite(correction)
    return _linear(idx, k, lni, cur, vadj - np.where(good, correction, 0.0), vt, summer, fixed)


def levenberg_marquardt(idx, k, lni, cur, volt, lt, theta_m1, vt, xti, eg, p0,
                        max_iter=100, rtol=1e-8, fixed=None):
    """Fit (ln IS0, N, RS) per group by Levenberg–Marquardt, all groups at once.

    RS stays at its start where ``fixed`` (per group). Each iteration works only on the
    groups that have not converged yet. Returns
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
        jtj, jtr = _pin_rs(*grouped_normal_equations(li, jac, r, g, total),
                           None if fixed is None else fixed[groups])
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


@dataclass
class _Readings:
    """The prepare stage's result: readings sorted by device, and what each one is.

    Per point (sorted by device): current, voltage, junction temperature [K] (ambient
    where none was given, plus I·V·Rth when self-heating is corrected), the I·V·Rth
    rise ``d_t`` of usable points, and the masks ``finite``, ``usable`` (finite, I > 0),
    ``at_ilim`` / ``at_vlim`` (on an instrument's limit) and ``used`` (enters the fit).
    Per device: ``distinct``, the number of distinct currents among used points;
    ``implausible``, the findings of readings no small-signal part gives (a part with any
    has no usable reading: no fit, no self-heating blamed on currents it never carried).
    """

    names: np.ndarray
    groups: Groups
    cur: np.ndarray
    volt: np.ndarray
    temp: np.ndarray
    d_t: np.ndarray
    pos: np.ndarray
    src: np.ndarray
    line: np.ndarray
    finite: np.ndarray
    usable: np.ndarray
    at_ilim: np.ndarray
    at_vlim: np.ndarray
    used: np.ndarray
    distinct: np.ndarray
    implausible: list[Finding]

    @property
    def implausible_dev(self) -> np.ndarray:
        """Devices with a reading no small-signal part gives."""
        return np.logical_or.reduce([f.where for f in self.implausible])

    @property
    def fit_dev(self) -> np.ndarray:
        """Devices with enough distinct currents (three) for a fit of IS, N and RS."""
        return self.distinct >= 3

    def used_range(self, x) -> tuple[np.ndarray, np.ndarray]:
        """Smallest and largest x over each device's used points (NaN where none)."""
        y = np.where(self.used, x, np.nan)
        return self.groups.min(y), self.groups.max(y)


def _plateaus(seg: Groups, cur, volt, usable):
    """Points at an instrument's limit: a top-of-sweep plateau in current or voltage."""
    imax = seg.each(seg.max(np.where(usable, cur, np.nan)))
    near_i = usable & (cur >= imax * (1 - PLATEAU_REL))
    at_current_limit = near_i & (seg.each(seg.spread(volt, near_i)) > PLATEAU_V)
    vmax = seg.each(seg.max(np.where(usable, volt, np.nan)))
    near_v = usable & (volt >= vmax - 1e-4) & ~at_current_limit
    log_i = np.log(np.where(near_v, cur, np.nan))
    at_voltage_limit = near_v & (seg.each(seg.spread(log_i, near_v)) > np.log(1.01))
    return at_current_limit, at_voltage_limit


def _prepare(points: pd.DataFrame, s: ForwardSettings) -> _Readings:
    """Sort the readings by device once and mark which of them a fit may use."""
    rows = ByDevice(points)
    names, order, seg = rows.names, rows.order, rows.groups
    cur, volt = rows.column("current"), rows.column("voltage")
    temp = rows.temperature(s.ambient_temperature)
    finite = np.isfinite(cur) & np.isfinite(volt)
    voltage_bound = FORWARD_VOLTAGE[s.material]
    implausible = [
        beyond("implausible_current", FORWARD_CURRENT, seg, cur,
               column_names(rows.text("column_current"), FORWARD_CURRENT), finite),
        beyond("implausible_voltage", voltage_bound, seg, volt,
               column_names(rows.text("column_voltage"), voltage_bound), finite, s.material)]
    usable = finite & (cur > 0) & ~seg.each(np.logical_or.reduce([f.where for f in implausible]))
    at_ilim, at_vlim = _plateaus(seg, cur, volt, usable)
    used = usable & ~at_ilim & ~at_vlim
    d_t = np.where(usable, cur * volt * s.thermal_resistance, 0.0)
    if s.correct_self_heating:
        temp = temp + d_t      # steady-state DC reading: the junction runs warmer
    # Distinct currents among used points decide whether a fit is possible.
    with np.errstate(divide="ignore", invalid="ignore"):
        distinct = seg.distinct(np.round(np.log(cur), 6), used)
    return _Readings(
        names=names, groups=seg, cur=cur, volt=volt, temp=temp, d_t=d_t,
        pos=points["position"].to_numpy(dtype=float)[order],
        src=points["source"].astype(str).to_numpy()[order],
        line=points["line"].to_numpy()[order],
        finite=finite, usable=usable, at_ilim=at_ilim, at_vlim=at_vlim, used=used,
        distinct=distinct, implausible=implausible)


def solve_forward(idx: np.ndarray, k: int, cur: np.ndarray, volt: np.ndarray,
                  temp: np.ndarray, s: ForwardSettings, fixed: np.ndarray | None = None
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Fit (ln IS0, N, RS) to the points of ``k`` devices: arrays in, arrays out.

    ``idx`` is each point's device (0..k-1), ``temp`` its junction temperature [K];
    where ``fixed`` (k,) RS is held at 0 and only (ln IS0, N) are fitted.
    Returns the parameters (k, 3) (NaN where the start was unusable), their standard
    errors (k, 3, NaN for a fixed RS) and correlation coefficients (k, 3: ln IS0–N,
    ln IS0–RS, N–RS) from the covariance s²(JᵀJ)⁻¹ at the solution (JCGM 100:2008 §5.2,
    the fit's own residual variance s²), and the rms residual (k,) [V].
    """
    lni = np.log(cur)
    vt = thermal_voltage(temp)
    lt = np.log(temp / s.reference_temperature)
    theta_m1 = temp / s.reference_temperature - 1.0
    vadj = volt + s.xti * vt * lt + theta_m1 * s.activation_energy
    p0 = _start(idx, k, lni, cur, vadj, vt, lt, theta_m1, s.xti, s.activation_energy, fixed)
    p, ssr, m, ok = levenberg_marquardt(idx, k, lni, cur, volt, lt, theta_m1, vt, s.xti,
                                        s.activation_energy, p0, fixed=fixed)
    _, jac = _model(p[idx, 0], p[idx, 1], p[idx, 2], lni, cur, lt, theta_m1, vt,
                    s.xti, s.activation_energy)
    jtj, _ = _pin_rs(*grouped_normal_equations(idx, jac, np.zeros(len(idx)), k), fixed)
    dof = m - 3 + (0 if fixed is None else fixed)
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(dof > 0, ssr / np.maximum(dof, 1), np.nan)
        cov = inverse_stack(jtj, rcond=1e-15)
        se = np.sqrt(s2[:, None] * np.einsum("kii->ki", cov))
        corr = correlations(cov)
        if fixed is not None:
            se[fixed, 2] = np.nan
            corr[fixed, 1:] = np.nan
        return (np.where(ok[:, None], p, np.nan), se, corr, np.sqrt(ssr / m))


def _solve_some(r: _Readings, s: ForwardSettings, which: np.ndarray,
                fixed: np.ndarray | None = None):
    """:func:`solve_forward` on the used points of the devices ``which`` (a mask over the
    reel, RS held at 0 where ``fixed``); parameters, standard errors, correlations and
    rms per device of the reel (NaN for the others)."""
    n_dev = len(r.names)
    params = np.full((n_dev, 3), np.nan)
    se = np.full((n_dev, 3), np.nan)
    corr = np.full((n_dev, 3), np.nan)
    rms = np.full(n_dev, np.nan)
    sel = np.flatnonzero(r.used & r.groups.each(which))
    if len(sel):
        fit_ids = np.flatnonzero(which)
        remap = np.full(n_dev, -1)
        remap[fit_ids] = np.arange(len(fit_ids))
        idx = remap[r.groups.codes[sel]]
        params[fit_ids], se[fit_ids], corr[fit_ids], rms[fit_ids] = solve_forward(
            idx, len(fit_ids), r.cur[sel], r.volt[sel], r.temp[sel], s,
            None if fixed is None else fixed[fit_ids])
    return params, se, corr, rms


@dataclass
class _Identified:
    """What the readings determine (issue 15, identifiability), per device.

    ``noise``: the voltage noise [V] RS was judged against, the full fit's residual
    standard deviation (dof = points − 3) but never below the voltmeter's floor;
    ``rs_fixed``: RS held at 0 because I·RS stayed within the noise or RS's 95 % interval
    holds 0; ``rs_wide`` / ``n_wide``: a fitted RS / N whose 95 % half-width exceeds
    :data:`RS_REL_CI` / :data:`N_REL_CI` of its value; ``half``: the 95 % half-widths (k, 3).
    """

    noise: np.ndarray
    rs_fixed: np.ndarray
    rs_wide: np.ndarray
    n_wide: np.ndarray
    half: np.ndarray


def _half_widths(r: _Readings, se, rms, fixed) -> tuple[np.ndarray, np.ndarray]:
    """95 % half-widths (Student t with the fit's dof; infinite without dof) of the
    parameters (ln IS0, N, RS), and the residual standard deviation [V]."""
    # The Student t quantile from scipy.special (stdtrit, the function scipy.stats.t.ppf
    # calls for df > 0): importing scipy.stats cost a step ~1 s of start-up (issue 18).
    from scipy.special import stdtrit
    m = r.groups.count(r.used).astype(float)
    dof = m - 3 + fixed
    with np.errstate(invalid="ignore", divide="ignore"):
        sd = np.where(dof > 0, rms * np.sqrt(m / np.maximum(dof, 1)), np.nan)
        t = np.where(dof > 0, stdtrit(np.maximum(dof, 1), 0.5 + CONFIDENCE / 2), np.inf)
    return t[:, None] * np.where(np.isfinite(se), se, np.inf), sd


def _identify(r: _Readings, s: ForwardSettings, params, se, corr, rms):
    """Hold RS at 0 where the readings cannot see it and refit IS and N there; judge what
    the final fit determines. Returns parameters, (standard errors, correlations), rms,
    :class:`_Identified`."""
    fitted = r.fit_dev & np.isfinite(params).all(axis=1)
    _, i_max = r.used_range(r.cur)
    none = np.zeros(len(r.names), dtype=bool)
    half, sd = _half_widths(r, se, rms, none)
    noise = np.fmax(sd, s.voltage_floor)
    rs = params[:, 2]
    # I·RS at the top reading within the noise, or RS not significantly above 0: the
    # readings cannot tell this RS from 0, so 0 changes no prediction inside their range.
    fixed = fitted & ~((i_max * rs > noise) & (rs > half[:, 2]))
    if fixed.any():
        p2, se2, corr2, rms2 = _solve_some(r, s, fixed, fixed)
        redo = fixed & np.isfinite(p2).all(axis=1)
        params, se, rms = (np.where(redo[:, None], p2, params), np.where(redo[:, None], se2, se),
                           np.where(redo, rms2, rms))
        corr = np.where(redo[:, None], corr2, corr)
        fixed = redo
        half, _ = _half_widths(r, se, rms, fixed)
    fitted = r.fit_dev & np.isfinite(params).all(axis=1)
    rs_wide = fitted & ~fixed & ~(half[:, 2] <= RS_REL_CI * params[:, 2])
    n_wide = fitted & ~(half[:, 1] <= N_REL_CI * params[:, 1])
    return params, (se, corr), rms, _Identified(noise, fixed, rs_wide, n_wide, half)


def _solve(r: _Readings, s: ForwardSettings):
    """Fit every device that can be fitted, then hold RS at 0 where it is not determined
    (:func:`_identify`)."""
    params, se, corr, rms = _solve_some(r, s, r.fit_dev)
    return _identify(r, s, params, se, corr, rms)


def _self_heating(r: _Readings, params: np.ndarray, s: ForwardSettings):
    """Per device: the largest I·V·Rth [K] among used points, the largest forward-voltage
    shift it causes [V], and the current of the first point with that shift."""
    seg, used = r.groups, r.used
    p_pt = params[seg.codes]
    have = used & np.isfinite(p_pt).all(axis=1)
    tempco = np.full(len(r.cur), TEMPCO_NO_MODEL)
    if have.any() and s.thermal_resistance > 0:
        tempco[have] = forward_voltage_tempco(
            r.cur[have], np.exp(p_pt[have, 0]), p_pt[have, 1], p_pt[have, 2], r.temp[have],
            s.reference_temperature, s.activation_energy, s.xti)
    shift = np.where(used, np.abs(tempco) * r.d_t, 0.0)
    heat_k = seg.max(np.where(used, r.d_t, np.nan))
    shift_max = seg.max(shift)
    top = np.flatnonzero((shift == seg.each(shift_max)) & used)
    shift_at = np.full(len(r.names), np.nan)
    shift_at[seg.codes[top[::-1]]] = r.cur[top[::-1]]      # first such point per device
    return heat_k, shift_max, shift_at


def _files(r: _Readings) -> tuple[np.ndarray, object]:
    """Per device: how many files its readings came from, and a callable naming them."""
    seg = r.groups
    # Each file's rows are contiguous in the input, so after the stable sort a device's
    # rows change file exactly (files − 1) times.
    change = np.zeros(len(r.src), dtype=bool)
    change[1:] = (r.src[1:] != r.src[:-1]) & (seg.codes[1:] == seg.codes[:-1])

    def names(d: int) -> str:
        own = r.src[seg.starts[d]:seg.starts[d] + seg.counts[d]]
        return ", ".join(sorted({Path(f).name for f in own}))
    return 1 + seg.count(change), names


def _undetermined(r: _Readings, params, ident: _Identified) -> list[Finding]:
    """RS held at 0, a wide RS, a wide N (and with it IS): what the readings do not determine."""
    i_min, i_max = r.used_range(r.cur)
    half = ident.half
    return [
        Finding("rs_not_determined", ident.rs_fixed,
                {"current": lambda d: si(i_max[d], "A"), "noise": lambda d: si(ident.noise[d], "V")}),
        Finding("rs_imprecise", ident.rs_wide,
                {"rs": params[:, 2], "half": half[:, 2], "limit": f"{RS_REL_CI:.0%}"}),
        Finding("n_not_determined", ident.n_wide,
                {"n": params[:, 1], "half": half[:, 1], "limit": f"{N_REL_CI:.0%}",
                 "is_factor": lambda d: f"{np.exp(min(half[d, 0], 700.0)):.3g}",
                 "decades": lambda d: f"{np.log10(i_max[d] / i_min[d]):.2g}"}),
    ]


def _diagnose(r: _Readings, params, rms, heating, ident: _Identified,
              s: ForwardSettings) -> list[Finding]:
    """What each device's readings and fit show, as findings in the order of its notes."""
    seg = r.groups
    n_used = seg.count(r.used)
    i_min, i_max = r.used_range(r.cur)
    implausible = r.implausible_dev
    none_used = n_used == 0
    reversed_ = seg.count(r.finite & (r.cur < 0) & (r.volt < 0)) == seg.counts
    too_few = ~none_used & ~r.fit_dev
    fitted = r.fit_dev & np.isfinite(params).all(axis=1)
    n_files, file_names = _files(r)
    poor = fitted & (rms > POOR_FIT_RMS_V)
    pos_min, pos_max = seg.min(r.pos), seg.max(r.pos)
    n_fit = params[:, 1]
    heat_k, shift_max, shift_at = heating
    heated = ~none_used & (shift_max > SELF_HEATING_SHIFT_V)
    heat_fields = {"heat": heat_k, "shift": lambda d: si(shift_max[d], "V", 2),
                   "current": lambda d: si(shift_at[d], "A")}
    rms_text = {"rms": lambda d: si(rms[d], "V")}
    i_limit = seg.max(np.where(r.at_ilim, r.cur, np.nan))
    n_nonpos, n_ilim, n_vlim = (seg.count(r.finite & (r.cur <= 0)), seg.count(r.at_ilim),
                                seg.count(r.at_vlim))
    return [
        *r.implausible,
        Finding("reversed_leads", none_used & reversed_ & ~implausible),
        Finding("no_usable_reading", none_used & ~reversed_ & ~implausible),
        Finding("single_point", too_few & (r.distinct == 1),
                {"current": lambda d: si(i_min[d], "A")}),
        Finding("two_points", too_few & (r.distinct != 1),
                {"low": lambda d: si(i_min[d], "A"), "high": lambda d: si(i_max[d], "A")}),
        Finding("not_converged", r.fit_dev & ~fitted),
        # Files that each follow a diode law but not together: most often one id written
        # on two parts. Their mixture must not be matched as one part.
        Finding("files_disagree", poor & (n_files > 1),
                {"count": n_files, "files": file_names, **rms_text}),
        Finding("nonpositive_current", n_nonpos > 0, {"count": n_nonpos}),
        Finding("current_limit", n_ilim > 0,
                {"count": n_ilim, "limit": lambda d: si(i_limit[d], "A")}),
        Finding("voltage_limit", n_vlim > 0, {"count": n_vlim}),
        Finding("files_combined", n_files > 1, {"count": n_files}),
        Finding("conflicting_positions", np.isfinite(pos_min) & (pos_min != pos_max),
                {"low": pos_min, "high": pos_max}),
        Finding("poor_fit", poor & (n_files == 1), rms_text),
        Finding("unusual_n", fitted & ~((USUAL_N[0] <= n_fit) & (n_fit <= USUAL_N[1])),
                {"n": n_fit, "low": USUAL_N[0], "high": USUAL_N[1]}),
        *_undetermined(r, params, ident),
        Finding("self_heating_corrected", heated & s.correct_self_heating, heat_fields),
        Finding("self_heating", heated & (not s.correct_self_heating), heat_fields),
    ]


def _table(r: _Readings, params, errors, rms, heat_k, ident: _Identified,
           findings: list[Finding],
           s: ForwardSettings) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The device table (status, note and reason_code composed from the findings once)
    and the readings table; ``errors`` is (standard errors, correlations)."""
    se, corr = errors
    status, note, reason_code = compose(len(r.names), findings, NOTES)
    i_min, i_max = r.used_range(r.cur)
    t_min, t_max = r.used_range(r.temp)
    is_a = np.exp(params[:, 0])
    out = pd.DataFrame({
        "device": r.names.astype(str),
        "status": status,
        "note": note,
        "reason_code": reason_code,
        "is_A": is_a,
        "n": params[:, 1],
        "rs_ohm": params[:, 2],
        "points": r.groups.count(r.used),
        "fit_rms_V": rms,
        "self_heating_K": heat_k,
        "is_A_se": is_a * se[:, 0],
        "n_se": se[:, 1],
        "rs_ohm_se": se[:, 2],
        # correlations of the fit (ln IS with N, ln IS with RS, N with RS), so that a
        # value at any condition carries the fit's uncertainty (kinset.quantities)
        "corr_is_n": corr[:, 0],
        "corr_is_rs": corr[:, 1],
        "corr_n_rs": corr[:, 2],
        "i_min_A": i_min,
        "i_max_A": i_max,
        "t_min_C": t_min - ZERO_CELSIUS,
        "t_max_C": t_max - ZERO_CELSIUS,
        "position": r.groups.min(r.pos),
        "reference_temperature_C": s.reference_temperature - ZERO_CELSIUS,
        "eg_eV": s.activation_energy,
        "xti": s.xti,
        "rs_fixed": ident.rs_fixed.astype(int),
        "noise_V": np.where(np.isfinite(rms), ident.noise, np.nan),
    })
    readings = pd.DataFrame({
        "device": np.asarray(r.names, dtype=object)[r.groups.codes],
        "current_A": r.cur, "voltage_V": r.volt, "temperature_C": r.temp - ZERO_CELSIUS,
        "used": r.used.astype(int),
        "source": r.src,
        "line": r.line,
    })
    return out, readings


def fit_forward(points: pd.DataFrame, settings: ForwardSettings
                ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Extract IS, N, RS for every device in a table of forward readings.

    Four stages: prepare (sort by device, mark usable readings and plateaus), solve
    (:func:`solve_forward`), diagnose (findings per device, :data:`NOTES`) and table
    (status, note and reason_code by :func:`kinset.outcomes.compose`).

    Parameters
    ----------
    points : DataFrame
        ``device, voltage [V], current [A], temperature [K] (NaN: ambient),
        position, source, line`` — as from :func:`kinset.io.datasets.read_forward`.
    settings : ForwardSettings

    Returns
    -------
    devices : DataFrame
        One row per device, sorted by id: ``device, status, note, reason_code, is_A, n,
        rs_ohm, points, fit_rms_V, self_heating_K`` and the standard errors, current and
        temperature ranges and the constants the parameters hold with.
    readings : DataFrame
        Every reading, grouped by device in input order, with ``used`` (whether it
        entered the fit), for the report and for single readings.
    """
    readings = _prepare(points, settings)
    params, errors, rms, ident = _solve(readings, settings)
    heating = _self_heating(readings, params, settings)
    findings = _diagnose(readings, params, rms, heating, ident, settings)
    return _table(readings, params, errors, rms, heating[0], ident, findings, settings)
