"""Inputs for report tests: a small demo reel, extracted, with match outputs written here.

The report is tested on its own, apart from the set-forming core: the match outputs
(sets.csv, unmatched.csv, values.csv, summary.json, written by
``kinset.matching.run.write_match``) come from :func:`stand_in_match`, a plain greedy grouping on the profile's
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

from kinset.registry import DATASETS
from kinset.io.output import read_result, write_csv
from kinset.io.reel import load_reel
from kinset.matching.criteria import spread
from kinset.matching.profile import load_profile
from kinset.matching.run import (MatchResult, candidates, no_set_reasons, read_results,
                                 set_table, unmatched_table, values_table, write_match)
from kinset.merge import merge_devices

EVIL_ID = 'D003<script>alert("x")</script>&'
EVIL_CSV = '"D003<script>alert(""x"")</script>&"'


def demo_results(folder: Path, devices: int = 40, seed: int = 412, markup_id: bool = True,
                 edit=None) -> Path:
    """A demo reel in ``folder/reel`` and its extraction tables in ``folder/results``;
    ``edit(reel_dir)``, when given, changes the reel's files before extraction."""
    from kinset.demo import write_demo
    reel_dir = write_demo(folder / "reel", devices=devices, seed=seed)
    if edit is not None:
        edit(reel_dir)
    for path in sorted(reel_dir.rglob("*.csv")) if markup_id else []:   # D003 -> EVIL_ID
        text = path.read_text(encoding="utf-8")
        if "\nD003," in text:
            path.write_text(text.replace("\nD003,", f"\n{EVIL_CSV},"), encoding="utf-8")
    return extract_results(reel_dir, folder / "results")


def extract_results(reel_dir: Path, out: Path) -> Path:
    """Every dataset of the reel folder extracted into ``out``, with devices.csv and reel.json."""
    reel = load_reel(reel_dir)
    out.mkdir(parents=True, exist_ok=True)
    tables = {}
    for record in DATASETS:
        dataset, extract = record.name, record.extract
        # Touchstone files are not among the dataset's files: a capacitance folder is tried
        if not reel.dataset_files(dataset) and not (
                dataset == "capacitance" and (reel_dir / dataset).is_dir()):
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


def stand_in_match(results: Path, application: str, out: Path,
                   extra_unmatched: list[tuple[str, str]] = ()) -> dict:
    """Write sets.csv, unmatched.csv, values.csv, summary.json for ``application`` (see
    module doc), through the matcher's own evaluation, tables and writer."""
    tables, devices, reel = read_results(results)
    dev_table = read_result(results / "devices.csv")
    positions = dict(zip(dev_table["device"].astype(str), dev_table["position"]))
    profile = load_profile(application)
    c = candidates(tables, devices, profile, reel["accuracy"])
    dims = profile.dimensions
    order = np.argsort(c.raw[:, 0], kind="stable")
    k = profile.set_size
    found, i = [], 0
    while i + k <= len(order):
        block = order[i:i + k]
        if all(spread(c.raw[block, j], d) <= c.tolerance[d.name] for j, d in enumerate(dims)):
            found.append(block)
            i += k
        else:
            i += 1
    sets = set_table(found, c, dims)
    placed = set(sets["device"])
    no_set_reasons(c, placed, k, dims)
    un = unmatched_table(c.evaluation, placed)
    values = values_table(c, profile, un)
    if extra_unmatched:
        extra = pd.DataFrame({"device": [d for d, _ in extra_unmatched],
                              "reason": [r for _, r in extra_unmatched],
                              "stage": "data", "reason_code": "no_forward_data", "criterion": ""})
        un = pd.concat([un, extra], ignore_index=True)
        values = pd.concat([values, extra[["device", "reason_code", "reason"]]], ignore_index=True)
    counts = un["stage"].value_counts().to_dict()
    seen = len(c.evaluation.devices) + len(extra_unmatched)
    summary = {
        "application": profile.name, "set_size": k, "goal": profile.goal,
        "sets": len(found), "upper_bound": len(c.devices) // k, "optimal": False,
        "method": "stand-in greedy grouping (tests)",
        "parts_seen": seen, "parts_with_data": seen - counts.get("data", 0),
        "parts_passed_screen": len(c.devices), "parts_used": len(placed),
        "parts_left": {s: int(n) for s, n in sorted(counts.items())},
        "guard_band": {d.name: c.evaluation.guards[d.name] for d in dims},
        "tolerance_used": {d.name: c.tolerance[d.name] for d in dims},
    }
    write_match(MatchResult(profile, sets, un, summary, values), out, positions)
    return summary
