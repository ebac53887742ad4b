"""Forward conduction of a junction diode: Shockley's law with series resistance.

All functions broadcast their arguments (``numpy.broadcast_arrays``) and return
arrays; inputs are SI. The symbols of the SPICE diode model appear only as local
aliases where a formula is written.

References
----------
.. [1] W. Shockley, "The theory of p-n junctions in semiconductors and p-n junction
   transistors", Bell System Technical Journal 28(3), 435-489, 1949.
   doi:10.1002/j.1538-7305.1949.tb03645.x
.. [2] T. C. Banwell and A. Jayakumar, "Exact analytical solution for current flow
   through diode with series resistance", Electronics Letters 36(4), 291-292, 2000.
   doi:10.1049/el:20000301
.. [3] P. W. Tuinenga, "SPICE: A Guide to Circuit Simulation and Analysis Using PSpice",
   Prentice Hall, 1988 (the SPICE2 diode model's IS(T) law); the same law is in the
   ngspice manual, section "Diode model temperature effects".
"""

from __future__ import annotations

import numpy as np
from scipy.special import wrightomega

from kinset.physics.constants import thermal_voltage


def saturation_current_at(saturation_current, temperature, reference_temperature,
                          ideality, activation_energy, xti):
    """Saturation current at another temperature, as in SPICE [3].

    Parameters
    ----------
    saturation_current : array_like
        IS at ``reference_temperature`` [A].
    temperature : array_like
        Junction temperature [K].
    reference_temperature : array_like
        Temperature at which ``saturation_current`` holds (SPICE TNOM) [K].
    ideality : array_like
        Emission coefficient N [1].
    activation_energy : array_like
        EG [eV].
    xti : array_like
        Saturation-current temperature exponent XTI [1].

    Returns
    -------
    numpy.ndarray
        IS(T) [A].

    Notes
    -----
    .. math::
        I_S(T) = I_S(T_0) \\left(\\frac{T}{T_0}\\right)^{XTI/N}
                 \\exp\\left[\\left(\\frac{T}{T_0} - 1\\right)\\frac{E_G}{N V_t(T)}\\right]

    with :math:`V_t(T) = kT/q`.
    """
    return np.exp(log_saturation_current_at(np.log(saturation_current), temperature,
                                            reference_temperature, ideality,
                                            activation_energy, xti))


def log_saturation_current_at(log_saturation_current, temperature, reference_temperature,
                              ideality, activation_energy, xti):
    """Natural log of :func:`saturation_current_at`, computed without overflow [ln A]."""
    T, T0, n = (np.asarray(a, dtype=float) for a in (temperature, reference_temperature, ideality))
    ratio = T / T0
    return (np.asarray(log_saturation_current, dtype=float)
            + (xti / n) * np.log(ratio)
            + (ratio - 1.0) * activation_energy / (n * thermal_voltage(T)))


def voltage_from_current(current, saturation_current, ideality, resistance_series,
                         temperature):
    """Terminal voltage of a forward-biased diode at a given current (explicit form).

    Parameters
    ----------
    current : array_like
        Diode current [A]; must exceed -saturation_current.
    saturation_current : array_like
        IS at ``temperature`` [A].
    ideality : array_like
        Emission coefficient N [1].
    resistance_series : array_like
        Series resistance RS [Ohm].
    temperature : array_like
        Junction temperature [K].

    Returns
    -------
    numpy.ndarray
        Voltage [V].

    Notes
    -----
    From Shockley's law [1] with a series resistance,

    .. math:: V = N V_t \\ln\\left(1 + I/I_S\\right) + I R_S .

    ``log1p`` keeps the small-current end exact.
    """
    i, i_s, n, rs, t = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        current, saturation_current, ideality, resistance_series, temperature)))
    return n * thermal_voltage(t) * np.log1p(i / i_s) + i * rs


def voltage_from_log_current(log_current, log_saturation_current, ideality,
                             resistance_series, temperature):
    """:func:`voltage_from_current` with both currents given as natural logs.

    Parameters
    ----------
    log_current : array_like
        ln of a positive diode current [ln A].
    log_saturation_current : array_like
        ln IS at ``temperature`` [ln A].
    ideality, resistance_series, temperature : array_like
        N [1], RS [Ohm], T [K].

    Returns
    -------
    voltage : numpy.ndarray
        The same forward voltage [V].

    Notes
    -----
    :math:`\\ln(1 + I/I_S)` is written as ``logaddexp(0, ln I − ln I_S)``, which neither
    overflows for large :math:`I/I_S` nor loses digits for small.
    """
    x = np.asarray(log_current, dtype=float) - np.asarray(log_saturation_current, dtype=float)
    return (np.asarray(ideality) * thermal_voltage(temperature) * np.logaddexp(0.0, x)
            + np.exp(log_current) * np.asarray(resistance_series))


def current_from_voltage(voltage, saturation_current, ideality, resistance_series,
                         temperature):
    """Diode current at a given terminal voltage, through the Lambert W solution [2].

    Parameters
    ----------
    voltage : array_like
        Terminal voltage [V].
    saturation_current : array_like
        IS at ``temperature`` [A].
    ideality, resistance_series, temperature : array_like
        Emission coefficient N [1], series resistance RS [Ohm] (zero is allowed) and
        junction temperature [K].

    Returns
    -------
    numpy.ndarray
        Current [A].

    Notes
    -----
    Banwell and Jayakumar [2], eq. (4), with :math:`a = N V_t`:

    .. math::
        I = \\frac{a}{R_S} W\\left(\\frac{I_S R_S}{a} e^{(V + I_S R_S)/a}\\right) - I_S .

    The argument of W overflows long before the result does, so W is evaluated as the
    Wright omega function, :math:`W(e^z) = \\omega(z)` with
    :math:`z = \\ln(I_S R_S / a) + (V + I_S R_S)/a`, which takes :math:`z` directly.
    ``RS = 0`` takes the explicit branch :math:`I = I_S \\,\\mathrm{expm1}(V/a)`.
    """
    v, i_s, n, rs, t = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        voltage, saturation_current, ideality, resistance_series, temperature)))
    a = n * thermal_voltage(t)
    out = np.empty_like(v)
    zero = rs <= 0.0
    if zero.any():
        out[zero] = i_s[zero] * np.expm1(v[zero] / a[zero])
    pos = ~zero
    if pos.any():
        i_s_, rs_, a_, v_ = i_s[pos], rs[pos], a[pos], v[pos]
        z = np.log(i_s_ * rs_ / a_) + (v_ + i_s_ * rs_) / a_
        out[pos] = a_ / rs_ * np.real(wrightomega(z)) - i_s_
    return out


def forward_voltage_tempco(current, saturation_current, ideality, resistance_series,
                           temperature, reference_temperature, activation_energy, xti,
                           resistance_tempco=0.0):
    r"""Temperature coefficient dV/dT of the forward voltage at a constant current.

    Parameters
    ----------
    current, saturation_current : array_like
        Forward current, and IS at ``reference_temperature`` [A].
    ideality, resistance_series : array_like
        N [1], RS [Ohm].
    temperature, reference_temperature : array_like
        Junction temperature and the temperature IS is given at [K].
    activation_energy, xti : array_like
        EG [eV], XTI [1].
    resistance_tempco : array_like, optional
        Linear temperature coefficient of RS [1/K] (SPICE TRS1); kinset fits RS at one
        temperature and assumes 0.

    Returns
    -------
    numpy.ndarray
        dV/dT [V/K].

    Notes
    -----
    With :math:`x = \ln I - \ln I_S(T)` and the IS(T) law of
    :func:`saturation_current_at`,

    .. math::
        \frac{d\ln I_S}{dT} = \frac{XTI}{N T} + \frac{E_G}{N (k/q) T^2}, \qquad
        \frac{dV}{dT} = N\frac{k}{q}\left[\ln(1 + e^{x}) - T\,\sigma(x)
        \frac{d\ln I_S}{dT}\right] + I R_S\,TRS1 ,

    the exact derivative of :func:`voltage_from_current` at constant current
    (:math:`\sigma` the logistic function). For :math:`I \gg I_S` it reduces to the
    familiar :math:`(V_j - XTI\,V_t - E_G)/T`.
    """
    from kinset.physics.constants import BOLTZMANN, ELEMENTARY_CHARGE
    i, i_s, n, rs, t, t0 = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        current, saturation_current, ideality, resistance_series, temperature,
        reference_temperature)))
    k_q = BOLTZMANN / ELEMENTARY_CHARGE
    # Exact derivative including the "+1" of log1p: V_j = N Vt ln(1 + I/IS(T)).
    ln_is_t = log_saturation_current_at(np.log(i_s), t, t0, n, activation_energy, xti)
    x = np.log(i) - ln_is_t
    sig = 0.5 * (1.0 + np.tanh(0.5 * x))           # d logaddexp(0, x)/dx
    dln_is_dt = xti / (n * t) + activation_energy / (n * k_q * t * t)
    # d/dT [N k/q T softplus(x)] with dx/dT = -dln_is_dt
    dvj = n * k_q * (np.logaddexp(0.0, x) - t * sig * dln_is_dt)
    return dvj + i * rs * np.asarray(resistance_tempco, dtype=float)
