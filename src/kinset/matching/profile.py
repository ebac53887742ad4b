"""Application profiles: what one circuit needs matched, read from YAML.

A profile is validated against ``schemas/application.schema.json``; its criteria
then become *dimensions*, one per quantity and condition (forward voltage at four
currents is four dimensions), each with a tolerance in SI and a weight.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

from kinset.errors import InputError
from kinset.format import likely_unit, si
from kinset.io.config import read_yaml, validate
from kinset.io.profiles import resolve_profile
from kinset.quantities import CONDITION_UNITS, QUANTITIES, Quantity, describe
from kinset.si import PREFIXES, ZERO_CELSIUS


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
        return describe(self.quantity, self.condition)


@dataclass(frozen=True)
class Screen:
    quantity: str
    condition: float | None
    minimum: float | None
    maximum: float | None
    unit: str

    @property
    def name(self) -> str:
        """Column stem of the screened value, named like a dimension."""
        return dimension_name(self.quantity, self.condition)

    def describe(self) -> str:
        return describe(self.quantity, self.condition)


@dataclass
class Profile:
    """One application profile, validated, with every default filled in.

    ``settings`` keeps the validated mapping as read (for the report's provenance);
    programs read the typed fields.
    """

    name: str            # output folder name: shipped name or the YAML file's stem
    path: Path
    settings: dict
    title: str = ""      # the profile's own name: key (or ``name`` when it has none)
    description: str = ""
    set_size: int = 2
    goal: str = "most_sets"          # most_sets | tightest_sets
    guard_band: str = "accuracy"     # none | accuracy
    operating_temperature_C: float = 25.0
    dimensions: list[Dimension] = field(default_factory=list)
    screens: list[Screen] = field(default_factory=list)
    # Tolerances outside the plausible range of their quantity (TOLERANCE_RANGES): each
    # a sentence naming the key, its line and the likely unit. Warnings, never errors.
    warnings: list[str] = field(default_factory=list)
    # screened quantities the user stated may go unscreened while the reel has no data
    # for them at all (key waive_screens, or kinset match --waive-screens)
    waive_screens: tuple[str, ...] = ()
    # reel.yaml materials the profile is made for (key materials; empty: any)
    materials: tuple[str, ...] = ()
    # the reference circuit every set is simulated in (key circuit; None: none)
    circuit: "CircuitSpec | None" = None

    @classmethod
    def from_settings(cls, name: str, path: Path, settings: dict) -> "Profile":
        return cls(name=name, path=path, settings=settings,
                   title=str(settings.get("name") or name),
                   description=str(settings.get("description") or ""),
                   set_size=int(settings["set_size"]), goal=str(settings["goal"]),
                   guard_band=str(settings["guard_band"]),
                   operating_temperature_C=float(settings["operating_temperature_C"]),
                   waive_screens=tuple(settings.get("waive_screens") or ()),
                   materials=tuple(settings.get("materials") or ()))

    @property
    def temperature(self) -> float:
        """Operating junction temperature [K]."""
        return self.operating_temperature_C + ZERO_CELSIUS

    def waiving(self, quantities, where: str) -> "Profile":
        """This profile with the screens on ``quantities`` waived as well (from the command
        line or the workflow config, named ``where`` in an error); a quantity the profile
        does not screen is no waiver of it (:func:`check_waiver`)."""
        names = tuple(q for q in quantities if q not in self.waive_screens)
        unknown = [q for q in names if q not in QUANTITIES]
        if unknown:
            raise InputError(f"{where}: unknown quantity '{unknown[0]}' (a screened quantity: "
                             f"{', '.join(QUANTITIES)})")
        check_waiver(self, names, where, only_screened=True)
        screened = {s.quantity for s in self.screens}
        return replace(self, waive_screens=self.waive_screens +
                       tuple(q for q in names if q in screened))

    @property
    def datasets(self) -> set[str]:
        return {QUANTITIES[d.quantity].dataset for d in self.dimensions} | \
               {QUANTITIES[s.quantity].dataset for s in self.screens}


@dataclass(frozen=True)
class Plausible:
    """The range a tolerance of one quantity plausibly lies in [SI], and why."""

    low: float
    high: float
    reason: str


# One plausible range per quantity's tolerance (SI, absolute), each with its reason. A
# tolerance outside it is accepted with a warning naming the unit it was likely meant in
# (a unit slip: tolerance_V: 1 written for 1 mV); an unusual application may need it.
TOLERANCE_RANGES: dict[str, Plausible] = {
    "forward_voltage": Plausible(1e-4, 0.1, "common practice: matched pairs and quads are "
                                 "specified to 1-10 mV; 0.1 mV is a bench meter's resolution"),
    "forward_voltage_tempco": Plausible(1e-6, 1e-3, "from memory: silicon's tempco is about "
                                        "-2 mV/K near 1 mA; matching is to some µV/K"),
    "reverse_current": Plausible(1e-12, 1e-5, "from memory: small-signal leakage is pA to µA"),
    "capacitance": Plausible(1e-15, 1e-10, "from memory: small-signal diodes have 0.1-10 pF, "
                             "varactors up to some hundreds of pF; matching is to fF or pF"),
    "recovery_time": Plausible(1e-11, 1e-6, "from memory: switching diodes recover in ns, "
                               "small-signal rectifiers in µs"),
    "recovery_charge": Plausible(1e-14, 1e-8, "from memory: pC to nC for small-signal parts"),
    "peak_reverse_current": Plausible(1e-5, 1.0, "common practice: recovery tests drive mA"),
    "series_resistance": Plausible(1e-2, 1e3, "from memory: RS of small-signal diodes is "
                                   "about 0.1-100 Ω"),
    "ideality": Plausible(1e-3, 1.0, "common practice: N lies between 1 and 2"),
}
# tolerance_percent: a spread of more than the value itself matches nothing; below 0.1 %
# is past any instrument's accuracy for these quantities (common practice).
PERCENT_RANGE = Plausible(0.1, 100.0, "common practice")


def tolerance_warning(quantity: str, key: str, written: float, tolerance: float,
                      line: int | None = None) -> str | None:
    """A sentence when ``tolerance`` (SI; percent for ``tolerance_percent``) lies outside
    its quantity's plausible range, naming the unit it was likely meant in; else None."""
    where = f" (line {line})" if line else ""
    label = QUANTITIES[quantity].label
    if key == "tolerance_percent":
        r = PERCENT_RANGE
        if r.low <= tolerance <= r.high:
            return None
        hint = (f"; a fraction written as percent? for {100 * written:g} % write "
                f"{key}: {100 * written:g}" if tolerance < r.low else "")
        return (f"{key}: {written:g}{where}: {label} tolerances in percent are usually "
                f"{r.low:g}-{r.high:g} %{hint}")
    r = TOLERANCE_RANGES[quantity]
    if r.low <= tolerance <= r.high:
        return None
    per_k = "_per_K" if QUANTITIES[quantity].unit.endswith("_per_K") else ""
    base = QUANTITIES[quantity].unit[: len(QUANTITIES[quantity].unit) - len(per_k)]
    shown = base + ("/K" if per_k else "")
    usual = f"{si(r.low, shown)}-{si(r.high, shown)}" if base else f"{r.low:g}-{r.high:g}"
    text = f"{key}: {written:g}{where}: {label} tolerances are usually {usual}"
    key_unit = key[len("tolerance_"):len(key) - len(per_k)]
    meant = likely_unit(tolerance, key_unit, (r.low * r.high) ** 0.5, r.high) if base else ""
    if not base or meant == key_unit:
        return text
    meant_si = written * PREFIXES[meant[: len(meant) - len(base)]]
    in_key = meant_si / (tolerance / written)
    return f"{text}; did you mean {si(meant_si, shown)} ({key}: {in_key:g})?"


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


def dimension_name(quantity: str, condition: float | None) -> str:
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
    profile = Profile.from_settings(path.stem, path, settings)
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
        warning = tolerance_warning(entry["quantity"], key, entry[key],
                                    100 * tol if relative else tol, lines.get(where))
        if warning:
            profile.warnings.append(warning)
        for cond in _conditions(entry, q, where, path, lines):
            profile.dimensions.append(Dimension(
                name=dimension_name(entry["quantity"], cond), quantity=entry["quantity"],
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
    check_waiver(profile, profile.waive_screens, (path, lines.get(("waive_screens",)),
                                                  "waive_screens"))
    if "circuit" in settings:
        profile.circuit = circuit_spec(settings["circuit"], profile.set_size, path, lines)
    return profile


@dataclass(frozen=True)
class CircuitSpec:
    """A profile's reference circuit: its kind, its drive and load (the kind's defaults
    overlaid by the profile's keys), limits on its figures and the stated expectation."""

    kind: str
    params: dict
    limits: dict          # min_<figure> / max_<figure> -> number
    expect: str = ""      # the profile's own words on what a good set gives

    def limit_pairs(self) -> list[tuple[str, str, float]]:
        """(figure, "min" or "max", bound) of every limit."""
        return [(key[4:], key[:3], float(v)) for key, v in self.limits.items()]


def circuit_spec(entry: dict, set_size: int, path: Path, lines: dict) -> CircuitSpec:
    """The typed ``circuit:`` section; an InputError naming the key, file and line for a key
    the kind does not take, a limit on a figure it does not compute, or a set size that is
    not its number of positions."""
    from kinset.circuit.kinds import kind_module
    kind = entry["kind"]
    try:
        module = kind_module(kind)
    except ImportError:
        raise InputError(f"circuit kind {kind} is not in this version of kinset", path,
                         lines.get(("circuit", "kind")), "circuit.kind") from None
    line = lambda *key: lines.get(("circuit", *key)) or lines.get(("circuit",))  # noqa: E731
    if set_size != module.POSITIONS:
        raise InputError(f"circuit kind {kind} takes {module.POSITIONS} diodes but set_size is "
                         f"{set_size}", path, line("kind"), "circuit.kind")
    params = {k: v[0] for k, v in module.PARAMETERS.items()}
    for key, value in entry.items():
        if key in ("kind", "limits", "expect"):
            continue
        if key not in module.PARAMETERS:
            raise InputError(f"circuit: unknown key '{key}' for kind {kind} (its keys: "
                             f"{', '.join(module.PARAMETERS)})", path, line(key), f"circuit.{key}")
        params[key] = float(value)
    limits = dict(entry.get("limits") or {})
    allowed = [f"{b}_{f}" for f in module.FIGURES for b in ("min", "max")]
    for key in limits:
        if key not in allowed:
            raise InputError(f"circuit.limits: unknown limit '{key}' for kind {kind} (min_ or "
                             f"max_ of a figure: {', '.join(allowed)})", path,
                             line("limits", key), f"circuit.limits.{key}")
    return CircuitSpec(kind, params, limits, str(entry.get("expect") or ""))


def check_waiver(profile: Profile, quantities, where, only_screened: bool = False) -> None:
    """Refuse a waiver of a match criterion, and (in a profile) of a quantity it does not
    screen. ``where``: the place an error names (file, line, key; or an option's name).
    ``only_screened``: names the profile neither screens nor matches on are left alone
    (one command-line waiver serves several applications)."""
    screened = {s.quantity for s in profile.screens}
    matched = {d.quantity for d in profile.dimensions}
    place, key = (where, "waive_screens") if isinstance(where, tuple) else ((), where)
    for q in quantities:
        if q in matched and q not in screened:
            raise InputError(f"{key}: {q} is a match criterion of {profile.name}, not "
                             f"a screen; a match criterion cannot be waived (a set cannot be "
                             f"matched on what was not measured)", *place)
        if q not in screened and not only_screened:
            raise InputError(f"{key}: {profile.name} has no screen on {q} "
                             f"(its screens: {', '.join(sorted(screened)) or 'none'})", *place)
