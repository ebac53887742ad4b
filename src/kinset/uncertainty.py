"""Standard uncertainty of a fitted model's value at a condition.

The law of propagation of uncertainty (JCGM 100:2008, Evaluation of measurement data —
Guide to the expression of uncertainty in measurement, §5.2.2, eq. 13) with the
sensitivity coefficients (§5.1.3) taken by central differences:

.. math:: u^2(y) = \\sum_{i,j} \\frac{\\partial f}{\\partial p_i}
          \\frac{\\partial f}{\\partial p_j}\\, u(p_i)\\, u(p_j)\\, r(p_i, p_j)

where :math:`u(p_i)` are the fit's standard errors and :math:`r` its correlation
coefficients. First order, as the Guide's law is; the tests compare it with a Monte
Carlo propagation of distributions (JCGM 101:2008).
"""

from __future__ import annotations

from typing import Callable

import numpy as np

STEP = 1e-3     # central-difference step, as a fraction of each parameter's standard error
MIN_STEP = 1e-9  # step where a standard error is zero (a parameter held fixed)


def pairs(p: int) -> list[tuple[int, int]]:
    """Index pairs of a correlation table's columns: upper triangle in row order."""
    i, j = np.triu_indices(p, 1)
    return list(zip(i.tolist(), j.tolist()))


def propagate(f: Callable[[np.ndarray], np.ndarray], params: np.ndarray, se: np.ndarray,
              corr: np.ndarray) -> np.ndarray:
    """Standard uncertainty of ``f(params)`` per row.

    Parameters
    ----------
    f : callable
        Maps parameters (k, p) to values (k,); vectorised over rows.
    params, se : ndarray (k, p)
        Parameters and their standard errors. A standard error of 0 is a parameter held
        fixed; NaN is an unknown uncertainty and makes the result NaN.
    corr : ndarray (k, p(p-1)/2)
        Correlation coefficients in the order of :func:`pairs`; NaN is read as 0 only
        where one of the two standard errors is 0 (a fixed parameter correlates with
        nothing), otherwise it makes the result NaN.

    Returns
    -------
    ndarray (k,)
        u(f) in the unit of ``f``.
    """
    params = np.asarray(params, dtype=float)
    se = np.asarray(se, dtype=float)
    k, p = params.shape
    jac = np.empty((k, p))
    for i in range(p):
        h = np.where(se[:, i] > 0, STEP * se[:, i], MIN_STEP * (1.0 + np.abs(params[:, i])))
        h = np.where(np.isfinite(h), h, MIN_STEP)
        up, down = params.copy(), params.copy()
        up[:, i] += h
        down[:, i] -= h
        jac[:, i] = (f(up) - f(down)) / (2.0 * h)
    var = np.einsum("ki,ki->k", jac * jac, se * se)
    for c, (i, j) in enumerate(pairs(p)):
        r = corr[:, c]
        fixed = (se[:, i] == 0) | (se[:, j] == 0)
        r = np.where(fixed, 0.0, r)
        var = var + 2.0 * jac[:, i] * jac[:, j] * se[:, i] * se[:, j] * r
    return np.sqrt(np.maximum(var, 0.0))
