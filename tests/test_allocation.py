"""One part, one set: applications served in order, the sets_wanted quota, and the
ledger over a history of keep / retire / replace / new parts.

The references are outside the matcher:

* the most sets an application can form: maximum set packing over every valid set,
  listed by brute force (itertools.combinations, validity by the contract's definition
  of a spread, max - min, against the effective tolerance) and solved by HiGHS through
  scipy.optimize.milp (``max_packing`` of test_match);
* forward voltages: the closed form V = N·Vt·ln(1 + I/IS) + I·RS (Shockley's law with a
  series resistance, solved for V), Vt = kT/q from scipy.constants (CODATA);
* the guard band: JCGM 100:2008 §4.3.7 (u = a/√3 for a specification ±a) and
  JCGM 106:2012 §8 (acceptance: spread ≤ T − 2·u(difference), u(difference) = √2·u);
* over a history: a plain model of what the ledger must hold, kept by the test itself
  from the operations it performs (the contract's "Over time: the ledger").

The reels are invented, demo-like parts (``tight_batch`` of test_match).
"""

from __future__ import annotations

import functools
import itertools
import json
import math
import re
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy.constants as sc
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from kinset.errors import InputError
from kinset.io.ledger import Entry, Ledger, check_ledger, read_ledger, write_ledger
from kinset.io.output import read_result, write_csv, write_text
from kinset.io.reel import OWNER_NAME, owner_text
from kinset.matching import upkeep
from kinset.matching.allocation import allocate
from kinset.matching.run import candidates, match, run_match
from kinset.physics.forward import voltage_from_current

from test_match import CURRENTS, T25, max_packing, profile, tight_batch

PAIR = (2, 1.0e-3)        # set size, forward-voltage tolerance [V]
QUAD = (4, 1.2e-3)
ORDERS = {                # (first, second): each leaves the second some sets to form
    "quads then pairs": (QUAD, PAIR),
    "tight pairs then quads": ((2, 0.3e-3), (4, 1.5e-3)),
}


def count_sets(result) -> int:
    return int(result.sets["set"].nunique())


def assert_accounted(result, devices) -> None:
    """Every device exactly once: in sets.csv or in unmatched.csv (the contract)."""
    placed, left = list(result.sets["device"]), list(result.unmatched["device"])
    assert len(placed) == len(set(placed)) and len(left) == len(set(left))
    assert set(placed).isdisjoint(left)
    assert set(placed) | set(left) == set(devices)


def packing_optimum(tables, devices, prof, exclude=()) -> int:
    """The most disjoint valid sets among ``prof``'s candidates outside ``exclude``.

    Valid sets by brute force over every combination of the candidates' values (the
    matcher's own ``candidates()``: its values and effective tolerances), a set being
    valid when each criterion's spread max - min is within its tolerance (the contract);
    the packing by HiGHS (scipy.optimize.milp).
    """
    c = candidates(tables, devices, prof, {})
    assert not any(d.relative for d in prof.dimensions)     # max - min is the spread
    rows = [i for i, d in enumerate(c.devices) if d not in set(exclude)]
    combos = np.array(list(itertools.combinations(rows, prof.set_size)),
                      dtype=int).reshape(-1, prof.set_size)
    tol = np.array([c.tolerance[d.name] for d in prof.dimensions])
    block = c.raw[combos]
    valid = np.all(block.max(axis=1) - block.min(axis=1) <= tol * (1 + 1e-9), axis=1)
    return max_packing(len(c.devices), map(tuple, combos[valid]))


def serve(tables, devices, first, second, wanted=None):
    """The two applications in order, the second after the first's sets."""
    r1 = match(tables, devices, first, {}, allocate(first.name, None, []), wanted)
    r2 = match(tables, devices, second, {}, allocate(second.name, None, [(first.name, r1.sets)]))
    return r1, r2


# ------------------------------------------------------------------ 1. optimality


@pytest.mark.parametrize("n,seed", [(40, 1), (50, 3), (45, 7)])
@pytest.mark.parametrize("order", ORDERS)
def test_each_application_reaches_the_milp_optimum_on_the_parts_left_to_it(
        tmp_path, n, seed, order):
    # Reference: HiGHS (scipy.optimize.milp) on every valid set listed by brute force.
    tables = tight_batch(n, seed)
    devices = sorted(tables["forward"]["device"])
    first, second = (profile(tmp_path, *app) for app in ORDERS[order])
    r1, r2 = serve(tables, devices, first, second)
    assert_accounted(r1, devices)
    assert_accounted(r2, devices)
    placed = dict(zip(r1.sets["device"], r1.sets["set"]))
    assert placed and set(placed).isdisjoint(r2.sets["device"])
    why = r2.unmatched.set_index("device")
    for dev, number in placed.items():
        assert why.loc[dev, "stage"] == "taken"
        assert why.loc[dev, "reason_code"] == "placed_earlier"
        assert re.search(rf"\b{first.name} set {number}\b", why.loc[dev, "reason"])
    assert count_sets(r1) == packing_optimum(tables, devices, first)
    assert count_sets(r2) == packing_optimum(tables, devices, second, exclude=placed)
    assert 0 < count_sets(r2) < packing_optimum(tables, devices, second)   # a real hand-off
    for r in (r1, r2):
        for _, members in r.sets.groupby("set")["device"]:
            assert len(members) == r.profile.set_size


# ------------------------------------------------------------------ 2. quota


@pytest.mark.parametrize("wanted", [0, 3, 1000])
def test_sets_wanted_stops_the_first_application_and_leaves_whole_sets(tmp_path, wanted):
    # Reference: HiGHS (scipy.optimize.milp) packings of the brute-force valid sets.
    tables = tight_batch(50, 3)
    devices = sorted(tables["forward"]["device"])
    first, second = profile(tmp_path, *QUAD), profile(tmp_path, *PAIR)
    best = packing_optimum(tables, devices, first)
    r1, r2 = serve(tables, devices, first, second, wanted)
    assert count_sets(r1) == min(wanted, best)
    assert_accounted(r1, devices)
    assert_accounted(r2, devices)
    why = r1.unmatched.set_index("device")
    quota = sorted(why.index[why["reason_code"] == "quota_reached"])
    assert (why.loc[quota, "stage"] == "no_set").all()
    left_out = best - min(wanted, best)
    assert len(quota) == first.set_size * left_out
    # the parts left by the quota are whole valid sets, not scraps
    ok = [d for d in devices if d not in set(quota)]
    assert packing_optimum(tables, devices, first, exclude=ok) == left_out
    _, unlimited = serve(tables, devices, first, second)
    assert count_sets(r2) >= count_sets(unlimited)
    assert count_sets(r2) == packing_optimum(tables, devices, second,
                                             exclude=set(r1.sets["device"]))


# ------------------------------------------------------------------ a reel on disk

APPS = {"p2": (2, 0.6e-3), "p4": (4, 2.5e-3)}   # reel.yaml's order: p2, then p4
ACCURACY = {"voltage": {"gain": 1.0e-4, "offset_V": 1.0e-4}}


@functools.lru_cache(maxsize=None)
def pool(n=60, seed=5):
    """Fitted forward tables of every part the histories draw from, in tape order."""
    return tight_batch(n, seed)


def write_reel(tmp: Path, parts: int, guard: str = "none") -> tuple[Path, Path]:
    """A reel folder (reel.yaml, the two profiles, no ledger yet) and the results folder
    the workflow would have made from it, holding the first ``parts`` parts."""
    reel, results = tmp / "reel", tmp / "results"
    reel.mkdir()
    results.mkdir()
    write_text(reel / "reel.yaml", "reel: r1\n")
    for size, tol in APPS.values():
        profile(reel, size, tol, guard)
    write_text(results / "reel.json", json.dumps(
        {"applications": [f"{name}.yaml" for name in APPS], "accuracy": ACCURACY}))
    write_text(results / OWNER_NAME, owner_text(results, reel))
    add_parts(results, parts)
    return reel, results


def add_parts(results: Path, more: int) -> list[str]:
    """The next ``more`` parts of the tape join the results (a new forward file, fitted)."""
    have = read_result(results / "devices.csv")["device"].tolist() \
        if (results / "devices.csv").is_file() else []
    names = sorted(pool()["forward"]["device"])[:len(have) + more]
    for table in ("forward", "forward_readings"):
        t = pool()[table]
        write_csv(t[t["device"].isin(names)], results / f"{table}.csv")
    fwd = pool()["forward"].set_index("device").loc[names]
    write_csv(pd.DataFrame({"device": names, "position": fwd["position"].to_numpy()}),
              results / "devices.csv")
    return names


def rematch(reel: Path, results: Path) -> dict:
    """Both applications in the reel's order (what the workflow's match rules run),
    without the tolerance scan: nothing here reads it (tests/test_scan.py checks it),
    and on these 40 parts it ran HiGHS at every scale of every criterion, most of
    this file's time."""
    out = {}
    for name in APPS:
        out[name] = run_match(results, str(reel / f"{name}.yaml"), results / name,
                              after=[results / earlier for earlier in out], scan=False)
    return out


# ------------------------------------------------------------------ 3. over time


class Model:
    """What the ledger must hold after the operations the test performed: each kept set's
    members still in the reel, and the parts retired (the contract's ledger rules)."""

    def __init__(self):
        self.kept: dict[tuple[str, int], set[str]] = {}
        self.retired: set[str] = set()

    def retire(self, device):
        self.retired.add(device)
        for members in self.kept.values():
            members.discard(device)

    def live(self) -> dict[tuple[str, int], set[str]]:
        return {k: v for k, v in self.kept.items() if v}


def check_history_step(reel, devices, model, results_by_app, before) -> None:
    """The contract's invariants after one step (``before``: the ledger the matches read)."""
    book = read_ledger(reel / "ledger.csv")
    check_ledger(book, set(devices), {n: size for n, (size, _) in APPS.items()})
    kept = {}
    for e in book.entries:
        if e.state == "kept":
            kept.setdefault((e.application, e.set), set()).add(e.device)
    assert kept == model.live()
    assert {e.device for e in book.entries if e.state == "retired"} == model.retired
    placed = []
    for name, r in results_by_app.items():
        assert_accounted(r, devices)
        sets = r.sets
        placed += list(sets["device"])
        listed = {(name, int(n)): set(g) for n, g in
                  sets[sets["state"] == "kept"].groupby("set")["device"]}
        assert listed == {k: v for k, v in model.live().items() if k[0] == name}
        short = sets[(sets["state"] == "kept") & (sets.groupby("set")["device"].transform(
            "size") < APPS[name][0])]
        assert (short["check"] == "broken").all()
        new = sets[sets["state"] == "new"]
        assert (new["set"] > before.highest_set(name)).all()
        assert (new.groupby("set").size() == APPS[name][0]).all()
        why = r.unmatched.set_index("device")["reason_code"]
        for dev in model.retired:
            assert why[dev] == "retired"
        for (app, _), members in model.live().items():
            if app != name:
                assert (why[list(members)] == "kept_elsewhere").all()
        if name == "p4":
            first = results_by_app["p2"].sets
            assert (why[list(first.loc[first["state"] == "new", "device"])]
                    == "placed_earlier").all()
    assert len(placed) == len(set(placed))              # one part, one set


def replace_one(reel, results, model, out, pick) -> None:
    """Replace a member (kept, or retired from a broken set) of a kept set with the best
    free part, trying the kept sets from the ``pick``-th on until one has a valid one."""
    book = read_ledger(reel / "ledger.csv")
    live = model.kept
    options = [(name, number, e.device) for name in APPS
               for number, rows in book.kept_sets(name).items() for e in rows
               if live[(name, number)] - {e.device}          # someone left to match, and
               and (e.state == "kept" or len(live[(name, number)]) < APPS[name][0])]
    # (a retired member of a set already made whole again: see the test below)
    for name, number, device in options[pick % max(len(options), 1):] + options:
        table, remaining, book = upkeep.replacement(results, name, number, device)
        if table["within"].any():
            break
    else:
        return
    earlier = set(out["p2"].sets["device"]) if name == "p4" else set()
    new = set(upkeep.apply_replacement(book, name, number, device, remaining,
                                       table).split(", "))
    assert new.isdisjoint(set(book.by_device()) | earlier)     # a free part
    model.retire(device)
    model.kept[(name, number)] |= new
    event(f"replaced a member of a {name} set")


PICK = st.integers(0, 2 ** 16)
# A history starts by keeping some sets of each application, so that retiring and
# replacing have kept sets to act on; then up to four more operations.
OPS = st.tuples(st.tuples(st.just("keep"), st.just(0), PICK),
                st.tuples(st.just("keep"), st.just(1), PICK)).flatmap(
    lambda start: st.lists(st.tuples(st.sampled_from(["keep", "retire", "retire_kept",
                                                      "replace", "add"]), PICK, PICK),
                           max_size=4).map(lambda more: list(start) + more))


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(ops=OPS)
def test_a_history_of_keep_retire_replace_and_new_parts_keeps_the_ledger_rules(ops):
    # Reference: the test's own model of the ledger (the contract's rules), and the
    # contract's invariants checked on every output after every step.
    with tempfile.TemporaryDirectory() as tmp:
        reel, results = write_reel(Path(tmp), 24)
        model = Model()
        out = rematch(reel, results)
        devices = read_result(results / "devices.csv")["device"].tolist()
        check_history_step(reel, devices, model, out, read_ledger(reel / "ledger.csv"))
        for op, a, b in ops:
            if op == "keep":
                name = list(APPS)[a % 2]
                sets = out[name].sets
                numbers = sorted({int(n) for n in sets["set"] if (int(n) + b) % 3})
                if not numbers:
                    continue
                _, newly = upkeep.keep(results, name, numbers)
                fresh = sets[sets["state"] == "new"]
                assert sorted(newly) == sorted({int(n) for n in fresh["set"]} & set(numbers))
                event(f"kept {len(newly)} set(s)")
                for n in newly:
                    model.kept[(name, n)] = set(fresh.loc[fresh["set"] == n, "device"])
            elif op.startswith("retire"):
                kept = sorted(set().union(*model.kept.values()))
                choice = kept if op == "retire_kept" and kept else devices
                device = choice[a % len(choice)]
                upkeep.retire(reel, device)
                event("retired a kept part" if any(device in m for m in model.kept.values())
                      else "retired a free part")
                model.retire(device)
            elif op == "replace":
                replace_one(reel, results, model, out, a)
            else:
                devices = add_parts(results, 6)
                event("new parts")
            before = read_ledger(reel / "ledger.csv")
            out = rematch(reel, results)
            check_history_step(reel, devices, model, out, before)


def test_replacing_a_part_already_replaced_is_refused_in_words(tmp_path):
    # Reference: the contract (replace lists parts that make set S valid again; every
    # problem with an input is an error naming it).
    reel, results = write_reel(tmp_path, 24)
    out = rematch(reel, results)
    sets = out["p2"].sets
    gone, stays = sets.loc[sets["set"] == 1, "device"]
    spare = sets.loc[sets["set"] == 2, "device"].iloc[0]
    write_ledger(Ledger(reel / "ledger.csv", [                    # gone was replaced by spare
        Entry(gone, "p2", 1, "retired", "2024-01-02"),
        Entry(stays, "p2", 1, "kept", "2024-01-02"),
        Entry(spare, "p2", 1, "kept", "2024-01-02")]))
    rematch(reel, results)
    with pytest.raises(InputError, match=gone):
        upkeep.replacement(results, "p2", 1, gone)


# ------------------------------------------------------------------ 4. replacements


def closed_form_volts(results: Path) -> pd.DataFrame:
    """Each part's forward voltage at the profile currents from its fitted IS, N, RS:
    V = N·Vt·ln(1 + I/IS) + I·RS with Vt = kT/q (scipy.constants, CODATA), checked
    against kinset.physics.forward.voltage_from_current."""
    t = read_result(results / "forward.csv").set_index("device")
    i = np.asarray(CURRENTS)[None, :]
    i_s, n, rs = (t[c].to_numpy()[:, None] for c in ("is_A", "n", "rs_ohm"))
    v = n * (sc.k * T25 / sc.e) * np.log1p(i / i_s) + i * rs
    np.testing.assert_allclose(voltage_from_current(i, i_s, n, rs, T25), v, rtol=1e-9)
    return pd.DataFrame(v, index=t.index)


def guarded_limit(volts: pd.DataFrame, tolerance: float) -> np.ndarray:
    """The tolerance after the guard band at each current: spread ≤ T − 2·√2·a/√3, a the
    voltmeter's ±(gain·|V| + offset) at the reel's median voltage (JCGM 100:2008 §4.3.7,
    JCGM 106:2012 §8)."""
    spec = ACCURACY["voltage"]
    a = spec["gain"] * np.abs(volts.median(axis=0).to_numpy()) + spec["offset_V"]
    return tolerance - 2 * math.sqrt(2) * a / math.sqrt(3)


def test_replacements_are_free_parts_that_make_the_set_valid_by_the_closed_form(tmp_path):
    # Reference: forward voltages recomputed from the fitted parameters by the closed
    # form (scipy.constants for Vt), the guard band by JCGM 100/106, the free parts by
    # the contract (not kept, not retired, not placed by an earlier application).
    reel, results = write_reel(tmp_path, 40, guard="accuracy")
    out = rematch(reel, results)
    p2 = sorted(set(out["p2"].sets["set"]))
    upkeep.keep(results, "p2", p2[:len(p2) // 2])        # the rest stay placed, not kept
    p4 = out["p4"].sets
    number = int(p4["set"].min())
    members = list(p4.loc[p4["set"] == number, "device"])
    volts = closed_form_volts(results)
    tolerance = APPS["p4"][1]
    limit = guarded_limit(volts, tolerance)

    def valid(parts, limit=limit):
        v = volts.loc[parts].to_numpy()
        return bool(np.all(v.max(axis=0) - v.min(axis=0) <= limit * (1 + 1e-9)))

    # retire a part that would have served: the first free one valid with the others
    spare = next(d for d in volts.index if d not in set(out["p2"].sets["device"])
                 and d not in members and valid(members[1:] + [d]))
    upkeep.retire(reel, spare)
    base, _ = upkeep.keep(results, "p4", [number])
    seen_valid, guarded_out, withheld = 0, 0, set()
    for gone in members:
        write_ledger(base.with_rows([Entry(gone, "p4", number, "retired", "2024-01-02")]))
        out = rematch(reel, results)
        book = read_ledger(reel / "ledger.csv")
        taken = set(book.by_device()) | set(out["p2"].sets["device"])
        free = [d for d in volts.index if d not in taken]
        table, remaining, _ = upkeep.replacement(results, "p4", number, gone, top=len(volts))
        assert sorted(remaining) == sorted(set(members) - {gone})
        # exactly the free parts whose set is valid (only those are proposed), best first
        assert sorted(table["device"]) == sorted(d for d in free if valid(remaining + [d]))
        assert table["within"].astype(bool).all()
        assert list(table["score"]) == sorted(table["score"])
        guarded_out += sum(valid(remaining + [d], tolerance) and not valid(remaining + [d])
                           for d in free)
        seen_valid += len(table)
        assert not any(d in taken for d in table["device"])
        for d in taken - set(members):
            if valid(remaining + [d]):
                state = book.by_device()[d].state if d in book.by_device() else "placed"
                withheld.add(state)
    assert seen_valid > 0 and guarded_out > 0   # the guard band decided some proposals
    assert withheld == {"kept", "retired", "placed"}    # each rule kept a part that would fit
