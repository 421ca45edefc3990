"""Tests for lamellume.survival: thermal energy, 2D and 3D Saha bound fractions, Mott densities, validity."""

import numpy as np
import pytest
from scipy.optimize import brentq

from lamellume.survival import (
    MOTT_3D_CRITERION,
    binding_over_kt,
    bound_fraction_2d,
    bound_fraction_3d,
    mott_density_3d_per_cm3,
    saha_constant_3d_per_cm3,
    is_wannier,
    mott_density_2d_per_cm2,
    saha_constant_2d_per_cm2,
    thermal_energy_ev,
)


def test_thermal_energy_at_room_temperature():
    # Common practice: kT(300 K) = 25.85 meV.
    np.testing.assert_allclose(thermal_energy_ev(300.0), 0.025852, rtol=1e-4)
    np.testing.assert_allclose(binding_over_kt(0.5, 300.0), 0.5 / 0.025852, rtol=1e-4)
    assert binding_over_kt(0.1, 0.0) == np.inf


def test_saha_prefactor_magnitude():
    # Computed directly in SI with scipy.constants (independent of the eV/Angstrom path):
    # m_e k_B (300 K) / (2 pi hbar^2) = 5.40e16 m^-2 = 5.40e12 cm^-2.
    from scipy import constants as c

    si = c.m_e * c.k * 300.0 / (2 * np.pi * c.hbar**2) * 1e-4
    np.testing.assert_allclose(saha_constant_2d_per_cm2(0.0, 1.0, 300.0), si, rtol=1e-12)
    np.testing.assert_allclose(si, 5.40e12, rtol=1e-3)
    # exp(-E_b/kT) factor and linearity in mu.
    np.testing.assert_allclose(
        saha_constant_2d_per_cm2(0.1, 0.5, 300.0), 0.5 * si * np.exp(-0.1 / thermal_energy_ev(300.0)), rtol=1e-12
    )


def _brute_force(eb, mu, t, n):
    s = saha_constant_2d_per_cm2(eb, mu, t)
    return brentq(lambda x: n * (1 - x) ** 2 - s * x, 0.0, 1.0, xtol=1e-300, rtol=1e-15)


@pytest.mark.parametrize(
    "eb, mu, t, n",
    [
        # Grid spanning mostly ionised to mostly bound (checked against brentq).
        (0.02, 0.2, 300.0, 1e10),
        (0.1, 0.2, 300.0, 1e12),
        (0.3, 0.25, 300.0, 1e11),
        (0.5, 0.3, 77.0, 1e9),
        (0.005, 0.1, 4.0, 1e10),
        (0.2, 0.5, 600.0, 1e13),
    ],
)
def test_bound_fraction_matches_root_find(eb, mu, t, n):
    np.testing.assert_allclose(bound_fraction_2d(eb, mu, t, n), _brute_force(eb, mu, t, n), rtol=1e-10)


def test_bound_fraction_limits():
    # T -> 0: everything bound (E_b/kT -> inf, no overflow); E_b -> 0 at low density:
    # small bound fraction, x ~ n/S.
    x = bound_fraction_2d(np.array([0.3, 0.3, 0.3]), 0.2, np.array([0.0, 1e-3, 1.0]), 1e10)
    np.testing.assert_array_equal(x, 1.0)
    s = saha_constant_2d_per_cm2(0.0, 0.2, 300.0)
    small = bound_fraction_2d(0.0, 0.2, 300.0, 1e6)
    assert small < 1e-6
    r = 1e6 / s  # series of x = 4r/(1+sqrt(1+4r))^2 = r - 2 r^2 + O(r^3)
    np.testing.assert_allclose(small, r - 2 * r**2, rtol=1e-10)


def test_bound_fraction_monotonic_and_vectorized():
    # More binding or more density -> more bound; higher T -> less bound. Shape broadcasting
    # over compounds (rows) and configured temperatures (columns).
    eb = np.array([0.05, 0.2, 0.5])[:, None]
    t = np.array([77.0, 300.0, 500.0])[None, :]
    x = bound_fraction_2d(eb, 0.25, t, 1e11)
    assert x.shape == (3, 3)
    assert np.all(np.diff(x, axis=0) > 0)
    assert np.all(np.diff(x, axis=1) < 0)
    assert np.all((x >= 0) & (x <= 1))


def test_mott_density():
    # Criterion n pi a^2 = 1: a = 10 Angstrom -> 1/(pi 1e-14 cm^2) = 3.183e13 cm^-2.
    np.testing.assert_allclose(mott_density_2d_per_cm2(10.0), 1 / (np.pi * 1e-14), rtol=1e-12)
    np.testing.assert_allclose(mott_density_2d_per_cm2(20.0, prefactor=0.5), 0.125 / (np.pi * 1e-14), rtol=1e-12)


def test_wannier_flag():
    # radius > threshold * lattice constant; NaN -> False.
    flag = is_wannier(np.array([5.0, 7.0, 30.0, np.nan]), 3.2, threshold=2.0)
    np.testing.assert_array_equal(flag, [False, True, True, False])


# --------------------------------------------------------------------------- 3D (bulk)

# CODATA 2018 values typed here (Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)), SI units,
# so the 3D checks do not go through lamellume.units.
_HBAR = 1.054571817e-34  # J s
_ME = 9.1093837015e-31  # kg
_KB = 1.380649e-23  # J/K (exact, 2019 SI)
_EV = 1.602176634e-19  # J (exact, 2019 SI)


def _saha_3d_si_per_cm3(eb_ev, mu, t):
    """Saha right-hand side in cm^-3 from the textbook form (Landau & Lifshitz, Statistical Physics
    Part 1, sec. 104, ionisation equilibrium, with the electron mass replaced by the exciton reduced
    mass; from memory): n_e n_h / n_X = (mu kT / (2 pi hbar^2))^(3/2) exp(-E_b / kT)."""
    kt = _KB * t
    return (mu * _ME * kt / (2.0 * np.pi * _HBAR**2)) ** 1.5 * np.exp(-eb_ev * _EV / kt) * 1e-6


def test_saha_3d_prefactor_is_half_the_effective_density_of_states():
    # Sze, Physics of Semiconductor Devices (Wiley), common practice: N_c = 2 (m kT/2 pi hbar^2)^(3/2)
    # = 2.51e19 cm^-3 for m = m_e at 300 K (from memory); the Saha prefactor has no spin factor 2.
    np.testing.assert_allclose(saha_constant_3d_per_cm3(0.0, 1.0, 300.0), _saha_3d_si_per_cm3(0.0, 1.0, 300.0),
                               rtol=1e-8)
    np.testing.assert_allclose(2.0 * saha_constant_3d_per_cm3(0.0, 1.0, 300.0), 2.51e19, rtol=2e-3)
    # mu^(3/2) and T^(3/2) scaling.
    np.testing.assert_allclose(saha_constant_3d_per_cm3(0.0, 0.25, 300.0),
                               0.125 * saha_constant_3d_per_cm3(0.0, 1.0, 300.0), rtol=1e-12)
    np.testing.assert_allclose(saha_constant_3d_per_cm3(0.0, 1.0, 1200.0),
                               8.0 * saha_constant_3d_per_cm3(0.0, 1.0, 300.0), rtol=1e-12)


@pytest.mark.parametrize(
    "eb, mu, t, n",
    [
        (0.0042, 0.058, 4.0, 1e15),  # GaAs-like exciton (E_b 4.2 meV, mu 0.058; from memory), cold
        (0.0042, 0.058, 77.0, 1e15),  # same at 77 K: mostly ionised
        (0.06, 0.2, 300.0, 1e16),  # ZnO-like binding 60 meV (from memory) at room temperature
        (0.06, 0.2, 300.0, 1e19),  # high density: mass action favours binding
        (0.3, 0.5, 300.0, 1e12),  # strongly bound, dilute
        (0.01, 0.1, 300.0, 1e10),  # weakly bound, very dilute
    ],
)
def test_bound_fraction_3d_matches_brentq(eb, mu, t, n):
    # Independent solution of n (1 - x)^2 = S x with S from the textbook form in SI.
    s = _saha_3d_si_per_cm3(eb, mu, t)
    x = brentq(lambda x: n * (1 - x) ** 2 - s * x, 0.0, 1.0, xtol=1e-300, rtol=1e-15)
    np.testing.assert_allclose(bound_fraction_3d(eb, mu, t, n), x, rtol=1e-7)


def test_bound_fraction_3d_limits():
    # T -> 0 with E_b > 0: all bound; E_b >> kT at huge ratio: no overflow; monotonic in density and T.
    assert bound_fraction_3d(0.01, 0.1, 0.0, 1e15) == 1.0
    assert bound_fraction_3d(5.0, 0.1, 1.0, 1e15) == 1.0
    n = np.logspace(10, 20, 11)
    x = bound_fraction_3d(0.02, 0.2, 300.0, n)
    assert np.all(np.diff(x) > 0)
    t = np.linspace(20.0, 600.0, 30)
    assert np.all(np.diff(bound_fraction_3d(0.02, 0.2, t, 1e16)) < 0)
    assert np.all((x >= 0) & (x <= 1))


def test_mott_3d_criterion_and_units():
    # Edwards and Sienko, Phys. Rev. B 17, 2575 (1978): n_c^(1/3) a_H* = 0.26 (from memory).
    assert MOTT_3D_CRITERION == 0.26
    # Hand computation: a = 120 Angstrom = 1.2e-6 cm -> (0.26 / 1.2e-6)^3 = 1.0171e16 cm^-3.
    np.testing.assert_allclose(mott_density_3d_per_cm3(120.0), (0.26 / 1.2e-6) ** 3, rtol=1e-12)
    np.testing.assert_allclose(mott_density_3d_per_cm3(120.0), 1.0171e16, rtol=1e-4)
    # n a^3 is the criterion cubed, at any radius.
    a = np.array([5.0, 30.0, 300.0])
    np.testing.assert_allclose(mott_density_3d_per_cm3(a) * (a * 1e-8) ** 3, 0.26**3, rtol=1e-12)
    np.testing.assert_allclose(mott_density_3d_per_cm3(a, criterion=0.25) * (a * 1e-8) ** 3, 0.25**3, rtol=1e-12)


def test_survival_columns_keep_2d_and_3d_apart():
    # Layer rows: 2D Saha at the areal density; bulk rows (layers 0): 3D Saha at the volume density,
    # each in its own column, NaN on the other kind of row (no column mixes cm^-2 and cm^-3 inputs).
    from lamellume.survival import survival_columns

    settings = {"survival": {"temperature_k": 300.0, "pair_density_per_cm2": 1e12, "pair_density_per_cm3": 1e17,
                             "wannier_ratio": 2.0}}
    eb, mu = np.array([0.3, 0.3, 0.05]), np.array([0.25, 0.25, 0.25])
    cols = survival_columns(eb, mu, np.array([10.0, 10.0, 20.0]), np.array([3.2, 3.2, 3.2]), settings,
                            np.array([1, 2, 0]))
    np.testing.assert_allclose(cols["bound_fraction"][:2], bound_fraction_2d(0.3, 0.25, 300.0, 1e12), rtol=1e-14)
    assert np.isnan(cols["bound_fraction"][2])
    assert np.all(np.isnan(cols["bound_fraction_3d"][:2]))
    s = _saha_3d_si_per_cm3(0.05, 0.25, 300.0)
    x = brentq(lambda x: 1e17 * (1 - x) ** 2 - s * x, 0.0, 1.0, xtol=1e-300, rtol=1e-15)
    np.testing.assert_allclose(cols["bound_fraction_3d"][2], x, rtol=1e-7)


@pytest.mark.parametrize("density, percent", [(1e12, 77), (1e10, 12)])
def test_three_kt_bound_fractions_quoted_in_the_config_docs(density, percent):
    # The reason given for ranking.min_binding_over_kt (schema and config/README.md): a binding of 3 kT
    # keeps about 77 % of pairs bound at 1e12 cm^-2 and 300 K (reduced mass 0.25 m_e) but about 12 % at
    # 1e10 cm^-2. Independent: the 2D Saha law n (1 - x)^2 = S x solved in SI with scipy.constants and
    # brentq (Saha balance; S = mu m_e kT / (2 pi hbar^2) exp(-E_b / kT)).
    from scipy import constants as c

    kt_j = c.k * 300.0
    s = 0.25 * c.m_e * kt_j / (2 * np.pi * c.hbar**2) * np.exp(-3.0) * 1e-4
    x = brentq(lambda v: density * (1 - v) ** 2 - s * v, 0.0, 1.0, xtol=1e-15)
    assert round(100 * x) == percent
    np.testing.assert_allclose(bound_fraction_2d(3 * kt_j / c.e, 0.25, 300.0, density), x, rtol=1e-6)
