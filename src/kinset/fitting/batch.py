"""Small dense least-squares problems solved for many devices at once.

A reel is an array problem: each device has a few parameters and a few dozen
points. Points live in flat arrays with a device index; normal equations are
summed per device with ``numpy.bincount`` and solved as a stack of tiny systems.
"""

from __future__ import annotations

import numpy as np


def grouped_normal_equations(index: np.ndarray, jac: np.ndarray, resid: np.ndarray,
                             groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Per-group JᵀJ (groups, p, p) and Jᵀr (groups, p) from flat rows.

    Parameters
    ----------
    index : (m,) int, group of each row
    jac : (m, p) Jacobian rows
    resid : (m,) residuals
    groups : number of groups
    """
    p = jac.shape[1]
    jtj = np.empty((groups, p, p))
    jtr = np.empty((groups, p))
    for a in range(p):
        jtr[:, a] = np.bincount(index, jac[:, a] * resid, minlength=groups)
        for b in range(a, p):
            s = np.bincount(index, jac[:, a] * jac[:, b], minlength=groups)
            jtj[:, a, b] = s
            jtj[:, b, a] = s
    return jtj, jtr


def solve_stack(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve a stack of small systems; singular ones give NaN instead of raising."""
    out = np.full(b.shape, np.nan)
    det_ok = np.isfinite(a).all(axis=(1, 2)) & np.isfinite(b).all(axis=1)
    if det_ok.any():
        aa, bb = a[det_ok], b[det_ok]
        # Scale rows and columns to unit diagonal so the conditioning test is fair.
        d = np.sqrt(np.abs(np.einsum("kii->ki", aa)))
        d[d == 0] = 1.0
        scaled = aa / d[:, :, None] / d[:, None, :]
        good = np.linalg.cond(scaled) < 1e13
        res = np.full(bb.shape, np.nan)
        if good.any():
            res[good] = np.linalg.solve(scaled[good], (bb[good] / d[good])[..., None])[..., 0] / d[good]
        out[det_ok] = res
    return out


def group_sum(index: np.ndarray, values: np.ndarray, groups: int) -> np.ndarray:
    return np.bincount(index, values, minlength=groups)
