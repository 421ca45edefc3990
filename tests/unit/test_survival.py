"""Tests for flakelight.survival: thermal energy, 2D Saha bound fraction, Mott density, validity."""

import numpy as np
import pytest
from scipy.optimize import brentq

from flakelight.survival import (
    binding_over_kt,
    bound_fraction_2d,
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
