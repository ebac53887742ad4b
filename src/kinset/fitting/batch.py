"""Small dense least-squares problems solved for many devices at once.

A reel is an array problem: each device has a few parameters and a few dozen
points. Points live in flat arrays with a device index; normal equations are
summed per device with ``numpy.bincount`` and solved as a stack of tiny systems.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def factorize_runs(values: np.ndarray, sort: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """``pandas.factorize(values, sort=sort)`` of a text column, hashing each run once.

    Files list a device's (or a file's) rows together: 500,000 recovery samples hold a few
    hundred runs of equal ids. Equal neighbours are found by comparison (cheap, as the
    parser shares one string object among equal cells), and only the first row of each
    run is factorized; the codes and uniques are those of ``pandas.factorize`` (a value's
    first run is its first appearance, so the unsorted order is the same too).
    """
    values = np.asarray(values)
    if not len(values):
        return pd.factorize(values, sort=sort)
    new = np.empty(len(values), dtype=bool)
    new[0] = True
    new[1:] = values[1:] != values[:-1]
    heads = np.flatnonzero(new)
    codes, uniques = pd.factorize(values[heads], sort=sort)
    return np.repeat(codes, np.diff(np.append(heads, len(values)))), uniques


def row_nanmedian(x: np.ndarray) -> np.ndarray:
    """Median of each row over its values that are not NaN (NaN for a row without any).

    ``numpy.nanmedian`` row by row, in one sort: NaN sorts last, so a row's k values are
    its first k, and the median is the middle one or the mean of the middle two, as
    numpy.median takes them (numpy.nanmedian loops over long rows in Python).
    """
    g, n = x.shape
    k = np.count_nonzero(~np.isnan(x), axis=1)
    if n == 0:
        return np.full(g, np.nan)
    s = np.sort(x, axis=1)
    rows = np.arange(g)
    lo, hi = s[rows, np.maximum((k - 1) // 2, 0)], s[rows, k // 2]
    with np.errstate(invalid="ignore"):
        mid = np.where(k % 2 == 1, lo, (lo + hi) / 2)
    return np.where(k > 0, mid, np.nan)


def group_summer(index: np.ndarray, groups: int):
    """A function summing a per-row array per group.

    When rows come grouped (``index`` sorted, no group empty, the usual case after
    sorting points by device) it uses ``numpy.add.reduceat``, several times faster
    than ``numpy.bincount`` with weights; otherwise ``bincount``.
    """
    index = np.asarray(index)
    if len(index) and index[0] == 0 and index[-1] == groups - 1:
        step = np.diff(index)
        if ((step >= 0) & (step <= 1)).all():
            starts = np.flatnonzero(np.concatenate([[True], step != 0]))
            return lambda x: np.add.reduceat(x, starts)
    return lambda x: np.bincount(index, x, minlength=groups)


def grouped_normal_equations(index: np.ndarray, jac: np.ndarray, resid: np.ndarray,
                             groups: int, summer=None) -> tuple[np.ndarray, np.ndarray]:
    """Per-group JᵀJ (groups, p, p) and Jᵀr (groups, p) from flat rows.

    Parameters
    ----------
    index : (m,) int, group of each row
    jac : (m, p) Jacobian rows
    resid : (m,) residuals
    groups : number of groups
    summer : optional result of :func:`group_summer` for this index (reused across calls)
    """
    total = summer or group_summer(index, groups)
    p = jac.shape[1]
    jtj = np.empty((groups, p, p))
    jtr = np.empty((groups, p))
    for a in range(p):
        jtr[:, a] = total(jac[:, a] * resid)
        for b in range(a, p):
            s = total(jac[:, a] * jac[:, b])
            jtj[:, a, b] = s
            jtj[:, b, a] = s
    return jtj, jtr


def solve_stack(a: np.ndarray, b: np.ndarray, rcond: float = 1e-13) -> np.ndarray:
    """Solve a stack of small symmetric systems ``a x = b``; singular ones give NaN.

    Rows and columns are first scaled to a unit diagonal (Jacobi scaling) so that
    parameters of very different size (ln IS, N, RS) are judged fairly; a system
    whose scaled determinant is below ``rcond`` is called singular.
    """
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    p = a.shape[-1]
    d = np.sqrt(np.abs(np.einsum("kii->ki", a)))
    d[~(d > 0)] = 1.0
    s = a / d[:, :, None] / d[:, None, :]
    rhs = b / d
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        if p == 1:
            det = s[:, 0, 0]
            x = rhs / det[:, None]
        elif p == 2:
            det = s[:, 0, 0] * s[:, 1, 1] - s[:, 0, 1] * s[:, 1, 0]
            x = np.stack([s[:, 1, 1] * rhs[:, 0] - s[:, 0, 1] * rhs[:, 1],
                          s[:, 0, 0] * rhs[:, 1] - s[:, 1, 0] * rhs[:, 0]], axis=1) / det[:, None]
        elif p == 3:
            # Adjugate of a 3x3 matrix (Cramer's rule), vectorised over the stack.
            c00 = s[:, 1, 1] * s[:, 2, 2] - s[:, 1, 2] * s[:, 2, 1]
            c01 = s[:, 0, 2] * s[:, 2, 1] - s[:, 0, 1] * s[:, 2, 2]
            c02 = s[:, 0, 1] * s[:, 1, 2] - s[:, 0, 2] * s[:, 1, 1]
            c10 = s[:, 1, 2] * s[:, 2, 0] - s[:, 1, 0] * s[:, 2, 2]
            c11 = s[:, 0, 0] * s[:, 2, 2] - s[:, 0, 2] * s[:, 2, 0]
            c12 = s[:, 0, 2] * s[:, 1, 0] - s[:, 0, 0] * s[:, 1, 2]
            c20 = s[:, 1, 0] * s[:, 2, 1] - s[:, 1, 1] * s[:, 2, 0]
            c21 = s[:, 0, 1] * s[:, 2, 0] - s[:, 0, 0] * s[:, 2, 1]
            c22 = s[:, 0, 0] * s[:, 1, 1] - s[:, 0, 1] * s[:, 1, 0]
            det = s[:, 0, 0] * c00 + s[:, 0, 1] * c10 + s[:, 0, 2] * c20
            x = np.stack([c00 * rhs[:, 0] + c01 * rhs[:, 1] + c02 * rhs[:, 2],
                          c10 * rhs[:, 0] + c11 * rhs[:, 1] + c12 * rhs[:, 2],
                          c20 * rhs[:, 0] + c21 * rhs[:, 1] + c22 * rhs[:, 2]], axis=1) / det[:, None]
        else:
            det = np.linalg.det(s)
            good = np.abs(det) > rcond
            x = np.full(b.shape, np.nan)
            if good.any():
                x[good] = np.linalg.solve(s[good], rhs[good][..., None])[..., 0]
    x = x / d
    x[~(np.abs(det) > rcond)] = np.nan
    return x


def inverse_stack(a: np.ndarray, rcond: float = 1e-13) -> np.ndarray:
    """The inverse of each matrix in a stack (NaN where singular)."""
    p = a.shape[-1]
    eye = np.broadcast_to(np.eye(p), a.shape)
    return np.stack([solve_stack(a, eye[:, :, j], rcond) for j in range(p)], axis=2)


def inverse_diagonal(a: np.ndarray, rcond: float = 1e-13) -> np.ndarray:
    """Diagonal of the inverse of each matrix in a stack (NaN where singular)."""
    return np.einsum("kii->ki", inverse_stack(a, rcond))


def correlations(cov: np.ndarray) -> np.ndarray:
    """Correlation coefficients of each covariance matrix in a stack, upper triangle in
    row order ((0,1), (0,2), …, (1,2), …), NaN where a variance is not positive."""
    p = cov.shape[-1]
    sd = np.sqrt(np.einsum("kii->ki", cov))
    i, j = np.triu_indices(p, 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cov[:, i, j] / (sd[:, i] * sd[:, j])
    return np.where(np.isfinite(r), np.clip(r, -1.0, 1.0), np.nan)




class Groups:
    """Per-device reductions over points sorted by device (one contiguous block each).

    The one place the fits reduce per device: ``codes`` is each point's device index,
    non-decreasing, and ``n`` the number of devices (a device may have no point: its
    reductions give NaN, 0 for counts and sums).
    """

    def __init__(self, codes: np.ndarray, n: int):
        self.codes = np.asarray(codes)
        self.n = n
        self.counts = np.bincount(self.codes, minlength=n)
        self.starts = np.concatenate([[0], np.cumsum(self.counts)[:-1]]).astype(np.int64)
        self._filled = self.counts > 0

    def _reduce(self, ufunc, x, empty):
        """``ufunc`` over each device's block; ``empty`` for a device without points.

        ``reduceat`` runs over the non-empty blocks only: an empty block's start equals
        the next block's, and at the end it would lie past the last point.
        """
        x = np.asarray(x)
        out = np.full(self.n, empty, dtype=np.result_type(x.dtype, np.asarray(empty).dtype))
        if len(x):
            out[self._filled] = ufunc.reduceat(x, self.starts[self._filled])
        return out

    def max(self, x):
        """Largest value per device, NaN ignored (NaN where none)."""
        return self._reduce(np.fmax, x, np.nan)

    def min(self, x):
        """Smallest value per device, NaN ignored (NaN where none)."""
        return self._reduce(np.fmin, x, np.nan)

    def sum(self, x):
        """Sum per device, added in point order (0 where none)."""
        return np.bincount(self.codes, np.asarray(x, dtype=float), minlength=self.n)

    def count(self, mask):
        """Points per device where ``mask`` holds."""
        return np.bincount(self.codes[np.asarray(mask, dtype=bool)], minlength=self.n)

    def spread(self, x, mask):
        """max − min of x over the masked points of each device (NaN where none)."""
        y = np.where(mask, x, np.nan)
        return self.max(y) - self.min(y)

    def each(self, per_device):
        """A per-device array spread back onto the points."""
        return np.asarray(per_device)[self.codes]

    def distinct(self, x, mask):
        """Number of distinct values of x among the masked points of each device."""
        sel = np.flatnonzero(mask)
        order = np.lexsort((x[sel], self.codes[sel]))
        d, v = self.codes[sel][order], x[sel][order]
        new = np.ones(len(d), dtype=bool)
        new[1:] = (d[1:] != d[:-1]) | (v[1:] != v[:-1])
        return np.bincount(d[new], minlength=self.n)


class ByDevice:
    """A table's rows sorted by device once (stable: each device's rows keep their order).

    ``names`` are the device ids, sorted; ``order`` the row order that groups them;
    ``groups`` the per-device reductions over the sorted rows.
    """

    def __init__(self, points: pd.DataFrame):
        codes, self.names = factorize_runs(points["device"].astype(str).to_numpy())
        self.order = np.argsort(codes, kind="stable")
        self.groups = Groups(codes[self.order], len(self.names))
        self._points = points

    def column(self, name: str) -> np.ndarray:
        """A numeric column in device order."""
        return self._points[name].to_numpy(dtype=float)[self.order]

    def text(self, name: str) -> np.ndarray:
        """A text column in device order (None in every row when the table lacks it)."""
        if name not in self._points:
            return np.full(len(self.order), None, dtype=object)
        return self._points[name].to_numpy(dtype=object)[self.order]

    def temperature(self, ambient: float) -> np.ndarray:
        """The rows' temperatures [K] in device order, ``ambient`` where a row has none."""
        t = self.column("temperature")
        return np.where(np.isfinite(t), t, ambient)
