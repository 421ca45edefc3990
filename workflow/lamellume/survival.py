"""Do excitons survive? Thermal ionisation (Saha), Mott density, Wannier validity.

Layers (N >= 1) are 2D: areal pair densities and Mott densities in cm^-2.
The bulk crystal is 3D: volume pair densities and Mott densities in cm^-3.
The two never share a function or a column. Energies in eV, temperatures in
K, lengths in Angstrom, masses in m_e. All functions are pure and broadcast
over compounds (and over configured temperatures/densities).
"""

from __future__ import annotations

import numpy as np

from typing import Mapping

from lamellume.units import (
    HBAR2_OVER_2ME_EV_A2,
    PER_CM2_TO_PER_ANGSTROM2,
    PER_CM3_TO_PER_ANGSTROM3,
    thermal_energy_ev,
)

__all__ = [
    "thermal_energy_ev",
    "binding_over_kt",
    "saha_constant_2d_per_cm2",
    "bound_fraction_2d",
    "mott_density_2d_per_cm2",
    "saha_constant_3d_per_cm3",
    "bound_fraction_3d",
    "mott_density_3d_per_cm3",
    "MOTT_3D_CRITERION",
    "is_wannier",
    "survival_columns",
]


def binding_over_kt(eb_ev, temperature_k):
    """Ratio E_b / (k_B T) (dimensionless; +inf at T = 0 for E_b > 0).

    Parameters
    ----------
    eb_ev : array_like
        Exciton binding energy in eV.
    temperature_k : array_like
        Temperature in K.

    Returns
    -------
    numpy.ndarray

    References
    ----------
    k_B from CODATA via :mod:`lamellume.units`.
    """
    with np.errstate(divide="ignore"):
        return np.asarray(eb_ev, dtype=float) / thermal_energy_ev(np.asarray(temperature_k, dtype=float))


def saha_constant_2d_per_cm2(eb_ev, mu_me, temperature_k):
    """Right-hand side of the 2D Saha equation, S = (mu k T / (2 pi hbar^2)) exp(-E_b / kT), cm^-2.

    Law of mass action n_e n_h / n_X = S for non-degenerate (Boltzmann)
    electrons, holes and excitons in 2D, in equilibrium at temperature T.
    Degeneracy assumption: the spin/valley degeneracy of the exciton equals the
    product of electron and hole degeneracies (g_X = g_e g_h, every pair state
    has an exciton partner, bright or dark), so the degeneracy factors cancel;
    only the ground exciton level is counted. The mass factor
    m_e m_h / (m_e + m_h) is the reduced mass mu; for anisotropic bands use
    the density-of-states (geometric-mean) mass, as returned by
    :func:`lamellume.masses.inplane_average_mass_me`.

    Parameters
    ----------
    eb_ev : array_like
        Binding energy in eV.
    mu_me : array_like
        Reduced (density-of-states) mass in m_e.
    temperature_k : array_like
        Temperature in K.

    Returns
    -------
    numpy.ndarray
        S in cm^-2 (0 at T = 0).

    References
    ----------
    M. N. Saha, Phil. Mag. 40, 472 (1920); for 2D electron-hole plasmas e.g.
    H. Haug and S. W. Koch, *Quantum Theory of the Optical and Electronic
    Properties of Semiconductors* (World Scientific), ionisation equilibrium.
    """
    kt = thermal_energy_ev(np.asarray(temperature_k, dtype=float))
    mu = np.asarray(mu_me, dtype=float)
    # mu m_e kT / (2 pi hbar^2) = mu kT / (4 pi hbar^2/(2 m_e)), in Angstrom^-2
    pref = mu * kt / (4.0 * np.pi * HBAR2_OVER_2ME_EV_A2) / PER_CM2_TO_PER_ANGSTROM2
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        return pref * np.exp(-np.asarray(eb_ev, dtype=float) / kt)


def _log_saha_ratio(eb_ev, mu_me, temperature_k, density_per_cm2):
    """log(n / S) computed without forming S (safe for E_b >> kT and T -> 0)."""
    kt = thermal_energy_ev(np.asarray(temperature_k, dtype=float))
    mu = np.asarray(mu_me, dtype=float)
    n = np.asarray(density_per_cm2, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_pref = np.log(mu * kt / (4.0 * np.pi * HBAR2_OVER_2ME_EV_A2) / PER_CM2_TO_PER_ANGSTROM2)
        return np.log(n) - log_pref + np.asarray(eb_ev, dtype=float) / kt


def bound_fraction_2d(eb_ev, mu_me, temperature_k, density_per_cm2):
    """Fraction of electron-hole pairs bound as excitons, from the 2D Saha equation.

    With total pair density n (conserved), n_X = x n and n_e = n_h = (1 - x) n:
    n (1 - x)^2 = S x. With r = n / S and s = sqrt(1 + 4 r), the root in [0, 1] is

        x = 4 r / (1 + s)^2          (r <= 1)
        x = 4 / (e^{-L/2} + sqrt(e^{-L} + 4))^2,  L = ln r   (r > 1),

    both free of cancellation; L is formed in logarithms, so E_b/kT of
    thousands (or T = 0) gives x = 1 without overflow.

    Parameters
    ----------
    eb_ev : array_like
        Exciton binding energy in eV.
    mu_me : array_like
        Reduced (density-of-states) mass in m_e.
    temperature_k : array_like
        Temperature in K (>= 0).
    density_per_cm2 : array_like
        Total electron-hole pair density in cm^-2 (> 0).

    Returns
    -------
    numpy.ndarray
        Bound fraction in [0, 1] (1 at T = 0 for E_b > 0).

    References
    ----------
    Saha ionisation equilibrium, see :func:`saha_constant_2d_per_cm2`.
    """
    return _bound_fraction_from_log_ratio(_log_saha_ratio(eb_ev, mu_me, temperature_k, density_per_cm2))


def _bound_fraction_from_log_ratio(L):
    """Root x in [0, 1] of (1 - x)^2 = x / r, r = e^L = n / S, free of cancellation."""
    with np.errstate(over="ignore", invalid="ignore"):
        r = np.exp(np.minimum(L, 0.0))
        low = 4.0 * r / (1.0 + np.sqrt(1.0 + 4.0 * r)) ** 2
        em = np.exp(-np.maximum(L, 0.0))
        high = 4.0 / (np.sqrt(em) + np.sqrt(em + 4.0)) ** 2
    return np.where(L <= 0.0, low, high)


def mott_density_2d_per_cm2(radius_angstrom, prefactor=1.0):
    """2D Mott density estimate n_Mott = prefactor / (pi a_B^2), in cm^-2.

    Criterion: excitons overlap (and screening/phase-space filling dissolve
    them) when each occupies its own disc of radius a_B, i.e. n pi a_B^2 ~ 1.
    This is an order-of-magnitude estimate (common practice); published
    criteria differ by factors of a few, which ``prefactor`` absorbs. Pass the
    radius of the model actually used (e.g. the 2D 1s decay length of
    :func:`lamellume.hydrogenic.bohr_radius_2d_angstrom`).

    Parameters
    ----------
    radius_angstrom : array_like
        Exciton radius in Angstrom.
    prefactor : float or array_like, optional
        Dimensionless prefactor (default 1).

    Returns
    -------
    numpy.ndarray
        Density in cm^-2.

    References
    ----------
    N. F. Mott, *Metal-Insulator Transitions* (Taylor & Francis, 1974) (the
    overlap criterion); the 2D disc form is common practice.
    """
    a = np.asarray(radius_angstrom, dtype=float)
    per_a2 = np.asarray(prefactor, dtype=float) / (np.pi * a * a)
    return per_a2 / PER_CM2_TO_PER_ANGSTROM2


#: Mott criterion n_M^(1/3) a_B = 0.26 in 3D (a_B the 1s decay length, Bohr radius).
MOTT_3D_CRITERION: float = 0.26


def _log_thermal_density_3d_per_a3(mu_me, kt_ev):
    """log of (mu m_e k T / (2 pi hbar^2))^(3/2) in Angstrom^-3."""
    return 1.5 * np.log(np.asarray(mu_me, dtype=float) * kt_ev / (4.0 * np.pi * HBAR2_OVER_2ME_EV_A2))


def saha_constant_3d_per_cm3(eb_ev, mu_me, temperature_k):
    """Right-hand side of the 3D Saha equation, S = (mu k T / (2 pi hbar^2))^(3/2) exp(-E_b / kT), cm^-3.

    Law of mass action n_e n_h / n_X = S for non-degenerate electrons, holes
    and excitons in a bulk crystal at temperature T. Electron and hole
    densities of states carry (m_e kT/2 pi hbar^2)^(3/2) and (m_h ...)^(3/2),
    the exciton's centre of mass (M kT/2 pi hbar^2)^(3/2), so the ratio has
    (m_e m_h / M)^(3/2) = mu^(3/2). Degeneracies cancel as in
    :func:`saha_constant_2d_per_cm2` (g_X = g_e g_h); only the ground exciton
    level is counted. For anisotropic bands use the density-of-states mass,
    (mu_1 mu_2 mu_3)^(1/3).

    Parameters
    ----------
    eb_ev : array_like
        Bulk exciton binding energy in eV.
    mu_me : array_like
        Reduced density-of-states mass in m_e.
    temperature_k : array_like
        Temperature in K.

    Returns
    -------
    numpy.ndarray
        S in cm^-3 (0 at T = 0).

    References
    ----------
    M. N. Saha, Phil. Mag. 40, 472 (1920); L. D. Landau and E. M. Lifshitz,
    *Statistical Physics, Part 1*, 3rd ed. (Pergamon, 1980), sec. 104
    (ionisation equilibrium); for excitons the atom's electron mass becomes
    the reduced mass (common practice).
    """
    kt = thermal_energy_ev(np.asarray(temperature_k, dtype=float))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        log_pref = _log_thermal_density_3d_per_a3(mu_me, kt)
        return np.exp(log_pref - np.asarray(eb_ev, dtype=float) / kt) / PER_CM3_TO_PER_ANGSTROM3


def bound_fraction_3d(eb_ev, mu_me, temperature_k, density_per_cm3):
    """Fraction of electron-hole pairs bound as excitons in a bulk crystal (3D Saha equation).

    With total pair density n, n_X = x n and n_e = n_h = (1 - x) n, so
    n (1 - x)^2 = S x with S from :func:`saha_constant_3d_per_cm3`; the root
    in [0, 1] is taken as in :func:`bound_fraction_2d` (logarithms, no
    overflow at E_b >> kT).

    Parameters
    ----------
    eb_ev : array_like
        Bulk exciton binding energy in eV.
    mu_me : array_like
        Reduced (density-of-states) mass in m_e.
    temperature_k : array_like
        Temperature in K (>= 0).
    density_per_cm3 : array_like
        Total electron-hole pair density in cm^-3 (> 0).

    Returns
    -------
    numpy.ndarray
        Bound fraction in [0, 1].

    References
    ----------
    Saha ionisation equilibrium, see :func:`saha_constant_3d_per_cm3`.
    """
    kt = thermal_energy_ev(np.asarray(temperature_k, dtype=float))
    n = np.asarray(density_per_cm3, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        L = (np.log(n * PER_CM3_TO_PER_ANGSTROM3) - _log_thermal_density_3d_per_a3(mu_me, kt)
             + np.asarray(eb_ev, dtype=float) / kt)
    return _bound_fraction_from_log_ratio(L)


def mott_density_3d_per_cm3(radius_angstrom, criterion=MOTT_3D_CRITERION):
    """3D Mott density n_M = (criterion / a_B)^3 in cm^-3.

    The Mott criterion n_M^(1/3) a_B ~ 0.26 marks where screening by the
    carriers (and the overlap of neighbouring excitons) removes the bound
    state; a_B is the 1s decay length (effective Bohr radius). It was stated
    for donors in doped semiconductors; for excitons it is an estimate within
    factors of a few (published electron-hole-plasma criteria differ), which
    ``criterion`` absorbs. For an anisotropic exciton pass the geometric mean
    of the decay lengths, (a_par^2 a_perp)^(1/3) (the radius of the sphere of
    the same volume).

    Parameters
    ----------
    radius_angstrom : array_like
        1s decay length (Bohr radius) in Angstrom.
    criterion : float, optional
        n_M^(1/3) a_B (default 0.26).

    Returns
    -------
    numpy.ndarray
        Density in cm^-3.

    References
    ----------
    N. F. Mott, Phil. Mag. 6, 287 (1961); P. P. Edwards and M. J. Sienko,
    Phys. Rev. B 17, 2575 (1978) (n_c^(1/3) a_H* = 0.26 +- 0.05 across many
    systems).
    """
    a = np.asarray(radius_angstrom, dtype=float)
    return (np.asarray(criterion, dtype=float) / a) ** 3 / PER_CM3_TO_PER_ANGSTROM3


def is_wannier(radius_angstrom, lattice_constant_angstrom, threshold=2.0):
    """Whether the effective-mass (Wannier-Mott) picture is self-consistent.

    True where radius > threshold * lattice constant: the envelope must extend
    over several unit cells for continuum effective masses and a macroscopic
    dielectric constant to apply. The default threshold 2 is a choice (common
    practice uses "several" lattice constants); NaN inputs give False.

    Parameters
    ----------
    radius_angstrom : array_like
        Exciton radius in Angstrom (in-plane, for layered compounds).
    lattice_constant_angstrom : array_like
        In-plane lattice constant in Angstrom.
    threshold : float, optional
        Required ratio radius / lattice constant.

    Returns
    -------
    numpy.ndarray of bool

    References
    ----------
    G. H. Wannier, Phys. Rev. 52, 191 (1937); R. S. Knox, *Theory of Excitons*
    (1963), ch. 2 (validity of the effective-mass exciton).
    """
    r = np.asarray(radius_angstrom, dtype=float)
    a = np.asarray(lattice_constant_angstrom, dtype=float)
    with np.errstate(invalid="ignore"):
        return r > threshold * a


#: Names of the columns :func:`survival_columns` returns, in order.
SURVIVAL_COLUMNS = ("temperature_k", "binding_over_kt", "survives_kt", "bound_fraction", "bound_fraction_3d", "wannier_ok")


def survival_columns(binding_ev, mu_inplane_me, radius_angstrom, lattice_angstrom,
                     settings: Mapping, layers) -> dict[str, np.ndarray]:
    """The temperature-dependent columns of the long table, as numpy arrays.

    Layer rows (``layers`` >= 1) get the 2D Saha bound fraction at the areal
    pair density ``pair_density_per_cm2``; bulk rows (``layers`` == 0) the 3D
    Saha bound fraction at the volume pair density ``pair_density_per_cm3``.
    Each lives in its own column (NaN on the other kind of row).

    Parameters
    ----------
    binding_ev, mu_inplane_me, radius_angstrom, lattice_angstrom : array_like
        Per row: exciton binding (eV), reduced mass (m_e; the in-plane average,
        also used as the density-of-states mass of bulk rows), exciton radius
        and in-plane lattice constant (Angstrom).
    settings : the config sections, with ``settings["survival"]``.
    layers : array_like of int
        Layer count per row, 0 for the bulk crystal.

    Returns ``temperature_k`` (K), ``binding_over_kt``, ``survives_kt``
    (E_b > kT), ``bound_fraction`` (2D Saha, layer rows), ``bound_fraction_3d``
    (3D Saha, bulk rows) and ``wannier_ok``.
    """
    surv = settings["survival"]
    t = float(surv["temperature_k"])
    eb = np.asarray(binding_ev, dtype=float)
    mu = np.asarray(mu_inplane_me, dtype=float)
    bulk = np.asarray(layers).astype(int) == 0
    over_kt = binding_over_kt(eb, t)
    ok = np.isfinite(eb) & np.isfinite(mu) & (eb > 0) & (mu > 0)
    frac_2d = np.full(eb.shape, np.nan)
    frac_3d = np.full(eb.shape, np.nan)
    sel = ok & ~bulk
    if sel.any():
        frac_2d[sel] = bound_fraction_2d(eb[sel], mu[sel], t, float(surv["pair_density_per_cm2"]))
    sel = ok & bulk
    if sel.any():
        frac_3d[sel] = bound_fraction_3d(eb[sel], mu[sel], t, float(surv["pair_density_per_cm3"]))
    return {
        "temperature_k": np.full(eb.shape, t),
        "binding_over_kt": over_kt,
        "survives_kt": over_kt > 1.0,
        "bound_fraction": frac_2d,
        "bound_fraction_3d": frac_3d,
        "wannier_ok": is_wannier(np.asarray(radius_angstrom, dtype=float),
                                          np.asarray(lattice_angstrom, dtype=float), float(surv["wannier_ratio"])),
    }

