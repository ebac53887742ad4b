"""Inputs for report tests: a small demo reel, extracted, with match outputs written here.

The report is tested on its own, apart from the set-forming core: the match outputs
(sets.csv, unmatched.csv, summary.json, in the columns ``kinset.matching.run.write_match``
writes) come from :func:`stand_in_match`, a plain greedy grouping on the profile's
criteria (consecutive parts in the order of the first criterion, kept when every
spread is within its tolerance after the guard band). It only has to give valid sets;
whether they are the best sets is the matcher's own tests' business.

Device ids: one part is renamed to an id with markup in it, ``EVIL_ID``, so tests can
check it is escaped wherever it appears.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.extract import EXTRACTORS
from kinset.io.output import read_result, write_csv
from kinset.io.reel import load_reel
from kinset.matching.criteria import effective_tolerance, evaluate, spread
from kinset.matching.profile import load_profile
from kinset.merge import merge_devices

EVIL_ID = 'D003<script>alert("x")</script>&'
EVIL_CSV = '"D003<script>alert(""x"")</script>&"'


def demo_results(folder: Path, devices: int = 40, seed: int = 412, markup_id: bool = True) -> Path:
    """A demo reel in ``folder/reel`` and its extraction tables in ``folder/results``."""
    from kinset.demo import write_demo
    reel_dir = write_demo(folder / "reel", devices=devices, seed=seed)
    for path in sorted(reel_dir.rglob("*.csv")) if markup_id else []:   # D003 -> EVIL_ID
        text = path.read_text(encoding="utf-8")
        if "\nD003," in text:
            path.write_text(text.replace("\nD003,", f"\n{EVIL_CSV},"), encoding="utf-8")
    reel = load_reel(reel_dir)
    out = folder / "results"
    out.mkdir(parents=True, exist_ok=True)
    tables = {}
    for dataset, extract in EXTRACTORS.items():
        if not reel.dataset_files(dataset) and dataset != "capacitance":
            continue
        result = extract(reel, [])
        write_csv(result.table, out / f"{dataset}.csv")
        for name, extra in result.extras.items():
            write_csv(extra, out / f"{dataset}_{name}.csv")
        tables[dataset] = read_result(out / f"{dataset}.csv")
    write_csv(merge_devices(tables), out / "devices.csv")
    (out / "reel.json").write_text(json.dumps(reel.settings, indent=2, sort_keys=True) + "\n",
                                   encoding="utf-8")
    return out


def _stage(reasons: list[str]) -> str:
    """The stage a part left at, from its first reason (the matcher's wording)."""
    first = reasons[0] if reasons else ""
    rules = (("screen", first.startswith("screen:")), ("guard", "guard band" in first),
             ("sets", first.startswith(("no other part", "only ", "its compatible"))))
    return next((stage for stage, hit in rules if hit), "data")


def stand_in_match(results: Path, application: str, out: Path,
                   extra_unmatched: list[tuple[str, str]] = ()) -> dict:
    """Write sets.csv, unmatched.csv, summary.json for ``application`` (see module doc)."""
    names = ("forward", "forward_readings", "leakage", "capacitance", "recovery")
    tables = {n: read_result(results / f"{n}.csv") for n in names if (results / f"{n}.csv").is_file()}
    dev_table = read_result(results / "devices.csv")
    devices = dev_table["device"].astype(str).tolist()
    positions = dict(zip(dev_table["device"].astype(str), dev_table["position"]))
    reel = json.loads((results / "reel.json").read_text(encoding="utf-8"))
    profile = load_profile(application)
    ev = evaluate(profile, tables, devices, reel["accuracy"])
    dims = profile.dimensions
    eff = {d.name: effective_tolerance(d, ev.guards[d.name], ev.typical[d.name]) for d in dims}
    cand = [d for d in ev.devices if not ev.reasons[d]]
    values = ev.values.loc[cand, [d.name for d in dims]].to_numpy(float)
    order = np.argsort(values[:, 0], kind="stable")
    k = profile.set_size
    found, i = [], 0
    while i + k <= len(order):
        block = order[i:i + k]
        if all(spread(values[block, j], d) <= eff[d.name] for j, d in enumerate(dims)):
            found.append(block)
            i += k
        else:
            i += 1

    def suffix(d):
        return "_percent" if d.relative else (f"_{d.unit}" if d.unit else "")

    rows, placed = [], set()
    for s, block in enumerate(found, start=1):
        base = {}
        for j, d in enumerate(dims):
            sp = spread(values[block, j], d)
            scale = 100 if d.relative else 1
            base[f"{d.name}_spread{suffix(d)}"] = sp * scale
            base[f"{d.name}_margin{suffix(d)}"] = (eff[d.name] - sp) * scale
        for m in block:
            placed.add(cand[m])
            rows.append({"set": s, "device": cand[m], "position": positions.get(cand[m], np.nan),
                         **base})
    sets = pd.DataFrame(rows, columns=["set", "device", "position"] + [
        f"{d.name}_{kind}{suffix(d)}" for d in dims for kind in ("spread", "margin")])
    for dev in cand:
        if dev not in placed:
            ev.reasons[dev].append("its compatible parts went into other sets, or cannot form "
                                   "a full set with it")
    left = [d for d in ev.devices if d not in placed]
    un = pd.DataFrame({"device": left, "reason": ["; ".join(ev.reasons[d]) for d in left],
                       "position": [positions.get(d, np.nan) for d in left],
                       "stage": [_stage(ev.reasons[d]) for d in left]})
    if extra_unmatched:
        un = pd.concat([un, pd.DataFrame({"device": [d for d, _ in extra_unmatched],
                                          "reason": [r for _, r in extra_unmatched],
                                          "position": np.nan, "stage": "data"})],
                       ignore_index=True)
    counts = un["stage"].value_counts().to_dict()
    seen = len(ev.devices) + len(extra_unmatched)
    summary = {
        "application": profile.name, "set_size": k, "goal": profile.settings["goal"],
        "sets": len(found), "upper_bound": len(cand) // k, "optimal": False,
        "method": "stand-in greedy grouping (tests)",
        "parts_seen": seen, "parts_with_data": seen - counts.get("data", 0),
        "parts_passed_screen": len(cand), "parts_used": len(placed),
        "parts_left": {s: int(n) for s, n in sorted(counts.items())},
        "guard_band": {d.name: ev.guards[d.name] for d in dims},
        "tolerance_used": {d.name: eff[d.name] for d in dims},
    }
    out.mkdir(parents=True, exist_ok=True)
    write_csv(sets, out / "sets.csv")
    write_csv(un, out / "unmatched.csv")
    (out / "summary.json").write_text(json.dumps(summary, indent=2, sort_keys=True) + "\n",
                                      encoding="utf-8")
    return summary

