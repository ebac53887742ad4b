"""The circuit step's one-line summary, and ``circuit.csv`` read back for it.

Kept free of pandas and of the simulation code: the workflow prints these lines at the
end of every run, a rerun with nothing to do included, whose whole cost is start-up.
"""

from __future__ import annotations

import csv
import math
import statistics
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from kinset.circuit.kinds import kind_module
from kinset.circuit.words import figure_label, figure_value

INSTALL_NOTE = ("ngspice is not on PATH, so no set was simulated: install it (Debian/Ubuntu: "
                "apt-get install ngspice; with --sdm conda, envs/kinset.yaml lists it) and "
                "rerun")


@dataclass
class CircuitResult:
    """What one ``kinset circuit`` run wrote: ``circuit.csv``'s table (a
    ``pandas.DataFrame``, or its columns as lists when read back by :func:`written`) and
    the words on it."""

    path: Path
    table: Any
    kind: str = ""
    figures: dict = field(default_factory=dict)
    note: str = ""


def written(path: str | Path, spec) -> CircuitResult | None:
    """A circuit.csv written earlier, as a result for :func:`summary_line` (None if absent
    or the profile names no circuit). Read with the csv module: lines starting with ``#``
    are the file's header notes; an empty field is a missing value."""
    path = Path(path)
    if spec is None or not path.is_file():
        return None
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(line for line in fh if not line.startswith("#")))
    head, body = (rows[0], rows[1:]) if rows else ([], [])
    table = {name: [row[i] if i < len(row) else "" for row in body]
             for i, name in enumerate(head)}
    notes = [n for n in table.get("note", []) if n != ""]
    note = INSTALL_NOTE if notes and all(n == INSTALL_NOTE for n in notes) else ""
    return CircuitResult(path, table, spec.kind, dict(kind_module(spec.kind).FIGURES), note)


def _number(value) -> float:
    return math.nan if value is None or value == "" else float(value)


def _median(values: list[float]) -> float:
    finite = [v for v in values if math.isfinite(v)]
    return statistics.median(finite) if finite else math.nan


def summary_line(result: CircuitResult) -> str:
    """One line: sets simulated, the first figure's median against the reference's, misses."""
    if not result.figures:
        return f"circuit: {result.note}"
    t = result.table
    columns = t if isinstance(t, dict) else {c: t[c].tolist() for c in t.columns}
    rows = max((len(v) for v in columns.values()), default=0)
    first = next(iter(result.figures))
    values = [_number(v) for v in columns.get(first, [])]
    done = sum(math.isfinite(v) for v in values)
    text = f"circuit ({result.kind}): {done} of {rows} sets simulated"
    if done:
        module = kind_module(result.kind)
        reference = [_number(v) for v in columns.get("reference_" + first, [])]
        text += (f"; median {figure_label(module, first)} "
                 f"{figure_value(_median(values), first)} (ideally matched: "
                 f"{figure_value(_median(reference), first)})")
    missed = sum(1 for v in columns.get("limits", [])
                 if v is not None and v == v and str(v) != "")
    return text + f"; {missed} sets miss a limit" + (f"; {result.note}" if result.note else "")
