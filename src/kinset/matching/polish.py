"""Lowering the total cost of chosen sets without changing how many there are.

Two count-preserving exchanges, repeated while they help: re-split the members of two
neighbouring sets into the cheapest two valid sets, and replace a member of a set by an
unused device.
"""

from __future__ import annotations

import itertools

import numpy as np
from scipy.spatial import cKDTree

from kinset.matching.graph import EPSILON

RESPLIT_NEIGHBOURS = 16
"""Neighbouring sets each set is tried with in a re-split."""


def polish(v, w, S, passes=4):
    """Lower the total cost without changing the number of sets.

    Two exchanges, repeated while they help: re-split the members of two neighbouring
    sets into the cheapest two valid sets, and replace a member by an unused device.
    """
    S = np.array(S, dtype=np.int64)
    if len(S) == 0:
        return S
    k = S.shape[1]
    n = len(v)
    for _ in range(passes):
        changed = _resplit(v, w, S) if k <= 6 and len(S) > 1 else False
        changed |= _replace(v, w, S, n)
        if not changed:
            break
    return S


def _resplit(v, w, S):
    k = S.shape[1]
    x = v[S]
    lo, hi = x.min(axis=1), x.max(axis=1)
    near = _neighbour_sets((lo + hi) / 2)
    if len(near) == 0:
        return False
    old = (hi - lo) @ w
    U = np.concatenate([S[near[:, 0]], S[near[:, 1]]], axis=1)
    xu = v[U]
    best = old[near[:, 0]] + old[near[:, 1]]
    best_split = np.full(len(near), -1)
    splits = [(0,) + c for c in itertools.combinations(range(1, 2 * k), k - 1)]
    for j, first in enumerate(splits):
        second = [i for i in range(2 * k) if i not in first]
        a, b = xu[:, list(first)], xu[:, second]
        sa, sb = a.max(axis=1) - a.min(axis=1), b.max(axis=1) - b.min(axis=1)
        ok = np.all(sa <= 1.0 + EPSILON, axis=1) & np.all(sb <= 1.0 + EPSILON, axis=1)
        total = np.where(ok, (sa + sb) @ w, np.inf)
        better = total < best - 1e-12 * np.maximum(best, 1.0)
        best = np.where(better, total, best)
        best_split = np.where(better, j, best_split)
    gain = old[near[:, 0]] + old[near[:, 1]] - best
    done = np.zeros(len(S), bool)
    changed = False
    for q in np.lexsort((np.arange(len(near)), -gain)):
        if best_split[q] < 0:
            break
        a, b = near[q]
        if done[a] or done[b]:
            continue
        first = list(splits[best_split[q]])
        second = [i for i in range(2 * k) if i not in first]
        S[a], S[b] = U[q, first], U[q, second]
        done[a] = done[b] = True
        changed = True
    return changed


def _neighbour_sets(centre):
    """Pairs (i < j, sorted) of sets whose centres lie within Chebyshev distance 2 (only
    then can their members be re-split into two valid sets), each set's
    ``RESPLIT_NEIGHBOURS`` nearest such: every pair within 2 where no set has more; on a
    dense reel (hundreds of sets within 2 of each) the full list of pairs was 152 s of a
    10,000-part match."""
    m = len(centre)
    kk = min(RESPLIT_NEIGHBOURS + 1, m)
    _, idx = cKDTree(centre).query(centre, k=kk, p=np.inf, distance_upper_bound=2.0 + EPSILON)
    idx = idx.reshape(m, kk)
    a = np.repeat(np.arange(m), kk)
    b = idx.ravel()
    ok = (b < m) & (b != a)
    a, b = a[ok], b[ok]
    return np.unique(np.column_stack([np.minimum(a, b), np.maximum(a, b)]), axis=0).reshape(-1, 2)


def _replace(v, w, S, n):
    k = S.shape[1]
    used = np.zeros(n, bool)
    used[S.ravel()] = True
    free = np.flatnonzero(~used)
    if len(free) == 0:
        return False
    tree = cKDTree(v[free])
    x = v[S]
    lo, hi = x.min(axis=1), x.max(axis=1)
    old = (hi - lo) @ w
    near = tree.query_ball_point((lo + hi) / 2, r=1.5 + EPSILON, p=np.inf)
    taken = np.zeros(len(free), bool)
    changed = False
    for s in range(len(S)):
        cands = np.asarray(near[s], dtype=np.int64)
        cands = cands[~taken[cands]]
        if len(cands) == 0:
            continue
        best, best_at = old[s] - 1e-12 * max(old[s], 1.0), None
        for j in range(k):
            rest = np.delete(S[s], j)
            xr = v[rest]
            nlo = np.minimum(xr.min(axis=0), v[free[cands]])
            nhi = np.maximum(xr.max(axis=0), v[free[cands]])
            sp = nhi - nlo
            ok = np.all(sp <= 1.0 + EPSILON, axis=1)
            if not ok.any():
                continue
            c = np.where(ok, sp @ w, np.inf)
            i = int(np.argmin(c))
            if c[i] < best:
                best, best_at = c[i], (j, cands[i])
        if best_at is not None:
            j, i = best_at
            S[s, j] = free[i]
            taken[i] = True
            old[s] = best
            changed = True
    return changed
