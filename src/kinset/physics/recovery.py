"""Reverse recovery of a junction diode in the charge-control picture.

A diode carrying a forward current IF holds a stored minority-carrier charge
Q = IF·TT. When the drive reverses to −IR the junction stays forward biased, and the
current is set by the circuit at −IR, until that charge is gone (the storage phase);
then the current decays toward zero as the junction takes up the reverse voltage.

All functions broadcast their arguments (``numpy.broadcast_arrays``) and take SI
inputs; currents are positive in the forward direction.

References
----------
.. [1] R. H. Kingston, "Switching time in junction diodes and junction transistors",
   Proceedings of the IRE 42(5), 829-834, 1954. doi:10.1109/JRPROC.1954.274521
.. [2] B. Lax and S. F. Neustadter, "Transient response of a p-n junction", Journal of
   Applied Physics 25(9), 1148-1154, 1954. doi:10.1063/1.1721830
"""

from __future__ import annotations

import numpy as np


def storage_time(forward_current, reverse_current, transit_time):
    """Storage time of the charge-control model, Kingston [1].

    Parameters
    ----------
    forward_current : array_like
        Forward current IF before the switch [A].
    reverse_current : array_like
        Magnitude of the reverse drive current IR after the switch [A].
    transit_time : array_like
        Transit time TT (stored charge per forward current, the minority-carrier
        lifetime in the charge-control model) [s].

    Returns
    -------
    numpy.ndarray
        ts [s], from the instant the current reverses to the end of the storage phase.

    Notes
    -----
    With :math:`dQ/dt = i - Q/TT`, :math:`Q(0) = I_F TT` and :math:`i = -I_R`,
    :math:`Q(t) = -I_R TT + (I_F + I_R) TT e^{-t/TT}`, which reaches zero at

    .. math:: t_s = TT \\ln\\left(1 + \\frac{I_F}{I_R}\\right) .
    """
    i_f, i_r, tt = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        forward_current, reverse_current, transit_time)))
    return tt * np.log1p(i_f / i_r)


def _softplus(x, width):
    """width·ln(1 + e^(x/width)), a smooth max(x, 0); width 0 gives max(x, 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        smooth = width * np.logaddexp(0.0, x / width)
    return np.where(width > 0.0, smooth, np.maximum(x, 0.0))


def recovery_waveform(time, forward_current, reverse_current, transit_time,
                      recovery_tau, fall_time, switch_time=0.0, corner_width=None):
    """Diode current during reverse recovery, in the charge-control picture [1].

    Parameters
    ----------
    time : array_like
        Sample times [s].
    forward_current, reverse_current : array_like
        Forward current IF before the switch, and the magnitude of the reverse drive
        current IR after it [A].
    transit_time : array_like
        Transit time TT [s].
    recovery_tau : array_like
        Time constant of the decay after the storage phase [s]; 0 for an abrupt
        (snap) recovery.
    fall_time : array_like
        (IF + IR) divided by the largest |di/dt| of the drive [s]; 0 for a step.
    switch_time : array_like, optional
        Instant the current crosses zero [s].
    corner_width : array_like, optional
        Width over which the storage phase blends into the decay [s]; default a
        quarter of ``recovery_tau``; 0 for a sharp corner.

    Returns
    -------
    numpy.ndarray
        Current [A], positive forward.

    Notes
    -----
    The current is the drive multiplied by a recovery factor,

    .. math::
        i(t) = d(t)\\, g(t), \\qquad
        d(t) = I_F - \\frac{I_F + I_R}{1 + e^{-4(t - t_c)/t_f}}, \\qquad
        g(t) = \\exp\\left[-\\frac{w}{\\tau}\\ln\\left(1 + e^{(t - t_0 - t_s)/w}\\right)\\right].

    The drive :math:`d` falls from :math:`+I_F` to :math:`-I_R` with the largest
    slope :math:`(I_F + I_R)/t_f` and crosses zero at :math:`t_0` (``switch_time``;
    :math:`t_c = t_0 - (t_f/4)\\ln(I_F/I_R)`). While stored charge remains, the
    circuit sets the current, :math:`g = 1`; the storage phase lasts
    :math:`t_s = TT\\ln(1 + I_F/I_R)` from the zero crossing (Kingston [1], see
    :func:`storage_time`). Counting :math:`t_s` from the zero crossing treats the
    charge lost during the fall as negligible, which holds for :math:`t_f \\ll TT`
    (the usual test condition); the error in :math:`t_s` is of order
    :math:`t_f I_F/(2(I_F+I_R))`. After the storage phase the current decays as
    :math:`e^{-(t - t_0 - t_s)/\\tau}`; the corner is rounded over :math:`w`, as the
    exact diffusion solution of Lax and Neustadter [2] rounds it. For
    :math:`t - t_0 - t_s \\gg w`, :math:`g` equals the exponential to within
    :math:`e^{-(t - t_0 - t_s)/w}`, so the current returns to a fraction :math:`f` of
    :math:`I_R` at :math:`t_0 + t_s + \\tau\\ln(1/f)` to that accuracy.
    """
    t, i_f, i_r, tt, tau, t_f, t0 = np.broadcast_arrays(
        *(np.asarray(a, dtype=float) for a in (
            time, forward_current, reverse_current, transit_time, recovery_tau,
            fall_time, switch_time)))
    w = 0.25 * tau if corner_width is None else np.broadcast_to(
        np.asarray(corner_width, dtype=float), t.shape)
    # Drive: a logistic step with the given largest slope, zero at t0.
    step = t_f > 0.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        t_c = t0 - 0.25 * t_f * np.log(i_f / i_r)
        u = np.where(step, 4.0 * (t - t_c) / np.where(step, t_f, 1.0), 0.0)
        frac = np.where(step, 0.5 * (1.0 + np.tanh(0.5 * u)), (t >= t0).astype(float))
    drive = i_f - (i_f + i_r) * frac
    # Recovery factor: 1 during storage, then exp(-(t - t0 - ts)/tau).
    x = t - t0 - storage_time(i_f, i_r, tt)
    with np.errstate(divide="ignore", invalid="ignore"):
        exponent = np.where(tau > 0.0, _softplus(x, w) / np.where(tau > 0.0, tau, 1.0),
                            np.where(x > 0.0, np.inf, 0.0))
    return drive * np.exp(-exponent)


def transit_time(storage_time_, forward_current, reverse_current):
    """Transit time TT of the charge-control model from a measured storage time.

    Parameters
    ----------
    storage_time_ : array_like
        ts [s], from the current's zero crossing to the end of the storage phase.
    forward_current : array_like
        Forward current IF before the switch [A].
    reverse_current : array_like
        Magnitude of the reverse current IR during the storage phase [A].

    Returns
    -------
    numpy.ndarray
        TT [s], the inverse of :func:`storage_time`:
        :math:`TT = t_s / \\ln(1 + I_F/I_R)` (Kingston [1]).
    """
    ts, i_f, i_r = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        storage_time_, forward_current, reverse_current)))
    with np.errstate(divide="ignore", invalid="ignore"):
        return ts / np.log1p(i_f / i_r)
