"""The compatible devices closest to one device, e.g. to replace a failed part."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kinset.matching.graph import EPSILON, compatibility, enumerate_sets
from kinset.matching.sets import MAX_CANDIDATES, check_inputs


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
    v, w, k = check_inputs(values, weights, size)
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
        found = enumerate_sets(lv, lp, k, w, MAX_CANDIDATES, start=np.zeros((1, 1), np.int64))
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
