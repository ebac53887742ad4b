"""``kinset circuit``: every set of an application simulated in its reference circuit.

For each set in ``sets.csv`` one :class:`~kinset.circuit.kinds.Circuit` is built from
the members' ``.model`` cards in position order, and one reference circuit: the set's
*median part* repeated in every position (an ideally matched set of the same parts).
Circuits are simulated in chunks of :data:`CHUNK` per ngspice deck (one process, one
analysis), chunks in parallel threads; the figures go to ``circuit.csv``, and each set's
missed ``circuit.limits`` to the ``circuit_limits`` column of ``sets.csv``.

The cards are those of ``models.lib``: by default made from the extraction tables by the
very function that writes ``models.lib`` (:func:`kinset.report.spice.models_lib`), so the
step does not wait for the report; ``models=`` reads a ``models.lib`` file instead.
"""

from __future__ import annotations

import math
import re
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from kinset import __version__
from kinset.circuit.kinds import Circuit, kind_module
from kinset.circuit.kinds.common import card_values
from kinset.circuit.ngspice import NgspiceError, find_ngspice, run_deck
from kinset.circuit.summary import INSTALL_NOTE, CircuitResult
from kinset.circuit.words import figure_label, figure_value
from kinset.errors import InputError
from kinset.io.output import read_result, write_csv, write_text

#: Circuits per deck. Measured on the ring mixer (one 2 µs transient, ngspice 39, a
#: shared 2-core machine): 10 per deck 42 ms a circuit, 25: 21 ms, 50: 23 ms, 100: 30 ms,
#: 200: 28 ms, 400: 48 ms. Below ~25 the process start dominates, above ~200 the matrix.
#: With two threads (benchmarks/circuit.py --sets 300, 600 circuits): chunk 25 27.5 s,
#: 50 16.4 s, 100 19.4 s, 200 28.4 s.
CHUNK = 50

LIMITS_COLUMN = "circuit_limits"


def median_part(members: list[str], values: pd.DataFrame, dimensions) -> str:
    """The member of a set nearest the set's median over the matched criteria.

    For every criterion dimension ``d`` of the profile (its column in ``values.csv``),
    member ``i`` lies ``z_id = (x_id - median_d) / T_d`` tolerances from the members'
    median (``(x_id / median_d - 1) / T_d`` for a ``tolerance_percent`` criterion); the
    median part minimises ``sum_d z_id^2``, values that are missing left out. Ties go to
    the member earlier in position order; a set with no values gives its first member.
    """
    score = np.zeros(len(members))
    for d in dimensions:
        if d.name not in values.columns:
            continue
        x = values[d.name].reindex(members).to_numpy(dtype=float)
        if not np.isfinite(x).any():
            continue
        mid = np.nanmedian(x)
        z = (x / mid - 1.0) / d.tolerance if d.relative else (x - mid) / d.tolerance
        score += np.where(np.isfinite(z), z * z, 0.0)
    return members[int(np.argmin(score))]


def read_cards(text: str) -> tuple[dict[str, str], dict[str, str]]:
    """The ``.model`` cards of a library (model name -> card, continuation lines kept) and
    the ``* no card for <name>: <why>`` comments (name -> why)."""
    cards: dict[str, list[str]] = {}
    why: dict[str, str] = {}
    current = None
    for line in text.splitlines():
        if line.lower().startswith(".model"):
            current = line.split()[1].lower()
            cards[current] = [line]
        elif line.startswith("+") and current:
            cards[current].append(line)
        else:
            current = None
            m = re.match(r"\*\s*no card for (\S+):\s*(.*)", line)
            if m:
                why[m.group(1).lower()] = m.group(2)
    return {k: "\n".join(v) for k, v in cards.items()}, why


def lacking(card: str, needs: dict[str, str]) -> list[str]:
    """The parameters of ``needs`` (names) that ``card`` does not set."""
    given = next(iter(card_values(card).values()), {})
    return [k for k in needs if k.upper() not in given]


def plan(sets: pd.DataFrame, values: pd.DataFrame, dimensions, cards: dict[str, str],
         why: dict[str, str], needs: dict[str, str] | None = None,
         ) -> tuple[list[dict], list[Circuit]]:
    """One row per set (``set``, ``reference_device``, ``note``) and the circuits to run
    (the set's as ``s<set>``, its reference as ``r<set>``); a set with a member without a
    card, or whose card lacks a parameter the circuit ``needs`` (the kind's ``NEEDS``),
    gets a note and no circuit."""
    from kinset.report.spice import model_names
    names = model_names(sets["device"].astype(str))
    rows, circuits = [], []
    order = sets.assign(_pos=pd.to_numeric(sets["position"], errors="coerce"))
    for s, block in order.sort_values(["set", "_pos"], kind="stable").groupby("set", sort=True):
        members = block["device"].astype(str).tolist()
        ref = median_part(members, values, dimensions)
        row = {"set": s, "reference_device": ref, "note": ""}
        rows.append(row)
        missing = [d for d in members if names[d].lower() not in cards]
        if missing:
            row["note"] = "; ".join(f"no card for {d}: {why.get(names[d].lower(), 'not in the models')}"
                                    for d in missing)
            continue
        short = {d: lacking(cards[names[d].lower()], needs or {}) for d in members}
        if any(short.values()):
            row["note"] = "; ".join(f"the card of {d} has no {k}: {(needs or {})[k]}"
                                    for d, ks in short.items() for k in ks)
            continue
        circuits.append(Circuit(f"s{s}", tuple(names[d] for d in members)))
        circuits.append(Circuit(f"r{s}", (names[ref],) * len(members)))
    return rows, circuits


def simulate(module, circuits: list[Circuit], params: dict, cards: dict[str, str],
             temperature_C: float, threads: int = 1, chunk: int = CHUNK,
             progress: Callable[[str], None] | None = None) -> dict[str, dict | str]:
    """Figures of every circuit by label, or the simulator's message where it failed.

    Chunks of ``chunk`` circuits share one deck; with several chunks, ``threads`` decks
    run at once. A chunk that fails is run again one circuit at a time, so one bad card
    costs only its own set.
    """
    chunks = [circuits[i:i + chunk] for i in range(0, len(circuits), chunk)]

    def run(part: list[Circuit]) -> dict[str, dict | str]:
        used = sorted({m.lower() for c in part for m in c.models})
        try:
            result = run_deck(module.deck(part, params, [cards[m] for m in used], temperature_C),
                              timeout=120 + 2.0 * len(part))
            return {c.label: f for c, f in zip(part, module.figures(result, part, params))}
        except (NgspiceError, ValueError) as exc:
            if len(part) > 1:
                return {k: v for c in part for k, v in run([c]).items()}
            return {part[0].label: "the simulator failed: " + str(exc).splitlines()[0]}

    out: dict[str, dict | str] = {}
    with ThreadPoolExecutor(max_workers=max(1, min(threads, len(chunks) or 1))) as pool:
        for k, got in enumerate(pool.map(run, chunks)):
            out.update(got)
            if progress and len(chunks) > 1:
                progress(f"circuit: chunk {k + 1} of {len(chunks)} simulated")
    return out


def missed_limits(spec, module, row: dict) -> str:
    """The limits a set's figures miss, in words; empty if none (or not simulated)."""
    out = []
    for figure, side, bound in spec.limit_pairs():
        v = row.get(figure, math.nan)
        if isinstance(v, float) and math.isfinite(v) and (v < bound if side == "min" else v > bound):
            out.append(f"{figure_label(module, figure)} {figure_value(v, figure)} "
                       f"{'below the minimum' if side == 'min' else 'above the maximum'} "
                       f"{figure_value(bound, figure)}")
    return "; ".join(out)


def table_of(rows: list[dict], figures, results: dict, module, spec) -> pd.DataFrame:
    """circuit.csv: ``set``, the figures, ``reference_<figure>``, ``reference_device``,
    ``limits`` (missed, in words) and ``note``."""
    for row in rows:
        mine, ref = results.get(f"s{row['set']}"), results.get(f"r{row['set']}")
        for prefix, got in (("", mine), ("reference_", ref)):
            for f in figures:
                row[prefix + f] = got[f] if isinstance(got, dict) else math.nan
            if isinstance(got, str) and not row["note"]:
                row["note"] = got if not prefix else f"reference: {got}"
        row["limits"] = missed_limits(spec, module, row)
    columns = (["set", *figures, *[f"reference_{f}" for f in figures], "reference_device",
                "limits", "note"])
    return pd.DataFrame(rows, columns=columns)


def flag_sets(path: Path, sets: pd.DataFrame, table: pd.DataFrame) -> None:
    """Write ``sets.csv`` again with :data:`LIMITS_COLUMN`: each set's missed limits."""
    words = dict(zip(table["set"], table["limits"]))
    out = sets.drop(columns=[LIMITS_COLUMN], errors="ignore")
    out[LIMITS_COLUMN] = [words.get(s, "") for s in out["set"]]
    write_csv(out, path)


def load_cards(inputs, models: str | Path | None) -> tuple[dict[str, str], dict[str, str]]:
    """Cards of the placed parts: from ``models`` (a models.lib) or made as models.lib is."""
    if models is not None:
        try:
            text = Path(models).read_text(encoding="ascii", errors="replace")
        except OSError as exc:
            raise InputError(f"cannot read the models: {exc.strerror}", models) from None
        return read_cards(text)
    from kinset.report.spice import models_lib
    lib, _, _ = models_lib(inputs.sets, inputs.tables, inputs.reel, inputs.profile.title,
                           __version__)
    return read_cards(lib)


def run_circuit(results: str | Path, application: str, out: str | Path | None = None,
                threads: int = 1, models: str | Path | None = None, chunk: int = CHUNK,
                progress: Callable[[str], None] | None = None) -> CircuitResult:
    """Simulate every set of ``application`` and write ``circuit.csv`` into ``out``.

    ``out`` (default ``results/<application>``) is where ``kinset match`` wrote the
    application's tables; ``sets.csv`` there gains the ``circuit_limits`` column. Without
    a ``circuit:`` section the file holds a note and no rows; without ngspice every set's
    row has empty figures and a note saying how to install it.
    """
    from kinset.matching.profile import load_profile
    profile = load_profile(application)
    folder = Path(out) if out is not None else Path(results) / profile.name
    path = folder / "circuit.csv"
    spec = profile.circuit
    if spec is None:
        note = f"the profile {profile.name} has no circuit: section; nothing to simulate"
        write_text(path, f"# {note}\nset,note\n")
        return CircuitResult(path, pd.DataFrame(columns=["set", "note"]), note=note)
    from kinset.report.inputs import load_inputs
    module = kind_module(spec.kind)
    inputs = load_inputs(results, application, folder)
    cards, why = load_cards(inputs, models)
    rows, circuits = plan(inputs.sets, inputs.values, profile.dimensions, cards, why,
                          getattr(module, "NEEDS", {}))
    note = ""
    if find_ngspice() is None:
        note, circuits = INSTALL_NOTE, []
        for row in rows:
            row["note"] = row["note"] or INSTALL_NOTE
    elif progress:
        progress(f"circuit: simulating {len(circuits)} circuits ({len(rows)} sets and their "
                 f"references) in {spec.kind}")
    got = simulate(module, circuits, spec.params, cards, profile.operating_temperature_C,
                   threads, chunk, progress) if circuits else {}
    table = table_of(rows, list(module.FIGURES), got, module, spec)
    write_csv(table, path)
    flag_sets(folder / "sets.csv", read_result(folder / "sets.csv"), table)
    return CircuitResult(path, table, spec.kind, dict(module.FIGURES), note)
