"""Packing valid sets when exact packing is too large: greedy choices, rounding of the
linear relaxation, and a local search that re-packs neighbourhoods exactly.

The local search is a large neighbourhood search [1]_: the sets lying inside a region of
nearby devices are released and the region is re-packed exactly by HiGHS (see
:mod:`kinset.matching.packing`). ``sort_and_group`` is the by-hand method, kept for
comparison and as the last resort on components too dense to enumerate.

References
----------
.. [1] P. Shaw, "Using constraint programming and local search methods to solve vehicle
   routing problems", Principles and Practice of Constraint Programming (CP98), LNCS
   1520, 417-431, 1998. doi:10.1007/3-540-49481-2_30
"""

from __future__ import annotations

import heapq

import numpy as np
from scipy.optimize import linprog
from scipy.spatial import cKDTree

from kinset.matching.graph import gather, is_valid
from kinset.matching.packing import lp_relaxation, milp_pack, set_matrix

# Limits, chosen from measurements on generated reels (7 correlated criteria, 5-30
# compatible neighbours per device, 2 cores); see benchmarks/matching.py.
ROOT_MAX_CANDIDATES = 25_000
"""Larger parts left short of their bound get one root node of HiGHS (its cuts and
heuristics): measured 16 s at 21,000 candidates, 31-59 s at 35,000."""
LNS_REGION_DEVICES = 800
LNS_BUDGETS = (2_000, 4_000, 8_000)
LNS_NODE_LIMIT = 50
"""Branch-and-bound nodes per neighbourhood: 50 found the same sets as 200 on 10,000
parts (1,398 from a start of 1,332) in 123 s instead of 154 s."""
LNS_MAX_PASSES = 1
"""Local-search passes: on 10,000 parts, started from the relaxation's sets above 1/2,
one pass added 34 sets in 76 s and a second (revisiting what changed) none in 78 s."""
LNS_REDUCED_COST = 0.25
GREEDY_BLOCK = 2_048
LNS_MIN_COVERAGE = 0.05


def sort_and_group(values, size=2, key=0):
    """The by-hand method, for comparison: sort by one criterion, group neighbours.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Criteria divided by their tolerances [1].
    size : int, optional
        Devices per set.
    key : int, optional
        Column to sort by (e.g. the forward voltage at one current).

    Returns
    -------
    list of numpy.ndarray
        Sets of sorted member indices. Walking the sorted list, the next ``size``
        devices become a set when they fit in every dimension; otherwise the first
        of them is skipped.
    """
    v = np.asarray(values, dtype=float)
    order = np.argsort(v[:, key], kind="stable")
    sets, i = [], 0
    while i + size <= len(order):
        group = order[i:i + size]
        if is_valid(v, group):
            sets.append(np.sort(group))
            i += size
        else:
            i += 1
    return sets


def by_cost(P, cost):
    """Candidate order: cost ascending, ties by members (lexicographic)."""
    keys = [P[:, j] for j in range(P.shape[1] - 1, -1, -1)] + [cost]
    return np.lexsort(keys)


def greedy(P, order, n):
    """Take candidates in ``order`` whenever all their members are still free.

    Candidates are screened a block at a time, so the loop only visits those still
    alive when their block starts (on 2.2 million quads, 20 s became ~1 s)."""
    free = np.ones(n, bool)
    chosen = []
    order = np.asarray(order, np.int64)
    for a in range(0, len(order), GREEDY_BLOCK):
        block = order[a:a + GREEDY_BLOCK]
        for s in block[free[P[block]].all(axis=1)].tolist():
            mem = P[s]
            if free[mem].all():
                free[mem] = False
                chosen.append(s)
    return np.asarray(chosen, np.int64)


def least_degree_greedy(P, cost, n, live=None):
    """Repeatedly serve the free device with the fewest live candidates.

    Its candidate that touches the fewest other live candidates (then least cost,
    then lowest row) is taken; all candidates sharing a member with it die.
    """
    m, k = P.shape
    live = np.ones(m, bool) if live is None else live.copy()
    indptr, d2c = _incidence(P, n)
    deg = np.bincount(P[live].ravel(), minlength=n).astype(np.int64)
    free = deg > 0
    heap = [(int(deg[u]), int(u)) for u in np.flatnonzero(free)]
    heapq.heapify(heap)
    chosen = []
    while heap:
        d, u = heapq.heappop(heap)
        if not free[u] or deg[u] == 0:
            continue
        if deg[u] != d:
            heapq.heappush(heap, (int(deg[u]), u))
            continue
        cs = d2c[indptr[u]:indptr[u + 1]]
        cs = cs[live[cs]]
        s = cs[np.lexsort((cs, cost[cs], deg[P[cs]].sum(axis=1)))[0]]
        chosen.append(s)
        mem = P[s]
        free[mem] = False
        killed = np.unique(gather(indptr, d2c, mem))
        killed = killed[live[killed]]
        live[killed] = False
        touched = P[killed].ravel()
        np.subtract.at(deg, touched, 1)
        for t in np.unique(touched[free[touched] & (deg[touched] > 0)]).tolist():
            heapq.heappush(heap, (int(deg[t]), t))
    return np.asarray(chosen, np.int64)


def _incidence(P, n):
    """Device -> candidate rows (CSR), candidates ascending within a device."""
    k = P.shape[1]
    flat = P.ravel()
    order = np.argsort(flat, kind="stable")
    indptr = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(flat, minlength=n), out=indptr[1:])
    return indptr, order // k


def pack_large(v, P, cost, n, k, start, bound, certify=True):
    """Relaxation rounding, least-degree greedy and local exact re-packing.

    Returns the sets (rows of member indices) and the proven upper bound. Without
    ``certify`` (the caller proves its bound another way) the relaxation is not solved:
    on a dense 10,000-part reel (2.2 million candidate quads) its two solves took 17 min
    and its rounding started the search 2 sets above the least-degree greedy (2,430 vs
    2,428 quads, benchmarks/scan.py), which takes 4 s.
    """
    x, reduced, lp_bound = lp_relaxation(P, n) if certify else (None, None, None)
    if certify and lp_bound is not None:
        bound = min(bound, lp_bound)
    m = len(P)
    if x is not None:
        # The sets the relaxation holds above 1/2 are pairwise disjoint (two sharing a
        # device would exceed its row); they are taken, largest value first, and the
        # least-degree greedy fills the rest. On 10,000 parts this starts the local
        # search 37 sets higher than keeping only the sets held whole (x = 1), and
        # the search ends 10 sets higher in a third of the time.
        half = np.flatnonzero(x > 0.5)
        taken = greedy(P, half[np.lexsort((half, cost[half], -x[half]))], n)
        used = np.zeros(n, bool)
        used[P[taken].ravel()] = True
        live = ~used[P].any(axis=1)
        chosen = np.concatenate([taken, least_degree_greedy(P, cost, n, live)])
        coverage = set_matrix(P, n) @ x
    else:
        chosen = least_degree_greedy(P, cost, n)
        coverage = np.ones(n)
    for other in (start, greedy(P, by_cost(P, cost), n)):
        if other is not None and len(other) > len(chosen):
            chosen = other
    if len(chosen) < bound:
        # the local search sees only candidates the relaxation prices near zero
        keep = np.ones(m, bool) if reduced is None else reduced <= LNS_REDUCED_COST
        keep[chosen] = True
        rows = np.flatnonzero(keep)
        at = np.full(m, -1, np.int64)
        at[rows] = np.arange(len(rows))
        chosen = rows[_local_search(v, P[rows], at[chosen], coverage, bound)]
    if len(chosen) < bound and m <= ROOT_MAX_CANDIDATES:
        # HiGHS's root node: its cuts tighten the bound, its heuristics may find more
        root, r = milp_pack(P, n, node_limit=1)
        if root is not None and len(root) > len(chosen):
            chosen = root
        if certify and r.mip_dual_bound is not None and np.isfinite(r.mip_dual_bound):
            bound = min(bound, int(np.floor(-r.mip_dual_bound + 1e-6)))
    return P[chosen], bound


def _region_pack(P, n, need):
    """Exact re-packing of a neighbourhood, skipped when its relaxation forbids ``need``."""
    A = set_matrix(P, n)
    r = linprog(-np.ones(len(P)), A_ub=A, b_ub=np.ones(n), bounds=(0, None), method="highs-ds")
    if r.status == 0 and np.floor(-r.fun + 1e-6) < need:
        return None, True
    chosen, _ = milp_pack(P, n, node_limit=LNS_NODE_LIMIT)
    return chosen, False


def _local_search(v, P, chosen, coverage, target):
    """Re-pack neighbourhoods of unused devices exactly while that adds sets.

    A neighbourhood is the nearest devices (Chebyshev) of an unused device, cut so
    that it holds at most a budget of candidate sets; the sets lying entirely inside
    it are released and HiGHS re-packs the free devices. The budget grows through
    ``LNS_BUDGETS`` while the neighbourhood's relaxation still allows one set more.
    Seeds are unused devices the relaxation covers most; later passes revisit only
    places that changed.
    """
    return _Search(v, P, chosen).run(coverage, target)


class _Search:
    """The local search's state: the set owning each device, and scratch masks."""

    def __init__(self, v, P, chosen):
        n = len(v)
        self.v, self.P, self.n = v, P, n
        self.indptr, self.d2c = _incidence(P, n)
        self.owner = np.full(n, -1, np.int64)
        self.sets = {}
        for i, s in enumerate(chosen):
            self.owner[P[s]] = i
            self.sets[i] = int(s)
        self.next_id = len(chosen)
        self.tree = cKDTree(v)
        self.K = min(n, LNS_REGION_DEVICES)
        self.inreg = np.zeros(n, bool)
        self.avail = np.zeros(n, bool)
        self.posn = np.full(n, self.K, np.int64)
        self.loc = np.full(n, -1, np.int64)

    def run(self, coverage, target):
        n = self.n
        has_cand = np.diff(self.indptr) > 0
        dirty = np.ones(n, bool)
        for _ in range(LNS_MAX_PASSES):
            if len(self.sets) >= target:
                break
            seeds = np.flatnonzero((self.owner < 0) & has_cand & dirty & (coverage > LNS_MIN_COVERAGE))
            seeds = seeds[np.argsort(-coverage[seeds], kind="stable")]
            changed = np.zeros(n, bool)
            gained = 0
            for f in seeds:
                if self.owner[f] >= 0 or len(self.sets) >= target:
                    continue
                gained += self._seed(f, changed)
            if gained == 0:
                break
            dirty = changed
        return np.array(sorted(self.sets.values()), np.int64)

    def _seed(self, f, changed):
        """Grow a neighbourhood of unused device ``f`` through the budgets until a
        re-packing gains a set; returns the sets gained and marks the region changed."""
        P, K = self.P, self.K
        _, near = self.tree.query(self.v[f], k=K, p=np.inf)
        near = np.atleast_1d(near)
        self.posn[near] = np.arange(len(near))
        touching = np.unique(gather(self.indptr, self.d2c, near))
        entry = self.posn[P[touching]].max(axis=1)
        sorted_entry = np.sort(entry)
        gained = 0
        for budget in LNS_BUDGETS:
            cut = int(sorted_entry[budget]) if len(sorted_entry) > budget else K
            cut = max(cut, 1)
            region = near[:cut]
            tried = self._repack(f, region, touching[entry < cut])
            if tried is None:
                break
            gained, skipped = tried
            if gained:
                changed[region] = True
                break
            if not skipped or cut >= K:
                break
        self.posn[near] = K
        return gained

    def _repack(self, f, region, cs):
        """Release the sets inside ``region`` and re-pack its free devices exactly.

        Returns (sets gained, whether the relaxation ruled a gain out), or None when no
        candidate among ``cs`` on the free devices holds ``f``.
        """
        P, owner, sets = self.P, self.owner, self.sets
        self.inreg[region] = True
        owners = np.unique(owner[region])
        owners = owners[owners >= 0]
        inside = [q for q in owners.tolist() if self.inreg[P[sets[q]]].all()]
        self.avail[region] = owner[region] < 0
        for q in inside:
            self.avail[P[sets[q]]] = True
        cs = cs[self.avail[P[cs]].all(axis=1)]
        free_here = np.flatnonzero(self.avail)
        self.inreg[region] = False
        self.avail[region] = False
        if not np.any(P[cs] == f):
            return None
        self.loc[free_here] = np.arange(len(free_here))
        new, skipped = _region_pack(self.loc[P[cs]], len(free_here), len(inside) + 1)
        self.loc[free_here] = -1
        if new is None or len(new) <= len(inside):
            return 0, skipped
        for q in inside:
            owner[P[sets.pop(q)]] = -1
        for s in cs[new]:
            sets[self.next_id] = int(s)
            owner[P[s]] = self.next_id
            self.next_id += 1
        return len(new) - len(inside), skipped
