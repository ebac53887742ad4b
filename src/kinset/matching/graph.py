"""The compatibility graph: which devices fit together, and the valid sets as its cliques.

Values are each device's criteria divided by their tolerances, so a group of devices is
a valid set exactly when, in every dimension, its largest value minus its smallest is at
most 1 (the group's bounding box fits in the unit cube). A group is valid if and only if
every two of its members lie within Chebyshev distance 1 of each other, so the valid
sets of ``k`` devices are the ``k``-cliques of the compatibility graph, whose edges join
devices within Chebyshev distance ``1 + EPSILON`` (the slack absorbs rounding in the
normalisation). The cost of a set is its weighted spread, ``sum_j w_j (max - min)_j``.
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

EPSILON = 1e-12
"""Slack on the unit box [1]: spreads up to ``1 + EPSILON`` count as within tolerance."""

_CHUNK = 250_000


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


def nearest_compatible(v, tree, keep):
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


def in_some_set(v, tree, devices, k, cap=200_000, first=32):
    """Whether each of ``devices`` belongs to some valid set of ``k`` devices of ``v``.

    A device does exactly when ``k - 1`` of its compatible devices (Chebyshev distance
    at most ``1 + EPSILON``, from ``tree``, a k-d tree of ``v``) are pairwise compatible:
    such a clique is sought among its ``first`` nearest partners, then among all of them.
    When the cliques cannot be listed within ``cap`` the answer is True: unproven, and
    counted as belonging, so that a bound made from these answers stays a bound.
    """
    out = np.zeros(len(devices), bool)
    for i, u in enumerate(np.asarray(devices, np.int64).tolist()):
        for limit in (first, None):
            if limit is None:
                near = np.asarray(tree.query_ball_point(v[u], r=1.0 + EPSILON, p=np.inf), np.int64)
            else:
                _, near = tree.query(v[u], k=min(limit + 1, len(v)), p=np.inf,
                                     distance_upper_bound=1.0 + EPSILON)
                near = np.atleast_1d(near)
                near = near[near < len(v)]
            whole = limit is None or len(near) <= limit
            near = near[near != u]
            if len(near) < k - 1:
                break
            found = True if k == 2 else enumerate_sets(
                v[near], compatibility(v[near]), k - 1, np.zeros(v.shape[1]), cap)
            if found is None or found is True or len(found[0]):
                out[i] = True
                break
            if whole:
                break
    return out


def adjacency(n, pairs):
    """The symmetric adjacency matrix (CSR, int8) of ``n`` devices joined by ``pairs``."""
    i = np.concatenate([pairs[:, 0], pairs[:, 1]])
    j = np.concatenate([pairs[:, 1], pairs[:, 0]])
    return coo_matrix((np.ones(len(i), np.int8), (i, j)), shape=(n, n)).tocsr()


def component_labels(n, i, j):
    """Connected-component label of each of ``n`` nodes joined by edges (i, j)."""
    g = coo_matrix((np.ones(len(i), np.int8), (i, j)), shape=(n, n))
    return connected_components(g, directed=False)[1]


def split_components(n, pairs, k):
    """Yield (devices, local pairs) of each component with at least k devices."""
    lab = component_labels(n, pairs[:, 0], pairs[:, 1])
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


def gather(indptr, data, rows):
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


def enumerate_sets(v, pairs, k, w, cap, start=None):
    """All k-cliques (rows increasing) and their costs; None beyond ``cap`` at any level.

    Each partial clique is extended by the higher-index neighbours of its last member
    whose value keeps the running bounding box within the unit cube. ``start`` (rows of
    member indices, increasing) gives the partial cliques to extend; default each device.
    """
    n = len(v)
    indptr, nbr = _upper_csr(pairs, n)
    P = np.arange(n, dtype=np.int64)[:, None] if start is None else start
    x = v[P]
    lo, hi = x.min(axis=1), x.max(axis=1)
    for level in range(P.shape[1], k):
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
        cand = gather(indptr, nbr, tail[a:b])
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
