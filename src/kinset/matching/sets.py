"""Forming disjoint matched sets from tolerance-normalised criteria.

Each device is a point whose coordinates are its criteria divided by their
tolerances, so a set is valid exactly when its bounding box fits in the unit cube.
Since a set's spread in a dimension is its largest pairwise difference there, the
valid sets are exactly the k-cliques of the compatibility graph (an edge where two
devices are within Chebyshev distance 1). Components of that graph are solved
separately.

* Pairs: maximum-cardinality matching, with weights breaking ties toward small
  spread, by Edmonds' blossom algorithm (J. Edmonds, "Paths, trees, and flowers",
  Canad. J. Math. 17, 449-467, 1965, doi:10.4153/CJM-1965-045-4) as implemented in
  rustworkx. Exact.
* Sets of k >= 3: set packing over the enumerated valid sets (the k-cliques),
  solved as a 0-1 program by HiGHS (scipy.optimize.milp) where the component is
  small enough; beyond that, a minimum-degree greedy packing. The bound reported is
  the MILP's proven dual bound, the LP relaxation of the set-packing program over
  all valid sets, or floor(component size / k), whichever is known and smallest.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import rustworkx as rx
from scipy.optimize import Bounds, LinearConstraint, linprog, milp
from scipy.sparse import coo_matrix, csr_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

EPS = 1e-12                 # rounding slack on the unit tolerance
EXACT_CANDIDATES = 20000    # set packing solved exactly up to this many valid sets ...
EXACT_DEVICES = 200         # ... in a component of at most this many devices
MILP_SECONDS = 30.0         # time limit of one exact solve (then its dual bound is used)
MAX_CANDIDATES = 400000     # enumeration cap per component


@dataclass
class SetResult:
    """Sets found, with what is proven about them.

    sets : list of int arrays (member indices, sorted), ordered by cost then first member
    cost : weighted normalised spread of each set
    upper_bound : proven upper bound on the number of disjoint valid sets (most_sets)
    optimal : whether the count is proven to be the largest possible
    method : plain words
    """

    sets: list
    cost: list
    upper_bound: int
    optimal: bool
    method: str


def set_cost(values: np.ndarray, weights: np.ndarray, members) -> float:
    """Σ_j w_j (max − min)_j over the members, in normalised units."""
    block = values[np.asarray(members)]
    return float(np.dot(weights, block.max(axis=0) - block.min(axis=0)))


def is_valid(values: np.ndarray, members) -> bool:
    block = values[np.asarray(members)]
    return bool((block.max(axis=0) - block.min(axis=0) <= 1.0 + EPS).all())


def compatibility(values: np.ndarray) -> np.ndarray:
    """Pairs (i < j) within Chebyshev distance 1, as an (m, 2) array."""
    if len(values) < 2:
        return np.empty((0, 2), dtype=np.int64)
    pairs = cKDTree(values).query_pairs(r=1.0 + EPS, p=np.inf, output_type="ndarray")
    return np.asarray(pairs, dtype=np.int64).reshape(-1, 2)


def _components(n: int, pairs: np.ndarray) -> list[np.ndarray]:
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])), shape=(n, n))
    count, label = connected_components(graph, directed=False)
    order = np.argsort(label, kind="stable")
    bounds = np.searchsorted(label[order], np.arange(count + 1))
    return [order[bounds[c]:bounds[c + 1]] for c in range(count) if bounds[c + 1] - bounds[c] > 1]


def _pairs_matching(values, weights, members, pairs_local):
    """Exact maximum-cardinality, then minimum-cost, matching of one component."""
    g = rx.PyGraph()
    g.add_nodes_from(range(len(members)))
    costs = np.array([set_cost(values, weights, members[[a, b]]) for a, b in pairs_local])
    scale = 1e6
    top = int(np.ceil(costs.max() * scale)) + 1 if len(costs) else 1
    g.add_edges_from([(int(a), int(b), int(top - round(c * scale))) for (a, b), c in
                      zip(pairs_local, costs)])
    matched = rx.max_weight_matching(g, max_cardinality=True, weight_fn=lambda w: w)
    return [np.sort(members[[a, b]]) for a, b in matched]


def _cliques(adj: list[set], n: int, k: int, cap: int) -> list[tuple] | None:
    """All k-cliques (as sorted tuples) of a graph on 0..n-1; None beyond ``cap``."""
    out: list[tuple] = []
    higher = [sorted(j for j in adj[i] if j > i) for i in range(n)]

    def extend(clique, cand):
        if len(clique) == k:
            out.append(tuple(clique))
            return len(out) <= cap
        need = k - len(clique)
        for pos, v in enumerate(cand):
            if len(cand) - pos < need:
                break
            nxt = [u for u in cand[pos + 1:] if u in adj[v]]
            if len(nxt) >= need - 1 and not extend(clique + [v], nxt):
                return False
        return True

    for i in range(n):
        if len(higher[i]) >= k - 1 and not extend([i], higher[i]):
            return None
    return out


def _packing_matrix(cands: np.ndarray, n: int) -> csr_matrix:
    rows = cands.ravel()
    cols = np.repeat(np.arange(len(cands)), cands.shape[1])
    return csr_matrix((np.ones(len(rows)), (rows, cols)), shape=(n, len(cands)))


def _exact_packing(cands: np.ndarray, costs: np.ndarray, n: int):
    """Most disjoint sets, then least total cost, by HiGHS: (chosen, dual bound, optimal)."""
    a = _packing_matrix(cands, n)
    cons = LinearConstraint(a, 0, 1)
    integ = np.ones(len(cands))
    first = milp(-np.ones(len(cands)), integrality=integ, bounds=Bounds(0, 1),
                 constraints=cons, options={"time_limit": MILP_SECONDS})
    if first.x is None:
        return None
    count = int(round(-first.fun))
    optimal = first.status == 0
    dual = getattr(first, "mip_dual_bound", None)
    bound = count if optimal else int(np.floor(-dual + 1e-9)) if dual is not None else None
    # Second stage: keep that many sets, spend the least spread.
    second = milp(costs, integrality=integ, bounds=Bounds(0, 1),
                  constraints=[cons, LinearConstraint(np.ones((1, len(cands))), count, count)],
                  options={"time_limit": MILP_SECONDS})
    x = second.x if second.x is not None else first.x
    return np.flatnonzero(x > 0.5), bound, optimal


def _lp_bound(cands: np.ndarray, n: int) -> int:
    a = _packing_matrix(cands, n)
    res = linprog(-np.ones(len(cands)), A_ub=a, b_ub=np.ones(n), bounds=(0, 1), method="highs")
    return int(np.floor(-res.fun + 1e-9)) if res.status == 0 else n


def _greedy_packing(cands: np.ndarray, costs: np.ndarray, n: int) -> np.ndarray:
    """Minimum-degree greedy: serve first the device with fewest remaining valid sets."""
    k = cands.shape[1]
    a = _packing_matrix(cands, n).tocsr()
    by_device = [a.indices[a.indptr[i]:a.indptr[i + 1]] for i in range(n)]  # noqa: F841
    a_t = a.T.tocsr()
    live = np.ones(len(cands), dtype=bool)
    degree = np.asarray(a.sum(axis=1)).ravel().astype(np.int64)
    used = np.zeros(n, dtype=bool)
    chosen = []
    members_of = cands
    sets_of = [a.indices[a.indptr[i]:a.indptr[i + 1]] for i in range(n)]
    while True:
        d = np.where(~used & (degree > 0), degree, np.iinfo(np.int64).max)
        i = int(np.argmin(d))
        if d[i] == np.iinfo(np.int64).max:
            break
        options = sets_of[i][live[sets_of[i]]]
        score = degree[members_of[options]].sum(axis=1) + costs[options] / (1.0 + costs.max())
        c = int(options[np.argmin(score)])
        chosen.append(c)
        for m in members_of[c]:
            used[m] = True
            dead = sets_of[m][live[sets_of[m]]]
            live[dead] = False
            for mm in members_of[dead].ravel():
                degree[mm] -= 1
    del a_t, k
    return np.asarray(chosen, dtype=np.int64)


def form_sets(values: np.ndarray, weights: np.ndarray, size: int,
              goal: str = "most_sets") -> SetResult:
    """Disjoint valid sets of ``size`` devices.

    Parameters
    ----------
    values : (n, d) array
        Criteria per device divided by their tolerances [1]; no NaN.
    weights : (d,) array
        Weight of each criterion in a set's cost [1].
    size : int
        Devices per set, at least 2.
    goal : {"most_sets", "tightest_sets"}
        ``most_sets``: the largest number of disjoint valid sets, then the least total
        weighted spread. ``tightest_sets``: repeatedly the valid set of least weighted
        spread among the devices left (best sets first).

    Returns
    -------
    SetResult
    """
    values = np.asarray(values, dtype=float)
    weights = np.asarray(weights, dtype=float)
    n = len(values)
    if size < 2:
        raise ValueError("a set has at least two devices")
    pairs = compatibility(values)
    found: list[np.ndarray] = []
    bound = 0
    optimal = True
    methods = set()
    for comp in _components(n, pairs):
        if len(comp) < size:
            continue
        local = {int(d): i for i, d in enumerate(comp)}
        inside = np.isin(pairs[:, 0], comp) & np.isin(pairs[:, 1], comp)
        lp = np.array([[local[int(a)], local[int(b)]] for a, b in pairs[inside]], dtype=np.int64)
        if size == 2 and goal == "most_sets":
            got = _pairs_matching(values, weights, comp, lp)
            found += got
            bound += len(got)
            methods.add("exact: blossom matching per component")
            continue
        adj = [set() for _ in comp]
        for a, b in lp:
            adj[a].add(int(b))
            adj[b].add(int(a))
        cl = _cliques(adj, len(comp), size, MAX_CANDIDATES)
        if cl is None:
            raise RuntimeError(f"more than {MAX_CANDIDATES} valid sets in one group of "
                               f"{len(comp)} parts: tighten the tolerances or split the reel")
        if not cl:
            continue
        cands = np.asarray(cl, dtype=np.int64)
        costs = np.array([set_cost(values, weights, comp[c]) for c in cands])
        if goal == "tightest_sets":
            order = np.lexsort((cands[:, 0], costs))
            used = np.zeros(len(comp), dtype=bool)
            for j in order:
                if not used[cands[j]].any():
                    used[cands[j]] = True
                    found.append(np.sort(comp[cands[j]]))
            bound += _lp_bound(cands, len(comp))
            optimal = False
            methods.add("best sets first over every valid set")
            continue
        if len(cands) <= EXACT_CANDIDATES and len(comp) <= EXACT_DEVICES:
            res = _exact_packing(cands, costs, len(comp))
            if res is not None:
                chosen, b, opt = res
                found += [np.sort(comp[cands[j]]) for j in chosen]
                bound += b if b is not None else len(comp) // size
                optimal &= opt
                methods.add("exact: set packing (HiGHS) per component" if opt
                            else "set packing (HiGHS, time limit) with its dual bound")
                continue
        chosen = _greedy_packing(cands, costs, len(comp))
        found += [np.sort(comp[cands[j]]) for j in chosen]
        b = min(_lp_bound(cands, len(comp)), len(comp) // size)
        bound += b
        optimal &= len(chosen) >= b
        methods.add("minimum-degree greedy packing with the LP-relaxation bound")
    costs = [set_cost(values, weights, s) for s in found]
    order = sorted(range(len(found)), key=lambda i: (costs[i], int(found[i][0])))
    sets = [found[i] for i in order]
    if goal == "tightest_sets":
        optimal = False
    return SetResult(sets=sets, cost=[costs[i] for i in order], upper_bound=max(bound, len(sets)),
                     optimal=bool(optimal) and goal == "most_sets",
                     method="; ".join(sorted(methods)) or "no two parts within tolerance")
