"""One part, one set: applications served in order, and the sets_wanted quota.

The references are outside the matcher:

* the most sets an application can form: maximum set packing over every valid set,
  listed by brute force (itertools.combinations, validity by the contract's definition
  of a spread, max - min, against the effective tolerance) and solved by HiGHS through
  scipy.optimize.milp (``max_packing`` of test_match);

The reels are invented, demo-like parts (``tight_batch`` of test_match).
"""

from __future__ import annotations

import itertools
import re

import numpy as np
import pytest

from kinset.matching.allocation import allocate
from kinset.matching.run import candidates, match

from test_match import max_packing, profile, tight_batch

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
