"""Quantities at a condition, evaluated per device from the extraction tables.

These are what the matcher compares: forward voltage at a current and temperature,
and its temperature coefficient, from each device's fitted model. A condition
outside what was measured is refused with a reason, never extrapolated.

Each value carries the standard uncertainty of how it was obtained (``Evaluated.u``,
besides the instrument's, which the matcher adds): a fitted model's, propagated from
the fit's covariance to the condition (:func:`kinset.uncertainty.propagate`), or a
single reading's temperature correction. NaN where the fit left no degrees of freedom
to estimate one (as many readings as parameters).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from kinset.format import si
from kinset.outcomes import Catalogue, first_clause, has_code
from kinset.physics.constants import ZERO_CELSIUS
from kinset.physics.forward import (forward_voltage_tempco as _tempco,
                                    saturation_current_at, voltage_from_current)
from kinset.uncertainty import propagate

# A reading serves a requested current within this relative difference (1 % of
# current moves a silicon junction's voltage by about N·Vt·0.01 ≈ 0.5 mV).
READING_CURRENT_REL = 0.01
# A single reading serves within this many kelvin of the requested temperature, moved
# there by the material's typical forward-voltage temperature coefficient.
READING_TEMPERATURE_K = 5.0
# dV/dT of a small-signal junction near 1 mA [V/K], by EG of the reel's material: silicon
# about -2 mV/K (common practice); low-barrier junctions (Schottky, germanium: EG below
# 0.9 eV) about -1.5 mV/K (from memory). Their standard uncertainty, 0.3 mV/K, covers
# parts from about -1.5 to -2.5 mV/K (silicon) as a rectangular half-width of 0.5 mV/K
# (JCGM 100:2008 §4.3.7); the correction's part of u is |ΔT| times it.
READING_TEMPCO = {"silicon": -2.0e-3, "low_barrier": -1.5e-3}
READING_TEMPCO_U = 0.3e-3
LOW_BARRIER_EG = 0.9          # [eV] below this the reel's material is a low-barrier junction
RANGE_SLACK = 1e-6            # relative slack on the measured current range (rounding)


REFUSALS = Catalogue.load("quantities")


@dataclass
class Evaluated:
    """Values per device (NaN where refused), the reason for each refusal ('' if none),
    its code (:data:`REFUSALS`; '' if none) and the standard uncertainty ``u`` of the
    value from its fit or correction (SI; 0 where none applies, NaN where unknown)."""

    device: np.ndarray
    value: np.ndarray
    reason: np.ndarray
    code: np.ndarray | None = None
    u: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.code is None:
            self.code = np.full(len(self.device), "", dtype=object)
        if self.u is None:
            self.u = np.zeros(len(self.device))

    def refuse(self, i: int, code: str, **fields) -> None:
        """Refuse device ``i`` with ``code`` (its value becomes NaN)."""
        self.value[i] = np.nan
        self.code[i] = code
        self.reason[i] = REFUSALS.text(code, **fields)

    def serve(self, i: int, value: float, u: float = 0.0) -> None:
        """Give device ``i`` a value and its uncertainty (clearing an earlier refusal)."""
        self.value[i] = value
        self.u[i] = u
        self.code[i] = ""
        self.reason[i] = ""

    def frame(self, name: str) -> pd.DataFrame:
        return pd.DataFrame({"device": self.device, name: self.value, f"{name}_reason": self.reason})


def _empty(devices: pd.DataFrame) -> Evaluated:
    n = len(devices)
    return Evaluated(devices["device"].astype(str).to_numpy(dtype=object), np.full(n, np.nan),
                     np.full(n, "", dtype=object), np.full(n, "", dtype=object))


def _unfitted(ev: Evaluated, devices: pd.DataFrame, rows, dataset: str, fallback: str,
              whole_note: bool = False) -> None:
    """Refuse ``rows`` that have no usable fit: the row was rejected, or the fit is missing.

    The reason quotes the first clause of the row's note (the whole note of a rejected
    row with ``whole_note``), or ``fallback`` when the note is empty.
    """
    status = devices["status"].astype(str).to_numpy()
    note = devices["note"].fillna("").astype(str).to_numpy()
    prefix = f"{dataset} " if dataset else ""
    for i in rows:
        if status[i] == "rejected":
            ev.refuse(i, "data_rejected", dataset=prefix,
                      note=note[i] if whole_note else first_clause(note[i]))
        else:
            ev.refuse(i, "no_model", note=first_clause(note[i]) or fallback)


def _fitted(devices: pd.DataFrame) -> np.ndarray:
    cols = devices[["is_A", "n", "rs_ohm"]].to_numpy(dtype=float)
    return np.isfinite(cols).all(axis=1) & (devices["status"].to_numpy() != "rejected")


def _outside_forward_range(ev: Evaluated, devices: pd.DataFrame, current: float) -> np.ndarray:
    """Refuse devices whose measured current range does not hold ``current``; the mask of those inside."""
    lo = devices["i_min_A"].to_numpy(dtype=float)
    hi = devices["i_max_A"].to_numpy(dtype=float)
    inside = (current >= lo * (1 - RANGE_SLACK)) & (current <= hi * (1 + RANGE_SLACK))
    for i in np.flatnonzero(~inside):
        ev.refuse(i, "outside_range", condition=si(current, "A"), what="forward",
                  low=si(lo[i], "A"), high=si(hi[i], "A"))
    return inside


def _forward_law(devices: pd.DataFrame, rows: np.ndarray, temperature: float):
    """(IS at ``temperature``, N, RS, reference temperature [K], EG, XTI) of the given rows."""
    d = devices[rows]
    t0 = d["reference_temperature_C"].to_numpy(float) + ZERO_CELSIUS
    return (d["is_A"].to_numpy(float), d["n"].to_numpy(float), d["rs_ohm"].to_numpy(float), t0,
            d["eg_eV"].to_numpy(float), d["xti"].to_numpy(float))


def _fit_errors(d: pd.DataFrame, params: np.ndarray, se_columns, corr_columns,
                log_params=()) -> tuple[np.ndarray, np.ndarray]:
    """Standard errors (of the parameters as fitted: ln of those in ``log_params``) and
    correlations of the rows of ``d``. A missing correlation column reads as NaN
    (unknown), a parameter with a ``<name>_fixed`` flag of 1 has a standard error of 0."""
    se = np.column_stack([d[c].to_numpy(float) if c in d else np.full(len(d), np.nan)
                          for c in se_columns])
    for j in log_params:
        se[:, j] = se[:, j] / params[:, j]
    corr = np.column_stack([d[c].to_numpy(float) if c in d else np.full(len(d), np.nan)
                            for c in corr_columns])
    return se, corr


def _forward_u(devices: pd.DataFrame, rows: np.ndarray, f) -> np.ndarray:
    """Standard uncertainty of ``f(IS0, N, RS)`` from each fitted row's covariance."""
    d = devices[rows]
    law = d[["is_A", "n", "rs_ohm"]].to_numpy(float)
    se, corr = _fit_errors(d, law, ("is_A_se", "n_se", "rs_ohm_se"),
                           ("corr_is_n", "corr_is_rs", "corr_n_rs"), log_params=(0,))
    if "rs_fixed" in d:
        se[d["rs_fixed"].to_numpy(float) == 1, 2] = 0.0
    fitted = np.column_stack([np.log(law[:, 0]), law[:, 1:]])
    return propagate(lambda p: f(np.exp(p[:, 0]), p[:, 1], p[:, 2]), fitted, se, corr)


def forward_voltage(devices: pd.DataFrame, current: float, temperature: float,
                    readings: pd.DataFrame | None = None) -> Evaluated:
    """Forward voltage of each device at ``current`` [A] and junction ``temperature`` [K].

    Parameters
    ----------
    devices : DataFrame
        The forward extraction table (``forward.csv``).
    current, temperature : float
        Forward current [A] and junction temperature [K].
    readings : DataFrame, optional
        The readings table (``forward_readings.csv``). Devices with one or two
        readings have no fitted model; a reading serves when it was taken within
        1 % of ``current`` and 0.5 K of ``temperature``.

    Returns
    -------
    Evaluated
        Voltage [V] per device, NaN with a reason where refused.
    """
    ev = _empty(devices)
    fitted = _fitted(devices)
    inside = _outside_forward_range(ev, devices, current)
    if fitted.any():
        i_s0, n, rs, t0, eg, xti = _forward_law(devices, fitted, temperature)

        def law(i_s0, n, rs):
            i_s = saturation_current_at(i_s0, temperature, t0, n, eg, xti)
            return voltage_from_current(current, i_s, n, rs, temperature)
        ev.value[fitted] = np.where(inside[fitted], law(i_s0, n, rs), np.nan)
        ev.u[fitted] = _forward_u(devices, fitted, law)
    _unfitted(ev, devices, np.flatnonzero(~fitted), "forward", "no fitted forward model",
              whole_note=True)
    if readings is not None and (~fitted).any():
        _serve_readings(devices, readings, current, temperature, fitted, ev)
    return ev


def reading_tempco(eg_ev: float) -> float:
    """Typical dV/dT [V/K] of a single reading's junction, by the reel's EG
    (:data:`READING_TEMPCO`)."""
    return READING_TEMPCO["silicon" if eg_ev >= LOW_BARRIER_EG else "low_barrier"]


def _serve_readings(devices, readings, current, temperature, fitted, ev: Evaluated):
    """Fill unfitted devices from readings taken at the requested current, within
    :data:`READING_TEMPERATURE_K` of ``temperature``: each reading moved there by the
    material's typical temperature coefficient, its uncertainty |ΔT|·u(dV/dT) carried."""
    want = set(devices["device"].to_numpy()[~fitted & (devices["status"] != "rejected").to_numpy()])
    r = readings[readings["device"].isin(want) & (readings["used"] == 1)]
    d_t = temperature - (r["temperature_C"].to_numpy(float) + ZERO_CELSIUS)
    close = (np.abs(np.log(r["current_A"].to_numpy(float) / current)) <= READING_CURRENT_REL) & \
            (np.abs(d_t) <= READING_TEMPERATURE_K)
    eg = devices.set_index("device")["eg_eV"].astype(float)
    tempco = np.array([reading_tempco(eg[d]) for d in r["device"]]) if len(r) else np.empty(0)
    moved = pd.DataFrame({"device": r["device"].to_numpy(),
                          "v": r["voltage_V"].to_numpy(float) + tempco * d_t,
                          "u": np.abs(d_t) * READING_TEMPCO_U})[close]
    served = moved.groupby("device").agg(v=("v", "mean"), u=("u", "mean"))
    index = {d: i for i, d in enumerate(devices["device"].to_numpy())}
    for dev, row in served.iterrows():
        ev.serve(index[dev], row["v"], row["u"])
    for dev in want - set(served.index):
        i = index[dev]
        window = f"{temperature - ZERO_CELSIUS:.3g} °C ± {READING_TEMPERATURE_K:g} K"
        ev.refuse(i, "no_reading", note=ev.reason[i], condition=si(current, "A"),
                  temperature=window)


def forward_voltage_tempco(devices: pd.DataFrame, current: float,
                           temperature: float) -> Evaluated:
    """dV/dT of each device's forward voltage at ``current`` [A] and ``temperature`` [K].

    Needs a fitted model; a single reading cannot give a slope.

    Returns
    -------
    Evaluated
        dV/dT [V/K] per device, NaN with a reason where refused.
    """
    ev = _empty(devices)
    fitted = _fitted(devices)
    inside = _outside_forward_range(ev, devices, current)
    if fitted.any():
        i_s0, n, rs, t0, eg, xti = _forward_law(devices, fitted, temperature)

        def law(i_s0, n, rs):
            return _tempco(current, i_s0, n, rs, temperature, t0, eg, xti)
        ev.value[fitted] = np.where(inside[fitted], law(i_s0, n, rs), np.nan)
        ev.u[fitted] = _forward_u(devices, fitted, law)
    unfitted = np.flatnonzero(~fitted)
    _unfitted(ev, devices, unfitted, "forward", "no fitted forward model", whole_note=True)
    for i in unfitted:
        ev.refuse(i, "no_slope", note=ev.reason[i])
    return ev


# Codes of an extraction table (its reason_code) saying the readings did not determine a
# column's value (issue 15, identifiability): matching on that column refuses the part.
NOT_DETERMINED = {
    "rs_ohm": ("rs_not_determined", "rs_imprecise"),
    "n": ("n_not_determined",),
}


def column_value(table: pd.DataFrame, column: str, label: str) -> Evaluated:
    """A quantity that is a column of an extraction table (N, RS, trr, Qrr, Irrm).

    Devices whose row is rejected, or whose value is missing, get the first clause of
    the table's note as the reason; devices whose row says the readings did not
    determine the value (:data:`NOT_DETERMINED`) are refused with ``not_determined``.
    """
    ev = _empty(table)
    values = table[column].to_numpy(dtype=float) if column in table else np.full(len(table), np.nan)
    status = table["status"].to_numpy()
    note = table["note"].fillna("").astype(str).to_numpy()
    ev.value[:] = values
    if f"{column}_se" in table:      # a fitted parameter: its standard error
        ev.u[:] = table[f"{column}_se"].to_numpy(dtype=float)
    else:
        # a row with a warning whose doubt no uncertainty expresses is not compared as if
        # it were ok
        for i in np.flatnonzero(np.isfinite(values) & (status == "warning")):
            ev.refuse(i, "warning_without_uncertainty", label=label,
                      note=first_clause(note[i]))
    codes = NOT_DETERMINED.get(column, ())
    if codes and "reason_code" in table:
        for i in np.flatnonzero(has_code(table["reason_code"], *codes) & np.isfinite(values)
                                & (status != "rejected")):
            ev.refuse(i, "not_determined", label=label)
    for i in np.flatnonzero(~np.isfinite(values) | (status == "rejected")):
        first = first_clause(note[i])
        if status[i] == "rejected":
            ev.refuse(i, "data_rejected", dataset="", note=first)
        elif first:
            ev.refuse(i, "no_value_noted", label=label, note=first)
        else:
            ev.refuse(i, "no_value", label=label)
    return ev


# --------------------------------------------------------------------------- capacitance
CAPACITANCE_BIAS_SLACK_V = 1e-6   # [V] slack on the measured bias range (rounding of the files)
CAPACITANCE_READING_V = 1e-3      # [V] a measured point serves a request within this bias


def capacitance(devices: pd.DataFrame, reverse_voltage: float,
                points: pd.DataFrame | None = None) -> Evaluated:
    """Junction capacitance of each device at a reverse bias, from its fitted law.

    Parameters
    ----------
    devices : DataFrame
        The capacitance extraction table (``capacitance.csv``).
    reverse_voltage : float
        Reverse bias VR [V], positive in reverse.
    points : DataFrame, optional
        The points table (``capacitance_points.csv``). A device with too few biases for
        a fit then serves the mean of its points used in the fit that were measured
        within 1 mV of ``reverse_voltage``.

    Returns
    -------
    Evaluated
        Capacitance [F] per device: CJO/(1 + VR/VJ)^M, plus CP where the package
        capacitance was fitted. NaN with a reason where refused: no fitted law, or a
        bias outside the device's measured range ``vr_min_V``–``vr_max_V`` (never
        extrapolated).
    """
    from kinset.physics.capacitance import junction_capacitance

    ev = _empty(devices)
    n = len(devices)
    vr = float(reverse_voltage)
    status = devices["status"].astype(str).to_numpy()
    law = devices[["cj0_F", "vj_V", "m"]].to_numpy(dtype=float)
    cp = devices["cp_F"].to_numpy(dtype=float) if "cp_F" in devices else np.zeros(n)
    cp = np.where(np.isfinite(cp), cp, 0.0)
    lo = devices["vr_min_V"].to_numpy(dtype=float)
    hi = devices["vr_max_V"].to_numpy(dtype=float)
    fitted = np.isfinite(law).all(axis=1) & (status != "rejected")
    inside = (vr >= lo - CAPACITANCE_BIAS_SLACK_V) & (vr <= hi + CAPACITANCE_BIAS_SLACK_V)
    ok = fitted & inside
    if ok.any():
        ev.value[ok] = junction_capacitance(vr, law[ok, 0], law[ok, 1], law[ok, 2]) + cp[ok]
        ev.u[ok] = _capacitance_u(devices[ok], np.column_stack([law[ok], cp[ok]]), vr)
    for i in np.flatnonzero(fitted & ~inside):
        ev.refuse(i, "outside_range", condition=f"{vr:g} V", what="reverse-bias",
                  low=f"{lo[i]:g}", high=f"{hi[i]:g} V")
    _unfitted(ev, devices, np.flatnonzero(~fitted), "capacitance", "no fitted capacitance law")
    want = ~fitted & (status != "rejected")
    if points is not None and want.any():
        p = points[points["used"].astype(int) == 1]
        p = p[np.abs(p["reverse_voltage_V"].to_numpy(dtype=float) - vr) <= CAPACITANCE_READING_V]
        served = p.groupby(p["device"].astype(str))["capacitance_F"].mean()
        for i in np.flatnonzero(want):
            if ev.device[i] in served.index:
                ev.serve(i, served[ev.device[i]])   # a measured point: the instrument's u
            else:
                ev.refuse(i, "no_point", note=ev.reason[i], condition=f"{vr:g} V")
    return ev


def _capacitance_u(d: pd.DataFrame, law: np.ndarray, vr: float) -> np.ndarray:
    """Standard uncertainty of CJO/(1 + VR/VJ)^M + CP from each row's fit covariance
    (parameters as fitted: ln CJO, ln VJ, M, CP; CP held at 0 where it was not fitted)."""
    from kinset.physics.capacitance import junction_capacitance

    se, corr = _fit_errors(d, law, ("cj0_F_se", "vj_V_se", "m_se", "cp_F_se"),
                           ("corr_cj0_vj", "corr_cj0_m", "corr_cj0_cp", "corr_vj_m",
                            "corr_vj_cp", "corr_m_cp"), log_params=(0, 1))
    if "cp_F_se" not in d:
        se[:, 3] = 0.0
    fitted = np.column_stack([np.log(law[:, :2]), law[:, 2:]])
    return propagate(lambda p: junction_capacitance(vr, np.exp(p[:, 0]), np.exp(p[:, 1]), p[:, 2])
                     + p[:, 3], fitted, se, corr)


LEAKAGE_VOLTAGE_SLACK = 1e-6   # relative slack on the modelled reverse-voltage range (rounding)


def reverse_current(devices: pd.DataFrame, reverse_voltage: float,
                    temperature: float) -> Evaluated:
    """Reverse (leakage) current of each device at ``reverse_voltage`` [V] and ``temperature`` [K].

    Parameters
    ----------
    devices : DataFrame
        The leakage extraction table (``leakage.csv``).
    reverse_voltage : float
        Reverse bias, a positive magnitude [V].
    temperature : float
        Junction temperature [K].

    Returns
    -------
    Evaluated
        Current [A] per device from its fitted shunt plus generation model
        (:func:`kinset.physics.leakage.reverse_current`), the generation part scaled
        to ``temperature`` with the law the extraction normalised by (columns
        ``law_eg_eV, law_xti, law_n``). NaN with a reason where refused: no model, or a
        voltage outside the range the model was fitted over (``sweep_min_V`` to
        ``model_max_V``; breakdown above it), never extrapolated.
    """
    from kinset.physics.leakage import leakage_temperature_factor
    from kinset.physics.leakage import reverse_current as leakage_current

    ev = _empty(devices)
    vr = float(reverse_voltage)
    status = devices["status"].astype(str).to_numpy()
    col = lambda c: devices[c].to_numpy(dtype=float)   # noqa: E731
    rsh, igen = col("rsh_ohm"), col("igen_A")
    m = np.where(np.isfinite(col("gen_m")), col("gen_m"), 0.0)   # no generation part: any M
    lo, hi, full = col("sweep_min_V"), col("model_max_V"), col("sweep_max_V")
    fitted = np.isfinite(igen) & ~np.isnan(rsh) & (status != "rejected")
    inside = (vr >= lo * (1 - LEAKAGE_VOLTAGE_SLACK)) & (vr <= hi * (1 + LEAKAGE_VOLTAGE_SLACK))
    ok = fitted & inside
    if ok.any():
        t0 = col("reference_temperature_C")[ok] + ZERO_CELSIUS
        f = leakage_temperature_factor(temperature, t0, col("law_eg_eV")[ok],
                                       col("law_xti")[ok], col("law_n")[ok])
        ev.value[ok] = leakage_current(vr, rsh[ok], igen[ok] * f, col("gen_vj_V")[ok], m[ok],
                                       temperature, col("gen_n")[ok])
    for i in np.flatnonzero(fitted & ~inside):
        if vr > hi[i] and full[i] > hi[i] * (1 + LEAKAGE_VOLTAGE_SLACK):
            ev.refuse(i, "above_breakdown", condition=f"{vr:g} V", high=f"{hi[i]:.4g} V",
                      top=f"{full[i]:.4g} V")
        else:
            ev.refuse(i, "outside_range", condition=f"{vr:g} V", what="reverse-voltage",
                      low=f"{lo[i]:.4g}", high=f"{hi[i]:.4g} V")
    _unfitted(ev, devices, np.flatnonzero(~fitted), "leakage", "no fitted leakage model")
    return ev


# --------------------------------------------------------------------------- by name

@dataclass(frozen=True)
class Quantity:
    """A quantity a profile can name: where it comes from and how it is measured."""

    dataset: str                  # extraction table it is evaluated from (kinset.registry)
    unit: str                     # SI unit of its tolerance keys ("" for dimensionless)
    condition: str | None = None  # "at_current_A" or "at_reverse_voltage_V", or None
    accuracy: str | None = None   # reel.yaml accuracy entry of the instrument, if any
    column: str | None = None     # table column, for quantities without a condition
    label: str = ""
    # (tables, condition, temperature) -> Evaluated; None: the column's value
    evaluator: Callable | None = None
    # the table's columns of each device's lowest and highest condition it serves (the
    # measured range; a condition outside every device's is said before matching)
    measured: tuple[str, str] | None = None


QUANTITIES: dict[str, Quantity] = {
    "forward_voltage": Quantity(
        "forward", "V", "at_current_A", "voltage", label="forward voltage",
        evaluator=lambda t, c, temp: forward_voltage(t["forward"], c, temp, t.get("forward_readings")),
        measured=("i_min_A", "i_max_A")),
    "forward_voltage_tempco": Quantity(
        "forward", "V_per_K", "at_current_A", label="forward-voltage temperature coefficient",
        evaluator=lambda t, c, temp: forward_voltage_tempco(t["forward"], c, temp),
        measured=("i_min_A", "i_max_A")),
    "reverse_current": Quantity(
        "leakage", "A", "at_reverse_voltage_V", "current", label="reverse current",
        evaluator=lambda t, c, temp: reverse_current(t["leakage"], c, temp),
        measured=("sweep_min_V", "model_max_V")),
    "capacitance": Quantity(
        "capacitance", "F", "at_reverse_voltage_V", "capacitance", label="capacitance",
        evaluator=lambda t, c, temp: capacitance(t["capacitance"], c, t.get("capacitance_points")),
        measured=("vr_min_V", "vr_max_V")),
    "recovery_time": Quantity("recovery", "s", None, "time", "trr_s", "recovery time trr"),
    "recovery_charge": Quantity("recovery", "C", None, None, "qrr_C", "recovered charge Qrr"),
    "peak_reverse_current": Quantity("recovery", "A", None, "current", "irrm_A",
                                     "peak reverse current Irrm"),
    "ideality": Quantity("forward", "", None, None, "n", "ideality N"),
    "series_resistance": Quantity("forward", "ohm", None, None, "rs_ohm", "series resistance RS"),
}

CONDITION_UNITS = {"at_current_A": "A", "at_reverse_voltage_V": "V"}


def evaluate(quantity: str, condition: float | None, tables: dict[str, pd.DataFrame],
             temperature: float) -> Evaluated | None:
    """One quantity at one condition for every device of its dataset's table.

    ``tables`` maps table names (``forward``, ``forward_readings``, ...) to the
    extraction tables; ``None`` when the reel has no table of the quantity's dataset.
    """
    q = QUANTITIES[quantity]
    table = tables.get(q.dataset)
    if table is None:
        return None
    if q.evaluator is not None:
        return q.evaluator(tables, condition, temperature)
    return column_value(table, q.column, q.label)


def describe(quantity: str, condition: float | None) -> str:
    """``forward voltage at 100 µA``: the quantity's label and its condition."""
    q = QUANTITIES[quantity]
    if condition is None:
        return q.label
    return f"{q.label} at {si(condition, CONDITION_UNITS[q.condition])}"
