"""Junction (depletion) capacitance and the small-signal impedance of a packaged diode.

All functions broadcast their arguments (``numpy.broadcast_arrays``) and take SI
inputs. The SPICE diode-model symbols (CJO, VJ, M, FC) are the argument names here
because they are the names every diode model card uses; they are defined in each
docstring.

References
----------
.. [1] S. M. Sze and K. K. Ng, "Physics of Semiconductor Devices", 3rd ed., Wiley,
   2007, section 2.3 (depletion width and capacitance of abrupt and linearly graded
   junctions). doi:10.1002/0470068329
.. [2] L. W. Nagel, "SPICE2: A computer program to simulate semiconductor circuits",
   Memorandum ERL-M520, Electronics Research Laboratory, University of California,
   Berkeley, 1975 (the diode depletion-capacitance law and its forward-bias
   linearisation beyond FC·VJ); the same law is in the ngspice manual, section
   "Junction Diodes".
.. [3] K. Kurokawa, "Power waves and the scattering matrix", IEEE Transactions on
   Microwave Theory and Techniques 13(2), 194-202, 1965. doi:10.1109/TMTT.1965.1125964
   (scattering parameters of a one-port and of series and shunt two-ports between
   real reference impedances).
"""

from __future__ import annotations

import numpy as np


def junction_capacitance(reverse_voltage, cj0, vj, m, fc=0.5):
    """Depletion capacitance of a junction at a reverse bias, as in SPICE [2].

    Parameters
    ----------
    reverse_voltage : array_like
        Reverse bias VR, positive in reverse [V]. Negative values are forward bias.
    cj0 : array_like
        Zero-bias junction capacitance CJO [F].
    vj : array_like
        Junction (built-in) potential VJ [V].
    m : array_like
        Grading coefficient M [1]: 1/2 for an abrupt junction, 1/3 for a linearly
        graded one [1].
    fc : array_like, optional
        Forward-bias coefficient FC [1]: beyond a forward bias of FC·VJ the law is
        continued by its tangent, as SPICE does, so it stays finite at and beyond VJ.

    Returns
    -------
    numpy.ndarray
        Junction capacitance Cj [F].

    Notes
    -----
    For :math:`V_R > -FC\\,V_J` (all of reverse bias),

    .. math:: C_j = \\frac{C_{J0}}{(1 + V_R/V_J)^{M}} ,

    the depletion law of [1] (depletion width :math:`\\propto (V_J + V_R)^M`).
    For a forward bias :math:`V_D = -V_R \\ge FC\\,V_J`, SPICE [2] uses

    .. math::
        C_j = \\frac{C_{J0}}{(1 - FC)^{1+M}}
              \\left[1 - FC(1 + M) + \\frac{M V_D}{V_J}\\right] ,

    which joins the depletion law with equal value and slope at :math:`V_D = FC\\,V_J`.
    """
    vr, c0, v_j, m_, f = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        reverse_voltage, cj0, vj, m, fc)))
    vd = -vr
    linear = vd >= f * v_j
    # Depletion law; the argument is clipped where the linear branch takes over,
    # so the unused branch never raises a power of a negative number.
    base = np.where(linear, 1.0 - f, 1.0 + vr / v_j)
    depletion = c0 * base ** (-m_)
    tangent = c0 / (1.0 - f) ** (1.0 + m_) * (1.0 - f * (1.0 + m_) + m_ * vd / v_j)
    return np.where(linear, tangent, depletion)


def series_rlc_impedance(frequency, resistance, inductance, capacitance):
    """Impedance of a resistance, an inductance and a capacitance in series.

    The small-signal model of a packaged diode at a reverse bias: series resistance
    RS, package and lead inductance LS and the junction capacitance Cj.

    Parameters
    ----------
    frequency : array_like
        Frequency [Hz]; must be positive where ``capacitance`` is finite.
    resistance : array_like
        Series resistance [Ohm].
    inductance : array_like
        Series inductance [H].
    capacitance : array_like
        Series capacitance [F]; ``inf`` means no capacitor (a short).

    Returns
    -------
    numpy.ndarray of complex
        Impedance Z [Ohm].

    Notes
    -----
    .. math:: Z = R + j\\left(\\omega L - \\frac{1}{\\omega C}\\right), \\qquad
              \\omega = 2\\pi f .

    At the series resonance :math:`\\omega^2 L C = 1` the reactance vanishes and
    :math:`Z = R`; below it the capacitance dominates.
    """
    f, r, ind, c = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        frequency, resistance, inductance, capacitance)))
    w = 2.0 * np.pi * f
    with np.errstate(divide="ignore"):
        x_c = np.where(np.isinf(c), 0.0, 1.0 / (w * c))
    return r + 1j * (w * ind - x_c)


def reflection_coefficient(impedance, reference_impedance=50.0):
    """Reflection coefficient of a load (S11 of a one-port).

    Parameters
    ----------
    impedance : array_like of complex
        Load impedance Z [Ohm]; ``inf`` is an open circuit.
    reference_impedance : array_like, optional
        Real reference impedance Z0 of the port [Ohm].

    Returns
    -------
    numpy.ndarray of complex
        :math:`\\Gamma = (Z - Z_0)/(Z + Z_0)` [1].
    """
    z = np.asarray(impedance, dtype=complex)
    z0 = np.asarray(reference_impedance, dtype=float)
    z, z0 = np.broadcast_arrays(z, z0)
    open_ = np.isinf(z)
    with np.errstate(invalid="ignore"):
        gamma = (z - z0) / (z + z0)
    return np.where(open_, 1.0 + 0.0j, gamma)


# --------------------------------------------------------------------------- from S to Y
# A diode measured with a vector network analyser sits in one of three fixtures. Each
# function below gives the device's admittance Y [S] from the measured scattering
# parameter and its derivative dY/dS, which tells how strongly noise on S is amplified
# (the conditioning of the measurement at each frequency). Admittances rather than
# impedances are returned because the empty fixture is subtracted as an admittance
# (its parasitics sit in parallel with the device) and because an open (Y = 0) stays finite.

FIXTURES = ("reflection", "series", "shunt")


def _z0_pair(reference_impedance, reference_impedance_2):
    z1 = np.asarray(reference_impedance, dtype=complex)
    z2 = z1 if reference_impedance_2 is None else np.asarray(reference_impedance_2, dtype=complex)
    return z1, z2


def reflection_admittance(s11, reference_impedance=50.0):
    """Admittance of a one-port from its reflection coefficient.

    Parameters
    ----------
    s11 : array_like of complex
        Reflection coefficient S11 looking into the device [1].
    reference_impedance : array_like, optional
        Real reference impedance Z0 of the port [Ohm].

    Returns
    -------
    admittance : numpy.ndarray of complex
        Y [S].
    derivative : numpy.ndarray of complex
        dY/dS11 [S].

    Notes
    -----
    From :math:`S_{11} = (Z - Z_0)/(Z + Z_0)` [3]:

    .. math:: Z = Z_0\\frac{1 + S_{11}}{1 - S_{11}}, \\qquad
              Y = \\frac{1 - S_{11}}{Z_0 (1 + S_{11})}, \\qquad
              \\frac{dY}{dS_{11}} = \\frac{-2}{Z_0 (1 + S_{11})^2} .
    """
    s, z0 = np.broadcast_arrays(np.asarray(s11, dtype=complex),
                                np.asarray(reference_impedance, dtype=complex))
    with np.errstate(divide="ignore", invalid="ignore"):
        y = (1.0 - s) / (z0 * (1.0 + s))
        dy = -2.0 / (z0 * (1.0 + s) ** 2)
    return y, dy


def series_admittance(s21, reference_impedance=50.0, reference_impedance_2=None):
    """Admittance of a device in series between the two ports of a fixture.

    Parameters
    ----------
    s21 : array_like of complex
        Transmission coefficient S21 [1].
    reference_impedance : array_like, optional
        Real reference impedance of port 1, Z01 [Ohm].
    reference_impedance_2 : array_like, optional
        Real reference impedance of port 2, Z02 [Ohm]; default Z01.

    Returns
    -------
    admittance : numpy.ndarray of complex
        Y [S].
    derivative : numpy.ndarray of complex
        dY/dS21 [S].

    Notes
    -----
    A series impedance Z between real reference impedances gives [3]
    :math:`S_{21} = 2\\sqrt{Z_{01}Z_{02}}/(Z + Z_{01} + Z_{02})`, so with
    :math:`k = 2\\sqrt{Z_{01}Z_{02}}`

    .. math:: Z = \\frac{k}{S_{21}} - Z_{01} - Z_{02}, \\qquad
              Y = \\frac{S_{21}}{k - S_{21}(Z_{01} + Z_{02})}, \\qquad
              \\frac{dY}{dS_{21}} = \\frac{k}{(k - S_{21}(Z_{01} + Z_{02}))^2} ;

    for equal ports :math:`Z = 2 Z_0 (1 - S_{21})/S_{21}`.
    """
    z1, z2 = _z0_pair(reference_impedance, reference_impedance_2)
    s, z1, z2 = np.broadcast_arrays(np.asarray(s21, dtype=complex), z1, z2)
    k = 2.0 * np.sqrt(z1 * z2)
    with np.errstate(divide="ignore", invalid="ignore"):
        den = k - s * (z1 + z2)
        return s / den, k / den ** 2


def shunt_admittance(s21, reference_impedance=50.0, reference_impedance_2=None):
    """Admittance of a device from the line to ground in a two-port fixture.

    Parameters and returns as :func:`series_admittance`: S21 [1] and the ports' real
    reference impedances Z01, Z02 [Ohm] in; Y [S] and dY/dS21 [S] out.

    Notes
    -----
    A shunt admittance Y between real reference impedances gives [3]
    :math:`S_{21} = 2\\sqrt{Z_{01}Z_{02}}/(Z_{01} + Z_{02} + Y Z_{01} Z_{02})`, so with
    :math:`k = 2\\sqrt{Z_{01}Z_{02}}`

    .. math:: Y = \\frac{k - S_{21}(Z_{01} + Z_{02})}{S_{21} Z_{01} Z_{02}}, \\qquad
              \\frac{dY}{dS_{21}} = \\frac{-k}{S_{21}^2 Z_{01} Z_{02}} ;

    for equal ports :math:`Z = 1/Y = Z_0 S_{21} / (2 (1 - S_{21}))`.
    """
    z1, z2 = _z0_pair(reference_impedance, reference_impedance_2)
    s, z1, z2 = np.broadcast_arrays(np.asarray(s21, dtype=complex), z1, z2)
    k = 2.0 * np.sqrt(z1 * z2)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (k - s * (z1 + z2)) / (s * z1 * z2), -k / (s ** 2 * z1 * z2)


def fixture_admittance(s, reference_impedance, fixture):
    """Device admittance from a fixture's scattering matrix.

    Parameters
    ----------
    s : array_like of complex, shape (..., ports, ports)
        Scattering matrix per frequency [1]: one port for ``reflection``, two for
        ``series`` and ``shunt`` (S21 is used).
    reference_impedance : array_like, shape (..., ports)
        Real reference impedance of each port [Ohm].
    fixture : str
        ``reflection``, ``series`` or ``shunt``.

    Returns
    -------
    admittance, derivative : numpy.ndarray of complex
        Y [S] and dY/dS [S] (see :func:`reflection_admittance`,
        :func:`series_admittance`, :func:`shunt_admittance`).
    """
    s = np.asarray(s, dtype=complex)
    z0 = np.asarray(reference_impedance, dtype=complex)
    if fixture == "reflection":
        return reflection_admittance(s[..., 0, 0], z0[..., 0])
    if fixture == "series":
        return series_admittance(s[..., 1, 0], z0[..., 0], z0[..., 1])
    if fixture == "shunt":
        return shunt_admittance(s[..., 1, 0], z0[..., 0], z0[..., 1])
    raise ValueError(f"unknown fixture {fixture!r} (one of {', '.join(FIXTURES)})")
