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

import math
import textwrap
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.spatial import cKDTree

from kinset.errors import InputError
from kinset.format import si
from kinset.matching.criteria import column_suffix, format_amount, spread_columns
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


# ------------------------------------------------------------------- why not

BALL_CHUNK = 256
"""Parts whose neighbourhoods are listed at once (bounds the memory of the ball queries)."""
FAR_CHUNK = 128
"""Parts compared with the whole reel at once when none is within all tolerances but one."""


@dataclass(frozen=True, eq=False)
class Blocking:
    """What keeps each part asked about (:func:`blocking`) out of a set, in normalised units.

    Attributes
    ----------
    rows : numpy.ndarray
        Shape (m,): the parts asked about.
    criterion : numpy.ndarray
        Shape (m,): the blocking dimension: the one on which a part within every other
        tolerance comes nearest (``misses`` 1), else the one the nearest part misses by
        most (nearest: fewest criteria missed, then the least worst miss); -1 when there
        is no other part.
    nearest : numpy.ndarray
        Shape (m,): that part's row (-1 when there is none).
    distance : numpy.ndarray
        Shape (m,): its normalised spread with the part on ``criterion`` [tolerances].
    misses : numpy.ndarray
        Shape (m,): the criteria on which ``nearest`` is beyond the tolerance (0 when
        there is none).
    one_miss : numpy.ndarray
        Shape (m, d): how many parts are within every tolerance but that dimension's.
    """

    rows: np.ndarray
    criterion: np.ndarray
    nearest: np.ndarray
    distance: np.ndarray
    misses: np.ndarray
    one_miss: np.ndarray

    def most_often(self) -> np.ndarray:
        """Shape (m,): the dimension most parts miss alone (-1 when none does)."""
        if not self.one_miss.size:
            return np.full(len(self.rows), -1)
        return np.where(self.one_miss.max(axis=1) > 0, self.one_miss.argmax(axis=1), -1)


def blocking(values, rows, nearest: bool = True) -> Blocking:
    """Why the parts ``rows`` find no partner within every tolerance, and by how much.

    ``values`` are criteria divided by their tolerances (Chebyshev distance at most
    ``1 + EPSILON`` is within every tolerance). For each dimension, a k-d tree on the
    other dimensions gives the parts within every other tolerance: those beyond this one
    are counted (``one_miss``), and with ``nearest`` the closest of them on it is found;
    the dimension where that part comes closest blocks. A part with no such neighbour is
    compared with every other part (vectorised, O(n·d) each): the one that misses the
    fewest criteria, then by the least worst miss, is its nearest, and the criterion it
    misses by most blocks.
    Ties within a dimension go to the lower row, between dimensions to the earlier one.
    Cost: d + 1 k-d trees and, per part, d ball queries (each as long as the part's
    neighbourhood within the other tolerances).
    """
    v = np.asarray(values, dtype=float)
    v, _, _ = check_inputs(v, np.ones(v.shape[-1] if v.ndim else 0), 2)
    rows = np.asarray(rows, dtype=np.int64).reshape(-1)
    n, d = v.shape
    m = len(rows)
    best = np.full((m, d), np.inf)
    who = np.full((m, d), -1, dtype=np.int64)
    one = np.zeros((m, d), dtype=np.int64)
    if m == 0 or n < 2:
        return _counted_only(rows, one)
    r = 1.0 + EPSILON
    within = cKDTree(v).query_ball_point(v[rows], r=r, p=np.inf, return_length=True)
    for j in range(d):
        others = np.delete(np.arange(d), j)
        if not len(others):        # one criterion: every other part is within "the others"
            one[:, j] = n - within
            if nearest:
                _closest_on_a_line(v[:, 0], rows, best[:, 0], who[:, 0])
            continue
        tree, pts = cKDTree(v[:, others]), v[rows][:, others]
        if not nearest:
            one[:, j] = tree.query_ball_point(pts, r=r, p=np.inf, return_length=True) - within
        for lo in range(0, m if nearest else 0, BALL_CHUNK):
            hits = tree.query_ball_point(pts[lo:lo + BALL_CHUNK], r=r, p=np.inf)
            one[lo:lo + BALL_CHUNK, j] = _closest(v, rows, j, hits, best, who, lo) \
                - within[lo:lo + BALL_CHUNK]
    return _blocked(v, rows, best, who, one) if nearest else _counted_only(rows, one)


def _counted_only(rows, one) -> Blocking:
    m = len(rows)
    return Blocking(rows, np.full(m, -1), np.full(m, -1), np.full(m, np.nan),
                    np.zeros(m, np.int64), one)


def _closest(v, rows, j, hits, best, who, lo) -> np.ndarray:
    """For each part ``rows[lo + a]``, the part among ``hits[a]`` that is beyond the
    tolerance on dimension ``j`` and nearest on it (ties: the lower row); returns the
    number of hits of each."""
    sizes = np.fromiter((len(h) for h in hits), dtype=np.int64, count=len(hits))
    if not sizes.sum():
        return sizes
    flat = np.concatenate([np.asarray(h, dtype=np.int64) for h in hits])
    owner = np.repeat(np.arange(len(hits)), sizes) + lo
    e = np.abs(v[flat, j] - v[rows[owner], j])
    out = e > 1.0 + EPSILON
    flat, owner, e = flat[out], owner[out], e[out]
    order = np.lexsort((flat, e, owner))
    first = order[np.unique(owner[order], return_index=True)[1]]
    best[owner[first], j], who[owner[first], j] = e[first], flat[first]
    return sizes


def _closest_on_a_line(x, rows, best, who) -> None:
    """One criterion: the nearest part beyond the tolerance lies just outside the unit
    interval around the part, on one side or the other (a binary search each)."""
    order = np.argsort(x, kind="stable")
    s = x[order]
    r = 1.0 + EPSILON
    left = np.searchsorted(s, x[rows] - r, side="left") - 1      # largest below x - r
    right = np.searchsorted(s, x[rows] + r, side="right")        # smallest above x + r
    for a, (lo, hi) in enumerate(zip(left, right)):
        near = [order[i] for i in (lo, hi) if 0 <= i < len(s)]
        for k in sorted(near, key=lambda i: (abs(x[i] - x[rows[a]]), i)):
            best[a], who[a] = abs(x[k] - x[rows[a]]), k
            break


def _blocked(v, rows, best, who, one) -> Blocking:
    m, d = best.shape
    crit = np.argmin(best, axis=1) if d else np.zeros(m, np.int64)
    found = np.isfinite(best[np.arange(m), crit]) if d else np.zeros(m, bool)
    near = np.where(found, who[np.arange(m), crit], -1)
    dist = np.where(found, best[np.arange(m), crit], np.nan)
    misses = found.astype(np.int64)
    far = np.flatnonzero(~found)
    for lo in range(0, len(far), FAR_CHUNK):   # nobody within all tolerances but one
        block = far[lo:lo + FAR_CHUNK]
        a = np.arange(len(block))
        count = np.zeros((len(block), len(v)), dtype=np.int16)
        worst = np.zeros((len(block), len(v)))
        for j in range(v.shape[1]):            # (parts, n) at a time: one criterion each
            e = np.abs(v[None, :, j] - v[rows[block], None, j])
            count += e > 1.0 + EPSILON
            np.maximum(worst, e, out=worst)
        count[a, rows[block]] = np.iinfo(np.int16).max              # not itself
        # fewest misses, then the least worst miss, then the lower row (argmin's first)
        worst[count != count.min(axis=1, keepdims=True)] = np.inf
        k = np.argmin(worst, axis=1)
        e = np.abs(v[k] - v[rows[block]])
        crit[block], near[block] = np.argmax(e, axis=1), k
        dist[block], misses[block] = worst[a, k], count[a, k]
    return Blocking(rows, crit.astype(np.int64), near.astype(np.int64), dist, misses, one)


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
        wanted = set(available)      # a set lookup: numpy's isin on text compares every pair
        mask = np.fromiter((d in wanted for d in c.devices), bool, count=len(c.devices))
    dims = profile.dimensions
    p = best_partners(c.z, [d.weight for d in dims], [row[m] for m in members], top=top,
                      size=size, available=mask, within_only=within_only)
    word = "difference" if p.members.shape[1] + len(members) == 2 else "spread"
    rows = [{"device": ", ".join(c.devices[added]), "within": bool(ok), "score": float(cost),
             **spread_columns(c.raw[np.concatenate([p.given, added])], dims, c.tolerance, word)}
            for added, cost, ok in zip(p.members, p.cost, p.within)]
    blocked, nearest, misses = (_blocked_on(c.z, row[members[0]], mask) if len(members) == 1
                                else (-1, -1, 0))
    order = _criteria_order(p, blocked)
    columns = ["device", "within", "score"] + [
        f"{dims[j].name}_{w}{column_suffix(dims[j])}" for j in order for w in (word, "margin")]
    table = pd.DataFrame(rows, columns=columns)
    # why the part has no partner (the terminal view says it): see :func:`blocking`
    table.attrs.update(blocking=dims[blocked].name if blocked >= 0 else "",
                       nearest=str(c.devices[nearest]) if nearest >= 0 else "", misses=misses)
    return table


def _blocked_on(z: np.ndarray, row: int, available) -> tuple[int, int, int]:
    """The criterion that keeps the part ``row`` from every partner among ``available``,
    the nearest part on it and on how many criteria that one misses (:func:`blocking`),
    or (-1, -1, 0) when one is within every tolerance or none is available."""
    pool = np.ones(len(z), bool) if available is None else np.asarray(available, bool).copy()
    pool[row] = True
    rows = np.flatnonzero(pool)
    if len(rows) < 2:
        return -1, -1, 0
    e = np.abs(z[rows] - z[row]).max(axis=1)
    if np.sum(e <= 1.0 + EPSILON) > 1:          # itself and a partner
        return -1, -1, 0
    b = blocking(z[rows], [int(np.searchsorted(rows, row))])
    return int(b.criterion[0]), int(rows[b.nearest[0]]), int(b.misses[0])


def _criteria_order(p: Partners, blocked: int) -> list[int]:
    """Criteria in the order ``kinset partners`` shows them: the one that keeps the part
    out first, then those the listed completions miss most often, then the tightest."""
    d = p.spread.shape[1]
    beyond = (p.spread > 1.0 + EPSILON).sum(axis=0) if len(p.spread) else np.zeros(d)
    worst = p.spread.max(axis=0) if len(p.spread) else np.zeros(d)
    return sorted(range(d), key=lambda j: (j != blocked, -beyond[j], -worst[j], j))


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


# ------------------------------------------------------------------- the terminal view

SYMBOLS = {"forward_voltage": "VF", "forward_voltage_tempco": "dVF/dT",
           "reverse_current": "IR", "capacitance": "C", "recovery_time": "trr",
           "recovery_charge": "Qrr", "peak_reverse_current": "Irrm", "ideality": "N",
           "series_resistance": "RS"}
"""Short column heads of the quantities, for a table that fits a terminal: the letter
symbols diode data sheets use (common practice), RS and N as in the SPICE diode model."""


def criterion_symbol(dim) -> str:
    """``VF@100µA``: a criterion's short head (its quantity's symbol at its condition)."""
    head = SYMBOLS.get(dim.quantity, dim.quantity)
    if dim.condition is None:
        return head
    unit = "A" if dim.quantity.startswith("forward_voltage") else "V"
    return f"{head}@{si(dim.condition, unit).replace(' ', '')}"


def partner_view(table: pd.DataFrame, profile: Profile, members, width: int = 100) -> str:
    """``kinset partners`` as people read it: one line per partner (or group), each
    criterion's difference (spread, for a group) in engineering units, ``*`` where it is
    beyond the tolerance after the guard band (the ``allowed`` line), the criterion that
    keeps the part out first; blocks of criteria that fit in ``width`` characters."""
    members = [members] if isinstance(members, str) else list(members)
    word = "difference" if any(f"{d.name}_difference{column_suffix(d)}" in table
                               for d in profile.dimensions) else "spread"
    shown = sorted((list(table.columns).index(f"{d.name}_{word}{column_suffix(d)}"), d)
                   for d in profile.dimensions if f"{d.name}_{word}{column_suffix(d)}" in table)
    heads, allowed, cells = [], [], []
    for _, d in shown:
        scale = 100.0 if d.relative else 1.0
        apart = table[f"{d.name}_{word}{column_suffix(d)}"].to_numpy(dtype=float) / scale
        margin = table[f"{d.name}_margin{column_suffix(d)}"].to_numpy(dtype=float) / scale
        heads.append(criterion_symbol(d))
        allowed.append(format_amount(float(apart[0] + margin[0]) if len(apart) else math.nan,
                                     d, typical=False))
        cells.append([format_amount(a, d, typical=False) + ("" if m >= -1e-15 else "*")
                      for a, m in zip(apart, margin)])
    lines = [f"{word} with {', '.join(members)} per criterion; allowed: the tolerance after "
             "the guard band; * beyond it"]
    if table.attrs.get("blocking"):
        d = next(d for d in profile.dimensions if d.name == table.attrs["blocking"])
        near, misses = table.attrs.get("nearest", ""), table.attrs.get("misses", 1)
        lines.append(f"{members[0]} has no partner within every tolerance; " + (
            f"{near} is within all but {d.describe()} (first column)"
            if misses == 1 else f"none is within all but one: the nearest, {near}, misses "
            f"{misses}, most on {d.describe()} (first column)"))
    lines = [w for line in lines for w in textwrap.wrap(line, width, subsequent_indent="  ")]
    if not len(table):
        return "\n".join(lines + ["no part to list: none of those offered passed the data, "
                                   "screens and guard bands"])
    left = [["device", "allowed"] + [str(v) for v in table["device"]],
            ["beyond", ""] + [str(sum(c[i].endswith("*") for c in cells))
                              for i in range(len(table))],
            ["score", ""] + [f"{v:.3g}" for v in table["score"]]]
    right = [[h, a] + c for h, a, c in zip(heads, allowed, cells)]
    return "\n".join(lines + _blocks(left, right, width))


def _blocks(left: list[list[str]], right: list[list[str]], width: int) -> list[str]:
    """Text columns ``left`` repeated before as many of ``right`` as fit in ``width``."""
    def wide(col):
        return max(len(s) for s in col) + 2
    base = sum(wide(c) for c in left)
    out, start = [], 0
    while start < len(right) or not out:
        stop, used = start, base
        while stop < len(right) and (stop == start or used + wide(right[stop]) <= width):
            used += wide(right[stop])
            stop += 1
        cols = left + right[start:stop]
        if out:
            out.append("")
        out += ["".join(c[i].ljust(wide(c)) for c in cols).rstrip()
                for i in range(len(left[0]))]
        start = stop
    return out
