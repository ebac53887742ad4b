"""Matched sets: which devices fit together, and how to choose many disjoint sets.

The caller divides each criterion by its tolerance, so that a group of devices is a
valid set exactly when, in every dimension, its largest value minus its smallest is at
most 1 (the group's bounding box fits in the unit cube). A group is valid if and only
if every two of its members lie within Chebyshev distance 1 of each other, so the valid
sets of ``k`` devices are the ``k``-cliques of the compatibility graph, whose edges join
devices within Chebyshev distance ``1 + EPSILON`` (the slack absorbs rounding in the
normalisation). The cost of a set is its weighted spread, ``sum_j w_j (max - min)_j``.

Two goals are offered (see :func:`form_sets`):

``most_sets``
    the largest number of disjoint valid sets; among those, the smallest total cost.
``tightest_sets``
    best sets first: repeatedly the valid set of smallest cost among the devices left.

Both are solved separately on each connected component of the compatibility graph (a
set never spans two). Pairs are a maximum-cardinality matching of least cost
(Edmonds' blossom algorithm [1]_ [2]_, through rustworkx); sets of three or more are a
set-packing problem [3]_ over the enumerated cliques, solved exactly with HiGHS [4]_ on
components with few candidate sets, and on larger ones by rounding the linear-programming
relaxation followed by a local search that re-solves neighbourhoods exactly [5]_, with an
upper bound from the dual of the relaxation strengthened by triangle cuts, checked
against every valid set.

Everything is deterministic: devices are first put in a canonical order (lexicographic
in their values, then by input position); ties are broken by that order; the MILP
solver runs with node limits, never time limits.

References
----------
.. [1] J. Edmonds, "Paths, trees, and flowers", Canadian Journal of Mathematics 17,
   449-467, 1965. doi:10.4153/CJM-1965-045-4
.. [2] Z. Galil, "Efficient algorithms for finding maximum matching in graphs",
   ACM Computing Surveys 18(1), 23-38, 1986. doi:10.1145/6462.6502
.. [3] M. W. Padberg, "On the facial structure of set packing polyhedra", Mathematical
   Programming 5, 199-215, 1973. doi:10.1007/BF01580121
.. [4] Q. Huangfu and J. A. J. Hall, "Parallelizing the dual revised simplex method",
   Mathematical Programming Computation 10, 119-142, 2018. doi:10.1007/s12532-017-0130-5
.. [5] P. Shaw, "Using constraint programming and local search methods to solve vehicle
   routing problems", Principles and Practice of Constraint Programming (CP98), LNCS
   1520, 417-431, 1998. doi:10.1007/3-540-49481-2_30
"""

from __future__ import annotations

import heapq
import itertools
import os
import sys
from dataclasses import dataclass

import numpy as np
import rustworkx as rx
from scipy.optimize import Bounds, LinearConstraint, linprog, milp
from scipy.sparse import coo_matrix, csc_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

EPSILON = 1e-12
"""Slack on the unit box [1]: spreads up to ``1 + EPSILON`` count as within tolerance."""

GOALS = ("most_sets", "tightest_sets")

# Limits, chosen from measurements on generated reels (7 correlated criteria, 5-30
# compatible neighbours per device, 2 cores); see benchmarks/matching.py.
MAX_CANDIDATES = 3_000_000
"""Valid sets enumerated per component (at any clique size) before falling back to a
pool built from each device's nearest partners (memory: ~100 bytes per set)."""
POOL_PARTNERS = 32
"""Partners kept per device in that pool (halved until the pool fits)."""
EXACT_MAX_CANDIDATES = 5_000
"""Components with at most this many candidate sets are packed by HiGHS directly
(measured: 1-2 s at 3,000-5,000 candidates, 5-20 s at 10,000-16,000)."""
EXACT_NODE_LIMIT = 5_000
COST_NODE_LIMIT = 2_000
ROOT_MAX_CANDIDATES = 25_000
"""Larger parts left short of their bound get one root node of HiGHS (its cuts and
heuristics): measured 16 s at 21,000 candidates, 31-59 s at 35,000."""
DENSE_MEAN_PARTNERS = 64
"""A reel whose devices have more compatible partners than this on average (tolerances
wide against the reel's spread) is matched among each device's ``DENSE_KEEP`` nearest
compatible partners: blossom matching over all 17 million compatible pairs of one
10,000-part reel (1,800 per device) ran past 300 s and 4.4 GB."""
DENSE_KEEP = 12
LNS_REGION_DEVICES = 800
LNS_BUDGETS = (2_000, 4_000, 8_000)
LNS_NODE_LIMIT = 50
"""Branch-and-bound nodes per neighbourhood: 50 found the same sets as 200 on 10,000
parts (1,398 from a start of 1,332) in 123 s instead of 154 s."""
LNS_MAX_PASSES = 1
"""Local-search passes: on 10,000 parts, started from the relaxation's sets above 1/2,
one pass added 34 sets in 76 s and a second (revisiting what changed) none in 78 s."""
IPM_TOLERANCE = 1e-4
"""Optimality tolerance of the interior point method for the bound's relaxation."""
TRIANGLE_MIN_X = 1e-4
TRIANGLE_MIN_VIOLATION = 1e-3
TRIANGLE_MAX_CUTS = 50_000
LNS_REDUCED_COST = 0.25
LNS_MIN_COVERAGE = 0.05
_CHUNK = 250_000
_WEIGHT_SCALE = 2 ** 40


@dataclass(frozen=True, eq=False)
class SetResult:
    """Sets formed from one reel, with what is proven about them.

    Attributes
    ----------
    sets : list of numpy.ndarray
        Member indices (rows of ``values``) of each set, each sorted ascending; the
        sets are ordered by cost, then by first member.
    cost : numpy.ndarray
        Weighted spread of each set, in the units of ``weights`` times tolerances.
    upper_bound : int
        A proven upper bound on the number of disjoint valid sets that any selection
        could form from this reel; equal to ``len(sets)`` when ``optimal``.
    optimal : bool
        The number of sets is proven maximal (``len(sets) == upper_bound``).
    cost_optimal : bool
        ``most_sets`` only: the total cost is proven minimal among selections with
        this many sets (to HiGHS's relative gap of 1e-4, or exactly for pairs).
    method : str
        How the sets and the bound were obtained, in plain words.
    size : int
        Devices per set.
    goal : str
        ``"most_sets"`` or ``"tightest_sets"``.
    """

    sets: list
    cost: np.ndarray
    upper_bound: int
    optimal: bool
    cost_optimal: bool
    method: str
    size: int
    goal: str

    @property
    def count(self) -> int:
        """Number of sets formed."""
        return len(self.sets)

    @property
    def total_cost(self) -> float:
        """Sum of the sets' costs."""
        return float(self.cost.sum())

    def summary(self) -> str:
        """One line: how many sets, how many at most, and how that was found."""
        return (f"{self.count} sets of {self.size}, at most {self.upper_bound} possible "
                f"({self.method})")


@dataclass(frozen=True, eq=False)
class Partners:
    """The best valid sets that contain one given device (see :func:`best_partners`).

    Attributes
    ----------
    index : int
        The device asked about.
    members : numpy.ndarray
        Shape (m, size - 1): the other members of each set, sorted within a row.
    cost : numpy.ndarray
        Shape (m,): weighted spread of each set, ascending.
    chebyshev : numpy.ndarray
        Shape (m,): the largest per-dimension spread of each set; for a pair, the
        Chebyshev distance between the two devices [tolerances].
    spread : numpy.ndarray
        Shape (m, d): per-dimension spread (max - min) of each set [tolerances].
    difference : numpy.ndarray
        Shape (m, d): mean of the other members minus the device; for a pair, the signed
        per-dimension difference partner - device [tolerances].
    """

    index: int
    members: np.ndarray
    cost: np.ndarray
    chebyshev: np.ndarray
    spread: np.ndarray
    difference: np.ndarray


# ---------------------------------------------------------------------------- public


def set_cost(values, weights, members):
    """Weighted spread of one set, or of each row of an array of sets.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Criteria of each device divided by their tolerances [1].
    weights : array_like, shape (d,)
        Non-negative weight of each criterion [1].
    members : array_like of int, shape (k,) or (m, k)
        Row indices of the members.

    Returns
    -------
    float or numpy.ndarray
        :math:`\\sum_j w_j (\\max_i v_{ij} - \\min_i v_{ij})` over the members ``i``.
    """
    v = np.asarray(values, dtype=float)
    w = np.asarray(weights, dtype=float)
    idx = np.asarray(members, dtype=np.int64)
    x = v[idx]
    spread = x.max(axis=-2) - x.min(axis=-2)
    c = spread @ w
    return float(c) if idx.ndim == 1 else c


def is_valid(values, members):
    """Whether a set (or each row of an array of sets) fits within tolerance.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Criteria of each device divided by their tolerances [1].
    members : array_like of int, shape (k,) or (m, k)
        Row indices of the members.

    Returns
    -------
    bool or numpy.ndarray
        True where every per-dimension spread is at most ``1 + EPSILON``.
    """
    v = np.asarray(values, dtype=float)
    idx = np.asarray(members, dtype=np.int64)
    x = v[idx]
    ok = np.all(x.max(axis=-2) - x.min(axis=-2) <= 1.0 + EPSILON, axis=-1)
    return bool(ok) if idx.ndim == 1 else ok


def form_sets(values, weights, size, goal="most_sets", *,
              exact_limit=EXACT_MAX_CANDIDATES, candidate_limit=MAX_CANDIDATES) -> SetResult:
    """Form disjoint matched sets of ``size`` devices.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Each device's criteria divided by their tolerances, so that a set is valid
        exactly when every per-dimension spread (max - min) is at most 1 [1]. Must be
        finite: remove devices lacking data first.
    weights : array_like, shape (d,)
        Non-negative weight of each criterion in a set's cost [1].
    size : int
        Devices per set, at least 2.
    goal : {"most_sets", "tightest_sets"}
        ``most_sets``: as many disjoint valid sets as possible, and among those the
        least total cost. ``tightest_sets``: repeatedly take the valid set of least cost
        among the devices not yet used (greedy by cost; this favours the tightest
        sets over their number).
    exact_limit : int, optional
        ``most_sets`` with ``size >= 3``: components with more candidate sets than this
        are packed heuristically (with a proven bound) instead of by HiGHS directly.
    candidate_limit : int, optional
        Valid sets enumerated per component before falling back to a pool built from
        each device's nearest partners.

    Returns
    -------
    SetResult
        The sets, their costs, a proven upper bound on their number, and the method.

    Notes
    -----
    Work is split along the connected components of the compatibility graph (edges
    where the Chebyshev distance is at most ``1 + EPSILON``, from a k-d tree).

    *Pairs, most sets.* A maximum-cardinality matching [1]_ [2]_ of least cost on each
    component: rustworkx's blossom algorithm maximises the integer weights
    :math:`W - \\mathrm{round}(c\\,s)` among the maximum-cardinality matchings, with
    :math:`s = 2^{40}/\\max c`, so the cost is minimal up to a rounding of
    :math:`2^{-41}\\max c` per pair. Exact; ``upper_bound == len(sets)``.

    *Sets of three or more, most sets.* The valid sets of each component are
    enumerated as cliques (each partial clique is extended by neighbours of its last
    member with a higher index, keeping the running bounding box within the unit cube).
    Packing them is the set-packing integer programme [3]_
    :math:`\\max \\sum_S x_S` subject to :math:`\\sum_{S \\ni v} x_S \\le 1`,
    :math:`x_S \\in \\{0, 1\\}`, solved per connected part of the candidates:

    - with at most ``exact_limit`` candidates, by HiGHS [4]_ in two stages (the largest
      number of sets, then, with that number fixed, the least total cost);
    - beyond, heuristically: the linear relaxation is solved (HiGHS's interior point
      method), strengthened by the triangle cuts it violates (of three devices, at
      most one set of a packing holds two [3]_) and solved again; its dual prices
      :math:`y \\ge 0` on devices and cuts, scaled so that every valid set
      :math:`S` is covered at least once, prove :math:`\\lfloor \\sum y \\rfloor` as an
      upper bound. Sets the relaxation holds above one half (pairwise disjoint) are
      kept, the rest is filled by a least-degree greedy, and a local search re-packs
      neighbourhoods of unused devices exactly with HiGHS (growing each neighbourhood
      while its own relaxation still allows one more set) [5]_. Costs are
      then lowered by count-preserving exchanges (re-splitting two neighbouring sets,
      replacing a member by an unused device).

    *Tightest sets.* All valid sets sorted by cost (ties by members), taken greedily
    when all their members are still free: exactly the repeated cheapest choice. Its
    ``upper_bound`` is the quick bound :math:`\\sum \\lfloor n_c / k \\rfloor` over the
    parts of devices that belong to some valid set.

    When a dense component has more than ``candidate_limit`` valid sets, only sets
    among each device's nearest partners are considered; the result is then a
    heuristic and its bound the component's size divided by ``size``.
    """
    v, w, k = _check(values, weights, size)
    if goal not in GOALS:
        raise ValueError(f"goal must be one of {GOALS}, not {goal!r}")
    n = len(v)
    order = np.lexsort(v.T[::-1]) if n else np.zeros(0, np.int64)
    vc = v[order]
    run = _Run(k, goal)
    if n >= k:
        tree = cKDTree(vc)
        partners = tree.query_ball_point(vc, r=1.0 + EPSILON, p=np.inf, return_length=True) - 1
        if partners.mean() > DENSE_MEAN_PARTNERS:
            pairs = _nearest_compatible(vc, tree, DENSE_KEEP)
            run.dense = (int(np.count_nonzero(partners)), float(partners.mean()))
        else:
            pairs = compatibility(vc)
        for comp, local_pairs in _split_components(n, pairs, k):
            run.component(vc[comp], w, comp, local_pairs, exact_limit, candidate_limit)
    return run.result(order, v, w)


def best_partners(values, weights, index, top=10, size=2, available=None) -> Partners:
    """The compatible devices closest to one device, e.g. to replace a failed part.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Criteria divided by their tolerances, as for :func:`form_sets` [1].
    weights : array_like, shape (d,)
        Non-negative weight of each criterion [1].
    index : int
        Row of the device to find partners for.
    top : int, optional
        How many sets to list.
    size : int, optional
        Size of the sets: 2 lists single partners; larger sizes list the best groups
        of ``size - 1`` devices that form a valid set with ``index``.
    available : array_like of bool, shape (n,), optional
        Devices that may be used (e.g. not already in a set); default all.

    Returns
    -------
    Partners
        Sorted by cost, ties by members.

    Notes
    -----
    Candidates are the devices within Chebyshev distance ``1 + EPSILON``. For
    ``size > 2`` the groups are enumerated as cliques among them; when there are more
    than 60 candidates, only the 60 nearest (by pair cost, ties by index) are used.
    """
    v, w, k = _check(values, weights, size)
    n, d = v.shape
    index = int(index)
    if not 0 <= index < n:
        raise ValueError(f"index {index} is outside 0..{n - 1}")
    ok = np.ones(n, bool) if available is None else np.asarray(available, dtype=bool).copy()
    if ok.shape != (n,):
        raise ValueError(f"available must have shape ({n},), not {ok.shape}")
    ok[index] = False
    diff = v - v[index]
    ok &= np.abs(diff).max(axis=1) <= 1.0 + EPSILON
    cand = np.flatnonzero(ok)
    pair_cost = np.abs(diff[cand]) @ w
    rank = np.lexsort((cand, pair_cost))
    if k == 2:
        members = cand[rank[:top]][:, None]
    else:
        near = np.sort(cand[rank[:60]])
        local = np.concatenate([[index], near])
        lv = v[local]
        lp = compatibility(lv)
        found = _enumerate_sets(lv, lp, k, w, MAX_CANDIDATES, start=np.zeros((1, 1), np.int64))
        sets_local, costs = found if found is not None else (np.zeros((0, k), np.int64), np.zeros(0))
        sets_local = np.sort(local[sets_local[:, 1:]], axis=1) if len(sets_local) else \
            np.zeros((0, k - 1), np.int64)
        keys = [sets_local[:, j] for j in range(k - 2, -1, -1)] + [costs]
        members = sets_local[np.lexsort(keys)[:top]] if len(sets_local) else sets_local
    full = np.column_stack([np.full(len(members), index), members]).astype(np.int64)
    x = v[full]
    spread = x.max(axis=1) - x.min(axis=1) if len(full) else np.zeros((0, d))
    diffm = v[members].mean(axis=1) - v[index] if len(full) else np.zeros((0, d))
    return Partners(index=index, members=members.astype(np.int64), cost=spread @ w,
                    chebyshev=spread.max(axis=1) if len(full) else np.zeros(0),
                    spread=spread, difference=diffm)


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


# ------------------------------------------------------------------------- internals


def _check(values, weights, size):
    v = np.asarray(values, dtype=float)
    if v.ndim != 2:
        raise ValueError(f"values must be a 2-D array (devices, criteria), not shape {v.shape}")
    if not np.all(np.isfinite(v)):
        raise ValueError("values contain NaN or infinity: remove devices lacking data first")
    w = np.asarray(weights, dtype=float).reshape(-1)
    if w.shape != (v.shape[1],):
        raise ValueError(f"weights must have {v.shape[1]} entries, not {w.size}")
    if not np.all(np.isfinite(w)) or np.any(w < 0):
        raise ValueError("weights must be finite and non-negative")
    if int(size) != size or size < 2:
        raise ValueError(f"size must be an integer >= 2, not {size!r}")
    return v, w, int(size)


def compatibility(values):
    """Compatible pairs: devices within Chebyshev distance ``1 + EPSILON``.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Criteria divided by their tolerances [1].

    Returns
    -------
    numpy.ndarray
        Shape (m, 2), rows (i, j) with i < j, sorted.
    """
    v = np.asarray(values, dtype=float)
    if len(v) < 2:
        return np.zeros((0, 2), np.int64)
    p = cKDTree(v).query_pairs(r=1.0 + EPSILON, p=np.inf, output_type="ndarray").astype(np.int64)
    if len(p):
        p = np.sort(p, axis=1)
        p = p[np.lexsort((p[:, 1], p[:, 0]))]
    return p.reshape(-1, 2)


def _nearest_compatible(v, tree, keep):
    """Pairs (i < j, sorted, unique) joining each device to its ``keep`` nearest
    compatible devices (Chebyshev distance at most ``1 + EPSILON``, ties by index)."""
    n = len(v)
    kk = min(keep + 1, n)
    dist, idx = tree.query(v, k=kk, p=np.inf, distance_upper_bound=1.0 + EPSILON)
    dist, idx = dist.reshape(n, kk), idx.reshape(n, kk)
    rows = np.repeat(np.arange(n), kk)
    cols = idx.ravel()
    ok = (cols < n) & (cols != rows)
    a, b = rows[ok], cols[ok]
    p = np.unique(np.column_stack([np.minimum(a, b), np.maximum(a, b)]), axis=0)
    return p.astype(np.int64).reshape(-1, 2)


def _labels(n, i, j):
    g = coo_matrix((np.ones(len(i), np.int8), (i, j)), shape=(n, n))
    return connected_components(g, directed=False)[1]


def _split_components(n, pairs, k):
    """Yield (devices, local pairs) of each component with at least k devices."""
    lab = _labels(n, pairs[:, 0], pairs[:, 1])
    sizes = np.bincount(lab)
    by_lab = np.argsort(lab, kind="stable")
    starts = np.concatenate([[0], np.cumsum(sizes)])
    plab = lab[pairs[:, 0]]
    porder = np.argsort(plab, kind="stable")
    pstarts = np.concatenate([[0], np.cumsum(np.bincount(plab, minlength=len(sizes)))])
    loc = np.empty(n, np.int64)
    for c in np.flatnonzero(sizes >= k):
        comp = by_lab[starts[c]:starts[c + 1]]
        loc[comp] = np.arange(len(comp))
        yield comp, loc[pairs[porder[pstarts[c]:pstarts[c + 1]]]]


def _gather(indptr, data, rows):
    """Concatenation of data[indptr[r]:indptr[r + 1]] over rows, vectorised."""
    starts = indptr[rows]
    counts = indptr[rows + 1] - starts
    total = int(counts.sum())
    if total == 0:
        return data[:0]
    shift = np.repeat(starts - (np.cumsum(counts) - counts), counts)
    return data[shift + np.arange(total)]


def _upper_csr(pairs, n):
    indptr = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(pairs[:, 0], minlength=n), out=indptr[1:])
    return indptr, pairs[:, 1]          # pairs are sorted by (i, j)


def _enumerate_sets(v, pairs, k, w, cap, start=None):
    """All k-cliques (rows increasing) and their costs; None beyond ``cap`` at any level.

    Each partial clique is extended by the higher-index neighbours of its last member
    whose value keeps the running bounding box within the unit cube.
    """
    n = len(v)
    indptr, nbr = _upper_csr(pairs, n)
    P = np.arange(n, dtype=np.int64)[:, None] if start is None else start
    lo = hi = v[P[:, 0]]
    for level in range(1, k):
        last = level == k - 1
        P, lo, hi, cost = _extend(P, lo, hi, v, indptr, nbr, cap, w if last else None)
        if P is None:
            return None
    return P, cost


def _extend(P, lo, hi, v, indptr, nbr, cap, w):
    tail = P[:, -1]
    counts = indptr[tail + 1] - indptr[tail]
    cum = np.cumsum(counts)
    outP, outlo, outhi, outc, total = [], [], [], [], 0
    a, m = 0, len(P)
    while a < m:
        b = int(np.searchsorted(cum, (cum[a - 1] if a else 0) + _CHUNK, side="right"))
        b = min(max(b, a + 1), m)
        rows = np.repeat(np.arange(a, b), counts[a:b])
        cand = _gather(indptr, nbr, tail[a:b])
        x = v[cand]
        nlo = np.minimum(lo[rows], x)
        nhi = np.maximum(hi[rows], x)
        spread = nhi - nlo
        ok = np.all(spread <= 1.0 + EPSILON, axis=1)
        total += int(ok.sum())
        if total > cap:
            return None, None, None, None
        outP.append(np.column_stack([P[rows[ok]], cand[ok]]))
        if w is None:
            outlo.append(nlo[ok])
            outhi.append(nhi[ok])
        else:
            outc.append(spread[ok] @ w)
        a = b
    d = v.shape[1]
    newP = np.concatenate(outP) if outP else np.zeros((0, P.shape[1] + 1), np.int64)
    if w is None:
        return (newP, np.concatenate(outlo) if outlo else np.zeros((0, d)),
                np.concatenate(outhi) if outhi else np.zeros((0, d)), None)
    return newP, None, None, np.concatenate(outc) if outc else np.zeros(0)


def _incidence(P, n):
    """Device -> candidate rows (CSR), candidates ascending within a device."""
    k = P.shape[1]
    flat = P.ravel()
    order = np.argsort(flat, kind="stable")
    indptr = np.zeros(n + 1, np.int64)
    np.cumsum(np.bincount(flat, minlength=n), out=indptr[1:])
    return indptr, order // k


def _matrix(P, n):
    m, k = P.shape
    return csc_matrix((np.ones(m * k), (P.ravel(), np.repeat(np.arange(m), k))), shape=(n, m))


def _by_cost(P, cost):
    """Candidate order: cost ascending, ties by members (lexicographic)."""
    keys = [P[:, j] for j in range(P.shape[1] - 1, -1, -1)] + [cost]
    return np.lexsort(keys)


def _greedy(P, order, n):
    """Take candidates in ``order`` whenever all their members are still free."""
    free = np.ones(n, bool)
    chosen = []
    for s in order:
        mem = P[s]
        if free[mem].all():
            free[mem] = False
            chosen.append(s)
    return np.asarray(chosen, np.int64)


def _least_degree_greedy(P, cost, n, live=None):
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
        killed = np.unique(_gather(indptr, d2c, mem))
        killed = killed[live[killed]]
        live[killed] = False
        touched = P[killed].ravel()
        np.subtract.at(deg, touched, 1)
        for t in np.unique(touched[free[touched] & (deg[touched] > 0)]).tolist():
            heapq.heappush(heap, (int(deg[t]), t))
    return np.asarray(chosen, np.int64)


def _milp_pack(P, n, cost=None, count=None, node_limit=EXACT_NODE_LIMIT):
    """Set packing by HiGHS: maximise the count, or (given ``count``) minimise cost."""
    m = len(P)
    A = _matrix(P, n)
    cons = [LinearConstraint(A, -np.inf, 1.0)]
    if count is None:
        c = -np.ones(m)
    else:
        c = cost
        cons.append(LinearConstraint(np.ones((1, m)), count, np.inf))
    r = milp(c, constraints=cons, integrality=np.ones(m), bounds=Bounds(0, 1),
             options={"node_limit": int(node_limit)})
    if r.x is None:
        return None, r
    chosen = np.flatnonzero(r.x > 0.5)
    if np.bincount(P[chosen].ravel(), minlength=n).max(initial=0) > 1:
        return None, r                  # never trust a solution that shares a device
    return chosen, r


def _lp_relaxation(P, n):
    """Bound the packing by its linear relaxation strengthened with triangle cuts.

    Returns ``(x, reduced, bound)``: the strengthened relaxation's solution, each
    candidate's reduced cost (its dual cover minus 1) and the certified bound; or
    Nones when HiGHS fails. See :func:`_certified_bound` for why the bound holds.
    """
    A = _matrix(P, n)
    x, y = _interior_point(A)
    if x is None:
        return None, None, None
    cuts = _violated_triangles(P, n, x)
    if len(cuts):
        rows = _vstack_csc(A, _triangle_rows(cuts, A, n))
        x2, y2 = _interior_point(rows)
        if x2 is not None:
            A, x, y = rows, x2, y2
    covers = A.T @ y
    return x, covers - 1.0, _certified_bound(y, covers)


def _certified_bound(y, covers):
    """floor(sum y / min(1, min cover)): a bound every packing obeys.

    Each row of the relaxation (a device, or a triangle cut) admits at most one set of
    a packing, so for prices ``y >= 0`` a packing ``X`` has
    ``|X| min_S cover_S <= sum_{S in X} cover_S <= sum y`` (weak LP duality [3]_); the
    covers are computed for *every* valid set, so the solver's accuracy only affects
    how tight the bound is, never whether it holds. The margin covers float rounding.
    """
    cover = float(covers.min()) if len(covers) else 1.0
    if not cover > 0:
        return None
    return int(np.floor(y.sum() / min(cover, 1.0) * (1.0 + 1e-12) + 1e-9))


def _interior_point(A):
    """max 1'x s.t. A x <= 1, x >= 0 by HiGHS's interior point method, no crossover.

    Returns the primal solution and the row prices (clipped at 0), or Nones. Crossover
    to a vertex is skipped: it took over half the time on reels of 10,000 parts, and
    the bound is certified from the prices whatever their accuracy.
    """
    import highspy

    A = csc_matrix(A)
    rows, cols = A.shape
    lp = highspy.HighsLp()
    lp.num_col_, lp.num_row_ = cols, rows
    lp.col_cost_ = -np.ones(cols)
    lp.col_lower_ = np.zeros(cols)
    lp.col_upper_ = np.full(cols, highspy.kHighsInf)
    lp.row_lower_ = np.full(rows, -highspy.kHighsInf)
    lp.row_upper_ = np.ones(rows)
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = A.indptr.astype(np.int32)
    lp.a_matrix_.index_ = A.indices.astype(np.int32)
    lp.a_matrix_.value_ = A.data.astype(float)
    h = _quiet_highs(highspy)
    for key, value in (("output_flag", False), ("solver", "ipm"), ("run_crossover", "off"),
                       ("ipm_optimality_tolerance", IPM_TOLERANCE), ("threads", 1),
                       ("random_seed", 0)):
        h.setOptionValue(key, value)
    h.passModel(lp)
    h.run()
    sol = h.getSolution()
    if not (sol.value_valid and sol.dual_valid):
        return None, None
    x = np.clip(np.asarray(sol.col_value, dtype=float), 0.0, None)
    y = np.clip(-np.asarray(sol.row_dual, dtype=float), 0.0, None)
    return x, y


def _quiet_highs(highspy):
    """A solver instance, keeping the banner its wrapper prints on creation (before any
    option can be set) out of the tool's standard output (it goes to a pipe, dropped)."""
    sys.stdout.flush()
    saved = os.dup(1)
    read_end, write_end = os.pipe()
    try:
        os.dup2(write_end, 1)
        return highspy.Highs()
    finally:
        os.dup2(saved, 1)
        for fd in (saved, write_end, read_end):
            os.close(fd)


def _vstack_csc(A, B):
    from scipy.sparse import vstack
    return csc_matrix(vstack([A, B]))


def _triangle_rows(T, A, n):
    """Rows of triangle cuts: candidate S is in the row of T when |S & T| >= 2."""
    t = len(T)
    M = csc_matrix((np.ones(3 * t), (np.repeat(np.arange(t), 3), T.ravel())), shape=(t, n))
    C = (M @ A).tocoo()
    keep = C.data >= 2
    return csc_matrix((np.ones(int(keep.sum())), (C.row[keep], C.col[keep])), shape=(t, A.shape[1]))


def _violated_triangles(P, n, x):
    """Device triples {a, b, c} whose cut sum_{|S & T| >= 2} x_S <= 1 is violated.

    Two sets that each hold two of three devices share one of them, so a packing
    holds at most one such set: an odd-cycle (clique) inequality of the set-packing
    polytope [3]_. The relaxation's typical fractional pattern, three sets at 1/2
    pairwise sharing a device, breaks exactly such an inequality. Triples are sought
    among device pairs that share fractional sets, the most violated kept first.
    """
    k = P.shape[1]
    frac = np.flatnonzero((x > TRIANGLE_MIN_X) & (x < 1.0 - TRIANGLE_MIN_X))
    if len(frac) < 3:
        return np.zeros((0, 3), np.int64)
    ij = list(itertools.combinations(range(k), 2))
    a = np.concatenate([P[frac, i] for i, _ in ij])
    b = np.concatenate([P[frac, j] for _, j in ij])
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    # w(a, b): the relaxation's weight on sets holding both a and b. A triple's cut sum is
    # w(a,b) + w(b,c) + w(a,c) less twice the weight on sets holding all three, so the
    # pair sum filters the triples before the exact sum is formed.
    U = coo_matrix((np.tile(x[frac], len(ij)), (lo, hi)), shape=(n, n)).tocsr()
    U.sum_duplicates()
    found = []
    for d in np.flatnonzero(np.diff(U.indptr) >= 2):
        nb = U.indices[U.indptr[d]:U.indptr[d + 1]]
        wd = U.data[U.indptr[d]:U.indptr[d + 1]]
        sub = U[nb][:, nb].tocoo()
        if sub.nnz:
            hit = wd[sub.row] + wd[sub.col] + sub.data > 1.0 + TRIANGLE_MIN_VIOLATION
            if hit.any():
                found.append(np.column_stack([np.full(int(hit.sum()), d), nb[sub.row[hit]],
                                              nb[sub.col[hit]]]))
    if not found:
        return np.zeros((0, 3), np.int64)
    T = np.concatenate(found).astype(np.int64)
    lhs = _triangle_rows(T, _matrix(P, n), n) @ x
    bad = np.flatnonzero(lhs > 1.0 + TRIANGLE_MIN_VIOLATION)
    bad = bad[np.lexsort((bad, -lhs[bad]))][:TRIANGLE_MAX_CUTS]
    return T[np.sort(bad)]


class _Run:
    """Accumulates sets, bounds and method notes over the components of one call."""

    def __init__(self, k, goal):
        self.k, self.goal = k, goal
        self.sets = []                  # arrays of canonical indices
        self.bound = 0
        self.cost_ok = True
        self.notes = {}                 # method -> [parts, devices]
        self.dense = None               # (devices with a partner, mean partners) if sparsified

    def note(self, what, devices):
        entry = self.notes.setdefault(what, [0, 0])
        entry[0] += 1
        entry[1] += int(devices)

    def add(self, comp, local_sets):
        for s in local_sets:
            self.sets.append(comp[np.asarray(s)])

    # -- one component of the compatibility graph
    def component(self, vc, w, comp, pairs, exact_limit, candidate_limit):
        k, n = self.k, len(comp)
        if k == 2:
            cost = np.abs(vc[pairs[:, 0]] - vc[pairs[:, 1]]) @ w
            if self.goal == "tightest_sets":
                chosen = _greedy(pairs, _by_cost(pairs, cost), n)
                self.add(comp, pairs[chosen])
                self.bound += n // 2
                self.cost_ok = False
                self.note("greedy by cost over all compatible pairs", n)
            else:
                matched = _blossom(n, pairs, cost)
                self.add(comp, matched)
                self.bound += len(matched)
                self.note("exact: blossom matching", n)
            return
        found = _enumerate_sets(vc, pairs, k, w, candidate_limit)
        if found is None:
            self._pool(vc, w, comp, pairs, candidate_limit)
            return
        P, cost = found
        if len(P) == 0:
            return
        if self.goal == "tightest_sets":
            chosen = _greedy(P, _by_cost(P, cost), n)
            self.add(comp, P[chosen])
            self.cost_ok = False
            placeable = np.bincount(P.ravel(), minlength=n) > 0
            lab = _labels(n, np.repeat(P[:, 0], k - 1), P[:, 1:].ravel())
            self.bound += int((np.bincount(lab[placeable]) // k).sum())
            self.note("greedy by cost over all valid sets", n)
            return
        lab = _labels(n, np.repeat(P[:, 0], k - 1), P[:, 1:].ravel())
        clab = lab[P[:, 0]]
        corder = np.argsort(clab, kind="stable")
        cstarts = np.concatenate([[0], np.cumsum(np.bincount(clab, minlength=n))])
        loc = np.empty(n, np.int64)
        for c in np.flatnonzero(np.diff(cstarts)):
            rows = corder[cstarts[c]:cstarts[c + 1]]
            devs = np.unique(P[rows].ravel())
            loc[devs] = np.arange(len(devs))
            self._pack(vc[devs], w, comp[devs], loc[P[rows]], cost[rows], exact_limit)

    # -- one connected part of the candidate sets (most_sets, k >= 3)
    def _pack(self, v, w, devs, P, cost, exact_limit):
        k, n, m = self.k, len(devs), len(P)
        if m == 1 or n < 2 * k:
            best = _by_cost(P, cost)[0]
            self.add(devs, P[[best]])
            self.bound += 1
            self.note("exact: set packing by enumeration", n)
            return
        start, bound = None, n // k
        if m <= exact_limit:
            chosen, r = _milp_pack(P, n)
            if chosen is not None and r.status == 0:
                count = len(chosen)
                better, r2 = _milp_pack(P, n, cost=cost, count=count, node_limit=COST_NODE_LIMIT)
                if better is not None and len(better) == count and cost[better].sum() <= cost[chosen].sum():
                    chosen = better
                cost_proven = better is not None and r2.status == 0
                if not cost_proven:
                    chosen = _polish(v, w, P[chosen])
                    self.add(devs, chosen)
                else:
                    self.add(devs, P[chosen])
                self.cost_ok &= cost_proven
                self.bound += count
                self.note("exact: set packing (HiGHS)", n)
                return
            start = chosen
            if r.mip_dual_bound is not None and np.isfinite(r.mip_dual_bound):
                bound = min(bound, int(np.floor(-r.mip_dual_bound + 1e-6)))
        sets, bound = _pack_large(v, P, cost, n, k, start, bound)
        sets = _polish(v, w, sets)
        self.add(devs, sets)
        self.bound += bound
        self.cost_ok = False
        self.note("heuristic (relaxation rounding, local exact re-packing) with LP bound (triangle cuts)", n)

    # -- a component too dense to enumerate: sets among nearest partners only
    def _pool(self, vc, w, comp, pairs, candidate_limit):
        k, n = self.k, len(comp)
        cost = np.abs(vc[pairs[:, 0]] - vc[pairs[:, 1]]) @ w
        partners, found = POOL_PARTNERS, None
        while found is None and partners >= k - 1:
            kept = _nearest_partners(pairs, cost, n, partners)
            found = _enumerate_sets(vc, kept, k, w, candidate_limit)
            partners = partners // 2 if found is None else partners
        self.bound += n // k
        self.cost_ok = False
        if found is None:               # not even k - 1 partners each fit: by hand
            self.add(comp, sort_and_group(vc, k))
            self.note("sort and group (too many valid sets to enumerate) with size bound", n)
            return
        P, pcost = found
        what = f"sets among each device's {partners} nearest partners"
        if len(P) == 0:
            self.note(f"heuristic ({what}) with size bound", n)
            return
        if self.goal == "tightest_sets":
            self.add(comp, P[_greedy(P, _by_cost(P, pcost), n)])
            self.note(f"greedy by cost over {what}", n)
            return
        sets, _ = _pack_large(vc, P, pcost, n, k, None, n // k, certify=False)
        self.add(comp, _polish(vc, w, sets))
        self.note(f"heuristic ({what}) with size bound", n)

    def result(self, order, v, w):
        sets = [np.sort(order[s]) for s in self.sets]
        cost = np.array([set_cost(v, w, s) for s in sets]) if sets else np.zeros(0)
        if sets:
            rank = np.lexsort((np.array([s[0] for s in sets]), cost))
            sets = [sets[i] for i in rank]
            cost = cost[rank]
        if not self.notes:
            method = "no valid sets"
        else:
            parts = [f"{what} ({p} part{'s' if p > 1 else ''}, {d} devices)"
                     for what, (p, d) in self.notes.items()]
            method = "; ".join(parts)
        count = len(sets)
        if self.dense is not None:
            # Only the nearest partners were seen: the bounds found on that graph do not
            # hold for the reel, the number of devices with any partner does.
            with_partner, mean = self.dense
            self.bound = max(count, with_partner // self.k)
            self.cost_ok = False
            method = (f"{method}; among each device's {DENSE_KEEP} nearest compatible partners "
                      f"(a dense reel: {mean:.0f} per device on average), bound from the "
                      f"{with_partner} devices that have a partner")
        return SetResult(sets=sets, cost=cost, upper_bound=int(self.bound),
                         optimal=count == self.bound,
                         cost_optimal=bool(self.cost_ok and self.goal == "most_sets"),
                         method=method, size=self.k, goal=self.goal)


def _blossom(n, pairs, cost):
    """Maximum-cardinality matching of least cost (up to 2**-41 of the largest cost)."""
    if n == 2:
        return [(0, 1)]
    top = float(cost.max()) if len(cost) else 0.0
    scale = _WEIGHT_SCALE / top if top > 0 else 0.0
    weight = (_WEIGHT_SCALE + 1 - np.round(cost * scale)).astype(np.int64)
    g = rx.PyGraph(multigraph=False)
    g.add_nodes_from(range(n))
    g.add_edges_from(list(zip(pairs[:, 0].tolist(), pairs[:, 1].tolist(), weight.tolist())))
    matched = rx.max_weight_matching(g, max_cardinality=True, weight_fn=int)
    return sorted((min(a, b), max(a, b)) for a, b in matched)


def _nearest_partners(pairs, cost, n, partners):
    """Edges kept when each device keeps only its ``partners`` cheapest compatible ones."""
    a = np.concatenate([pairs[:, 0], pairs[:, 1]])
    b = np.concatenate([pairs[:, 1], pairs[:, 0]])
    c = np.concatenate([cost, cost])
    e = np.concatenate([np.arange(len(pairs))] * 2)
    o = np.lexsort((b, c, a))
    a, e = a[o], e[o]
    first = np.searchsorted(a, a, side="left")
    keep = np.zeros(len(pairs), bool)
    keep[e[np.arange(len(a)) - first < partners]] = True
    return pairs[keep]


def _pack_large(v, P, cost, n, k, start, bound, certify=True):
    """Relaxation rounding, least-degree greedy and local exact re-packing.

    Returns the sets (rows of member indices) and the proven upper bound.
    """
    x, reduced, lp_bound = _lp_relaxation(P, n)
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
        taken = _greedy(P, half[np.lexsort((half, cost[half], -x[half]))], n)
        used = np.zeros(n, bool)
        used[P[taken].ravel()] = True
        live = ~used[P].any(axis=1)
        chosen = np.concatenate([taken, _least_degree_greedy(P, cost, n, live)])
        coverage = _matrix(P, n) @ x
    else:
        chosen = _least_degree_greedy(P, cost, n)
        coverage = np.ones(n)
    for other in (start, _greedy(P, _by_cost(P, cost), n)):
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
        root, r = _milp_pack(P, n, node_limit=1)
        if root is not None and len(root) > len(chosen):
            chosen = root
        if certify and r.mip_dual_bound is not None and np.isfinite(r.mip_dual_bound):
            bound = min(bound, int(np.floor(-r.mip_dual_bound + 1e-6)))
    return P[chosen], bound


def _region_pack(P, n, need):
    """Exact re-packing of a neighbourhood, skipped when its relaxation forbids ``need``."""
    A = _matrix(P, n)
    r = linprog(-np.ones(len(P)), A_ub=A, b_ub=np.ones(n), bounds=(0, None), method="highs-ds")
    if r.status == 0 and np.floor(-r.fun + 1e-6) < need:
        return None, True
    chosen, _ = _milp_pack(P, n, node_limit=LNS_NODE_LIMIT)
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
    n = len(v)
    m, k = P.shape
    indptr, d2c = _incidence(P, n)
    owner = np.full(n, -1, np.int64)
    sets = {}
    for i, s in enumerate(chosen):
        owner[P[s]] = i
        sets[i] = int(s)
    next_id = len(chosen)
    tree = cKDTree(v)
    K = min(n, LNS_REGION_DEVICES)
    has_cand = np.diff(indptr) > 0
    dirty = np.ones(n, bool)
    inreg = np.zeros(n, bool)
    avail = np.zeros(n, bool)
    posn = np.full(n, K, np.int64)
    loc = np.full(n, -1, np.int64)
    for _ in range(LNS_MAX_PASSES):
        if len(sets) >= target:
            break
        seeds = np.flatnonzero((owner < 0) & has_cand & dirty & (coverage > LNS_MIN_COVERAGE))
        seeds = seeds[np.argsort(-coverage[seeds], kind="stable")]
        changed = np.zeros(n, bool)
        gained = 0
        for f in seeds:
            if owner[f] >= 0 or len(sets) >= target:
                continue
            _, near = tree.query(v[f], k=K, p=np.inf)
            near = np.atleast_1d(near)
            posn[near] = np.arange(len(near))
            touching = np.unique(_gather(indptr, d2c, near))
            entry = posn[P[touching]].max(axis=1)
            sorted_entry = np.sort(entry)
            for budget in LNS_BUDGETS:
                cut = int(sorted_entry[budget]) if len(sorted_entry) > budget else K
                cut = max(cut, 1)
                region = near[:cut]
                inreg[region] = True
                owners = np.unique(owner[region])
                owners = owners[owners >= 0]
                inside = [q for q in owners.tolist() if inreg[P[sets[q]]].all()]
                avail[region] = owner[region] < 0
                for q in inside:
                    avail[P[sets[q]]] = True
                cs = touching[entry < cut]
                cs = cs[avail[P[cs]].all(axis=1)]
                free_here = np.flatnonzero(avail)
                inreg[region] = False
                avail[region] = False
                if not np.any(P[cs] == f):
                    break
                loc[free_here] = np.arange(len(free_here))
                new, skipped = _region_pack(loc[P[cs]], len(free_here), len(inside) + 1)
                loc[free_here] = -1
                if new is not None and len(new) > len(inside):
                    for q in inside:
                        owner[P[sets.pop(q)]] = -1
                    for s in cs[new]:
                        sets[next_id] = int(s)
                        owner[P[s]] = next_id
                        next_id += 1
                    gained += len(new) - len(inside)
                    changed[region] = True
                    break
                if not skipped or cut >= K:
                    break
            posn[near] = K
        if gained == 0:
            break
        dirty = changed
    return np.array(sorted(sets.values()), np.int64)


def _polish(v, w, S, passes=4):
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
    near = cKDTree((lo + hi) / 2).query_pairs(r=2.0 + EPSILON, p=np.inf, output_type="ndarray")
    if len(near) == 0:
        return False
    near = near[np.lexsort((near[:, 1], near[:, 0]))]
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
