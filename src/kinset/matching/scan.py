"""What would it take: the number of sets as one tolerance at a time is scaled.

For each criterion (profile dimension) the tolerance T is scaled by each of
:data:`SCALES`, the others held at the profile's values, and the sets are counted again
on the same parts the match was offered (the candidates that passed screens and guard
bands, less the parts kept in sets or taken by earlier applications). The guard band
stays as the match computed it: the effective tolerance at scale s is s·T − g, where
T − g is the match's own. A scale at which s·T ≤ g admits no set.

The count ignores a ``sets_wanted`` quota: it is what the parts allow, so at 1× it is
the number of new sets the match formed before any quota dropped some.

Two methods (the ``method`` column of ``tolerance_scan.csv``):

``full``
    :func:`kinset.matching.sets.form_sets`, the matcher itself, at every scale. Used
    when the offered parts are few (:data:`FULL_MAX_PARTS`); at 1× the match's own count
    is reused.
``estimate``
    :func:`greedy_count`: sets grown greedily from the least-connected free part among
    its :data:`ESTIMATE_NEIGHBOURS` nearest compatible parts, a lower bound on what the
    matcher finds. Its gap to the full result is measured in ``tests/test_scan.py``.

The *binding criterion* is the one whose tolerance, loosened alone to the largest scale
(2×), gains the most sets over the count at 1× by the same method; ties go to the larger
gain at the next smaller scale (1.5×, then 1.25×), then to the profile's order. When no
criterion gains a set, none binds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree

from kinset.matching.criteria import normalise
from kinset.matching.graph import EPSILON, compatibility, enumerate_sets
from kinset.matching.heuristics import least_degree_greedy
from kinset.matching.sets import form_sets

SCALES = (0.5, 0.75, 1.0, 1.25, 1.5, 2.0)
"""Factors on each tolerance, one criterion at a time."""
FULL_MAX_PARTS = {2: 2_000, 3: 40}
"""Offered parts (by set size; 3 stands for 3 and more) up to which the scan runs the
full matcher at every scale. Measured: see ``benchmarks/matching.py``'s scan figures
and the README's cost note."""
ESTIMATE_NEIGHBOURS = 64
"""Nearest parts each part's compatible partners are sought among in
:func:`greedy_count` (measured on a 10,000-part reel of pairs: 16 found 4,751 of 4,895
pairs, 64 found 4,856 in 0.7 s)."""
ESTIMATE_MAX_CANDIDATES = 300_000
"""Valid sets enumerated for :func:`candidate_greedy` before falling back to
:func:`greedy_count`."""
ESTIMATE_NAME = (f"greedy: sets grown from the least-connected free part among its "
                 f"{ESTIMATE_NEIGHBOURS} nearest compatible parts (a lower bound)")
FULL_NAME = "the matcher (form_sets) at this scale"
CANDIDATE_NAME = "least-degree greedy over every valid set (the matcher's own greedy; a lower bound)"
NO_ROOM = "none: the guard band takes the whole tolerance"
MATCH_NAME = "the match itself (its sets before any quota)"
COLUMNS = ["criterion", "scale", "tolerance", "unit", "effective_tolerance", "sets",
           "method", "how"]
"""tolerance_scan.csv's columns, and ``gain``: sets less the count at 1× by the same
method (the match's own for ``full``)."""


def greedy_count(z: np.ndarray, k: int, neighbours: int = ESTIMATE_NEIGHBOURS) -> int:
    """Disjoint valid sets of ``k`` found greedily among normalised points ``z``.

    Each part's compatible parts (Chebyshev distance ≤ 1 in every normalised dimension)
    are sought among its ``neighbours`` nearest; parts are served in order of fewest
    such partners, ties by row. A free part takes its free partners, those of fewest
    partners first (then nearest), each only while the group's bounding box stays
    within the unit cube; with ``k`` members the group is a set. Every set found is
    valid, so the count is a lower bound on the most disjoint sets.
    """
    n = len(z)
    if n < k:
        return 0
    kk = min(neighbours + 1, n)
    idx = cKDTree(z).query(z, k=kk, p=np.inf, distance_upper_bound=1.0 + EPSILON)[1]
    idx = idx.reshape(n, kk)
    near_ok = (idx < n) & (idx != np.arange(n)[:, None])
    degree = near_ok.sum(axis=1)
    free = np.ones(n, bool)
    count = 0
    for u in np.argsort(degree, kind="stable"):
        if not free[u] or degree[u] < k - 1:
            continue
        near = idx[u][near_ok[u]]
        near = near[free[near]]
        if len(near) < k - 1:
            continue
        near = near[np.argsort(degree[near], kind="stable")]    # ties: nearest first
        members = [u, near[0]] if k == 2 else _grow(z, u, near, k)
        if members is not None:
            free[members] = False
            count += 1
    return count


def _grow(z: np.ndarray, u: int, near: np.ndarray, k: int):
    """``u`` and members of ``near`` taken in order while the set stays valid; None if
    fewer than ``k`` fit.

    The box only grows, so a part that does not fit once never fits later: each step
    takes the first part of the rest that fits (one vectorised test of the rest) and
    drops those before it, the same members as testing one part at a time."""
    members = [int(u)]
    lo, hi = z[u].copy(), z[u].copy()
    rest = np.asarray(near)
    while len(members) < k and len(rest):
        x = z[rest]
        nlo, nhi = np.minimum(lo, x), np.maximum(hi, x)
        fits = np.flatnonzero(np.all(nhi - nlo <= 1.0 + EPSILON, axis=1))
        if not len(fits):
            return None
        a = fits[0]
        members.append(int(rest[a]))
        lo, hi, rest = nlo[a], nhi[a], rest[a + 1:]
    return np.asarray(members) if len(members) == k else None


def full_count(z: np.ndarray, weights, k: int, goal: str) -> int:
    """Sets the matcher forms among normalised points ``z``."""
    return form_sets(z, weights, k, goal).count if len(z) >= k else 0


def candidate_greedy(z: np.ndarray, weights, k: int, cap: int = ESTIMATE_MAX_CANDIDATES):
    """Sets of ``k`` by the matcher's least-degree greedy over every valid set (its own
    enumeration, :func:`kinset.matching.graph.enumerate_sets`); None beyond ``cap``
    valid sets.

    The valid pairs are the first level of the enumeration: when they alone exceed
    ``cap`` the enumeration would stop there, so they are only counted (:func:`more_pairs_than`,
    without building the pair list: on a dense 10,000-part reel listing them took
    2.5 s per call, half the scan)."""
    if k >= 2 and more_pairs_than(z, cap):
        return None
    found = enumerate_sets(z, compatibility(z), k, weights, cap)
    if found is None:
        return None
    P, cost = found
    return len(least_degree_greedy(P, cost, len(z))) if len(P) else 0


def more_pairs_than(z: np.ndarray, cap: float, chunk: int = 500) -> bool:
    """Whether more than ``cap`` pairs of ``z`` are compatible (Chebyshev distance
    ≤ 1 + EPSILON). Each part's compatible parts are counted, a chunk of parts at a
    time, stopping as soon as the count proves it: every pair is counted at most twice,
    so half the running count is a lower bound on the pairs."""
    n = len(z)
    if n < 2 or not np.isfinite(cap):
        return False
    tree, seen = cKDTree(z), 0
    for lo in range(0, n, chunk):
        part = z[lo:lo + chunk]
        seen += int(tree.query_ball_point(part, r=1.0 + EPSILON, p=np.inf,
                                          return_length=True).sum()) - len(part)
        if seen // 2 > cap:
            return True
    return False


def placeable(z: np.ndarray, k: int) -> np.ndarray:
    """Rows of ``z`` with at least ``k − 1`` compatible parts: the only ones any set
    can hold (dropping the others changes no count)."""
    n = len(z)
    if n < k:
        return np.zeros(n, bool)
    dist = cKDTree(z).query(z, k=k, p=np.inf, distance_upper_bound=1.0 + EPSILON)[0]
    return np.isfinite(dist.reshape(n, k)[:, -1])


def count_sets(z: np.ndarray, weights, k: int, goal: str) -> tuple[int, str, str]:
    """(sets, method, how) among normalised points ``z``: the matcher itself when at
    most :data:`FULL_MAX_PARTS` placeable parts are left, else the matcher's greedy over
    every valid set (sets of three or more, up to :data:`ESTIMATE_MAX_CANDIDATES`), else
    :func:`greedy_count`."""
    z = z[placeable(z, k)]
    if uses_full(len(z), k):
        return full_count(z, weights, k, goal), "full", FULL_NAME
    if k >= 3:
        n = candidate_greedy(z, weights, k)
        if n is not None:
            return n, "estimate", CANDIDATE_NAME
    return greedy_count(z, k), "estimate", ESTIMATE_NAME


def estimate(how: str, z: np.ndarray, weights, k: int) -> int:
    """Sets by the estimate named ``how`` (the base its gains are taken from)."""
    z = z[placeable(z, k)]
    if how == CANDIDATE_NAME:
        return int(candidate_greedy(z, weights, k, cap=np.inf))
    return greedy_count(z, k)


def uses_full(parts: int, k: int) -> bool:
    """Whether the scan runs the full matcher on this many placeable parts."""
    return parts <= FULL_MAX_PARTS[min(k, 3)]


def scaled_points(raw: np.ndarray, z: np.ndarray, dims, effective: dict, j: int,
                  scale: float):
    """``z`` with dimension ``j`` re-normalised at ``scale`` times its tolerance (the
    guard band kept), and that effective tolerance; None for points when none is left."""
    d = dims[j]
    eff = effective[d.name] + (scale - 1.0) * d.tolerance
    if not eff > 0:
        return None, eff
    out = z.copy()
    out[:, j] = normalise(raw[:, j], d, eff)
    return out, eff


@dataclass
class Scan:
    """A tolerance scan: the table, ``estimate`` if any row is estimated (else
    ``full``), and the count at 1× by each method used (the bases of the gains)."""

    table: pd.DataFrame
    method: str
    base: dict

    def binding(self) -> dict:
        """The binding criterion (module docstring), its gain and the definition."""
        return binding_criterion(self.table)


def tolerance_scan(pool, profile, at_one: int) -> Scan:
    """``tolerance_scan.csv``: sets per criterion and scale on the offered parts ``pool``
    (a :class:`kinset.matching.run.Candidates`); ``at_one``: the match's own count of new
    sets before any quota, written at 1× (method ``full``). Each criterion's scales are
    counted on the parts placeable at its largest scale (:func:`placeable`), by
    :func:`count_sets`."""
    dims, k = profile.dimensions, profile.set_size
    weights = np.asarray([d.weight for d in dims])
    rows, bases = [], {}
    for j, d in enumerate(dims):
        pct = 100.0 if d.relative else 1.0
        loose = scaled_points(pool.raw, pool.z, dims, pool.tolerance, j, max(SCALES))[0]
        keep = placeable(loose, k) if loose is not None else np.zeros(len(pool.z), bool)
        for s in SCALES:
            z, eff = scaled_points(pool.raw[keep], pool.z[keep], dims, pool.tolerance, j, s)
            if s == 1.0:
                n, method, how = at_one, "full", MATCH_NAME
            elif z is None:
                n, method, how = 0, "full", NO_ROOM
            else:
                n, method, how = count_sets(z, weights, k, profile.goal)
            rows.append({"criterion": d.name, "scale": s, "tolerance": s * d.tolerance * pct,
                         "unit": "percent" if d.relative else d.unit,
                         "effective_tolerance": eff * pct, "sets": int(n), "method": method,
                         "how": how})
    table = pd.DataFrame(rows, columns=COLUMNS)
    base = {"full": at_one}
    for how in table.loc[table["method"] == "estimate", "how"].unique():
        base[how] = estimate(how, pool.z, weights, k)
    table["gain"] = table["sets"] - [base.get(h, base["full"]) if m == "estimate" else at_one
                                     for m, h in zip(table["method"], table["how"])]
    method = "estimate" if (table["method"] == "estimate").any() else "full"
    return Scan(table, method, {h: int(n) for h, n in base.items()})


def binding_criterion(scan: pd.DataFrame) -> dict:
    """The binding criterion of a scan table (module docstring), its gain in sets and
    the definition; ``criterion`` is None when loosening no single criterion gains a set."""
    definition = ("the criterion whose tolerance alone loosened to the largest scale "
                  f"({max(SCALES):g}x) gains the most sets over 1x (counted by the same "
                  "method); ties by the gain at the next smaller scales, then profile order")
    loosen = sorted((s for s in SCALES if s > 1.0), reverse=True)
    best, best_key = None, None
    for name, rows in scan.groupby("criterion", sort=False):
        at = dict(zip(rows["scale"], rows["gain"]))
        key = tuple(int(at.get(s, 0)) for s in loosen)
        if best_key is None or key > best_key:
            best, best_key = name, key
    gain = int(best_key[0]) if best_key else 0
    return {"criterion": best if gain > 0 else None, "gain": gain,
            "scale": max(SCALES), "defined_as": definition}


def scan_line(summary: dict) -> str:
    """One line for the terminal: what binds, from a match's ``summary.json``."""
    name = summary.get("application", "")
    info = summary.get("tolerance_scan")
    if not info:
        return f"{name}: no tolerance scan"
    what = ("estimated" if info["method"] == "estimate" else "counted by the matcher")
    if summary.get("binding_criterion") is None:
        return (f"{name}: loosening no single tolerance to {info['binding_scale']:g}x gains "
                f"a set ({what}); see tolerance_scan.csv")
    return (f"{name}: binding criterion {summary['binding_criterion']}: its tolerance at "
            f"{info['binding_scale']:g}x gains {info['binding_gain']} sets ({what}); "
            "see tolerance_scan.csv")
