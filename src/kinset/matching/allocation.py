"""One part, one set: what an application may use, given the ledger and the applications
before it, and what it must keep.

The reel's applications are served in order. A part is not offered to an application
when it is retired (the ledger), kept in a set of another application (the ledger), or
placed by an application before it in this run. An application's own kept sets keep
their numbers and members; they are re-checked against the newest data, never changed.
New sets are numbered after the highest number the ledger holds for the application, in
tape order of their first part, so the same inputs always give the same numbers.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.io.ledger import Ledger
from kinset.io.output import read_result
from kinset.matching.reasons import Reason


@dataclass
class Allocation:
    """What the ledger and the earlier applications leave one application.

    ``kept``: set number -> members still in the reel; ``retired``: set number ->
    members retired since the set was kept (the set is broken); ``taken``: device ->
    why it is not offered; ``first_new``: the number of the application's first new set.
    """

    application: str
    kept: dict[int, list[str]] = field(default_factory=dict)
    retired: dict[int, list[str]] = field(default_factory=dict)
    taken: dict[str, Reason] = field(default_factory=dict)
    first_new: int = 1

    @property
    def kept_devices(self) -> set[str]:
        return {d for members in self.kept.values() for d in members}


def earlier_placements(folders: list[str | Path]) -> list[tuple[str, pd.DataFrame]]:
    """(application, its sets.csv) of each earlier application's match folder."""
    out = []
    for folder in map(Path, folders):
        summary, sets = folder / "summary.json", folder / "sets.csv"
        if not summary.is_file() or not sets.is_file():
            raise InputError("an earlier application's match folder without sets.csv and "
                             "summary.json", folder)
        name = json.loads(summary.read_text(encoding="utf-8"))["application"]
        table = read_result(sets) if sets.read_bytes().strip() else pd.DataFrame(
            columns=["set", "device"])
        out.append((name, table.astype({"device": str})))
    return out


def allocate(application: str, ledger: Ledger | None,
             earlier: list[tuple[str, pd.DataFrame]] = ()) -> Allocation:
    """What ``application`` keeps and may not use (see the module's description)."""
    a = Allocation(application)
    if ledger is not None:
        for e in ledger.entries:
            own = e.application == application and e.set is not None
            if e.state == "retired":
                a.taken[e.device] = Reason.of("retired", date=e.date, note=_noted(e.note))
                if own:
                    a.retired.setdefault(e.set, []).append(e.device)
            elif own:
                a.kept.setdefault(e.set, []).append(e.device)
            else:
                a.taken[e.device] = Reason.of("kept_elsewhere", application=e.application,
                                              set=e.set, date=e.date)
        a.first_new = ledger.highest_set(application) + 1
    for name, sets in earlier:
        for dev, number in zip(sets["device"], sets["set"]):
            if dev not in a.taken:
                a.taken[dev] = Reason.of("placed_earlier", application=name, set=int(number))
    for number in a.retired:
        a.kept.setdefault(number, [])
    a.kept = {n: sorted(a.kept[n]) for n in sorted(a.kept)}
    return a


def _noted(note: str) -> str:
    return f": {note}" if note else ""


def tape_order(found: list, devices: np.ndarray, positions: dict) -> list:
    """New sets in the order they are numbered: by the tape position of their first part
    (parts without one last), then by their first device id."""
    def key(members):
        names = [str(devices[m]) for m in members]
        pos = [float(positions.get(n, np.nan)) for n in names]
        pos = [p for p in pos if np.isfinite(p)]
        return (min(pos) if pos else np.inf, min(names))
    return sorted(found, key=key)
