"""From extraction tables to the numbers a profile matches on.

Each profile dimension becomes one value per device, evaluated from the fitted
models at the profile's temperature, with its combined standard uncertainty (the
instrument's part from reel.yaml's accuracy and the fit's or correction's part from
:mod:`kinset.quantities`, JCGM 100:2008 §5.1.2); a device that lacks the data, or is
asked outside what was measured, gets a reason instead. Screening limits are checked
here too, and the guard band of each tolerance is derived from the parts' uncertainties
(:func:`guard_cap`).

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data — Guide to the expression of
   uncertainty in measurement, §4.3.7 (rectangular distribution: u = a/√3).
.. [2] JCGM 106:2012, Evaluation of measurement data — The role of measurement
   uncertainty in conformity assessment, §8 (guarded acceptance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from kinset.format import si
from kinset.matching.profile import Dimension, Profile, Screen
from kinset.matching.reasons import REASONS, Reason
from kinset.quantities import QUANTITIES
from kinset.quantities import evaluate as evaluate_quantity

SQRT3 = math.sqrt(3.0)


# A part whose uncertainty alone takes more than this fraction of a tolerance as a guard
# band (2·u, the guard beside an exactly known partner) is left out as `uncertain`: its
# value cannot tell a match from a miss.
UNCERTAIN_SHARE = 0.5


@dataclass
class Evaluation:
    """Values of every dimension per device, and why a device cannot be matched."""

    devices: np.ndarray          # all devices seen, sorted
    values: pd.DataFrame         # device index, one column per dimension (NaN = missing)
    reasons: dict[str, list[Reason]]  # device -> reasons it cannot take part
    guards: dict[str, float]     # dimension -> guard band (SI; for a relative one, at typical)
    typical: dict[str, float]    # dimension -> median value over the reel
    screened: pd.DataFrame | None = None   # device index, one column per screen (NaN = missing)
    u: pd.DataFrame | None = None   # device index, combined standard uncertainty of each
    #                                 dimension and screen (SI; NaN = unknown)


def instrument_accuracy(quantity: str, value, accuracy: dict):
    """Half-width ``a`` of the instrument's specification ±(gain·reading + offset) at ``value``.

    0 for a quantity no instrument entry of reel.yaml covers.
    """
    kind = QUANTITIES[quantity].accuracy
    spec = accuracy.get(kind, {}) if kind is not None else {}
    offset_key = next((k for k in spec if k.startswith("offset")), None)
    return spec.get("gain", 0.0) * np.abs(value) + (spec.get(offset_key, 0.0) if offset_key else 0.0)


def instrument_uncertainty(quantity: str, values, accuracy: dict) -> np.ndarray:
    """Standard uncertainty from the instrument alone, u = a/√3 [1]; NaN where no
    instrument entry covers the quantity."""
    values = np.asarray(values, dtype=float)
    if QUANTITIES[quantity].accuracy is None:
        return np.full(values.shape, np.nan)
    return instrument_accuracy(quantity, values, accuracy) / SQRT3


def combined_uncertainty(quantity: str, values, fit_u, accuracy: dict) -> np.ndarray:
    """Combined standard uncertainty (JCGM 100:2008 §5.1.2, uncorrelated parts): the
    instrument's (:func:`instrument_uncertainty`; 0 where no instrument entry covers the
    quantity) and the fit's or correction's ``fit_u`` (NaN where unknown stays NaN)."""
    inst = instrument_uncertainty(quantity, values, accuracy)
    return np.hypot(np.where(np.isnan(inst), 0.0, inst), np.asarray(fit_u, dtype=float))


def pair_guard(u_a, u_b):
    """Guard band of the difference of two values with standard uncertainties ``u_a`` and
    ``u_b`` (independent): guarded acceptance with coverage factor k = 2 [2] accepts a
    spread only up to T − 2·√(u_a² + u_b²)."""
    return 2.0 * np.hypot(u_a, u_b)


def guard_cap(u: np.ndarray, tolerance: float) -> float:
    """The standard uncertainty a dimension's guard band is set at.

    Sets are formed in one geometry (every spread at most T − g) so that the exact and
    heuristic set packers can work on points; JCGM 106's guarded acceptance with each
    set's own extreme members a, b needs spread ≤ T − 2·√(u_a² + u_b²) [2]. With
    g = :func:`pair_guard` (cap, cap) every part with u ≤ cap meets that conservatively,
    whichever partners it gets. The cap is the value among the parts' own u that keeps
    the most parts-times-tolerance, n(u ≤ cap)·(T − g): a few thin parts are then left
    out rather than narrowing every set's tolerance, and a reel of like parts keeps
    them all. ``u`` holds the candidates' (finite) uncertainties, relative ones for a
    percent tolerance.
    """
    u = np.sort(np.asarray(u, dtype=float))
    if not len(u):
        return 0.0
    score = np.arange(1, len(u) + 1) * (tolerance - pair_guard(u, u))
    return float(u[len(u) - 1 - int(np.argmax(score[::-1]))])


def _collect(quantity: str, condition, tables, temperature, index: pd.Index):
    """Values of one quantity over ``index``, the fit's or correction's part of their
    uncertainty, and each refusal as (code, sentence)."""
    ev = evaluate_quantity(quantity, condition, tables, temperature)
    col = pd.Series(np.nan, index=index)
    fit_u = pd.Series(np.nan, index=index)
    why = pd.Series("", index=index, dtype=object)
    code = pd.Series("", index=index, dtype=object)
    dataset = QUANTITIES[quantity].dataset
    if ev is None:
        why[:] = REASONS.text(f"no_{dataset}_data", dataset=dataset, where=" in this reel")
        code[:] = f"no_{dataset}_data"
        return col, fit_u, why, code
    ev_index = pd.Index(ev.device.astype(str))      # device ids are unique per table
    present = index.isin(ev_index)
    for target, source in ((col, ev.value), (fit_u, ev.u), (why, ev.reason), (code, ev.code)):
        target[present] = pd.Series(source, index=ev_index).reindex(index[present]).to_numpy()
    why[~present] = REASONS.text(f"no_{dataset}_data", dataset=dataset, where="")
    code[~present] = f"no_{dataset}_data"
    return col, fit_u, why, code


def _screen(screen: Screen, col, why, code, reasons) -> None:
    """Each device's reason for failing ``screen``: no value (with its refusal), or beyond a limit."""
    for dev in col.index:
        if why[dev]:
            reasons[dev].append(Reason.wrapped("screen_refused", code[dev], why[dev],
                                               screen.describe(), screen.name))
            continue
        v = col[dev]
        failed = []
        if screen.maximum is not None and v > screen.maximum:
            failed.append(("above", screen.maximum))
        if screen.minimum is not None and v < screen.minimum:
            failed.append(("below", screen.minimum))
        for side, limit in failed:
            reasons[dev].append(Reason.of(
                "screen_failed", screen.name, criterion=screen.describe(),
                value=si(v, screen.unit), side=side, limit=si(limit, screen.unit)))


def evaluate(profile: Profile, tables: dict[str, pd.DataFrame], all_devices,
             accuracy: dict) -> Evaluation:
    """Evaluate every dimension and screen of ``profile`` for ``all_devices``, with the
    combined standard uncertainty of each value, and set each dimension's guard band."""
    devices = np.asarray(sorted(set(map(str, all_devices))), dtype=object)
    index = pd.Index(devices, name="device")
    reasons: dict[str, list[Reason]] = {d: [] for d in devices}
    values = pd.DataFrame(index=index)
    screened = pd.DataFrame(index=index)
    u = pd.DataFrame(index=index)
    typical = {}
    t = profile.temperature
    for dim in profile.dimensions:
        col, fit_u, why, code = _collect(dim.quantity, dim.condition, tables, t, index)
        if dim.relative:
            bad = col.notna() & ~(col > 0)
            why[bad] = REASONS.text("not_positive", criterion=dim.describe())
            code[bad] = "not_positive"
            col[bad] = np.nan
        values[dim.name] = col
        u[dim.name] = combined_uncertainty(dim.quantity, col, fit_u, accuracy)
        u.loc[col.isna(), dim.name] = np.nan        # no value, no uncertainty
        for dev in index[why.to_numpy() != ""]:
            reasons[dev].append(Reason.wrapped("criterion_refused", code[dev], why[dev],
                                               dim.describe(), dim.name))
        finite = col[np.isfinite(col)]
        typical[dim.name] = float(finite.median()) if len(finite) else math.nan
    for screen in profile.screens:
        col, fit_u, why, code = _collect(screen.quantity, screen.condition, tables, t, index)
        screened[screen.name] = col
        if screen.name not in u:
            u[screen.name] = combined_uncertainty(screen.quantity, col, fit_u, accuracy)
            u.loc[col.isna(), screen.name] = np.nan
        _screen(screen, col, why, code, reasons)
    offered = pd.Series([not reasons[d] for d in devices], index=index)
    guards = {dim.name: _guard(profile, dim, values[dim.name], u[dim.name], typical[dim.name],
                               offered, reasons) for dim in profile.dimensions}
    return Evaluation(devices, values, reasons, guards, typical, screened, u)


def _guard(profile: Profile, dim: Dimension, col: pd.Series, u: pd.Series, typical: float,
           offered: pd.Series, reasons: dict) -> float:
    """Leave out the parts too uncertain to be matched on ``dim``; its guard band (SI).
    With ``guard_band: none`` the values are compared as they are: nothing is left out.

    ``uncertain``: the part's own guard (beside an exactly known partner) takes more than
    :data:`UNCERTAIN_SHARE` of the tolerance, or its uncertainty is unknown. ``less_certain``: above the cap the guard is
    set at (:func:`guard_cap`, over the parts still ``offered``)."""
    if profile.guard_band != "accuracy":     # values compared as they are: no guard
        return 0.0
    rel = u / col.abs() if dim.relative else u
    has = col.notna()
    unknown = has & rel.isna()
    own = has & (pair_guard(rel, 0.0) > UNCERTAIN_SHARE * dim.tolerance)
    for dev in col.index[unknown | own]:
        why = (REASONS.text("uncertainty_unknown") if unknown[dev] else
               REASONS.text("uncertainty_share", share=f"{UNCERTAIN_SHARE:.0%}",
                            tolerance=format_amount(dim.tolerance, dim, typical=False)))
        reasons[dev].append(Reason.of("uncertain", dim.name, criterion=dim.describe(),
                                      u=_u_text(rel[dev], dim), why=why))
    pool = offered & has & ~unknown & ~own
    cap = guard_cap(rel[pool].to_numpy(dtype=float), dim.tolerance)
    if not pool.any() and (has & ~unknown).any():
        # nobody left to match on it: report the guard the least uncertain part would need
        cap = float(rel[has & ~unknown].min())
    for dev in col.index[pool & (rel > cap)]:
        reasons[dev].append(Reason.of("less_certain", dim.name, criterion=dim.describe(),
                                      u=_u_text(rel[dev], dim), cap=_u_text(cap, dim)))
    return float(pair_guard(cap, cap) * (abs(typical) if dim.relative else 1.0))


def format_amount(value: float, dim, typical: bool = True) -> str:
    """A tolerance, guard or spread of ``dim`` in words: SI with prefix, or percent."""
    if dim.relative:
        if not math.isfinite(value):
            return "n/a"
        return f"{100 * value:.3g} %" + (" of a typical value" if typical else "")
    return si(value, dim.unit.replace("_per_K", "/K")) if dim.unit else f"{value:.3g}"


def _u_text(u: float, dim) -> str:
    return "unknown" if not math.isfinite(u) else format_amount(u, dim, typical=False)


def effective_tolerance(dim: Dimension, guard: float, typical: float) -> float:
    """Tolerance left after the guard band: SI for absolute, a fraction for percent."""
    if dim.relative:
        return dim.tolerance - (guard / abs(typical) if typical else 0.0)
    return dim.tolerance - guard


def normalise(values: np.ndarray, dim: Dimension, effective: float) -> np.ndarray:
    """Coordinates in which a set is valid when its spread is at most 1."""
    if dim.relative:
        return np.log(values) / math.log1p(effective)
    return values / effective


def spread(values: np.ndarray, dim: Dimension) -> float:
    """Spread of one set in one dimension: max − min, or max/min − 1 in percent mode."""
    if dim.relative:
        return float(values.max() / values.min() - 1.0)
    return float(values.max() - values.min())


def column_suffix(dim) -> str:
    """Unit suffix of a criterion's columns: ``_percent``, ``_<unit>`` or nothing."""
    return "_percent" if dim.relative else (f"_{dim.unit}" if dim.unit else "")


def spread_columns(block: np.ndarray, dims, tolerance: dict, word: str = "spread") -> dict:
    """Each criterion's spread over the rows of ``block`` (SI values, one column per
    criterion) and its margin to the effective tolerance, as ``<dim>_<word><suffix>``
    and ``<dim>_margin<suffix>`` (percent for relative criteria)."""
    row = {}
    for j, d in enumerate(dims):
        sp = spread(block[:, j], d)
        scale = 100 if d.relative else 1
        row[f"{d.name}_{word}{column_suffix(d)}"] = sp * scale
        row[f"{d.name}_margin{column_suffix(d)}"] = (tolerance[d.name] - sp) * scale
    return row
