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

import numpy as np
import pandas as pd

from kinset.fitting.batch import group_sum, grouped_normal_equations, solve_stack
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
USUAL_N = (0.8, 4.0)        # outside this, a junction diode's N is suspicious (common practice)


@dataclass
class ForwardSettings:
    """What the fit needs from reel.yaml (all SI)."""

    reference_temperature: float   # [K]
    ambient_temperature: float     # [K], for rows without a temperature
    activation_energy: float       # EG [eV]
    xti: float                     # [1]
    thermal_resistance: float      # [K/W]


def _model(lnis, n, rs, lni, cur, lt, theta_m1, vt, xti, eg):
    """Voltage, and its derivatives with respect to (ln IS0, N, RS), per point."""
    ln_is_t = lnis + (xti / n) * lt + theta_m1 * eg / (n * vt)
    x = lni - ln_is_t
    sp = np.logaddexp(0.0, x)
    sig = 0.5 * (1.0 + np.tanh(0.5 * x))
    v = n * vt * sp + cur * rs
    d_lnis = -n * vt * sig
    d_n = vt * sp + sig * (vt * xti * lt + theta_m1 * eg) / n
    return v, np.stack([d_lnis, d_n, cur], axis=1)


def _start(idx, k, lni, cur, vadj, vt):
    """Linear least squares of the adjusted voltage on [Vt ln I, -Vt, I]."""
    x = np.stack([vt * lni, -vt, cur], axis=1)
    jtj, jtr = grouped_normal_equations(idx, x, vadj, k)
    c = solve_stack(jtj, jtr)
    neg = ~(c[:, 2] >= 0)              # RS < 0 or NaN: refit with RS = 0
    if neg.any():
        c2 = solve_stack(jtj[neg][:, :2, :2], jtr[neg][:, :2])
        c[neg, :2] = c2
        c[neg, 2] = 0.0
    n = np.clip(c[:, 0], *N_BOUNDS)
    return np.stack([c[:, 1] / c[:, 0], n, c[:, 2]], axis=1)


def levenberg_marquardt(idx, k, lni, cur, volt, lt, theta_m1, vt, xti, eg, p0,
                        max_iter=200):
    """Fit (ln IS0, N, RS) per group; returns params, SSR, points per group, converged."""
    p = p0.copy()
    m = np.bincount(idx, minlength=k)

    def ssr_of(par):
        v, _ = _model(par[idx, 0], par[idx, 1], par[idx, 2], lni, cur, lt, theta_m1, vt, xti, eg)
        r = v - volt
        return group_sum(idx, r * r, k)

    ok = np.isfinite(p).all(axis=1)
    p[~ok] = [-30.0, 1.5, 0.0]
    ssr = ssr_of(p)
    lam = np.full(k, 1e-3)
    done = ~ok
    for _ in range(max_iter):
        if done.all():
            break
        v, jac = _model(p[idx, 0], p[idx, 1], p[idx, 2], lni, cur, lt, theta_m1, vt, xti, eg)
        jtj, jtr = grouped_normal_equations(idx, jac, v - volt, k)
        diag = np.einsum("kii->ki", jtj)
        a = jtj + lam[:, None, None] * np.eye(3)[None] * diag[:, :, None]
        step = solve_stack(a, -jtr)
        step[done] = 0.0
        bad_step = ~np.isfinite(step).all(axis=1)
        step[bad_step] = 0.0
        trial = p + step
        trial[:, 1] = np.clip(trial[:, 1], *N_BOUNDS)
        trial[:, 2] = np.maximum(trial[:, 2], 0.0)
        new = ssr_of(trial)
        better = (new < ssr) & ~done
        gain = np.where(better, (ssr - new) / np.maximum(ssr, 1e-300), 0.0)
        p[better] = trial[better]
        ssr = np.where(better, new, ssr)
        lam = np.where(better, lam / 5.0, lam * 5.0)
        small = np.abs(step) <= 1e-10 * (1.0 + np.abs(p))
        done |= (better & (gain < 1e-12)) | (lam > 1e12) | small.all(axis=1) | bad_step
    return p, ssr, m, ok


def _plateaus(dev, cur, volt, usable):
    """Points at an instrument's limit: a top-of-sweep plateau in current or voltage."""
    frame = pd.DataFrame({"dev": dev, "i": np.where(usable, cur, np.nan),
                          "v": np.where(usable, volt, np.nan)})
    g = frame.groupby("dev")
    imax = g["i"].transform("max").to_numpy()
    near_i = usable & (cur >= imax * (1 - PLATEAU_REL))
    frame["vi"] = np.where(near_i, volt, np.nan)
    gv = frame.groupby("dev")["vi"]
    spread_v = (gv.transform("max") - gv.transform("min")).to_numpy()
    at_current_limit = near_i & (spread_v > PLATEAU_V)
    vmax = g["v"].transform("max").to_numpy()
    near_v = usable & (volt >= vmax - 1e-4) & ~at_current_limit
    frame["iv"] = np.where(near_v, cur, np.nan)
    gi = frame.groupby("dev")["iv"]
    spread_i = (gi.transform("max") / gi.transform("min")).to_numpy()
    at_voltage_limit = near_v & (spread_i > 1.01)
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
        One row per device: ``device, status, note, is_A, n, rs_ohm, points,
        fit_rms_V, self_heating_K`` and the standard errors, current and temperature
        ranges and the constants the parameters hold with.
    readings : DataFrame
        Every reading with ``used`` (whether it entered the fit) for the report.
    """
    s = settings
    points = points.reset_index(drop=True)
    dev_codes, names = pd.factorize(points["device"].astype(str), sort=True)
    n_dev = len(names)
    cur = points["current"].to_numpy(dtype=float)
    volt = points["voltage"].to_numpy(dtype=float)
    temp = points["temperature"].to_numpy(dtype=float)
    temp = np.where(np.isfinite(temp), temp, s.ambient_temperature)
    finite = np.isfinite(cur) & np.isfinite(volt)
    nonpos = finite & (cur <= 0)
    usable = finite & (cur > 0)
    at_ilim, at_vlim = _plateaus(dev_codes, cur, volt, usable)
    used = usable & ~at_ilim & ~at_vlim

    count = lambda mask: np.bincount(dev_codes, mask.astype(float), minlength=n_dev).astype(int)
    n_total, n_nonpos, n_used = count(np.ones_like(used)), count(nonpos), count(used)
    n_ilim, n_vlim = count(at_ilim), count(at_vlim)
    all_reversed = count(finite & (cur < 0) & (volt < 0)) == n_total
    # Distinct currents among used points decide whether a fit is possible.
    key = pd.DataFrame({"d": dev_codes[used], "i": np.round(np.log(cur[used]), 6)})
    distinct = np.zeros(n_dev, dtype=int)
    nun = key.groupby("d")["i"].nunique()
    distinct[nun.index.to_numpy()] = nun.to_numpy()
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
        p0 = _start(idx, k, lni, c, vadj, vt)
        p, ssr, m, ok = levenberg_marquardt(idx, k, lni, c, v, lt, theta_m1, vt, s.xti,
                                            s.activation_energy, p0)
        _, jac = _model(p[idx, 0], p[idx, 1], p[idx, 2], lni, c, lt, theta_m1, vt,
                        s.xti, s.activation_energy)
        jtj, _ = grouped_normal_equations(idx, jac, np.zeros(len(idx)), k)
        dof = m - 3
        with np.errstate(invalid="ignore", divide="ignore"):
            s2 = np.where(dof > 0, ssr / np.maximum(dof, 1), np.nan)
            cov_diag = np.full((k, 3), np.nan)
            inv_ok = np.isfinite(jtj).all(axis=(1, 2)) & (np.linalg.cond(jtj) < 1e15)
            if inv_ok.any():
                cov_diag[inv_ok] = np.einsum("kii->ki", np.linalg.inv(jtj[inv_ok]))
            params[fit_ids] = np.where(ok[:, None], p, np.nan)
            se[fit_ids] = np.sqrt(s2[:, None] * cov_diag)
            rms[fit_ids] = np.sqrt(ssr / m)

    # Self-heating: dT = I V Rth at each used point, and the shift it causes.
    d_t = cur * volt * s.thermal_resistance
    p_pt = params[dev_codes]
    have = used & np.isfinite(p_pt).all(axis=1)
    tempco = np.full(len(cur), TEMPCO_NO_MODEL)
    if have.any():
        tempco[have] = forward_voltage_tempco(
            cur[have], np.exp(p_pt[have, 0]), p_pt[have, 1], p_pt[have, 2], temp[have],
            s.reference_temperature, s.activation_energy, s.xti)
    shift = np.where(used, np.abs(tempco) * d_t, 0.0)
    frame = pd.DataFrame({"d": dev_codes, "dt": np.where(used, d_t, np.nan), "shift": shift,
                          "i": np.where(used, cur, np.nan), "t": np.where(used, temp, np.nan),
                          "pos": points["position"].to_numpy(dtype=float),
                          "src": points["source"].astype(str).to_numpy()})
    g = frame.groupby("d")
    heat_k = g["dt"].max().reindex(range(n_dev)).to_numpy()
    shift_max = g["shift"].max().reindex(range(n_dev)).to_numpy()
    shift_at = frame.loc[g["shift"].idxmax().reindex(range(n_dev)).to_numpy(), "i"].to_numpy()
    i_min = g["i"].min().reindex(range(n_dev)).to_numpy()
    i_max = g["i"].max().reindex(range(n_dev)).to_numpy()
    t_min = g["t"].min().reindex(range(n_dev)).to_numpy()
    t_max = g["t"].max().reindex(range(n_dev)).to_numpy()
    pos_min = g["pos"].min().reindex(range(n_dev)).to_numpy()
    pos_max = g["pos"].max().reindex(range(n_dev)).to_numpy()
    n_files = g["src"].nunique().reindex(range(n_dev)).to_numpy()

    status, notes = [], []
    for d in range(n_dev):
        note: list[str] = []
        st = "ok"
        if n_nonpos[d]:
            note.append(f"{n_nonpos[d]} reading(s) with zero or negative current ignored")
        if n_ilim[d]:
            note.append(f"{n_ilim[d]} reading(s) at the current limit near "
                        f"{si(i_max[d] if np.isfinite(i_max[d]) else np.nan, 'A')} left out")
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
        elif not np.isfinite(params[d]).all():
            st = "rejected"
            note.insert(0, "the fit did not converge: readings do not follow a diode law")
        else:
            if rms[d] > POOR_FIT_RMS_V:
                st = "warning"
                note.append(f"poor fit: rms residual {si(rms[d], 'V')} (noisy readings or "
                            f"not a single junction)")
            if not USUAL_N[0] <= params[d, 1] <= USUAL_N[1]:
                st = "warning"
                note.append(f"ideality N = {params[d, 1]:.3g} is outside the usual "
                            f"{USUAL_N[0]}–{USUAL_N[1]}")
            if params[d, 2] == 0.0:
                note.append("series resistance not resolved (RS at 0)")
        if n_used[d] and shift_max[d] > SELF_HEATING_SHIFT_V:
            if st == "ok":
                st = "warning"
            note.append(f"self-heating up to {heat_k[d]:.2g} K shifts the forward voltage by "
                        f"about {si(shift_max[d], 'V', 2)} at {si(shift_at[d], 'A')}; pulse "
                        f"the test or lower the current")
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
        "device": points["device"].astype(str).to_numpy(),
        "current_A": cur, "voltage_V": volt, "temperature_C": temp - ZERO_CELSIUS,
        "used": used.astype(int),
        "source": points["source"].astype(str).to_numpy(),
        "line": points["line"].to_numpy(),
    })
    return out, readings
