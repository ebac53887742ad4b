"""Matched sets: the strategy that chooses many disjoint valid sets from one reel.

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
(Edmonds' blossom algorithm [1]_ [2]_, through rustworkx; components beyond
``BLOSSOM_MAX_DEVICES`` in overlapping blocks, bounded by the fractional matching number
[6]_); sets of three or more are a set-packing problem [3]_ over the enumerated cliques,
solved exactly with HiGHS [4]_ on components with few candidate sets, and on larger ones
by rounding the linear-programming relaxation followed by a local search that re-solves
neighbourhoods exactly [5]_, with an upper bound from the dual of the relaxation
strengthened by triangle cuts, checked against every valid set.

The modules beside this one hold the parts: :mod:`~kinset.matching.graph` (the
compatibility graph, valid sets and their cost), :mod:`~kinset.matching.packing` (exact
packing and proven bounds), :mod:`~kinset.matching.heuristics` (greedy choices, rounding,
local search), :mod:`~kinset.matching.polish` (cost-lowering exchanges) and
:mod:`~kinset.matching.partners` (the best partners of a device or of a partial set).

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
.. [6] A. Schrijver, *Combinatorial Optimization: Polyhedra and Efficiency*, Springer,
   2003, ch. 30 (fractional matchings).
.. [7] M. Grötschel and O. Holland, "Solving matching problems with linear programming",
   Mathematical Programming 33, 243-259, 1985. doi:10.1007/BF01582247
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from kinset.matching.graph import (EPSILON, adjacency, compatibility, component_labels,
                                   enumerate_sets, in_some_set, is_valid, nearest_compatible, set_cost,
                                   split_components)
from kinset.matching.heuristics import by_cost, greedy, pack_large, sort_and_group
from kinset.matching.packing import blossom, fractional_matching_bound, milp_pack
from kinset.matching.polish import polish

__all__ = ["DENSE_KEEP", "DENSE_MEAN_PARTNERS", "EPSILON", "EXACT_MAX_CANDIDATES", "GOALS",
           "MAX_CANDIDATES", "POOL_PARTNERS", "SetResult", "check_inputs", "form_sets",
           "is_valid", "set_cost"]

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
COST_NODE_LIMIT = 2_000
DENSE_MEAN_PARTNERS = 64
"""A reel whose devices have more compatible partners than this on average (tolerances
wide against the reel's spread) is matched among each device's ``DENSE_KEEP`` nearest
compatible partners: blossom matching over all 17 million compatible pairs of one
10,000-part reel (1,800 per device) ran past 300 s and 4.4 GB."""
DENSE_KEEP = 12
BLOSSOM_MAX_DEVICES = 20_000
"""Pairs: larger components are not given to the blossom algorithm whole (its time grows
about as n^2.7 here: 1.4 s CPU at 2,744 devices, 30-45 s at 9,000-9,800; hours at
100,000); they are matched in blocks and repaired (see :func:`form_sets`), with the
fractional matching number as the bound."""
REPAIR_ROUNDS = 4
"""Rounds of re-matching regions around single devices after that (radius 1, 2, ...)."""
REPAIR_MAX_DEVICES = 2_000
"""Regions of that repair are cut into blocks of at most this many devices."""
BLOCK_DEVICES = 2_000
"""Such a component is first matched in blocks of at most this many devices (median cuts)."""


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


# ---------------------------------------------------------------------------- public


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

    *Pairs, most sets, on a component of more than* ``BLOSSOM_MAX_DEVICES`` *devices*
    (the blossom algorithm's time grows about as :math:`n^{2.7}` here; a 100,000-part
    pool): the devices are cut at the median of the widest dimension, again and again,
    into blocks of at most ``BLOCK_DEVICES``, and each block is matched exactly; then
    blocks cut along the next widest dimension, and regions around the devices left
    single, are matched again where that pairs more devices or as many for less cost;
    then the cost is lowered by exchanges between neighbouring pairs
    (:mod:`~kinset.matching.polish`). A dense reel (thinned to each device's
    ``DENSE_KEEP`` nearest partners, where the cost is not claimed optimal anyway)
    takes this path from ``BLOCK_DEVICES`` devices on, and falls back to the whole
    blossom when the blocks pair fewer devices than the bound allows (measured on the
    10,000-part demo reel: 4,895 of 4,895 pairs in 3.6 s CPU against 41 s for the
    blossom, cost 244.06 against its 243.47 on the thinned graph). The bound is the floor of the
    fractional matching number :math:`\\nu_f` [6]_ (every matching is a fractional one;
    :math:`\\nu_f` is half a maximum matching of the bipartite double cover, found by
    Hopcroft-Karp), so the count is proven when it reaches it; the cost is not claimed
    optimal. Reduced-cost fixing with the degree-constrained matching LP [7]_ was tried
    for an exact answer and set aside: without odd-set rows its bound lies ~4 % below
    the best cost on these reels (odd cycles at one half), and after 30 rounds of
    odd-set cuts still 0.07 (0.6 of a mean pair's cost) below, so no pair could be fixed.

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

    *Dense reels* (more than ``DENSE_MEAN_PARTNERS`` compatible partners per device on
    average) are matched among each device's ``DENSE_KEEP`` nearest partners. Sets of
    three or more are then started by the least-degree greedy, without the linear
    relaxation (its bound would hold only for the thinned graph), and searched locally
    as above. The bound is the number of devices some packing could use, divided by
    ``size``: the devices placed in a set, and of the others those that belong to a
    valid set of the whole compatibility graph (a clique of ``size - 1`` among their
    compatible devices); for pairs, the devices with a partner.
    """
    v, w, k = check_inputs(values, weights, size)
    if goal not in GOALS:
        raise ValueError(f"goal must be one of {GOALS}, not {goal!r}")
    n = len(v)
    order = np.lexsort(v.T[::-1]) if n else np.zeros(0, np.int64)
    vc = v[order]
    run = _Run(k, goal)
    if n >= k:
        tree = cKDTree(vc)
        # the mean number of compatible partners from a dual-tree pair count (the same
        # pairs a ball query per device would list, without visiting each one)
        mean = (float(tree.count_neighbors(tree, 1.0 + EPSILON, p=np.inf)) - n) / n
        if mean > DENSE_MEAN_PARTNERS:
            pairs = nearest_compatible(vc, tree, DENSE_KEEP)
            second = tree.query(vc, k=2, p=np.inf)[0][:, 1]
            run.dense = (second <= 1.0 + EPSILON, mean, vc, tree)
        else:
            pairs = compatibility(vc)
        for comp, local_pairs in split_components(n, pairs, k):
            run.component(vc[comp], w, comp, local_pairs, exact_limit, candidate_limit)
    return run.result(order, v, w)


def check_inputs(values, weights, size):
    """Values, weights and set size as arrays and an int; ValueError naming what is wrong."""
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


# ------------------------------------------------------------------------- internals


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


def _blocks(v, size, turn):
    """Block label of each device: halve at the median, along the dimension of widest
    spread (``turn`` > 0: the next widest), until a block holds at most ``size``."""
    label = np.zeros(len(v), np.int64)
    todo, done = [np.arange(len(v))], 0
    while todo:
        idx = todo.pop()
        if len(idx) <= size:
            label[idx] = done
            done += 1
            continue
        x = v[idx]
        dims = np.argsort(x.max(axis=0) - x.min(axis=0), kind="stable")
        dim = dims[-1 - min(turn, len(dims) - 1)]
        half = idx[np.argsort(x[:, dim], kind="stable")]
        todo += [half[len(half) // 2:], half[:len(half) // 2]]
    return label


def _rematch(vc, w, pairs, cost, matched, group):
    """Blossom-match each group of devices again (group -1: none; pairs within the group,
    devices whose partner is outside it left as they are); keep a group's new matching where it pairs
    more devices, or as many for less cost. ``cost``: each pair's cost."""
    n = len(vc)
    mate = np.full(n, -1)
    mate[matched[:, 0]], mate[matched[:, 1]] = matched[:, 1], matched[:, 0]
    free = (mate < 0) | (group[np.maximum(mate, 0)] == group)
    ok = free[pairs[:, 0]] & free[pairs[:, 1]] & (group[pairs[:, 0]] == group[pairs[:, 1]])
    gone, new = np.zeros(n, bool), []
    for g in np.unique(group[free & (group >= 0)]):
        devs = np.flatnonzero(free & (group == g))
        if len(devs) > REPAIR_MAX_DEVICES:
            continue
        loc = np.full(n, -1)
        loc[devs] = np.arange(len(devs))
        rows = ok & (group[pairs[:, 0]] == g)
        if not rows.any():
            continue
        found = devs[np.asarray(blossom(len(devs), loc[pairs[rows]], cost[rows]),
                                np.int64).reshape(-1, 2)]
        old = matched[(group[matched[:, 0]] == g) & (group[matched[:, 1]] == g)]
        if len(found) > len(old) or (len(found) == len(old) and set_cost(vc, w, found).sum()
                                     < set_cost(vc, w, old).sum()):
            gone[devs] = True
            new.append(found)
    return np.concatenate([matched[~gone[matched[:, 0]]]] + new)


def _repair(vc, w, pairs, cost, matched, count, rounds=REPAIR_ROUNDS):
    """Re-match, by blossom, regions around the devices a matching leaves single.

    A region is the single devices and every device within ``hops`` compatible pairs of
    them (one more each round), cut into blocks of at most ``REPAIR_MAX_DEVICES``
    (:func:`_blocks`) and re-matched by :func:`_rematch`: the matching only improves.
    """
    n = len(vc)
    g = adjacency(n, pairs)
    for hops in range(1, 1 + rounds):
        if len(matched) >= count:
            break
        region = np.ones(n, bool)
        region[matched.ravel()] = False
        for _ in range(hops):
            region = region | (g @ region > 0)
        group = np.full(n, -1)
        group[region] = _blocks(vc[region], REPAIR_MAX_DEVICES, hops - 1)
        matched = _rematch(vc, w, pairs, cost, matched, group)
    return matched


class _Run:
    """Accumulates sets, bounds and method notes over the components of one call."""

    def __init__(self, k, goal):
        self.k, self.goal = k, goal
        self.sets = []                  # arrays of canonical indices
        self.bound = 0
        self.cost_ok = True
        self.notes = {}                 # method -> [parts, devices]
        self.dense = None               # (has a partner, mean partners, values, tree) if sparsified

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
                chosen = greedy(pairs, by_cost(pairs, cost), n)
                self.add(comp, pairs[chosen])
                self.bound += n // 2
                self.cost_ok = False
                self.note("greedy by cost over all compatible pairs", n)
                return
            large = n > BLOSSOM_MAX_DEVICES or (self.dense is not None and n > BLOCK_DEVICES)
            if not (large and self._large_pairs(vc, w, comp, pairs, cost)):
                matched = blossom(n, pairs, cost)   # also where the blocks fell short
                self.add(comp, matched)
                self.bound += len(matched)
                self.note("exact: blossom matching", n)
            return
        found = enumerate_sets(vc, pairs, k, w, candidate_limit)
        if found is None:
            self._pool(vc, w, comp, pairs, candidate_limit)
            return
        P, cost = found
        if len(P) == 0:
            return
        if self.goal == "tightest_sets":
            chosen = greedy(P, by_cost(P, cost), n)
            self.add(comp, P[chosen])
            self.cost_ok = False
            placeable = np.bincount(P.ravel(), minlength=n) > 0
            lab = component_labels(n, np.repeat(P[:, 0], k - 1), P[:, 1:].ravel())
            self.bound += int((np.bincount(lab[placeable]) // k).sum())
            self.note("greedy by cost over all valid sets", n)
            return
        lab = component_labels(n, np.repeat(P[:, 0], k - 1), P[:, 1:].ravel())
        clab = lab[P[:, 0]]
        corder = np.argsort(clab, kind="stable")
        cstarts = np.concatenate([[0], np.cumsum(np.bincount(clab, minlength=n))])
        loc = np.empty(n, np.int64)
        for c in np.flatnonzero(np.diff(cstarts)):
            rows = corder[cstarts[c]:cstarts[c + 1]]
            devs = np.unique(P[rows].ravel())
            loc[devs] = np.arange(len(devs))
            self._pack(vc[devs], w, comp[devs], loc[P[rows]], cost[rows], exact_limit)

    # -- pairs, most sets, on a component too large for the blossom algorithm whole
    def _large_pairs(self, vc, w, comp, pairs, cost):
        """Pairs in blocks; False (nothing added) when they fall short of the bound on a
        component the whole blossom can still take."""
        n = len(comp)
        none = np.zeros((0, 2), np.int64)
        matched = _rematch(vc, w, pairs, cost, none, _blocks(vc, BLOCK_DEVICES, 0))
        count = fractional_matching_bound(n, pairs)
        matched = _rematch(vc, w, pairs, cost, matched, _blocks(vc, BLOCK_DEVICES, 1))
        matched = _repair(vc, w, pairs, cost, matched, count)
        if len(matched) < count and n <= BLOSSOM_MAX_DEVICES:
            return False                # the whole blossom is affordable: exact count
        self.add(comp, polish(vc, w, matched))
        self.bound += count
        self.cost_ok = False
        self.note(f"blossom matching in blocks of up to {BLOCK_DEVICES} devices, then in "
                  f"blocks cut the other way and around single devices, exchanges between "
                  f"neighbouring pairs, with the fractional "
                  f"matching bound", n)
        return True

    # -- one connected part of the candidate sets (most_sets, k >= 3)
    def _pack(self, v, w, devs, P, cost, exact_limit):
        k, n, m = self.k, len(devs), len(P)
        if m == 1 or n < 2 * k:
            best = by_cost(P, cost)[0]
            self.add(devs, P[[best]])
            self.bound += 1
            self.note("exact: set packing by enumeration", n)
            return
        start, bound = None, n // k
        if m <= exact_limit:
            chosen, r = milp_pack(P, n)
            if chosen is not None and r.status == 0:
                count = len(chosen)
                better, r2 = milp_pack(P, n, cost=cost, count=count, node_limit=COST_NODE_LIMIT)
                if better is not None and len(better) == count and cost[better].sum() <= cost[chosen].sum():
                    chosen = better
                cost_proven = better is not None and r2.status == 0
                if not cost_proven:
                    chosen = polish(v, w, P[chosen])
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
        if self.dense is not None:      # the reel's bound is proven in result(), not here
            sets, _ = pack_large(v, P, cost, n, k, start, bound, certify=False)
            self.add(devs, polish(v, w, sets))
            self.bound += bound
            self.cost_ok = False
            self.note("heuristic (least-degree greedy, local exact re-packing)", n)
            return
        sets, bound = pack_large(v, P, cost, n, k, start, bound)
        sets = polish(v, w, sets)
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
            found = enumerate_sets(vc, kept, k, w, candidate_limit)
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
            self.add(comp, P[greedy(P, by_cost(P, pcost), n)])
            self.note(f"greedy by cost over {what}", n)
            return
        sets, _ = pack_large(vc, P, pcost, n, k, None, n // k, certify=False)
        self.add(comp, polish(vc, w, sets))
        self.note(f"heuristic ({what}) with size bound", n)

    def _placeable(self):
        """Devices that some packing could use, on a dense reel: only the nearest partners
        were seen, so the bounds found on that graph do not hold for the reel. Pairs:
        every device with a partner. Larger sets: the devices placed in a set, and of
        the others those in some valid set of the whole compatibility graph
        (``in_some_set``); a packing uses no other, so it has at most this ÷ ``k`` sets.
        On the 10,000-part demo reel 101 of the 127 devices left over are in none."""
        has_partner, mean, vc, tree = self.dense
        if self.k == 2:
            return int(has_partner.sum()), mean, "have a partner"
        placed = np.zeros(len(vc), bool)
        for s in self.sets:
            placed[s] = True
        rest = np.flatnonzero(has_partner & ~placed)
        found = int(in_some_set(vc, tree, rest, self.k).sum())
        return int(placed.sum()) + found, mean, f"belong to some valid set of {self.k}"

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
            placeable, mean, what = self._placeable()
            self.bound = max(count, placeable // self.k)
            self.cost_ok = False
            method = (f"{method}; among each device's {DENSE_KEEP} nearest compatible partners "
                      f"(a dense reel: {mean:.0f} per device on average), bound from the "
                      f"{placeable} devices that {what}")
        return SetResult(sets=sets, cost=cost, upper_bound=int(self.bound),
                         optimal=count == self.bound,
                         cost_optimal=bool(self.cost_ok and self.goal == "most_sets"),
                         method=method, size=self.k, goal=self.goal)
