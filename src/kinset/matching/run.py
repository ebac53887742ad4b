"""One application on one reel: evaluate, screen, guard, form sets, account for every part.

This is what ``kinset match`` and the workflow's match rule call.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree

from kinset.errors import InputError
from kinset.io.output import read_result, write_csv, write_text
from kinset.matching.allocation import Allocation, tape_order
from kinset.matching.coverage import gaps, misfits, notice, skipped_screens, suit_notice
from kinset.matching.criteria import (column_suffix, effective_tolerance, evaluate,
                                     format_amount, normalise, pair_guard, spread,
                                     spread_columns)
from kinset.matching.graph import set_cost
from kinset.matching.profile import Profile, load_profile
from kinset.matching.reasons import REASONS, Reason, stage_of
from kinset.matching.scan import tolerance_scan
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
    scan: pd.DataFrame | None = None      # tolerance_scan.csv (kinset.matching.scan)


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
    unscreened: tuple[str, ...] = ()    # screens skipped (waived, no data in the reel)
    missing: list = field(default_factory=list)    # coverage.Gap.as_dict of each gap

    @property
    def unscreened_text(self) -> str:
        """sets.csv's ``unscreened``: the screens not applied, joined by ';'."""
        return ";".join(self.unscreened)

    def subset(self, keep: np.ndarray) -> "Candidates":
        """The candidates where ``keep`` holds (the same evaluation and tolerances)."""
        return replace(self, devices=self.devices[keep], raw=self.raw[keep], z=self.z[keep])


def candidates(tables: dict[str, pd.DataFrame], devices: list[str], profile: Profile,
               accuracy: dict | None = None) -> Candidates:
    """Evaluate, screen and guard every device; the rest are candidates for sets.

    A screen the profile waives (``waive_screens``) is skipped only when the reel has no
    table of its dataset at all (:mod:`kinset.matching.coverage`); it is then named in
    ``unscreened``."""
    accuracy_note = ""
    if accuracy is None:
        accuracy = _default_accuracy()
        accuracy_note = "reel accuracy not given: the schema's default instrument accuracy was used"
    found = gaps(profile, {n for n in NAMES if n in tables})
    skipped = skipped_screens(found)
    applied = [s for s in profile.screens if s not in skipped]
    ev = evaluate(replace(profile, screens=applied), tables, devices, accuracy)
    dims = profile.dimensions
    eff = {d.name: effective_tolerance(d, ev.guards[d.name], ev.typical[d.name]) for d in dims}
    impossible = [d for d in dims if not eff[d.name] > 0]
    for d in impossible:
        guard = ev.guards[d.name] / abs(ev.typical[d.name]) if d.relative else ev.guards[d.name]
        reason = Reason.of("within_guard_band", d.name, criterion=d.describe(),
                           guard=format_amount(guard, d))
        for dev in ev.devices:
            ev.reasons[dev].append(reason)
    cand = np.asarray([d for d in ev.devices if not ev.reasons[d]], dtype=object)
    raw = ev.values.loc[cand, [d.name for d in dims]].to_numpy(dtype=float) \
        if len(cand) else np.empty((0, len(dims)))
    z = np.column_stack([normalise(raw[:, j], d, eff[d.name]) for j, d in enumerate(dims)]) \
        if len(cand) else np.empty((0, len(dims)))
    return Candidates(ev, eff, cand, raw, z, accuracy_note, accuracy,
                      tuple(s.name for s in skipped), [g.as_dict() for g in found])


def set_table(found: list, c: Candidates, dims, first: int = 1) -> pd.DataFrame:
    """sets.csv's new sets, without positions: each placed part with its set's spreads and
    margins; the sets numbered from ``first`` in the order given."""
    rows = []
    for s, members in enumerate(found, start=first):
        spreads = spread_columns(c.raw[members], dims, c.tolerance)
        rows += [{"set": s, "device": c.devices[m], **spreads, "state": "new", "check": "",
                  "unscreened": c.unscreened_text} for m in members]
    return pd.DataFrame(rows, columns=set_columns(dims))


def set_columns(dims) -> list[str]:
    spreads = [f"{d.name}_{w}{column_suffix(d)}" for d in dims for w in ("spread", "margin")]
    return ["set", "device"] + spreads + ["state", "check", "unscreened"]


def kept_tolerance(profile: Profile, raw: np.ndarray, u: np.ndarray) -> dict:
    """Each dimension's tolerance after the guard band of the set's own extreme members
    (JCGM 106:2012 guarded acceptance, :func:`pair_guard` of the uncertainties ``u`` of its
    largest and smallest value), not the reel's: a kept set is judged by its own readings,
    so data of other parts never move its margins."""
    out = {}
    for j, d in enumerate(profile.dimensions):
        x, uj = raw[:, j], u[:, j]
        if profile.guard_band != "accuracy" or not np.isfinite(x).any():
            out[d.name] = d.tolerance
            continue
        rel = uj / np.abs(x) if d.relative else uj
        hi, lo = np.nanargmax(x), np.nanargmin(x)
        out[d.name] = d.tolerance - float(pair_guard(rel[hi], rel[lo]))
    return out


def kept_table(alloc: Allocation, c: Candidates, profile: Profile) -> pd.DataFrame:
    """sets.csv's kept sets: their members as the ledger holds them, re-checked against
    the newest data (tolerances after a guard band at the set's own values,
    :func:`kept_tolerance`). ``check``: ``ok``; ``broken`` (a member retired and not
    replaced: fewer than the profile's set size);
    ``member_refused`` (a member now lacks data or fails a screen);
    ``out_of_tolerance`` (a spread is now beyond its tolerance after the guard band)."""
    ev, dims = c.evaluation, profile.dimensions
    rows = []
    for number, members in alloc.kept.items():
        names = [d.name for d in dims]
        raw = ev.values.loc[members, names].to_numpy(dtype=float) \
            if members else np.empty((0, len(dims)))
        u = ev.u.loc[members, names].to_numpy(dtype=float) if members else raw
        tolerance = kept_tolerance(profile, raw, u)
        spreads = spread_columns(raw, dims, tolerance) if len(members) else {}
        check = "ok"
        if len(members) < profile.set_size:
            check = "broken"
        elif any(r.code != "less_certain" for m in members for r in ev.reasons[m]):
            check = "member_refused"    # (the reel-wide guard cap does not judge a kept set)
        elif any(spread(raw[:, j], d) > tolerance[d.name] * (1 + 1e-9)
                 for j, d in enumerate(dims)):
            check = "out_of_tolerance"
        rows += [{"set": number, "device": m, **spreads, "state": "kept", "check": check,
                  "unscreened": c.unscreened_text} for m in members]
    return pd.DataFrame(rows, columns=set_columns(dims))


def no_set_reasons(c: Candidates, placed: set, k: int, dims) -> None:
    """Why each candidate left unplaced found no set: partners within every tolerance.

    A part with none is told the criterion that keeps it out (``dims``: the profile's
    dimensions, in the order of ``c.z``), the part nearest to being its partner and the
    shortfall (:func:`kinset.matching.partners.blocking`); in a set of more than two, a
    part with too few partners the criterion most of its near misses miss on."""
    from kinset.matching.partners import blocking      # partners imports this module
    rows = [i for i, d in enumerate(c.devices) if d not in placed]
    neighbours = np.asarray(_neighbour_counts(c.z, rows), dtype=np.int64)
    rows = np.asarray(rows, dtype=np.int64)
    alone = rows[neighbours == 0]
    few = rows[(neighbours > 0) & (neighbours + 1 < k)] if k > 2 else rows[:0]
    why = {int(r): reason for r, reason in zip(alone, _nearest_reasons(
        c, dims, blocking(c.z, alone)))}
    few_block = blocking(c.z, few, nearest=False)
    most = dict(zip(few.tolist(), zip(few_block.most_often(), few_block.one_miss)))
    for i, nb in zip(rows.tolist(), neighbours.tolist()):
        if nb + 1 >= k:
            reason = Reason.of("partners_used")
        elif nb:
            j, counts = most.get(i, (-1, None))
            said = "" if j < 0 else REASONS.text(
                "most_often_blocks", others=int(counts[j]), criterion=dims[j].describe())
            reason = Reason.of("too_few_partners", dims[j].name if j >= 0 else "",
                               count=nb, needed=k - 1, blocking=said)
        else:
            reason = why.get(i) or Reason.of("no_partner", nearest=REASONS.text("nearest_none"))
        c.evaluation.reasons[c.devices[i]].append(reason)


def _nearest_reasons(c: Candidates, dims, b) -> list[Reason]:
    """The ``no_partner`` reason of each part of ``b`` (a :class:`Blocking`): the blocking
    criterion, the part nearest on it, and the spread with it against the tolerance after
    the guard band, in engineering units."""
    out = []
    for i, j, nb, misses in zip(b.rows, b.criterion, b.nearest, b.misses):
        if nb < 0:
            out.append(Reason.of("no_partner", nearest=REASONS.text("nearest_none")))
            continue
        d = dims[j]
        apart = spread(c.raw[[i, nb], j], d)
        allowed = c.tolerance[d.name]
        words = {"device": c.devices[nb], "criterion": d.describe(),
                 "apart": format_amount(apart, d, typical=False),
                 "allowed": format_amount(allowed, d, typical=False),
                 "short": format_amount(apart - allowed, d, typical=False)}
        said = (REASONS.text("nearest_but_one", **words) if misses == 1 else
                REASONS.text("nearest_misses", count=int(misses), **words))
        out.append(replace(Reason.of("no_partner", d.name, nearest=said),
                           nearest=str(c.devices[nb]),
                           shortfall=(apart - allowed) * (100 if d.relative else 1)))
    return out


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
        "nearest": [r.nearest for r in first],
        "shortfall": [r.shortfall for r in first],
    }, columns=UNMATCHED_COLUMNS)


UNMATCHED_COLUMNS = ["device", "reason", "stage", "reason_code", "criterion", "nearest",
                     "shortfall"]
"""unmatched.csv's columns (``position`` is inserted after ``reason`` when written).
``nearest`` and ``shortfall``, for a part with no partner: the part that came nearest
and by how much its spread with it on ``criterion`` exceeds the tolerance after the
guard band (SI in the criterion's unit; percent for a percent tolerance)."""


def values_table(c: Candidates, profile: Profile, unmatched: pd.DataFrame) -> pd.DataFrame:
    """values.csv: every part's value of each dimension and screen (SI) and its combined
    standard uncertainty ``<name>_u`` (the instrument's part, JCGM 100:2008 §4.3.7, with
    the fit's or correction's, :func:`kinset.matching.criteria.combined_uncertainty`),
    with the code and reason of a part not placed."""
    ev = c.evaluation
    out = pd.DataFrame({"device": ev.devices})
    named = [(d.name, d.quantity) for d in profile.dimensions]
    named += [(s.name, s.quantity) for s in profile.screens
              if s.name not in {n for n, _ in named}]
    for name, quantity in named:
        frame = ev.values if name in ev.values else ev.screened
        v = frame[name].to_numpy(dtype=float) if name in frame \
            else np.full(len(ev.devices), np.nan)          # a screen skipped: no value
        out[name] = v
        out[f"{name}_u"] = ev.u[name].to_numpy(dtype=float) if name in ev.u \
            else np.full(len(ev.devices), np.nan)
    why = unmatched.set_index("device")
    for col in ("reason_code", "reason"):
        out[col] = why[col].astype(object).reindex(ev.devices).fillna("").to_numpy()
    return out


def _form(pool: Candidates, profile: Profile, wanted: int | None):
    """New sets among ``pool``; (sets, left out by the quota, bound, method, optimal).

    With a quota (``wanted``) the sets kept are those with the least to spare (the
    largest weighted spread): every one of them meets the tolerances, and the parts that
    match each other most closely stay free for the applications after this one, which
    may need them most (quads, more criteria).
    """
    k = profile.set_size
    if len(pool.devices) < k:
        return [], [], 0, "too few candidates for one set", True
    weights = np.asarray([d.weight for d in profile.dimensions])
    result = form_sets(pool.z, weights, k, profile.goal)
    found = list(result.sets)
    dropped = []
    if wanted is not None and len(found) > wanted:
        cost = set_cost(pool.z, weights, np.asarray(found))
        order = np.argsort(-cost, kind="stable")
        dropped = [found[i] for i in order[wanted:]]
        found = [found[i] for i in sorted(order[:wanted])]
    return found, dropped, result.upper_bound, result.method, result.optimal


def match(tables: dict[str, pd.DataFrame], devices: list[str], profile: Profile,
          accuracy: dict | None = None, allocation: Allocation | None = None,
          sets_wanted: int | None = None, positions: dict | None = None,
          scan: bool = False) -> MatchResult:
    """Form the sets of one application; every device ends in sets or unmatched.

    ``allocation`` (:func:`kinset.matching.allocation.allocate`) holds the kept sets,
    which are re-checked and listed as they are, and the parts not offered; new sets are
    formed from the rest, at most ``sets_wanted`` in all (kept ones count), and numbered
    from ``allocation.first_new`` in tape order (``positions``: device -> pocket).
    ``scan``: also count the sets as each tolerance is scaled (:mod:`kinset.matching.scan`)
    on the same offered parts, and name the binding criterion in the summary.
    """
    alloc = allocation or Allocation(profile.name)
    c = candidates(tables, devices, profile, accuracy)
    ev, dims = c.evaluation, profile.dimensions
    for dev, reason in alloc.taken.items():
        if dev in ev.reasons:
            ev.reasons[dev].insert(0, reason)
    # a set lookup: numpy's isin on text compares every pair (158 s at 100,000 parts)
    gone = alloc.kept_devices | set(alloc.taken)
    offered = np.fromiter((d not in gone for d in c.devices), bool, count=len(c.devices))
    pool = c.subset(offered)
    # kept sets count toward the quota, unless every member of one is retired (it is gone)
    kept_count = sum(1 for members in alloc.kept.values() if members)
    wanted = None if sets_wanted is None else max(0, sets_wanted - kept_count)
    found, dropped, bound, method, optimal = _form(pool, profile, wanted)
    found = tape_order(found, pool.devices, positions or {})
    sets = set_table(found, pool, dims, alloc.first_new)
    if alloc.kept:
        sets = pd.concat([kept_table(alloc, c, profile), sets], ignore_index=True)
    placed = set(sets["device"])
    for members in dropped:
        for m in members:
            ev.reasons[pool.devices[m]].append(Reason.of("quota_reached", wanted=sets_wanted))
    no_set_reasons(pool, placed | {pool.devices[m] for s in dropped for m in s},
                   profile.set_size, dims)
    unmatched = unmatched_table(ev, placed)
    summary = _summary(profile, c, pool, alloc, sets, unmatched, (bound, method, optimal))
    summary["sets_wanted"] = sets_wanted
    from kinset.matching.partners import broken_set_replacements   # partners imports run
    summary["broken_sets"] = {str(n): r for n, r in broken_set_replacements(
        c, alloc.kept, profile.set_size, [d.weight for d in dims], offered).items()}
    table = _scan(pool, profile, len(found) + len(dropped), summary) if scan else None
    return MatchResult(profile, sets, unmatched, summary, values_table(c, profile, unmatched),
                       table)


def _scan(pool: Candidates, profile: Profile, at_one: int, summary: dict) -> pd.DataFrame:
    """tolerance_scan.csv's table; the binding criterion into ``summary``."""
    found = tolerance_scan(pool, profile, at_one)
    binding = found.binding()
    summary["binding_criterion"] = binding["criterion"]
    summary["tolerance_scan"] = {"method": found.method, "sets_at_1x": at_one,
                                 "sets_at_1x_by_method": found.base,
                                 "parts_offered": int(len(pool.devices)),
                                 "binding_gain": binding["gain"],
                                 "binding_scale": binding["scale"],
                                 "binding_defined_as": binding["defined_as"]}
    return found.table


def _summary(profile: Profile, c: Candidates, pool: Candidates, alloc: Allocation,
             sets: pd.DataFrame, unmatched: pd.DataFrame, solved: tuple) -> dict:
    bound, method, optimal = solved
    ev, dims = c.evaluation, profile.dimensions
    counts = unmatched["stage"].value_counts().to_dict()
    new = sets[sets["state"] == "new"]
    summary = {
        "application": profile.name,
        "set_size": profile.set_size,
        "goal": profile.goal,
        "sets": int(sets["set"].nunique()),
        "kept_sets": len(alloc.kept),
        "new_sets": int(new["set"].nunique()),
        "kept_sets_to_check": sorted(int(n) for n in sets.loc[
            (sets["state"] == "kept") & (sets["check"] != "ok"), "set"].unique()),
        "upper_bound": int(bound),
        "optimal": bool(optimal),
        "method": method,
        "parts_seen": int(len(ev.devices)),
        "parts_with_data": int(len(ev.devices) - counts.get("data", 0)),
        "parts_passed_screen": int(len(c.devices)),
        "parts_offered": int(len(pool.devices)),
        "parts_used": int(len(sets)),
        "parts_left": {stage: int(n) for stage, n in sorted(counts.items())},
        "guard_band": {d.name: ev.guards[d.name] for d in dims},
        "tolerance_used": {d.name: c.tolerance[d.name] for d in dims},
    }
    summary["unscreened"] = list(c.unscreened)
    summary["missing_data"] = c.missing
    if c.accuracy_note:
        summary["note"] = c.accuracy_note
    return summary


def _neighbour_counts(z: np.ndarray, rows: list[int]) -> list[int]:
    """Compatible parts (Chebyshev distance ≤ 1 in normalised units) of each given row."""
    if not rows:
        return []
    tree = cKDTree(z)
    hits = tree.query_ball_point(z[rows], r=1.0 + 1e-12, p=np.inf)
    return [len(h) - 1 for h in hits]


def write_match(result: MatchResult, folder: str | Path, positions: dict | None = None) -> None:
    """sets.csv, unmatched.csv, values.csv, summary.json (and tolerance_scan.csv when the
    match was scanned) in ``folder``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    sets = result.sets.copy()
    un = result.unmatched.copy()
    pos = positions or {}
    sets.insert(2, "position", [pos.get(d, np.nan) for d in sets["device"]])
    un.insert(1, "position", [pos.get(d, np.nan) for d in un["device"]])
    un = un[["device", "reason", "position"] + UNMATCHED_COLUMNS[2:]]
    write_csv(sets, folder / "sets.csv")
    write_csv(un, folder / "unmatched.csv")
    if result.values is not None:
        write_csv(result.values, folder / "values.csv")
    if result.scan is not None:
        write_csv(result.scan, folder / "tolerance_scan.csv")
    write_text(folder / "summary.json", json.dumps(result.summary, indent=2, sort_keys=True) + "\n")


def run_match(results: str | Path, application: str, out: str | Path,
              ledger: str | Path | None = None, after: list[str | Path] = (),
              sets_wanted: int | None = None, waive: tuple[str, ...] = (),
              notify=None, scan: bool = True) -> MatchResult:
    """One application on a results folder, written to ``out``.

    ``ledger``: the reel's ``ledger.csv`` (default: the one of the reel folder the results
    came from, if it is known and exists); ``after``: the match folders of the
    applications before this one, whose placed parts it may not use; ``waive``: screened
    quantities waived from the command line (as the profile's ``waive_screens``);
    ``notify``: called, before matching, with the text of what the reel lacks and how to
    proceed (:func:`kinset.matching.coverage.notice`), if it lacks anything, and of how
    the profile does not suit the reel (:func:`~kinset.matching.coverage.suit_notice`:
    another material, a condition outside every part's measured range), if it does not;
    ``scan``: also write ``tolerance_scan.csv`` (:mod:`kinset.matching.scan`).
    """
    from kinset.io.ledger import check_ledger, read_ledger
    from kinset.matching.allocation import allocate, earlier_placements
    tables, devices, reel = read_results(results)
    profile = load_profile(application)
    if waive:
        profile = profile.waiving(waive, "--waive-screens")
    said = notice(profile.name, [g.as_dict() for g in gaps(profile, set(tables))])
    unsuited = misfits(profile, reel.get("material"), tables)
    for said in (said, suit_notice(profile.name, unsuited)):
        if said is not None and notify is not None:
            notify(said.text())
    if ledger is None:
        ledger = reel_ledger_path(results)
    book = read_ledger(ledger) if ledger is not None else None
    if book is not None:
        check_ledger(book, set(devices), {profile.name: profile.set_size})
    positions = {}
    devfile = Path(results) / "devices.csv"
    if devfile.is_file():
        d = read_result(devfile)
        positions = dict(zip(d["device"].astype(str), d["position"]))
    alloc = allocate(profile.name, book, earlier_placements(list(after)))
    result = match(tables, devices, profile, reel.get("accuracy"), alloc, sets_wanted, positions,
                   scan=scan)
    result.summary["unsuited"] = unsuited
    write_match(result, out, positions)
    return result


def reel_ledger_path(results: str | Path) -> Path | None:
    """``ledger.csv`` of the reel folder a results folder belongs to (None if not known)."""
    from kinset.io.ledger import LEDGER_NAME
    from kinset.io.reel import results_owner
    folder = results_owner(results)
    return None if folder is None else folder / LEDGER_NAME
