"""Reverse leakage of a junction diode: shunt, generation in the depletion layer, breakdown.

All functions broadcast their arguments (``numpy.broadcast_arrays``) and take SI
inputs; currents and voltages are positive magnitudes in the reverse direction.

References
----------
.. [1] C.-T. Sah, R. N. Noyce and W. Shockley, "Carrier generation and recombination
   in p-n junctions and p-n junction characteristics", Proceedings of the IRE 45(9),
   1228-1243, 1957. doi:10.1109/JRPROC.1957.278528
.. [2] S. M. Sze and K. K. Ng, "Physics of Semiconductor Devices", 3rd ed., Wiley,
   2007: intrinsic carrier density (section 1.4.1), depletion width (section 2.3)
   and the generation current of a reverse-biased junction (section 2.4).
   doi:10.1002/0470068329
.. [3] L. W. Nagel, "SPICE2: A computer program to simulate semiconductor circuits",
   Memorandum ERL-M520, Electronics Research Laboratory, University of California,
   Berkeley, 1975 (the exponential reverse-breakdown current, parameters BV and IBV);
   the ngspice manual, section "Junction Diodes", adds the emission coefficient NBV.
"""

from __future__ import annotations

import numpy as np

from kinset.physics.constants import BOLTZMANN, ELEMENTARY_CHARGE, thermal_voltage

SILICON_BANDGAP_EV = 1.12  # [eV] at 300 K, Sze and Ng [2], Appendix G


def reverse_current(reverse_voltage, shunt_resistance, generation_current, vj, m,
                    temperature, generation_ideality=2.0, breakdown_voltage=np.inf,
                    breakdown_current=1.0e-3, breakdown_ideality=1.0):
    """Reverse current of a diode: ohmic shunt, depletion-layer generation, breakdown.

    Parameters
    ----------
    reverse_voltage : array_like
        Reverse bias VR >= 0 [V]; negative values give NaN.
    shunt_resistance : array_like
        Ohmic leakage path across the junction (surface, damage) [Ohm]; ``inf`` for none.
    generation_current : array_like
        Generation current of the zero-bias depletion layer at ``temperature`` [A]
        (scale it between temperatures with :func:`generation_temperature_factor`).
    vj : array_like
        Junction potential VJ [V].
    m : array_like
        Exponent of the depletion width, the grading coefficient M of the
        capacitance law [1] (1/2 for an abrupt junction).
    temperature : array_like
        Junction temperature [K].
    generation_ideality : array_like, optional
        Emission coefficient of the generation–recombination current [1]; 2 for
        recombination centres near mid-gap [1].
    breakdown_voltage : array_like, optional
        BV [V], where the breakdown term alone equals ``breakdown_current``;
        ``inf`` (the default) for no breakdown.
    breakdown_current : array_like, optional
        IBV [A], the current that defines BV (SPICE default 1 mA) [3].
    breakdown_ideality : array_like, optional
        NBV [1]: the breakdown current grows e-fold every NBV·Vt volts [3].

    Returns
    -------
    numpy.ndarray
        Reverse current magnitude [A].

    Notes
    -----
    .. math::
        I_R = \\frac{V_R}{R_{sh}}
            + I_{gen}\\left(1 + \\frac{V_R}{V_J}\\right)^{M}
              \\left(1 - e^{-V_R/(N_R V_t)}\\right)
            + I_{BV}\\left(e^{(V_R - BV)/(N_{BV} V_t)} - e^{-BV/(N_{BV} V_t)}\\right)

    The generation current is proportional to the volume of the depletion layer
    [1], [2], whose width grows as :math:`(1 + V_R/V_J)^M` (the inverse of the
    capacitance law); the last factor is the Sah–Noyce–Shockley bias dependence,
    which makes the net current vanish at zero bias and saturate within a few
    :math:`N_R V_t`. The breakdown term is the SPICE exponential [3], offset so that
    it too vanishes at zero bias. Every term is zero at :math:`V_R = 0`.
    """
    vr, rsh, ig, v_j, m_, t, nr, bv, ibv, nbv = np.broadcast_arrays(
        *(np.asarray(a, dtype=float) for a in (
            reverse_voltage, shunt_resistance, generation_current, vj, m, temperature,
            generation_ideality, breakdown_voltage, breakdown_current,
            breakdown_ideality)))
    valid = vr >= 0.0
    v = np.where(valid, vr, 0.0)
    shunt = np.where(np.isinf(rsh), 0.0, v / rsh)
    generation = ig * generation_shape(v, v_j, m_, t, nr)
    vt = thermal_voltage(t)
    a = nbv * vt
    # exp((v - bv)/a) - exp(-bv/a) written as exp((v - bv)/a) * (1 - exp(-v/a)), which
    # loses no digits near v = 0; BV = inf gives exp(-inf) = 0. The exponent is capped
    # so that a bias far above BV gives a huge but finite current.
    breakdown = ibv * np.exp(np.minimum((v - bv) / a, 700.0)) * -np.expm1(-v / a)
    return np.where(valid, shunt + generation + breakdown, np.nan)


def generation_temperature_factor(temperature, reference_temperature,
                                  eg=SILICON_BANDGAP_EV):
    """Ratio of the generation current at one temperature to that at another.

    Parameters
    ----------
    temperature : array_like
        Junction temperature [K].
    reference_temperature : array_like
        Temperature the generation current is known at [K].
    eg : array_like, optional
        Band gap [eV]; silicon 1.12 eV at 300 K [2].

    Returns
    -------
    numpy.ndarray
        :math:`I_{gen}(T) / I_{gen}(T_0)` [1].

    Notes
    -----
    The generation current is :math:`q n_i W A / (2\\tau)` [1], so with a
    temperature-independent lifetime it follows the intrinsic density [2],
    :math:`n_i \\propto T^{3/2} e^{-E_G/(2kT)}`:

    .. math::
        \\frac{I_{gen}(T)}{I_{gen}(T_0)} = \\left(\\frac{T}{T_0}\\right)^{3/2}
        \\exp\\left[\\frac{E_G}{2 k/q}\\left(\\frac{1}{T_0} - \\frac{1}{T}\\right)\\right]

    For silicon near room temperature this doubles about every 9 K.
    """
    t, t0, e = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        temperature, reference_temperature, eg)))
    k_q = BOLTZMANN / ELEMENTARY_CHARGE
    return (t / t0) ** 1.5 * np.exp(e / (2.0 * k_q) * (1.0 / t0 - 1.0 / t))


def generation_shape(reverse_voltage, vj, m, temperature, generation_ideality=2.0):
    """Bias dependence of the generation current, relative to its zero-bias value.

    Parameters
    ----------
    reverse_voltage : array_like
        Reverse bias VR >= 0 [V].
    vj : array_like
        Junction potential VJ [V].
    m : array_like
        Exponent of the depletion width [1].
    temperature : array_like
        Junction temperature [K].
    generation_ideality : array_like, optional
        Emission coefficient of the generation current [1].

    Returns
    -------
    numpy.ndarray
        :math:`(1 + V_R/V_J)^M (1 - e^{-V_R/(N_R V_t)})` [1], the factor that multiplies
        the generation current in :func:`reverse_current`.

    Notes
    -----
    The first factor is the depletion width relative to its zero-bias value (Sze
    and Ng [2], section 2.3), the second the Sah–Noyce–Shockley bias dependence [1].
    """
    vr, v_j, m_, t, nr = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        reverse_voltage, vj, m, temperature, generation_ideality)))
    vt = thermal_voltage(t)
    return (1.0 + vr / v_j) ** m_ * -np.expm1(-vr / (nr * vt))


def leakage_temperature_factor(temperature, reference_temperature, activation_energy,
                               xti, emission_coefficient):
    """Ratio of a thermally activated leakage current at one temperature to another.

    Parameters
    ----------
    temperature : array_like
        Junction temperature [K].
    reference_temperature : array_like
        Temperature the current is known at [K].
    activation_energy : array_like
        EG [eV]: the band gap for a p-n junction, the barrier height for a Schottky.
    xti : array_like
        Temperature exponent of the prefactor [1].
    emission_coefficient : array_like
        N [1]: 2 for generation in the depletion layer, 1 for emission over a barrier.

    Returns
    -------
    numpy.ndarray
        :math:`I(T)/I(T_0)` [1].

    Notes
    -----
    The SPICE saturation-current law [3] with emission coefficient N,

    .. math::
        \\frac{I(T)}{I(T_0)} = \\left(\\frac{T}{T_0}\\right)^{XTI/N}
        \\exp\\left[\\frac{E_G}{N k/q}\\left(\\frac{1}{T_0} - \\frac{1}{T}\\right)\\right].

    With N = 2 and XTI = 3 it is :func:`generation_temperature_factor`, the intrinsic
    density :math:`n_i \\propto T^{3/2} e^{-E_G/(2kT)}` [1], [2]; with N = 1 and XTI = 2
    it is thermionic emission over a Schottky barrier of height EG (Sze and Ng [2],
    section 3.3), the usual SPICE values for a Schottky diode.
    """
    t, t0, e, x, n = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (
        temperature, reference_temperature, activation_energy, xti, emission_coefficient)))
    k_q = BOLTZMANN / ELEMENTARY_CHARGE
    return (t / t0) ** (x / n) * np.exp(e / (n * k_q) * (1.0 / t0 - 1.0 / t))
