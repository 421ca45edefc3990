"""Tests for lamellume.hydrogenic: 3D, anisotropic 3D, 2D and fractional-dimension excitons."""

import numpy as np
import pytest
from sympy.physics.hydrogen import E_nl

from lamellume.hydrogenic import (
    anisotropy_parameter,
    binding_2d_anisotropic,
    binding_2d_ev,
    binding_3d_anisotropic,
    binding_3d_ev,
    binding_fractional_ev,
    bohr_radius_2d_angstrom,
    bohr_radius_3d_angstrom,
    bohr_radius_fractional_angstrom,
    bulk_exciton,
)
from lamellume.units import BOHR_RADIUS_ANGSTROM, HARTREE_EV, RYDBERG_EV


@pytest.mark.parametrize("n", [1, 2, 3, 5])
@pytest.mark.parametrize("mu, eps", [(1.0, 1.0), (0.2, 5.0), (0.058, 12.9), (1.3, 2.4)])
def test_3d_levels_match_sympy_hydrogen(n, mu, eps):
    # Computed with sympy: E_nl(n, Z=1) = -1/(2 n^2) Hartree; the exciton scales it by mu/eps^2.
    expected = -float(E_nl(n, 1)) * HARTREE_EV * mu / eps**2
    np.testing.assert_allclose(binding_3d_ev(mu, eps, n), expected, rtol=1e-9)


def test_hydrogen_atom_limit():
    # mu = 1, eps = 1: binding = Ry and radius = a0 (CODATA values via lamellume.units).
    np.testing.assert_allclose(binding_3d_ev(1.0, 1.0), RYDBERG_EV, rtol=1e-15)
    np.testing.assert_allclose(bohr_radius_3d_angstrom(1.0, 1.0), BOHR_RADIUS_ANGSTROM, rtol=1e-15)
    np.testing.assert_allclose(RYDBERG_EV, 13.605693, rtol=1e-7)  # CODATA 2018, from memory


def test_scaling_laws():
    # E_b proportional to mu/eps^2, radius to eps/mu (Wannier 1937), in 3D and 2D.
    mu, eps = np.array([0.1, 0.3]), np.array([3.0, 8.0])
    for f in (binding_3d_ev, binding_2d_ev):
        np.testing.assert_allclose(f(2 * mu, eps), 2 * f(mu, eps), rtol=1e-15)
        np.testing.assert_allclose(f(mu, 2 * eps), f(mu, eps) / 4, rtol=1e-15)
    for f in (bohr_radius_3d_angstrom, bohr_radius_2d_angstrom):
        np.testing.assert_allclose(f(2 * mu, eps), f(mu, eps) / 2, rtol=1e-15)
        np.testing.assert_allclose(f(mu, 3 * eps), 3 * f(mu, eps), rtol=1e-15)


def test_handbook_bulk_exciton_cu2o_rydberg():
    # Cu2O yellow series: the n >= 2 levels follow E_g - Ry*/n^2 with Ry* = 92 meV
    # (T. Kazimierczuk et al., Nature 514, 343 (2014); from memory). Inputs: cyclotron masses
    # m_e = 0.99, m_h = 0.58 (J. W. Hodby et al., J. Phys. C 9, 1429 (1976); from memory) and the
    # static dielectric constant 7.5 (from memory). The hydrogenic model gives 88.5 meV.
    # Tolerance 5 %: the excited states are hydrogenic (central-cell corrections act on 1s only,
    # which is why the 1s is not compared), the masses are known to a few per cent (mu to ~3 %)
    # and eps_0 to ~2 % (so Ry* to ~4 %); wrong scalings (eps instead of eps^2, m instead of mu)
    # would be off by a factor of two or more.
    mu = 0.99 * 0.58 / (0.99 + 0.58)
    np.testing.assert_allclose(binding_3d_ev(mu, 7.5), 0.092, rtol=0.05)
    # Effective Bohr radius about 1.1 nm (Kazimierczuk et al.; from memory), within the same 5 %.
    np.testing.assert_allclose(bohr_radius_3d_angstrom(mu, 7.5), 11.1, rtol=0.05)


def test_2d_over_3d_ground_state_is_four():
    # Common practice / Yang et al. 1991: strict-2D 1s binding = 4 Ry*, radius a*/2.
    mu, eps = np.array([0.1, 0.5]), np.array([2.0, 10.0])
    np.testing.assert_allclose(binding_2d_ev(mu, eps) / binding_3d_ev(mu, eps), 4.0, rtol=1e-15)
    np.testing.assert_allclose(bohr_radius_2d_angstrom(mu, eps) / bohr_radius_3d_angstrom(mu, eps), 0.5)


@pytest.mark.parametrize("n, ratio", [(1, 1.0), (2, 1 / 9), (3, 1 / 25), (4, 1 / 49)])
def test_2d_series(n, ratio):
    # Yang et al., Phys. Rev. A 43, 1186 (1991): E_n = Ry*/(n - 1/2)^2 -> E_n/E_1 = 1/(2n-1)^2.
    np.testing.assert_allclose(binding_2d_ev(0.3, 4.0, n) / binding_2d_ev(0.3, 4.0, 1), ratio, rtol=1e-14)


# --------------------------------------------------------------------------- anisotropic 3D


def test_anisotropic_isotropic_limit_is_exact():
    # Kohn-Luttinger trial function contains the exact 1s state when gamma = 1.
    mu = np.array([0.05, 0.2, 1.0, 3.0])
    eps = np.array([12.0, 5.0, 1.0, 2.5])
    r = binding_3d_anisotropic(mu, mu, eps, eps)
    np.testing.assert_allclose(r.binding_ev, binding_3d_ev(mu, eps), rtol=1e-14)
    np.testing.assert_allclose(r.radius_a_angstrom, bohr_radius_3d_angstrom(mu, eps), rtol=1e-7)
    np.testing.assert_allclose(r.radius_b_angstrom, bohr_radius_3d_angstrom(mu, eps), rtol=1e-7)


def test_anisotropic_dielectric_only_with_gamma_one():
    # Hand-derived: if mu_par eps_par = mu_perp eps_perp then gamma = 1 and the problem maps
    # exactly onto hydrogen with eps = sqrt(eps_par eps_perp), mass mu_par; z is stretched
    # by sqrt(eps_perp/eps_par).
    mu_par, eps_par, eps_perp = 0.3, 8.0, 2.0
    mu_perp = mu_par * eps_par / eps_perp
    assert anisotropy_parameter(mu_par, mu_perp, eps_par, eps_perp) == pytest.approx(1.0)
    r = binding_3d_anisotropic(mu_par, mu_perp, eps_par, eps_perp)
    eps_eff = np.sqrt(eps_par * eps_perp)
    np.testing.assert_allclose(r.binding_ev, binding_3d_ev(mu_par, eps_eff), rtol=1e-14)
    a = bohr_radius_3d_angstrom(mu_par, eps_eff)
    np.testing.assert_allclose(r.radius_a_angstrom, a, rtol=1e-7)
    np.testing.assert_allclose(r.radius_b_angstrom, a * np.sqrt(eps_perp / eps_par), rtol=1e-7)


def test_anisotropic_quasi_2d_asymptote():
    # Derived from the closed form: gamma -> 0 gives B -> 3 pi^2/8 Ry* (f -> pi/2), approached
    # monotonically from below, and always below the exact strict-2D value 4 Ry*.
    mu_par, eps = 0.2, 5.0
    gammas = np.array([1.0, 0.3, 1e-2, 1e-4, 1e-6, 1e-9])
    r = binding_3d_anisotropic(mu_par, mu_par / gammas, eps, eps)
    b = r.binding_ev / binding_3d_ev(mu_par, eps)
    assert np.all(np.diff(b) > 0)
    assert np.all(b < 3 * np.pi**2 / 8)
    np.testing.assert_allclose(b[-1], 3 * np.pi**2 / 8, rtol=2e-3)
    assert np.all(r.radius_b_angstrom[1:] < r.radius_a_angstrom[1:])  # flattened along the normal


def test_anisotropic_radius_scaling():
    # Scaling: all masses x2 -> binding x2, radii /2; all eps x2 -> binding /4, radii x2.
    args = (np.array([0.2]), np.array([0.9]), np.array([6.0]), np.array([3.0]))
    r0 = binding_3d_anisotropic(*args)
    r1 = binding_3d_anisotropic(2 * args[0], 2 * args[1], args[2], args[3])
    r2 = binding_3d_anisotropic(args[0], args[1], 2 * args[2], 2 * args[3])
    np.testing.assert_allclose(r1.binding_ev, 2 * r0.binding_ev, rtol=1e-12)
    np.testing.assert_allclose(r1.radius_a_angstrom, r0.radius_a_angstrom / 2, rtol=1e-7)
    np.testing.assert_allclose(r2.binding_ev, r0.binding_ev / 4, rtol=1e-12)
    np.testing.assert_allclose(r2.radius_b_angstrom, 2 * r0.radius_b_angstrom, rtol=1e-7)


def _gaussian_basis_binding_ry(gamma, n=26, levels=1):
    """Independent solve of H = -nabla_rho^2 - gamma d_u^2 - 2/r (units Ry*, a*).

    Basis exp(-a_i rho^2 - b_j u^2) with even-tempered exponents 1e-4..1e4 (n each);
    overlap, kinetic and Coulomb integrals in closed form; the Coulomb integral
    int exp(-A rho^2 - B u^2)/r d^3r = 2 pi int_0^inf dt / ((A + t^2) sqrt(B + t^2)).
    Rayleigh-Ritz, so the result is a variational (lower) bound on the binding too; with
    this basis it is converged to ~2e-5 at gamma = 1.
    """
    al = np.geomspace(1e-4, 1e4, n)
    s = np.add.outer(al, al)
    p = np.multiply.outer(al, al)
    s_rho, t_rho = np.pi / s, 4 * p * np.pi / s**2
    s_u = np.sqrt(np.pi / s)
    t_u = 2 * p / s * s_u
    overlap = np.kron(s_rho, s_u)
    A = np.kron(s, np.ones_like(s))
    B = np.kron(np.ones_like(s), s)
    q = A / B
    with np.errstate(invalid="ignore", divide="ignore"):
        lt = np.arccos(np.sqrt(np.minimum(q, 1))) / np.sqrt(A * (B - A))
        gt = np.arccosh(np.sqrt(np.maximum(q, 1))) / np.sqrt(A * (A - B))
    integral = np.where(np.abs(q - 1) < 1e-9, 1 / np.sqrt(A * B), np.where(q < 1, lt, gt))
    h = np.kron(t_rho, s_u) + gamma * np.kron(s_rho, t_u) - 4 * np.pi * integral
    w, u = np.linalg.eigh(overlap)
    keep = w > 1e-11 * w.max()
    x = u[:, keep] / np.sqrt(w[keep])
    return -np.linalg.eigvalsh(x.T @ h @ x)[:levels] if levels > 1 else -np.linalg.eigvalsh(x.T @ h @ x)[0]


@pytest.mark.parametrize("gamma", [0.2, 3.0])
def test_variational_binding_is_below_numerical_solution(gamma):
    # Computed here with an independent Gaussian-basis Rayleigh-Ritz solve (see helper):
    # the Kohn-Luttinger value must not exceed it and should be within 1 %.
    numerical = _gaussian_basis_binding_ry(gamma)
    assert abs(_gaussian_basis_binding_ry(1.0) - 1.0) < 5e-5  # basis sanity: hydrogen
    mu_par, eps = 0.25, 4.0
    var = binding_3d_anisotropic(mu_par, mu_par / gamma, eps, eps).binding_ev / binding_3d_ev(mu_par, eps)
    assert var <= numerical
    assert var > 0.99 * numerical


def test_invalid_anisotropic_input_gives_nan():
    # Missing out-of-plane mass (NaN) must propagate, not crash.
    r = binding_3d_anisotropic(np.array([0.2, 0.2]), np.array([np.nan, 0.4]), 5.0, 5.0)
    assert np.isnan(r.binding_ev[0]) and np.isfinite(r.binding_ev[1])


# --------------------------------------------------------------------------- anisotropic 2D


def test_2d_anisotropic_isotropic_limit_and_symmetry():
    # Trial function exact for equal masses (1s of Yang et al. 1991); swapping x and y
    # swaps the radii and leaves the binding unchanged.
    r = binding_2d_anisotropic(np.array([0.2, 0.2, 0.6]), np.array([0.2, 0.6, 0.2]), 4.0)
    np.testing.assert_allclose(r.binding_ev[0], binding_2d_ev(0.2, 4.0), rtol=1e-14)
    np.testing.assert_allclose(r.radius_a_angstrom[0], bohr_radius_2d_angstrom(0.2, 4.0), rtol=1e-7)
    np.testing.assert_allclose(r.binding_ev[1], r.binding_ev[2], rtol=1e-12)
    np.testing.assert_allclose(r.radius_a_angstrom[1], r.radius_b_angstrom[2], rtol=1e-6)
    # Heavier mass along y binds more strongly than the light-mass isotropic case.
    assert r.binding_ev[1] > r.binding_ev[0]


# --------------------------------------------------------------------------- fractional dimension


def test_fractional_dimension_endpoints():
    # He, Phys. Rev. B 43, 2063 (1991): alpha = 3 is bulk, alpha = 2 the strict-2D series.
    mu, eps = 0.2, 6.0
    for n in (1, 2, 3):
        np.testing.assert_allclose(binding_fractional_ev(mu, eps, 3.0, n), binding_3d_ev(mu, eps, n), rtol=1e-15)
        np.testing.assert_allclose(binding_fractional_ev(mu, eps, 2.0, n), binding_2d_ev(mu, eps, n), rtol=1e-15)
    np.testing.assert_allclose(bohr_radius_fractional_angstrom(mu, eps, 3.0), bohr_radius_3d_angstrom(mu, eps))
    np.testing.assert_allclose(bohr_radius_fractional_angstrom(mu, eps, 2.0), bohr_radius_2d_angstrom(mu, eps))
    alphas = np.linspace(2.0, 3.0, 11)
    assert np.all(np.diff(binding_fractional_ev(mu, eps, alphas)) < 0)


# --------------------------------------------------------------------------- bulk exciton (one model)


@pytest.mark.parametrize("mu, eps_par, eps_perp", [(0.25, 10.0, 5.0), (0.058, 12.9, 12.9), (1.1, 3.0, 2.0)])
def test_bulk_exciton_isotropic_fallback_is_hydrogen(mu, eps_par, eps_perp):
    # No out-of-plane mass: hydrogen scaled by mu/eps^2 with eps = sqrt(eps_par eps_perp);
    # levels from sympy's hydrogen, radii a0 eps/mu (CODATA via lamellume.units).
    b = bulk_exciton(mu, np.nan, eps_par, eps_perp)
    eps = np.sqrt(eps_par * eps_perp)
    for n, got in ((1, b.binding_1s_ev), (2, b.binding_2s_ev), (3, b.binding_3s_ev)):
        np.testing.assert_allclose(got, -float(E_nl(n, 1)) * HARTREE_EV * mu / eps**2, rtol=1e-9)
    a = BOHR_RADIUS_ANGSTROM * eps / mu
    np.testing.assert_allclose([b.decay_inplane_angstrom[0], b.decay_normal_angstrom[0], b.mott_radius_angstrom[0]],
                               [a, a, a], rtol=1e-12)
    np.testing.assert_allclose(b.rms_radius_inplane_angstrom, np.sqrt(2.0) * a, rtol=1e-12)
    assert b.model[0] == "3d-hydrogenic"


def test_bulk_exciton_uses_one_model_for_binding_and_radii():
    # With an out-of-plane mass every quantity comes from the uniaxial model.
    mu_par, mu_perp, e_par, e_perp = 0.25, 1.0, 10.0, 5.0
    b = bulk_exciton(mu_par, mu_perp, e_par, e_perp)
    r = binding_3d_anisotropic(mu_par, mu_perp, e_par, e_perp)
    assert b.model[0] == "3d-anisotropic"
    np.testing.assert_allclose(b.binding_1s_ev, r.binding_ev, rtol=1e-14)
    np.testing.assert_allclose(b.decay_inplane_angstrom, r.radius_a_angstrom, rtol=1e-14)
    np.testing.assert_allclose(b.mott_radius_angstrom, np.cbrt(r.radius_a_angstrom**2 * r.radius_b_angstrom),
                               rtol=1e-12)


def test_inplane_rms_radius_by_quadrature():
    # <x^2 + y^2> of the envelope exp(-sqrt(rho^2/a^2 + z^2/b^2)), integrated with scipy dblquad
    # over (rho, z) with the cylindrical measure, against the closed form sqrt(2) a.
    from scipy import integrate

    b = bulk_exciton(0.3, 0.9, 12.0, 4.0)
    a, c = float(b.decay_inplane_angstrom[0]), float(b.decay_normal_angstrom[0])
    dens = lambda z, rho: np.exp(-2.0 * np.sqrt(rho**2 / a**2 + z**2 / c**2)) * rho  # noqa: E731
    num = integrate.dblquad(lambda z, rho: rho**2 * dens(z, rho), 0, 40 * a, 0, 40 * c, epsabs=0, epsrel=1e-9)[0]
    den = integrate.dblquad(dens, 0, 40 * a, 0, 40 * c, epsabs=0, epsrel=1e-9)[0]  # even in z
    np.testing.assert_allclose(b.rms_radius_inplane_angstrom, np.sqrt(num / den), rtol=1e-7)


@pytest.mark.parametrize("gamma", [0.5, 1.0, 3.0])
def test_bulk_2s_against_numerical_excited_level(gamma):
    # The 2s of the uniaxial model is the series scaled to its 1s (E_1s / 4). Checked against the
    # first excited even level of the independent Gaussian-basis solution (see helper): within 5 %
    # for 0.5 <= gamma <= 3, the validity range the docstring states.
    mu_par, eps = 0.25, 4.0
    levels = _gaussian_basis_binding_ry(gamma, levels=2)
    b = bulk_exciton(mu_par, mu_par / gamma, eps, eps)
    ry = binding_3d_ev(mu_par, eps)
    np.testing.assert_allclose(b.binding_2s_ev / ry, levels[1], rtol=0.05)
    np.testing.assert_allclose(b.binding_3s_ev, b.binding_1s_ev / 9.0, rtol=1e-15)
