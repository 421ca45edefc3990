"""Tests for lamellume.masses: inverse-mass tensors, principal masses, averages, validation."""

import numpy as np
import pytest

from lamellume.hydrogenic import binding_2d_anisotropic, binding_2d_ev
from lamellume.masses import (
    finite_tensor,
    harmonic_mean_mass_me,
    inplane_average_mass_me,
    inverse_mass_tensor_2d_from_principal,
    inverse_mass_tensor_2d_from_scalar,
    inverse_mass_tensor_2d_from_tensor,
    principal_masses,
    reduced_inverse_mass_tensor,
    reduced_mass_perpendicular,
    validate_masses,
)


def test_scalar_mass_gives_isotropic_inverse_tensor():
    # Definition: W = (1/m) I.
    w = inverse_mass_tensor_2d_from_scalar(np.array([0.5, 0.25]))
    np.testing.assert_allclose(w, [2.0 * np.eye(2), 4.0 * np.eye(2)])


@pytest.mark.parametrize(
    "m1, m2, angle, expected",
    [
        # Round trips (eigen-decomposition, computed by hand): light axis angle reported.
        (0.2, 0.8, 30.0, (0.2, 0.8, 30.0)),
        (0.8, 0.2, 30.0, (0.2, 0.8, -60.0)),  # m1 is heavy -> light axis at 30+90 = 120 == -60
        (0.1, 1.5, -75.0, (0.1, 1.5, -75.0)),
        (0.3, 0.6, 90.0, (0.3, 0.6, 90.0)),  # (-90, 90] convention keeps +90
        (0.4, 0.4, 33.0, (0.4, 0.4, 0.0)),  # isotropic -> angle 0 by convention
    ],
)
def test_principal_round_trip(m1, m2, angle, expected):
    w = inverse_mass_tensor_2d_from_principal(np.array([m1]), np.array([m2]), np.array([angle]))
    p = principal_masses(w)
    np.testing.assert_allclose([p.m_small_me[0], p.m_large_me[0]], expected[:2], rtol=1e-13)
    np.testing.assert_allclose(p.angle_deg[0], expected[2], atol=1e-10)


def test_mass_tensor_input_matches_principal_input():
    # A rotated anisotropic mass tensor M = R diag(m1, m2) R^T inverts to R diag(1/m1, 1/m2) R^T.
    rng = np.random.default_rng(7)
    m1 = rng.uniform(0.05, 2.0, 40)
    m2 = rng.uniform(0.05, 2.0, 40)
    ang = rng.uniform(-180, 180, 40)
    t = np.deg2rad(ang)
    r = np.stack([np.stack([np.cos(t), -np.sin(t)], -1), np.stack([np.sin(t), np.cos(t)], -1)], -2)
    d = np.zeros((40, 2, 2))
    d[:, 0, 0], d[:, 1, 1] = m1, m2
    mass_tensor = r @ d @ np.swapaxes(r, 1, 2)
    np.testing.assert_allclose(
        inverse_mass_tensor_2d_from_tensor(mass_tensor),
        inverse_mass_tensor_2d_from_principal(m1, m2, ang),
        rtol=1e-12,
        atol=1e-12,
    )
    p = principal_masses(inverse_mass_tensor_2d_from_tensor(mass_tensor))
    np.testing.assert_allclose(p.m_small_me, np.minimum(m1, m2), rtol=1e-12)
    np.testing.assert_allclose(p.m_large_me, np.maximum(m1, m2), rtol=1e-12)


def test_singular_mass_tensor_gives_nan():
    w = inverse_mass_tensor_2d_from_tensor(np.array([[[1.0, 1.0], [1.0, 1.0]]]))
    assert np.all(np.isnan(w))


def test_reduced_mass_of_equal_isotropic_carriers():
    # 1/mu = 1/m_e + 1/m_h (Knox 1963): m_e = m_h = 0.5 -> mu = 0.25.
    w = reduced_inverse_mass_tensor(
        inverse_mass_tensor_2d_from_scalar(np.array([0.5])),
        inverse_mass_tensor_2d_from_scalar(np.array([0.5])),
    )
    np.testing.assert_allclose(inplane_average_mass_me(w), [0.25])
    np.testing.assert_allclose(harmonic_mean_mass_me(w), [0.25])


def test_average_masses_rotation_invariant_and_ordered():
    # Geometric mean sqrt(m1 m2) and harmonic mean 2/(1/m1+1/m2); AM-GM gives harmonic <= geometric.
    m1, m2 = np.full(5, 0.2), np.full(5, 0.9)
    w = inverse_mass_tensor_2d_from_principal(m1, m2, np.linspace(-80, 170, 5))
    np.testing.assert_allclose(inplane_average_mass_me(w), np.sqrt(0.2 * 0.9), rtol=1e-13)
    np.testing.assert_allclose(harmonic_mean_mass_me(w), 2 / (1 / 0.2 + 1 / 0.9), rtol=1e-13)
    assert np.all(harmonic_mean_mass_me(w) <= inplane_average_mass_me(w))


def test_geometric_mean_reproduces_variational_anisotropic_2d_binding():
    # Justification of the chosen average (see inplane_average_mass_me): against the
    # variational anisotropic 2D binding (Kohn-Luttinger trial function, closed form in
    # hydrogenic.binding_2d_anisotropic), the geometric mean is within 3.5 % for mass
    # ratios up to 3; the harmonic mean is off by > 10 % at ratio 3.
    ratio = np.linspace(1.0, 3.0, 21)
    mx = np.full_like(ratio, 0.2)
    my = mx * ratio
    eps = 4.0
    var = binding_2d_anisotropic(mx, my, eps).binding_ev
    w = inverse_mass_tensor_2d_from_principal(mx, my, np.zeros_like(ratio))
    geo = binding_2d_ev(inplane_average_mass_me(w), eps)
    harm = binding_2d_ev(harmonic_mean_mass_me(w), eps)
    err_geo = geo / var - 1.0
    err_harm = harm / var - 1.0
    assert np.max(np.abs(err_geo)) < 0.035
    assert np.all(np.abs(err_geo) <= np.abs(err_harm) + 1e-14)
    assert err_harm[-1] < -0.10
    # Both averages agree with the anisotropic result to first order (perturbation theory):
    # error quadratic in the small anisotropy.
    small = binding_2d_anisotropic(np.array([0.2]), np.array([0.2 * 1.01]), eps).binding_ev
    wsmall = inverse_mass_tensor_2d_from_principal(np.array([0.2]), np.array([0.202]), np.array([0.0]))
    np.testing.assert_allclose(binding_2d_ev(inplane_average_mass_me(wsmall), eps), small, rtol=1e-4)


def test_reduced_mass_perpendicular_and_nan_propagation():
    # mu = m_e m_h/(m_e + m_h); NaN marks a missing value and must propagate.
    mu = reduced_mass_perpendicular(np.array([1.0, np.nan, 0.5]), np.array([1.0, 2.0, np.nan]))
    np.testing.assert_allclose(mu[0], 0.5)
    assert np.isnan(mu[1]) and np.isnan(mu[2])


def test_validate_masses():
    # Bounds documented in validate_masses (common practice).
    reasons = validate_masses(np.array([[0.3, 0.5], [np.nan, 0.5], [-0.3, 0.5], [0.3, 250.0], [1e-4, 0.5], [np.inf, 0.5]]))
    assert reasons[0] is None
    assert "non-finite" in reasons[1]
    assert "<= 0" in reasons[2]
    assert "> 100" in reasons[3]
    assert "< 0.001" in reasons[4]
    assert "non-finite" in reasons[5]
    assert validate_masses(np.array([np.nan, 0.4]), allow_missing=True) == [None, None]
    assert validate_masses(np.array([np.inf]), allow_missing=True)[0] is not None


def test_finite_tensor_matches_numpy_over_the_last_two_axes():
    # reference: numpy's own reduction np.all(np.isfinite(t), axis=(-2, -1)) (general-purpose library)
    rng = np.random.default_rng(5)
    t = rng.normal(size=(7, 3, 2, 2))
    for bad in (np.nan, np.inf, -np.inf):
        t[rng.random(t.shape) < 0.05] = bad
    np.testing.assert_array_equal(finite_tensor(t), np.all(np.isfinite(t), axis=(-2, -1)))
    assert finite_tensor(np.eye(2)) and not finite_tensor(np.array([[1.0, np.nan], [0.0, 1.0]]))
