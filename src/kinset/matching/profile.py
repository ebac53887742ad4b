"""Application profiles: what one circuit needs matched, read from YAML.

A profile is validated against ``schemas/application.schema.json``; its criteria
then become *dimensions*, one per quantity and condition (forward voltage at four
currents is four dimensions), each with a tolerance in SI and a weight.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from difflib import get_close_matches
from importlib import resources
from pathlib import Path

from kinset.errors import InputError
from kinset.format import si
from kinset.io.config import read_yaml, validate
from kinset.io.units import PREFIXES


@dataclass(frozen=True)
class Quantity:
    """A quantity a profile can name: where it comes from and how it is measured."""

    dataset: str                  # extraction table it is evaluated from
    unit: str                     # SI unit of its tolerance keys ("" for dimensionless)
    condition: str | None = None  # "at_current_A" or "at_reverse_voltage_V", or None
    accuracy: str | None = None   # reel.yaml accuracy entry of the instrument, if any
    column: str | None = None     # table column, for quantities without a condition
    label: str = ""


QUANTITIES: dict[str, Quantity] = {
    "forward_voltage": Quantity("forward", "V", "at_current_A", "voltage", label="forward voltage"),
    "forward_voltage_tempco": Quantity("forward", "V_per_K", "at_current_A",
                                       label="forward-voltage temperature coefficient"),
    "reverse_current": Quantity("leakage", "A", "at_reverse_voltage_V", "current", label="reverse current"),
    "capacitance": Quantity("capacitance", "F", "at_reverse_voltage_V", "capacitance", label="capacitance"),
    "recovery_time": Quantity("recovery", "s", None, "time", "trr_s", "recovery time trr"),
    "recovery_charge": Quantity("recovery", "C", None, None, "qrr_C", "recovered charge Qrr"),
    "peak_reverse_current": Quantity("recovery", "A", None, "current", "irrm_A", "peak reverse current Irrm"),
    "ideality": Quantity("forward", "", None, None, "n", "ideality N"),
    "series_resistance": Quantity("forward", "ohm", None, None, "rs_ohm", "series resistance RS"),
}

CONDITION_UNITS = {"at_current_A": "A", "at_reverse_voltage_V": "V"}


@dataclass(frozen=True)
class Dimension:
    """One matched number per device: a quantity at one condition."""

    name: str            # column stem in sets.csv, e.g. "forward_voltage_at_100uA"
    quantity: str
    condition: float | None
    tolerance: float     # [SI unit of the quantity], or a fraction when relative
    relative: bool       # tolerance_percent: matched on max/min - 1
    weight: float
    unit: str

    def describe(self) -> str:
        q = QUANTITIES[self.quantity]
        where = ""
        if self.condition is not None:
            where = f" at {si(self.condition, CONDITION_UNITS[q.condition])}"
        return q.label + where


@dataclass(frozen=True)
class Screen:
    quantity: str
    condition: float | None
    minimum: float | None
    maximum: float | None
    unit: str

    def describe(self) -> str:
        q = QUANTITIES[self.quantity]
        where = f" at {si(self.condition, CONDITION_UNITS[q.condition])}" if self.condition is not None else ""
        return q.label + where


@dataclass
class Profile:
    name: str            # output folder name: shipped name or the YAML file's stem
    path: Path
    settings: dict
    dimensions: list[Dimension] = field(default_factory=list)
    screens: list[Screen] = field(default_factory=list)

    @property
    def set_size(self) -> int:
        return int(self.settings["set_size"])

    @property
    def temperature(self) -> float:
        """Operating junction temperature [K]."""
        return self.settings["operating_temperature_C"] + 273.15

    @property
    def datasets(self) -> set[str]:
        return {QUANTITIES[d.quantity].dataset for d in self.dimensions} | \
               {QUANTITIES[s.quantity].dataset for s in self.screens}


def shipped_profiles() -> dict[str, Path]:
    """Profiles that come with kinset, by name."""
    folder = resources.files("kinset") / "applications"
    return {Path(str(p)).stem: Path(str(p)) for p in folder.iterdir() if str(p).endswith(".yaml")}


def is_profile_name(item: str) -> bool:
    """A bare name (a shipped profile), not a path."""
    return not item.endswith((".yaml", ".yml")) and "/" not in item and "\\" not in item


def resolve_profile(name_or_path: str, base: Path | None = None, only_base: bool = False) -> Path:
    """Path of a profile given as a shipped name or a YAML path.

    A relative path is looked for under ``base`` first, then (unless ``only_base``:
    a path written in reel.yaml is relative to the reel folder alone) in the working
    folder.
    """
    shipped = shipped_profiles()
    if name_or_path in shipped:
        return shipped[name_or_path]
    p = Path(name_or_path)
    candidates = [base / p] if base is not None and not p.is_absolute() else []
    for candidate in candidates + ([] if only_base else [p]):
        if candidate.suffix in (".yaml", ".yml") and candidate.is_file():
            return candidate
    names = ", ".join(sorted(shipped))
    if is_profile_name(name_or_path):
        close = get_close_matches(name_or_path, sorted(shipped), n=1)
        hint = f"did you mean '{close[0]}'? " if close else ""
        raise InputError(f"no shipped application profile '{name_or_path}': {hint}the shipped "
                         f"ones are {names} (or give a YAML file)")
    where = " in the reel folder" if only_base else ""
    raise InputError(f"application profile '{name_or_path}' not found{where}: give a YAML "
                     f"file or one of {names}")


def _unit_factor(unit: str, expected: str, path, line, key) -> float:
    """Scale of a prefixed unit written in a key (tolerance_mV -> 1e-3 for V)."""
    if expected == "":
        raise InputError(f"'{key}': this quantity has no unit; use 'tolerance' or "
                         f"'tolerance_percent'", path, line, key)
    suffix = "_per_K" if expected.endswith("_per_K") else ""
    base = expected[: -len(suffix)] if suffix else expected
    if suffix and not unit.endswith(suffix):
        raise InputError(f"'{key}': expected a unit of {expected}", path, line, key)
    unit = unit[: -len(suffix)] if suffix else unit
    if not unit.endswith(base) or unit[: len(unit) - len(base)] not in PREFIXES:
        raise InputError(f"'{key}': unit '{unit + suffix}' is not {expected} with an optional "
                         f"SI prefix", path, line, key)
    return PREFIXES[unit[: len(unit) - len(base)]]


def _conditions(entry: dict, q: Quantity, where: tuple, path, lines) -> list[float | None]:
    line = lines.get(where)
    other = {"at_current_A", "at_reverse_voltage_V"} - ({q.condition} if q.condition else set())
    for key in other:
        if key in entry:
            raise InputError(f"'{key}' does not apply to {entry['quantity']}", path, line, key)
    if q.condition is None:
        return [None]
    if q.condition not in entry:
        raise InputError(f"{entry['quantity']} needs '{q.condition}'", path, line, q.condition)
    value = entry[q.condition]
    return [float(v) for v in (value if isinstance(value, list) else [value])]


def _dimension_name(quantity: str, condition: float | None) -> str:
    if condition is None:
        return quantity
    unit = CONDITION_UNITS[QUANTITIES[quantity].condition]
    text = si(condition, unit, 4).replace(" ", "").replace("\u00b5", "u")
    return f"{quantity}_at_{text}"


def load_profile(name_or_path: str, base: Path | None = None) -> Profile:
    """Read, validate and expand an application profile."""
    path = resolve_profile(name_or_path, base)
    data, lines = read_yaml(path)
    if not isinstance(data, dict):
        raise InputError("an application profile must be a mapping of keys to values", path, 1)
    settings = validate(data, "application", path, lines)
    profile = Profile(name=path.stem, path=path, settings=settings)
    for i, entry in enumerate(settings["match"]):
        where = ("match", i)
        q = QUANTITIES[entry["quantity"]]
        tol_keys = [k for k in entry if k.startswith("tolerance")]
        if len(tol_keys) != 1:
            raise InputError(f"criterion {entry['quantity']} needs exactly one tolerance key "
                             f"(tolerance_{q.unit or 'percent'} or tolerance_percent), found "
                             f"{len(tol_keys)}", path, lines.get(where), f"match.{i}")
        key = tol_keys[0]
        if key == "tolerance_percent":
            tol, relative, unit = entry[key] / 100.0, True, ""
        elif key == "tolerance":
            if q.unit:
                raise InputError(f"'tolerance' needs a unit for {entry['quantity']}: write "
                                 f"tolerance_{q.unit}", path, lines.get(where), key)
            tol, relative, unit = float(entry[key]), False, ""
        else:
            factor = _unit_factor(key[len("tolerance_"):], q.unit, path, lines.get(where), key)
            tol, relative, unit = entry[key] * factor, False, q.unit
        for cond in _conditions(entry, q, where, path, lines):
            profile.dimensions.append(Dimension(
                name=_dimension_name(entry["quantity"], cond), quantity=entry["quantity"],
                condition=cond, tolerance=tol, relative=relative,
                weight=float(entry.get("weight", 1.0)), unit=unit))
    names = [d.name for d in profile.dimensions]
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise InputError(f"criterion named twice: {', '.join(sorted(dup))}", path, None, "match")
    for i, entry in enumerate(settings["screen"]):
        where = ("screen", i)
        q = QUANTITIES[entry["quantity"]]
        limits: dict[str, float] = {}
        for key, value in entry.items():
            if key == "quantity" or key.startswith("at_"):
                continue
            kind = key[:3]          # the schema admits only min, max, min_<unit>, max_<unit>
            if kind in limits:
                raise InputError(f"two {kind} limits for {entry['quantity']}", path,
                                 lines.get(where), key)
            if key == kind:
                if q.unit:
                    raise InputError(f"'{key}' needs a unit for {entry['quantity']}: write "
                                     f"{key}_{q.unit}", path, lines.get(where), key)
                factor = 1.0
            else:
                factor = _unit_factor(key[4:], q.unit, path, lines.get(where), key)
            limits[kind] = value * factor
        if not limits:
            raise InputError(f"screen on {entry['quantity']} needs a min_ or max_ limit", path,
                             lines.get(where), f"screen.{i}")
        for cond in _conditions(entry, q, where, path, lines):
            profile.screens.append(Screen(entry["quantity"], cond, limits.get("min"),
                                          limits.get("max"), q.unit))
    return profile
