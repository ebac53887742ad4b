"""Exact packing of valid sets, and proven bounds on how many disjoint sets can exist.

Pairs are a maximum-cardinality matching of least cost (Edmonds' blossom algorithm [1]_
[2]_, through rustworkx). Sets of three or more are a set-packing problem [3]_ over the
enumerated valid sets (rows of member indices), solved by HiGHS [4]_ with node limits,
never time limits; its linear relaxation, strengthened by triangle cuts, gives a bound
certified against every valid set.

References
----------
(in full in :mod:`kinset.matching.sets`)

.. [1] Edmonds 1965, doi:10.4153/CJM-1965-045-4
.. [2] Galil 1986, doi:10.1145/6462.6502
.. [3] Padberg 1973, doi:10.1007/BF01580121
.. [4] Huangfu and Hall 2018, doi:10.1007/s12532-017-0130-5
.. [6] Schrijver 2003, *Combinatorial Optimization*, ch. 30 (fractional matchings)
"""

from __future__ import annotations

import itertools
import os
import sys

import numpy as np
import rustworkx as rx
from scipy.optimize import Bounds, LinearConstraint, milp
from scipy.sparse import coo_matrix, csc_matrix
from scipy.sparse.csgraph import maximum_bipartite_matching

from kinset.matching.graph import adjacency

EXACT_NODE_LIMIT = 5_000
"""Branch-and-bound nodes of HiGHS for a count-maximising packing."""
IPM_TOLERANCE = 1e-4
"""Optimality tolerance of the interior point method for the bound's relaxation."""
TRIANGLE_MIN_X = 1e-4
TRIANGLE_MIN_VIOLATION = 1e-3
TRIANGLE_MAX_CUTS = 50_000
_WEIGHT_SCALE = 2 ** 40


def set_matrix(P, n):
    """Device-by-set incidence (n, m) of the sets ``P``: the packing's constraint rows."""
    m, k = P.shape
    return csc_matrix((np.ones(m * k), (P.ravel(), np.repeat(np.arange(m), k))), shape=(n, m))


def blossom(n, pairs, cost):
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


def fractional_matching_bound(n, pairs):
    """floor(nu_f): the fractional matching number, an upper bound on any matching's size.

    Every matching is a fractional matching (x(delta(v)) <= 1, x >= 0), so the matching
    number is at most nu_f, and, being an integer, at most floor(nu_f). nu_f is half the
    maximum matching of the bipartite double cover (v and v' for each device, edges
    a-b' and b-a' for each pair) [6]_: a fractional matching x gives the double cover the
    fractional matching x on both copies, and a double-cover matching m gives
    x_ab = (m_ab' + m_ba') / 2. Hopcroft-Karp (scipy) finds it in O(m sqrt(n)).
    """
    if len(pairs) == 0:
        return 0
    cover = adjacency(n, pairs)         # rows: the devices v; columns: their copies v'
    matched = int(np.count_nonzero(maximum_bipartite_matching(cover, perm_type="column") >= 0))
    return matched // 2                 # nu_f = matched / 2


def milp_pack(P, n, cost=None, count=None, node_limit=EXACT_NODE_LIMIT):
    """Set packing by HiGHS: maximise the count, or (given ``count``) minimise cost."""
    m = len(P)
    A = set_matrix(P, n)
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


def lp_relaxation(P, n):
    """Bound the packing by its linear relaxation strengthened with triangle cuts.

    Returns ``(x, reduced, bound)``: the strengthened relaxation's solution, each
    candidate's reduced cost (its dual cover minus 1) and the certified bound; or
    Nones when HiGHS fails. See :func:`_certified_bound` for why the bound holds.
    """
    A = set_matrix(P, n)
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
    lhs = _triangle_rows(T, set_matrix(P, n), n) @ x
    bad = np.flatnonzero(lhs > 1.0 + TRIANGLE_MIN_VIOLATION)
    bad = bad[np.lexsort((bad, -lhs[bad]))][:TRIANGLE_MAX_CUTS]
    return T[np.sort(bad)]
