"""Brightness proxy: each formula against an independent solver, a published limit or form."""

import numpy as np
import pytest
from scipy import integrate

from lamellume import brightness as br


@pytest.mark.parametrize("gap, p2", [(1.5, 20.0), (2.4, 3.2), (0.5, 10.0)])
def test_kane_energy_recovers_two_band_kp(gap, p2):
    # Independent solver: numpy diagonalisation of the two-band k.p Hamiltonian
    # H = [[Eg + k^2, P k], [P k, k^2]] in units hbar^2/(2 m_e) = 1, so E_P = P^2 (Kane 1957).
    k = 1e-4
    p = np.sqrt(p2)

    def bands(kk):
        return np.linalg.eigvalsh(np.array([[gap + kk**2, p * kk], [p * kk, kk**2]]))

    lo0, hi0 = bands(0.0)
    lo, hi = bands(k)
    inv_mc = (hi - hi0) / k**2           # m_e / m_c
    inv_mv = -(lo - lo0) / k**2          # m_e / m_v (hole mass, positive)
    mu = 1.0 / (inv_mc + inv_mv)
    np.testing.assert_allclose(br.kane_energy_ev(gap, mu), p2, rtol=1e-5)


def test_kane_energy_massive_dirac_mos2():
    # Massive Dirac model of MoS2 (Xiao et al., PRL 108, 196802 (2012); a t = 3.51 eV A,
    # Delta = 1.66 eV, from memory): m_c = m_v = Delta hbar^2 / (2 (a t)^2), and
    # E_P = 2 m_e (a t)^2 / hbar^2 = (a t)^2 / (hbar^2 / 2 m_e).
    from lamellume.units import HBAR2_OVER_2ME_EV_A2
    at, delta = 3.51, 1.66
    m = delta * HBAR2_OVER_2ME_EV_A2 / at**2
    np.testing.assert_allclose(br.kane_energy_ev(delta, m / 2.0), at**2 / HBAR2_OVER_2ME_EV_A2,
                               rtol=1e-12)


@pytest.mark.parametrize("a", [5.0, 10.0, 30.0])
def test_origin_density_normalises_1s(a):
    # Independent: scipy quad normalisation of phi = exp(-r/a) over the plane.
    norm, _ = integrate.quad(lambda r: 2 * np.pi * r * np.exp(-2 * r / a), 0, np.inf)
    np.testing.assert_allclose(br.origin_density_2d_per_angstrom2(a), 1.0 / norm, rtol=1e-10)


def test_intrinsic_rate_gaussian_units_form():
    # Andreani et al. (1991) in Gaussian units: Gamma_0 = 2 pi e^2 / (n m c) * f/S
    # (rate = 2 x half-width). Gaussian constants, common practice (CODATA 2018 cgs values):
    e_statc, m_g, c_cm = 4.80320471e-10, 9.1093837015e-28, 2.99792458e10
    kane, ex, a, n = 3.2, 1.9, 10.0, 1.5
    f_per_cm2 = kane / ex * 2.0 / (np.pi * (a * 1e-8) ** 2)
    expected = 2 * np.pi * e_statc**2 / (n * m_g * c_cm) * f_per_cm2
    got = br.intrinsic_rate_per_s(kane, ex, br.origin_density_2d_per_angstrom2(a), n)
    np.testing.assert_allclose(got, expected, rtol=1e-6)


def test_intrinsic_lifetime_mos2_worked_example():
    # Monolayer TMD intrinsic radiative lifetime ~0.2 ps (Robert et al., PRB 93, 205423
    # (2016); Wang et al., RMP 90, 021001 (2018); from memory): accept 0.1-0.5 ps for
    # E_P = 3.2 eV, E_X = 1.9 eV, a = 10 A, freestanding.
    rate = br.intrinsic_rate_per_s(3.2, 1.9, br.origin_density_2d_per_angstrom2(10.0), 1.0)
    assert 0.1e-12 < 1.0 / rate < 0.5e-12


def test_thermal_average_matches_boltzmann_integral():
    # Independent: scipy quad of the Boltzmann average of Gamma_T = G0 q0/kz and
    # Gamma_L = G0 kz/q0 over the light-cone disk (Andreani 1991), in units q0 = 1.
    g0, ex, mass, n = 1.0, 1.8, 1.0, 1.0
    ec = br.light_cone_energy_ev(ex, mass, n)
    for t in (4.0, 77.0, 300.0):
        b = ec / (br.BOLTZMANN_EV_PER_K * t)          # E(Q) / kT = b Q^2
        num_t, _ = integrate.quad(lambda q: q / np.sqrt(1 - q * q) * np.exp(-b * q * q), 0, 1)
        num_l, _ = integrate.quad(lambda q: q * np.sqrt(1 - q * q) * np.exp(-b * q * q), 0, 1)
        den = 1.0 / (2.0 * b)                          # int_0^inf q exp(-b q^2) dq
        exact = g0 * 0.5 * (num_t + num_l) / den
        np.testing.assert_allclose(br.thermal_rate_per_s(g0, ex, mass, t, n), exact, rtol=1e-2)


def test_thermal_lifetime_palummo_form():
    # Palummo et al., Nano Lett. 15, 2794 (2015) (from memory):
    # <tau> = tau_0 (3/4) (2 M c^2 / E_X^2) k_B T for freestanding layers.
    mc2_ev = 0.51099895e6  # m_e c^2, CODATA (common practice)
    tau0, ex, mass, t = 0.2e-12, 1.9, 1.0, 300.0
    expected_tau = tau0 * 0.75 * 2 * mass * mc2_ev / ex**2 * 8.617333262e-5 * t
    np.testing.assert_allclose(1.0 / br.thermal_rate_per_s(1 / tau0, ex, mass, t), expected_tau,
                               rtol=1e-6)


def test_proxy_scaling_with_radius_gap_and_index():
    # Analytic scaling of the chain: Gamma_0 ~ E_g / (mu E_X a^2 n);
    # <Gamma> ~ E_g E_X n / (mu M a^2 T); linear in the bright fraction.
    base = dict(gap_ev=2.0, exciton_ev=1.7, reduced_mass_me=0.25, exciton_mass_me=1.0,
                radius_angstrom=12.0, temperature_k=300.0, bright_fraction=0.8,
                refractive_index=1.0)
    g0, gt = br.brightness_proxy_per_s(**base)
    for key, factor, p0, pt in [("radius_angstrom", 2.0, -2, -2), ("gap_ev", 1.5, 1, 1),
                                ("reduced_mass_me", 2.0, -1, -1), ("exciton_ev", 1.2, -1, 1),
                                ("temperature_k", 0.5, 0, -1), ("refractive_index", 2.0, -1, 1),
                                ("bright_fraction", 0.5, 0, 1), ("exciton_mass_me", 3.0, 0, -1)]:
        g0x, gtx = br.brightness_proxy_per_s(**{**base, key: base[key] * factor})
        np.testing.assert_allclose(g0x / g0, factor**p0, rtol=1e-12, err_msg=key)
        np.testing.assert_allclose(gtx / gt, factor**pt, rtol=1e-12, err_msg=key)


def test_proxy_vectorised_over_compounds():
    g0, gt = br.brightness_proxy_per_s(np.array([2.0, 2.0]), 1.7, 0.25, 1.0,
                                       np.array([10.0, 20.0]), 300.0, 1.0)
    assert g0.shape == gt.shape == (2,)
    np.testing.assert_allclose(g0[0] / g0[1], 4.0, rtol=1e-12)  # 1/a^2


@pytest.mark.parametrize("a", [4.0, 12.0, 40.0])
def test_decay_length_from_rms_radius(a):
    # Independent: scipy quad of <r^2> over |phi|^2 = exp(-2 r / a) in the plane (2D 1s envelope).
    num, _ = integrate.quad(lambda r: r**3 * np.exp(-2 * r / a), 0, np.inf)
    den, _ = integrate.quad(lambda r: r * np.exp(-2 * r / a), 0, np.inf)
    np.testing.assert_allclose(br.decay_length_from_rms_angstrom(np.sqrt(num / den)), a, rtol=1e-10)


def test_emitted_rate_is_the_thermal_rate_times_the_bright_fraction():
    # Analytic: <Gamma> = (4/3) Gamma_0 (n E_X)^2 / (2 M c^2 k_B T) (Andreani et al. 1991), scipy.constants.
    from scipy import constants as sc
    g0, ex, mass, t, n, f = 3.0e12, 1.8, 1.2, 300.0, 2.1, 0.7
    ec_j = (n * ex * sc.e) ** 2 / (2 * mass * sc.m_e * sc.c**2)
    want = 4.0 / 3.0 * g0 * ec_j / (sc.k * t)
    thermal, proxy = br.emitted_rate_per_s(g0, ex, mass, t, f, n)
    np.testing.assert_allclose(thermal, want, rtol=1e-9)
    np.testing.assert_allclose(proxy, f * want, rtol=1e-9)
