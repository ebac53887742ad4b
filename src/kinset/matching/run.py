"""One application on one reel: evaluate, screen, guard, form sets, account for every part.

This is what ``kinset match`` and the workflow's match rule call.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree

from kinset.errors import InputError
from kinset.format import si
from kinset.io.output import read_result, write_csv, write_text
from kinset.matching.criteria import effective_tolerance, evaluate, normalise, spread
from kinset.matching.profile import Profile, load_profile
from kinset.matching.sets import form_sets

TABLES = ("forward", "forward_readings", "leakage", "capacitance", "recovery")


def read_results(folder: str | Path) -> tuple[dict[str, pd.DataFrame], list[str], dict]:
    """The extraction tables in a results folder, the device universe, reel settings."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError("results folder does not exist", folder)
    tables = {name: read_result(folder / f"{name}.csv") for name in TABLES
              if (folder / f"{name}.csv").is_file()}
    if (folder / "devices.csv").is_file():
        devices = read_result(folder / "devices.csv")["device"].astype(str).tolist()
    else:
        devices = sorted({d for n, t in tables.items() if n != "forward_readings"
                          for d in t["device"].astype(str)})
    if not devices:
        raise InputError("no extraction tables (forward.csv, leakage.csv, ...) found", folder)
    reel = {}
    if (folder / "reel.json").is_file():
        reel = json.loads((folder / "reel.json").read_text(encoding="utf-8"))
    return tables, devices, reel


@dataclass
class MatchResult:
    profile: Profile
    sets: pd.DataFrame
    unmatched: pd.DataFrame
    summary: dict = field(default_factory=dict)


def _default_accuracy() -> dict:
    """The schema's default instrument accuracy (when a results folder has no reel.json)."""
    from kinset.io.config import validate
    return validate({"material": "silicon"}, "reel", "reel.yaml defaults")["accuracy"]


@dataclass
class Candidates:
    """What set forming starts from: the parts that passed screens and guard bands, with
    their values (SI) and the values divided by the effective tolerances (``z``)."""

    evaluation: object
    tolerance: dict
    devices: np.ndarray
    raw: np.ndarray
    z: np.ndarray
    accuracy_note: str = ""


def candidates(tables: dict[str, pd.DataFrame], devices: list[str], profile: Profile,
               accuracy: dict | None = None) -> Candidates:
    """Evaluate, screen and guard every device; the rest are candidates for sets."""
    accuracy_note = ""
    if accuracy is None:
        accuracy = _default_accuracy()
        accuracy_note = "reel accuracy not given: the schema's default instrument accuracy was used"
    ev = evaluate(profile, tables, devices, accuracy)
    dims = profile.dimensions
    eff = {d.name: effective_tolerance(d, ev.guards[d.name], ev.typical[d.name]) for d in dims}
    impossible = [d for d in dims if not eff[d.name] > 0]
    for d in impossible:
        for dev in ev.devices:
            ev.reasons[dev].append(
                f"{d.describe()}: tolerance is within the measurement guard band "
                f"({_fmt(ev.guards[d.name], d)}); the instruments cannot verify it")
    cand = np.asarray([d for d in ev.devices if not ev.reasons[d]], dtype=object)
    raw = ev.values.loc[cand, [d.name for d in dims]].to_numpy(dtype=float) \
        if len(cand) else np.empty((0, len(dims)))
    z = np.column_stack([normalise(raw[:, j], d, eff[d.name]) for j, d in enumerate(dims)]) \
        if len(cand) else np.empty((0, len(dims)))
    return Candidates(ev, eff, cand, raw, z, accuracy_note)


def match(tables: dict[str, pd.DataFrame], devices: list[str], profile: Profile,
          accuracy: dict | None = None) -> MatchResult:
    """Form the sets of one application; every device ends in sets or unmatched."""
    c = candidates(tables, devices, profile, accuracy)
    ev, eff, cand, raw, z = c.evaluation, c.tolerance, c.devices, c.raw, c.z
    accuracy_note = c.accuracy_note
    dims = profile.dimensions
    weights = np.asarray([d.weight for d in dims])
    k = profile.set_size
    if len(cand) >= k:
        result = form_sets(z, weights, k, profile.settings["goal"])
        found, bound, method, optimal = result.sets, result.upper_bound, result.method, result.optimal
    else:
        found, bound, method, optimal = [], 0, "too few candidates for one set", True

    rows = []
    placed = set()
    for s, members in enumerate(found, start=1):
        block = raw[members]
        row_base = {"set": s}
        for j, d in enumerate(dims):
            sp = spread(block[:, j], d)
            row_base[f"{d.name}_spread{_suffix(d)}"] = sp * (100 if d.relative else 1)
            row_base[f"{d.name}_margin{_suffix(d)}"] = (eff[d.name] - sp) * (100 if d.relative else 1)
        for m in members:
            placed.add(cand[m])
            rows.append({"set": s, "device": cand[m], **{k_: v for k_, v in row_base.items()
                                                                 if k_ != "set"}})
    sets = pd.DataFrame(rows, columns=["set", "device"] + [c for d in dims for c in (
        f"{d.name}_spread{_suffix(d)}", f"{d.name}_margin{_suffix(d)}")])

    left = [d for d in cand if d not in placed]
    neighbours = _neighbour_counts(z, [i for i, d in enumerate(cand) if d not in placed])
    for dev, nb in zip(left, neighbours):
        if nb + 1 < k:
            ev.reasons[dev].append(f"only {nb} other part(s) within every tolerance, a set needs "
                                   f"{k - 1}" if nb else "no other part within every tolerance")
        else:
            ev.reasons[dev].append("its compatible parts went into other sets, or cannot form "
                                   "a full set with it")
    unmatched = pd.DataFrame({"device": [d for d in ev.devices if d not in placed]})
    unmatched["reason"] = ["; ".join(ev.reasons[d]) for d in unmatched["device"]]
    unmatched["stage"] = [_stage(ev.reasons[d]) for d in unmatched["device"]]

    counts = unmatched["stage"].value_counts().to_dict()
    summary = {
        "application": profile.name,
        "set_size": k,
        "goal": profile.settings["goal"],
        "sets": len(found),
        "upper_bound": int(bound),
        "optimal": bool(optimal),
        "method": method,
        "parts_seen": int(len(ev.devices)),
        "parts_with_data": int(len(ev.devices) - counts.get("data", 0)),
        "parts_passed_screen": int(len(cand)),
        "parts_used": int(len(placed)),
        "parts_left": {stage: int(n) for stage, n in sorted(counts.items())},
        "guard_band": {d.name: ev.guards[d.name] for d in dims},
        "tolerance_used": {d.name: eff[d.name] for d in dims},
    }
    if accuracy_note:
        summary["note"] = accuracy_note
    return MatchResult(profile, sets, unmatched, summary)


def _suffix(dim) -> str:
    return "_percent" if dim.relative else (f"_{dim.unit}" if dim.unit else "")


def _fmt(value: float, dim) -> str:
    if dim.relative:
        return f"{100 * value:.3g} % of a typical value" if math.isfinite(value) else "n/a"
    return si(value, dim.unit.replace("_per_K", "/K")) if dim.unit else f"{value:.3g}"


def _stage(reasons: list[str]) -> str:
    first = reasons[0] if reasons else ""
    if first.startswith("screen:"):
        return "screen"
    if "guard band" in first:
        return "guard"
    if first.startswith(("no other part", "only ", "its compatible")):
        return "sets"
    return "data"


def _neighbour_counts(z: np.ndarray, rows: list[int]) -> list[int]:
    """Compatible parts (Chebyshev distance ≤ 1 in normalised units) of each given row."""
    if not rows:
        return []
    tree = cKDTree(z)
    hits = tree.query_ball_point(z[rows], r=1.0 + 1e-12, p=np.inf)
    return [len(h) - 1 for h in hits]


def summary_line(summary: dict) -> str:
    left = ", ".join(f"{n} at {stage}" for stage, n in summary["parts_left"].items()) or "none"
    return (f"{summary['application']}: {summary['sets']} sets of {summary['set_size']} "
            f"(at most {summary['upper_bound']} possible; {summary['method']}), "
            f"{summary['parts_used']} of {summary['parts_seen']} parts used; left: {left}")


def write_match(result: MatchResult, folder: str | Path, positions: dict | None = None) -> None:
    """sets.csv, unmatched.csv and summary.json in ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    sets = result.sets.copy()
    un = result.unmatched.copy()
    pos = positions or {}
    sets.insert(2, "position", [pos.get(d, np.nan) for d in sets["device"]])
    un.insert(1, "position", [pos.get(d, np.nan) for d in un["device"]])
    un = un[["device", "reason", "position", "stage"]]
    write_csv(sets, folder / "sets.csv")
    write_csv(un, folder / "unmatched.csv")
    write_text(folder / "summary.json", json.dumps(result.summary, indent=2, sort_keys=True) + "\n")


def run_match(results: str | Path, application: str, out: str | Path) -> MatchResult:
    tables, devices, reel = read_results(results)
    profile = load_profile(application)
    result = match(tables, devices, profile, reel.get("accuracy"))
    positions = {}
    devfile = Path(results) / "devices.csv"
    if devfile.is_file():
        d = read_result(devfile)
        positions = dict(zip(d["device"].astype(str), d["position"]))
    write_match(result, out, positions)
    return result
