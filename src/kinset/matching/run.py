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
from kinset.matching.criteria import (column_suffix, effective_tolerance, evaluate,
                                     instrument_uncertainty, normalise, spread_columns)
from kinset.matching.profile import Profile, load_profile
from kinset.matching.reasons import Reason, stage_of
from kinset.matching.sets import form_sets
from kinset.registry import NAMES, TABLES


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
        devices = sorted({d for n, t in tables.items() if n in NAMES
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
    values: pd.DataFrame | None = None


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
    accuracy: dict = field(default_factory=dict)   # reel.yaml accuracy as used


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
        reason = Reason.of("within_guard_band", d.name, criterion=d.describe(),
                           guard=_fmt(ev.guards[d.name], d))
        for dev in ev.devices:
            ev.reasons[dev].append(reason)
    cand = np.asarray([d for d in ev.devices if not ev.reasons[d]], dtype=object)
    raw = ev.values.loc[cand, [d.name for d in dims]].to_numpy(dtype=float) \
        if len(cand) else np.empty((0, len(dims)))
    z = np.column_stack([normalise(raw[:, j], d, eff[d.name]) for j, d in enumerate(dims)]) \
        if len(cand) else np.empty((0, len(dims)))
    return Candidates(ev, eff, cand, raw, z, accuracy_note, accuracy)


def set_table(found: list, c: Candidates, dims) -> pd.DataFrame:
    """sets.csv without positions: each placed part with its set's spreads and margins."""
    rows = []
    for s, members in enumerate(found, start=1):
        spreads = spread_columns(c.raw[members], dims, c.tolerance)
        rows += [{"set": s, "device": c.devices[m], **spreads} for m in members]
    columns = [f"{d.name}_{w}{column_suffix(d)}" for d in dims for w in ("spread", "margin")]
    return pd.DataFrame(rows, columns=["set", "device"] + columns)


def no_set_reasons(c: Candidates, placed: set, k: int) -> None:
    """Why each candidate left unplaced found no set: partners within every tolerance."""
    left = [d for d in c.devices if d not in placed]
    neighbours = _neighbour_counts(c.z, [i for i, d in enumerate(c.devices) if d not in placed])
    for dev, nb in zip(left, neighbours):
        if nb + 1 >= k:
            reason = Reason.of("partners_used")
        elif nb:
            reason = Reason.of("too_few_partners", count=nb, needed=k - 1)
        else:
            reason = Reason.of("no_partner")
        c.evaluation.reasons[dev].append(reason)


def unmatched_table(ev, placed: set) -> pd.DataFrame:
    """unmatched.csv without positions: every part not placed, its reasons, and the stage,
    code and criterion (dimension or screen name, '' for the whole part) of its first reason."""
    left = [d for d in ev.devices if d not in placed]
    first = [ev.reasons[d][0] if ev.reasons[d] else Reason("", "") for d in left]
    return pd.DataFrame({
        "device": left,
        "reason": ["; ".join(r.text for r in ev.reasons[d]) for d in left],
        "stage": [stage_of(r.code) for r in first],
        "reason_code": [r.code for r in first],
        "criterion": [r.criterion for r in first],
    }, columns=["device", "reason", "stage", "reason_code", "criterion"])


def values_table(c: Candidates, profile: Profile, unmatched: pd.DataFrame) -> pd.DataFrame:
    """values.csv: every part's value of each dimension and screen (SI) and its standard
    uncertainty ``<name>_u`` (here the instruments' part, JCGM 100:2008 §4.3.7), with the
    code and reason of a part not placed."""
    ev = c.evaluation
    out = pd.DataFrame({"device": ev.devices})
    named = [(d.name, d.quantity) for d in profile.dimensions]
    named += [(s.name, s.quantity) for s in profile.screens
              if s.name not in {n for n, _ in named}]
    for name, quantity in named:
        frame = ev.values if name in ev.values else ev.screened
        v = frame[name].to_numpy(dtype=float)
        out[name] = v
        out[f"{name}_u"] = instrument_uncertainty(quantity, v, c.accuracy)
    why = unmatched.set_index("device")
    for col in ("reason_code", "reason"):
        out[col] = why[col].astype(object).reindex(ev.devices).fillna("").to_numpy()
    return out


def match(tables: dict[str, pd.DataFrame], devices: list[str], profile: Profile,
          accuracy: dict | None = None) -> MatchResult:
    """Form the sets of one application; every device ends in sets or unmatched."""
    c = candidates(tables, devices, profile, accuracy)
    dims = profile.dimensions
    weights = np.asarray([d.weight for d in dims])
    k = profile.set_size
    if len(c.devices) >= k:
        result = form_sets(c.z, weights, k, profile.goal)
        found, bound, method, optimal = result.sets, result.upper_bound, result.method, result.optimal
    else:
        found, bound, method, optimal = [], 0, "too few candidates for one set", True
    sets = set_table(found, c, dims)
    placed = set(sets["device"])
    no_set_reasons(c, placed, k)
    unmatched = unmatched_table(c.evaluation, placed)
    counts = unmatched["stage"].value_counts().to_dict()
    ev = c.evaluation
    summary = {
        "application": profile.name,
        "set_size": k,
        "goal": profile.goal,
        "sets": len(found),
        "upper_bound": int(bound),
        "optimal": bool(optimal),
        "method": method,
        "parts_seen": int(len(ev.devices)),
        "parts_with_data": int(len(ev.devices) - counts.get("data", 0)),
        "parts_passed_screen": int(len(c.devices)),
        "parts_used": int(len(placed)),
        "parts_left": {stage: int(n) for stage, n in sorted(counts.items())},
        "guard_band": {d.name: ev.guards[d.name] for d in dims},
        "tolerance_used": {d.name: c.tolerance[d.name] for d in dims},
    }
    if c.accuracy_note:
        summary["note"] = c.accuracy_note
    return MatchResult(profile, sets, unmatched, summary, values_table(c, profile, unmatched))


def _fmt(value: float, dim) -> str:
    if dim.relative:
        return f"{100 * value:.3g} % of a typical value" if math.isfinite(value) else "n/a"
    return si(value, dim.unit.replace("_per_K", "/K")) if dim.unit else f"{value:.3g}"


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
    """sets.csv, unmatched.csv, values.csv and summary.json in ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    sets = result.sets.copy()
    un = result.unmatched.copy()
    pos = positions or {}
    sets.insert(2, "position", [pos.get(d, np.nan) for d in sets["device"]])
    un.insert(1, "position", [pos.get(d, np.nan) for d in un["device"]])
    un = un[["device", "reason", "position", "stage", "reason_code", "criterion"]]
    write_csv(sets, folder / "sets.csv")
    write_csv(un, folder / "unmatched.csv")
    if result.values is not None:
        write_csv(result.values, folder / "values.csv")
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
