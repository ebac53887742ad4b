"""The best partners of one device, or the parts that complete a set with its members.

One finder serves every set size. It is given the members kept (one device looking for
a partner, or the remaining members of a set that lost some) and ranks the free parts,
or groups of free parts, that would complete the set by the set's weighted normalised
spread: the cost of :func:`kinset.matching.graph.set_cost`, in units of the effective
tolerances. :func:`best_partners` works on normalised values like
:func:`kinset.matching.sets.form_sets`; :func:`partner_table` evaluates one application
profile on a reel and tabulates each criterion's spread and its margin to the effective
tolerance (the tolerance after the guard band), as ``kinset partners`` prints it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from kinset.errors import InputError
from kinset.matching.criteria import column_suffix, spread_columns
from kinset.matching.graph import EPSILON, compatibility, enumerate_sets
from kinset.matching.profile import Profile
from kinset.matching.run import candidates
from kinset.matching.sets import MAX_CANDIDATES, check_inputs

GROUP_NEAREST = 60
"""When several parts are to be added, groups are formed among this many free parts
nearest the members kept (by the cost of the members with that one part, ties by row)."""


@dataclass(frozen=True, eq=False)
class Partners:
    """The best completions of a set (see :func:`best_partners`), best first.

    Attributes
    ----------
    given : numpy.ndarray
        Shape (g,): the members kept (the device asked about, for a partner).
    members : numpy.ndarray
        Shape (m, size - g): the parts added in each completion, sorted within a row.
    cost : numpy.ndarray
        Shape (m,): weighted spread of each completed set [tolerances], ascending.
    chebyshev : numpy.ndarray
        Shape (m,): the largest per-dimension spread of each completed set; for a pair,
        the Chebyshev distance between the two devices [tolerances].
    spread : numpy.ndarray
        Shape (m, d): per-dimension spread (max - min) of each completed set [tolerances].
    difference : numpy.ndarray
        Shape (m, d): mean of the parts added minus mean of the members kept; for a pair,
        the signed per-dimension difference partner - device [tolerances].
    within : numpy.ndarray
        Shape (m,): whether the completed set fits every tolerance (spread at most
        ``1 + EPSILON`` in every dimension).
    """

    given: np.ndarray
    members: np.ndarray
    cost: np.ndarray
    chebyshev: np.ndarray
    spread: np.ndarray
    difference: np.ndarray
    within: np.ndarray

    @property
    def margin(self) -> np.ndarray:
        """Shape (m, d): each criterion's margin to its tolerance, 1 - spread [tolerances]."""
        return 1.0 - self.spread


def best_partners(values, weights, given, top=10, size=None, available=None,
                  within_only=True) -> Partners:
    """The parts that best complete a set with the members ``given``.

    Parameters
    ----------
    values : array_like, shape (n, d)
        Criteria divided by their tolerances, as for ``form_sets`` [1].
    weights : array_like, shape (d,)
        Non-negative weight of each criterion [1].
    given : int or sequence of int
        Row of the device to find partners for, or rows of the members kept of a set.
    top : int, optional
        How many completions to list.
    size : int, optional
        Size of the completed set; default one more than ``given`` (single partners).
        When several parts are to be added, the best groups of them are listed.
    available : array_like, optional
        Parts that may be used (e.g. not already in a set): a boolean mask of shape
        (n,) or a list of rows; default all. Members of ``given`` are never added.
    within_only : bool, optional
        List only completions that fit every tolerance. With False, and one part to
        add, every available part is ranked and ``within`` tells which fit. Groups of
        several parts are always valid ones.

    Returns
    -------
    Partners
        Sorted by cost, ties by the rows added.

    Notes
    -----
    With one part to add, the candidates are the available parts whose addition keeps
    the set's bounding box within the unit cube (for a single device: those within
    Chebyshev distance ``1 + EPSILON``). With several, the groups are enumerated as
    cliques among the ``GROUP_NEAREST`` nearest such candidates.
    """
    v, w, _ = check_inputs(values, weights, 2)
    n = len(v)
    kept = _rows(given, n)
    k = len(kept) + 1 if size is None else size
    if int(k) != k or k <= len(kept):
        raise ValueError(f"size must be an integer above the {len(kept)} member(s) given, "
                         f"not {size!r}")
    k = int(k)
    free = _free(available, n)
    free[kept] = False
    x = v[kept]
    box = np.maximum(x.max(axis=0), v) - np.minimum(x.min(axis=0), v)
    fits = np.all(box <= 1.0 + EPSILON, axis=1)
    cand = np.flatnonzero(free & fits if within_only or k - len(kept) > 1 else free)
    added_cost = box[cand] @ w
    rank = np.lexsort((cand, added_cost))
    if k - len(kept) == 1:
        members = cand[rank[:top]][:, None]
    else:
        members = _groups(v, w, kept, np.sort(cand[rank[:GROUP_NEAREST]]), k, top)
    return _describe(v, w, kept, members.astype(np.int64))


def _rows(given, n):
    rows = np.atleast_1d(np.asarray(given))
    if rows.ndim != 1 or len(rows) == 0 or not np.issubdtype(rows.dtype, np.integer):
        raise ValueError(f"given must be a row index or a list of them, not {given!r}")
    rows = rows.astype(np.int64)
    if rows.min() < 0 or rows.max() >= n:
        raise ValueError(f"given rows {rows.tolist()} are not all within 0..{n - 1}")
    if len(np.unique(rows)) != len(rows):
        raise ValueError(f"given rows {rows.tolist()} repeat a device")
    return rows


def _free(available, n):
    if available is None:
        return np.ones(n, bool)
    a = np.asarray(available)
    if a.dtype == bool:
        if a.shape != (n,):
            raise ValueError(f"available must have shape ({n},), not {a.shape}")
        return a.copy()
    free = np.zeros(n, bool)
    if a.size == 0:
        return free
    if a.ndim != 1 or not np.issubdtype(a.dtype, np.integer) or a.min() < 0 or a.max() >= n:
        raise ValueError(f"available must be a boolean mask of shape ({n},) or rows "
                         f"within 0..{n - 1}")
    free[a] = True
    return free


def _groups(v, w, kept, near, k, top):
    """The ``top`` cheapest valid groups among ``near`` completing ``kept`` to ``k``."""
    g = len(kept)
    local = np.concatenate([kept, near])
    lv = v[local]
    found = enumerate_sets(lv, compatibility(lv), k, w, MAX_CANDIDATES,
                           start=np.arange(g, dtype=np.int64)[None, :])
    if found is None or len(found[0]) == 0:
        return np.zeros((0, k - g), np.int64)
    sets_local, costs = found
    added = np.sort(local[sets_local[:, g:]], axis=1)
    keys = [added[:, j] for j in range(k - g - 1, -1, -1)] + [costs]
    return added[np.lexsort(keys)[:top]]


def _describe(v, w, kept, members):
    d = v.shape[1]
    if len(members) == 0:
        empty = np.zeros((0, d))
        return Partners(kept, members, np.zeros(0), np.zeros(0), empty, empty,
                        np.zeros(0, bool))
    full = np.column_stack([np.tile(kept, (len(members), 1)), members])
    x = v[full]
    sp = x.max(axis=1) - x.min(axis=1)
    diff = v[members].mean(axis=1) - v[kept].mean(axis=0)
    return Partners(given=kept, members=members, cost=sp @ w, chebyshev=sp.max(axis=1),
                    spread=sp, difference=diff, within=np.all(sp <= 1.0 + EPSILON, axis=1))


# ------------------------------------------------------------------- one application


def partner_table(tables: dict[str, pd.DataFrame], devices: list[str], profile: Profile,
                  members, accuracy: dict | None = None, top: int = 10,
                  size: int | None = None, available=None,
                  within_only: bool = False) -> pd.DataFrame:
    """The parts closest to ``members`` under ``profile``: a replacement for a failed part.

    ``members`` is one device name (its best single partners are listed) or the names
    of the remaining members of a set, which ``size`` parts in all would complete
    (default: one part more). Every other part that passes the profile's screens and
    guard bands, and is in ``available`` (names; default all), is ranked by the
    weighted normalised spread of the completed set (``score``). Each criterion's spread
    (``difference`` for a pair) and margin (tolerance after the guard band minus the
    spread) is listed, and ``within`` says whether the set fits every tolerance. Groups
    of several parts, and every completion with ``within_only``, are listed only when
    they fit.
    """
    members = [members] if isinstance(members, str) else list(members)
    c = candidates(tables, devices, profile, accuracy)
    reasons = c.evaluation.reasons
    for name in members:
        if name not in reasons:
            raise InputError(f"device '{name}' is in no extraction table")
        if reasons[name]:
            raise InputError(f"device '{name}' cannot be matched under {profile.name}: "
                             + "; ".join(r.text for r in reasons[name]))
    if len(set(members)) != len(members):
        raise InputError(f"devices {members} name one part twice")
    row = {name: i for i, name in enumerate(c.devices)}
    mask = None
    if available is not None:
        available = [available] if isinstance(available, str) else list(available)
        unknown = [a for a in available if a not in reasons]
        if unknown:
            raise InputError(f"available parts {unknown} are in no extraction table")
        mask = np.isin(c.devices, list(available))
    dims = profile.dimensions
    p = best_partners(c.z, [d.weight for d in dims], [row[m] for m in members], top=top,
                      size=size, available=mask, within_only=within_only)
    word = "difference" if p.members.shape[1] + len(members) == 2 else "spread"
    rows = [{"device": ", ".join(c.devices[added]), "within": bool(ok), "score": float(cost),
             **spread_columns(c.raw[np.concatenate([p.given, added])], dims, c.tolerance, word)}
            for added, cost, ok in zip(p.members, p.cost, p.within)]
    columns = ["device", "within", "score"] + [
        f"{d.name}_{w}{column_suffix(d)}" for d in dims for w in (word, "margin")]
    return pd.DataFrame(rows, columns=columns)


def broken_set_replacements(c, kept: dict[int, list[str]], size: int, weights,
                            available: np.ndarray, top: int = 3) -> dict[int, list[dict]]:
    """For each kept set with fewer than ``size`` members: the best groups of available
    candidates that make it valid again (``c``: the application's candidates; members that
    are no candidates any more leave the set without a proposal)."""
    row = {name: i for i, name in enumerate(c.devices)}
    out: dict[int, list[dict]] = {}
    for number, members in kept.items():
        if len(members) >= size or not members or any(m not in row for m in members):
            continue
        p = best_partners(c.z, weights, [row[m] for m in members], top=top, size=size,
                          available=available)
        out[number] = [{"devices": [str(c.devices[i]) for i in added], "score": float(cost)}
                       for added, cost in zip(p.members, p.cost)]
    return out
