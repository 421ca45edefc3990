"""Radiative-rate proxy of the lowest bright exciton: a brightness estimate, not a measurement.

Each step is a named published formula, vectorised over compounds:

1. Interband momentum matrix element from two-band k.p (Kane): in a two-band
   model with free-electron terms, m_e/m_c = 1 + E_P/E_g and m_e/m_v = E_P/E_g - 1,
   so the reduced mass fixes the Kane energy, E_P = 2 |p_cv|^2 / m_e = E_g / (2 mu).
2. Exciton wavefunction at the origin: 2D hydrogenic 1s, |phi(0)|^2 = 2 / (pi a^2)
   with a the 1s decay length (the Keldysh solver's radius may be passed as a).
3. Intrinsic radiative rate of a 2D exciton at zero in-plane momentum
   (Andreani et al., Solid State Commun. 77, 641 (1991)): a sheet of oscillators with
   oscillator strength per area f/S = (E_P / E_X) |phi(0)|^2 radiates its energy at
   Gamma_0 = e^2 (f/S) / (2 eps0 n c m_e) into surroundings of refractive index n.
4. Thermal average over a Boltzmann gas of excitons of mass M = m_c + m_v, only the
   light cone Q < n E_X / (hbar c) radiating (Andreani 1991; the form used by Palummo
   et al., Nano Lett. 15, 2794 (2015) and reviewed by Wang et al., Rev. Mod. Phys. 90,
   021001 (2018)): <Gamma> = (4/3) Gamma_0 E_c / (k_B T), E_c = (n E_X)^2 / (2 M c^2),
   valid for k_B T >> E_c (E_c is a few micro-eV: T above ~1 K).

Assumptions (stated on the page): in-plane dipole, one spin/valley channel, strict-2D
1s envelope, symmetric surroundings of index n = sqrt(eps), no non-radiative decay,
no strain, defects or charged excitons; the result is then multiplied by the thermal
bright fraction from :mod:`lamellume.excitons`. Units: eV, Angstrom, m_e, kelvin;
rates in 1/s.
"""

import numpy as np

from lamellume.units import (BOLTZMANN_EV_PER_K, ELECTRON_REST_ENERGY_EV,
                              PER_ANGSTROM2_TO_PER_M2, SHEET_RADIATIVE_RATE_M2_PER_S)


def kane_energy_ev(gap_ev, reduced_mass_me):
    """Kane energy E_P = 2 |p_cv|^2 / m_e from the two-band k.p relation, in eV.

    Parameters
    ----------
    gap_ev : array_like
        Direct band gap at the pair's valley, eV.
    reduced_mass_me : array_like
        Electron-hole reduced mass mu = m_c m_v / (m_c + m_v), in m_e.

    Returns
    -------
    numpy.ndarray
        E_P = E_g / (2 mu) in eV.

    References
    ----------
    Kane, J. Phys. Chem. Solids 1, 249 (1957): two-band k.p, m_e/m_c = 1 + E_P/E_g,
    m_e/m_v = E_P/E_g - 1; summing gives m_e/mu = 2 E_P / E_g.
    """
    return np.asarray(gap_ev, dtype=float) / (2.0 * np.asarray(reduced_mass_me, dtype=float))


def origin_density_2d_per_angstrom2(radius_angstrom):
    """|phi(0)|^2 of the strict-2D 1s exciton, 2 / (pi a^2), in 1/Angstrom^2.

    Parameters
    ----------
    radius_angstrom : array_like
        1s decay length a (phi ~ exp(-r/a)), Angstrom.

    References
    ----------
    Yang et al., Phys. Rev. A 43, 1186 (1991) (2D hydrogen ground state).
    """
    a = np.asarray(radius_angstrom, dtype=float)
    return 2.0 / (np.pi * a**2)


def decay_length_from_rms_angstrom(rms_radius_angstrom):
    """1s decay length a of phi ~ exp(-r/a) with the given rms radius, Angstrom.

    For the strict-2D 1s envelope <r^2> = 3 a^2 / 2, so a = r_rms sqrt(2/3).
    Used to turn the Rytova-Keldysh rms radius (:func:`lamellume.keldysh.keldysh_radius_angstrom`)
    into the decay length of :func:`origin_density_2d_per_angstrom2`; the screened
    wavefunction is not exactly hydrogenic, so |phi(0)|^2 is then an estimate.

    References
    ----------
    Yang et al., Phys. Rev. A 43, 1186 (1991) (2D hydrogen ground state).
    """
    return np.asarray(rms_radius_angstrom, dtype=float) * np.sqrt(2.0 / 3.0)


def intrinsic_rate_per_s(kane_ev, exciton_ev, origin_density_per_angstrom2, refractive_index=1.0):
    """Radiative rate Gamma_0 (population, 1/s) of a 2D exciton at zero in-plane momentum.

    Gamma_0 = e^2 / (2 eps0 n c m_e) * f/S with f/S = (E_P / E_X) |phi(0)|^2.

    Parameters
    ----------
    kane_ev : array_like
        Kane energy E_P, eV.
    exciton_ev : array_like
        Exciton energy E_X (the photon energy), eV.
    origin_density_per_angstrom2 : array_like
        |phi(0)|^2, 1/Angstrom^2.
    refractive_index : array_like
        Refractive index n of the (symmetric) surroundings.

    References
    ----------
    Andreani, Tassone, Bassani, Solid State Commun. 77, 641 (1991).
    """
    f_per_m2 = (np.asarray(kane_ev, dtype=float) / np.asarray(exciton_ev, dtype=float)
                * np.asarray(origin_density_per_angstrom2, dtype=float) * PER_ANGSTROM2_TO_PER_M2)
    return SHEET_RADIATIVE_RATE_M2_PER_S * f_per_m2 / np.asarray(refractive_index, dtype=float)


def light_cone_energy_ev(exciton_ev, exciton_mass_me, refractive_index=1.0):
    """Kinetic energy E_c = (n E_X)^2 / (2 M c^2) of an exciton at the light-cone edge, eV.

    Parameters
    ----------
    exciton_ev : array_like
        Exciton energy, eV.
    exciton_mass_me : array_like
        Translational mass M = m_c + m_v, m_e.
    refractive_index : array_like
        Refractive index of the surroundings.
    """
    e = np.asarray(refractive_index, dtype=float) * np.asarray(exciton_ev, dtype=float)
    return e**2 / (2.0 * np.asarray(exciton_mass_me, dtype=float) * ELECTRON_REST_ENERGY_EV)


def thermal_rate_per_s(intrinsic_per_s, exciton_ev, exciton_mass_me, temperature_k,
                       refractive_index=1.0):
    """Thermally averaged radiative rate <Gamma> = (4/3) Gamma_0 E_c / (k_B T), 1/s.

    Boltzmann gas of excitons, in-plane dipoles averaged over the transverse
    (Gamma_0 k/k_z) and longitudinal (Gamma_0 k_z/k) branches inside the light
    cone; valid for k_B T >> E_c.

    References
    ----------
    Andreani et al., Solid State Commun. 77, 641 (1991); Palummo, Bernardi, Grossman,
    Nano Lett. 15, 2794 (2015), <tau> = (3/4) tau_0 k_B T / E_c (from memory);
    Wang et al., Rev. Mod. Phys. 90, 021001 (2018).
    """
    e_c = light_cone_energy_ev(exciton_ev, exciton_mass_me, refractive_index)
    kt = BOLTZMANN_EV_PER_K * np.asarray(temperature_k, dtype=float)
    return (4.0 / 3.0) * np.asarray(intrinsic_per_s, dtype=float) * e_c / kt


def emitted_rate_per_s(intrinsic_per_s, exciton_ev, exciton_mass_me, temperature_k, bright_fraction,
                       refractive_index=1.0):
    """Thermal radiative rate and brightness proxy at the operating temperature, 1/s.

    The temperature stage of the proxy, used alike by the nominal screen
    (:func:`lamellume.ranking.add_survival`) and the Monte Carlo: the
    thermally averaged rate :func:`thermal_rate_per_s` of the lowest bright
    exciton, and that rate times the thermal bright fraction (the share of
    excitons in the bright state).

    Returns
    -------
    tuple of numpy.ndarray
        (<Gamma> in 1/s, <Gamma> x bright fraction in 1/s).
    """
    thermal = thermal_rate_per_s(intrinsic_per_s, exciton_ev, exciton_mass_me, temperature_k, refractive_index)
    return thermal, thermal * np.asarray(bright_fraction, dtype=float)


def brightness_proxy_per_s(gap_ev, exciton_ev, reduced_mass_me, exciton_mass_me,
                           radius_angstrom, temperature_k, bright_fraction,
                           refractive_index=1.0):
    """Brightness proxy: thermal radiative rate times the thermal bright fraction, 1/s.

    Chains :func:`kane_energy_ev`, :func:`origin_density_2d_per_angstrom2`,
    :func:`intrinsic_rate_per_s` and :func:`thermal_rate_per_s`. A model estimate
    for ranking (a tie-breaker), not a measured emission rate.

    Returns
    -------
    tuple of numpy.ndarray
        (intrinsic rate Gamma_0 in 1/s, thermal rate <Gamma> * bright fraction in 1/s).
    """
    gamma0 = intrinsic_rate_per_s(kane_energy_ev(gap_ev, reduced_mass_me), exciton_ev,
                                  origin_density_2d_per_angstrom2(radius_angstrom),
                                  refractive_index)
    thermal = thermal_rate_per_s(gamma0, exciton_ev, exciton_mass_me, temperature_k,
                                 refractive_index)
    return gamma0, thermal * np.asarray(bright_fraction, dtype=float)
