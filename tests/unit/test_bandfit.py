"""Tests of flakelight.bandfit: effective-mass tensors from sampled band energies.

Synthetic bands are generated from the model itself (exact recovery) or from
a two-band Kane dispersion E (1 + E / Eg) = hbar^2 k^2 / (2 m) (E. O. Kane,
J. Phys. Chem. Solids 1, 249 (1957)) for the nonparabolicity check.
"""

from __future__ import annotations

import numpy as np
import pytest

from flakelight.bandfit import MassFit, MassFitError, fit_effective_mass, fit_effective_masses
from flakelight.units import HBAR2_OVER_2ME_EV_A2 as C


def _grid(half_width=0.04, n=5, center=(0.0, 0.0)):
    g = np.linspace(-half_width, half_width, n)
    kx, ky = np.meshgrid(g, g)
    return np.c_[kx.ravel(), ky.ravel()] + np.asarray(center)


def _tensor(m1, m2, angle_deg):
    """Inverse-mass tensor with principal masses m1 (axis at angle_deg from x) and m2."""
    t = np.radians(angle_deg)
    r = np.array([[np.cos(t), -np.sin(t)], [np.sin(t), np.cos(t)]])
    return r @ np.diag([1.0 / m1, 1.0 / m2]) @ r.T


def _band(k, inv_mass, k0=(0.0, 0.0), e0=0.0, sign=1.0):
    dk = k - np.asarray(k0)
    return e0 + sign * C * np.einsum("mi,ij,mj->m", dk, inv_mass, dk)


# (m1, m2, angle of m1 axis in degrees, k0 in 1/A, E0 in eV); "computed with numpy" from the model.
PARABOLIC = [
    (0.45, 0.45, 0.0, (0.0, 0.0), 1.2),  # isotropic, MoS2-like conduction mass (from memory)
    (0.14, 1.24, 0.0, (0.0, 0.0), 0.3),  # phosphorene-like anisotropy along x (from memory)
    (0.2, 0.9, 30.0, (0.0, 0.0), -0.5),  # rotated anisotropic tensor
    (0.2, 0.9, -60.0, (0.01, -0.005), 2.0),  # rotated and shifted extremum
    (0.08, 3.0, 75.0, (-0.012, 0.02), 0.0),  # strong anisotropy, shifted
]


@pytest.mark.parametrize("band, sign", [("conduction", 1.0), ("valence", -1.0)])
@pytest.mark.parametrize("m1, m2, angle, k0, e0", PARABOLIC)
def test_exact_recovery(m1, m2, angle, k0, e0, band, sign):
    k = _grid(center=k0)
    w = _tensor(m1, m2, angle)
    fit = fit_effective_mass(k, _band(k, w, k0, e0, sign), band)
    assert isinstance(fit, MassFit)
    # Exact data: recovery limited by round-off only.
    np.testing.assert_allclose(fit.masses_me, (m1, m2), rtol=1e-8)
    np.testing.assert_allclose(fit.inverse_mass_tensor, w, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(fit.k0, k0, atol=1e-8)
    np.testing.assert_allclose(fit.e0_ev, e0, atol=1e-8)
    assert fit.rms_residual_ev < 1e-10
    assert not fit.nonparabolic
    if m1 != m2:
        # Axis is defined modulo 180 degrees.
        d = (fit.angle_deg - angle + 90.0) % 180.0 - 90.0
        assert abs(d) < 1e-6
    assert -90.0 < fit.angle_deg <= 90.0
    assert fit.band == band and fit.n_points == 25


@pytest.mark.parametrize("m1, m2, angle", [(0.3, 0.7, 20.0), (0.5, 0.5, 0.0)])
def test_fixed_k0(m1, m2, angle):
    k = _grid()
    w = _tensor(m1, m2, angle)
    fit = fit_effective_mass(k, _band(k, w, e0=0.7), "conduction", fix_k0=True)
    np.testing.assert_allclose(fit.masses_me, (m1, m2), rtol=1e-8)
    np.testing.assert_allclose(fit.k0, (0.0, 0.0), atol=0.0)
    np.testing.assert_allclose(fit.e0_ev, 0.7, atol=1e-10)


def test_fixed_k0_needs_fewer_points():
    # 5 points (parameters + 1) suffice with k0 fixed; a non-conic set is needed.
    k = np.array([[0.0, 0.0], [0.02, 0.0], [0.0, 0.02], [0.03, 0.01], [-0.01, 0.025]])
    w = _tensor(0.3, 0.6, 10.0)
    fit = fit_effective_mass(k, _band(k, w), "conduction", fix_k0=True)
    np.testing.assert_allclose(fit.masses_me, (0.3, 0.6), rtol=1e-8)


def test_valence_hole_masses_positive():
    # A valence band curving downward gives positive hole masses (sign convention).
    k = _grid()
    w = _tensor(0.5, 0.6, 0.0)
    fit = fit_effective_mass(k, _band(k, w, sign=-1.0), "valence")
    assert all(m > 0 for m in fit.masses_me)
    assert np.all(np.linalg.eigvalsh(fit.inverse_mass_tensor) > 0)


def test_z_component_ignored_with_warning():
    k2 = _grid()
    w = _tensor(0.3, 0.4, 0.0)
    e = _band(k2, w)
    k3 = np.c_[k2, np.linspace(0.0, 0.1, len(k2))]
    fit = fit_effective_mass(k3, e, "conduction")
    np.testing.assert_allclose(fit.masses_me, (0.3, 0.4), rtol=1e-8)
    assert any("kz" in msg for msg in fit.warnings)
    assert fit_effective_mass(np.c_[k2, np.zeros(len(k2))], e, "conduction").warnings == ()


def _kane(k, mass, gap):
    # E (1 + E/Eg) = x with x = hbar^2 k^2 / (2 m): positive root (Kane 1957, two-band model).
    x = C * np.sum(k**2, axis=1) / mass
    return 0.5 * gap * (np.sqrt(1.0 + 4.0 * x / gap) - 1.0)


@pytest.mark.parametrize("fix_k0", [False, True])
def test_kane_nonparabolicity_flagged(fix_k0):
    # m = 0.2, |k| <= 0.057 1/A: x_max = 0.061 eV; with Eg = 0.3 eV the quartic correction
    # x^2/Eg is ~20 % of x at the edge (leading order); the fit absorbs part of it into the
    # mass and reports ~12 %, still well above the 5 % threshold.
    k = _grid()
    fit = fit_effective_mass(k, _kane(k, 0.2, 0.3), "conduction", fix_k0=fix_k0)
    assert fit.nonparabolic
    assert fit.quartic_fraction > 0.05


@pytest.mark.parametrize("fix_k0", [False, True])
def test_kane_large_gap_and_parabola_not_flagged(fix_k0):
    # With Eg = 1000 eV the quartic fraction is x_max/Eg ~ 6e-5: parabolic for practical purposes,
    # and the fitted mass approaches m (limit Eg -> infinity).
    k = _grid()
    fit = fit_effective_mass(k, _kane(k, 0.2, 1000.0), "conduction", fix_k0=fix_k0)
    assert not fit.nonparabolic
    assert fit.quartic_fraction < 1e-3
    np.testing.assert_allclose(fit.masses_me, (0.2, 0.2), rtol=1e-3)
    exact = fit_effective_mass(k, _band(k, _tensor(0.2, 0.2, 0.0)), "conduction", fix_k0=fix_k0)
    assert not exact.nonparabolic
    assert exact.quartic_fraction < 1e-8


def test_kane_fraction_scales_inverse_gap():
    # Scaling law: for x_max << Eg the quartic fraction ~ x_max / Eg, so it scales as 1/Eg.
    k = _grid(half_width=0.02)
    f1 = fit_effective_mass(k, _kane(k, 0.2, 50.0), "conduction").quartic_fraction
    f2 = fit_effective_mass(k, _kane(k, 0.2, 100.0), "conduction").quartic_fraction
    np.testing.assert_allclose(f1 / f2, 2.0, rtol=0.02)


def test_batch_matches_single():
    rng = np.random.default_rng(7)
    k = _grid()
    ks, es, truth = [], [], []
    for _ in range(6):
        m1, m2 = np.sort(rng.uniform(0.05, 2.0, 2))
        ang = rng.uniform(-89.0, 89.0)
        k0 = rng.uniform(-0.01, 0.01, 2)
        kk = k + k0
        ks.append(kk)
        es.append(_band(kk, _tensor(m1, m2, ang), k0, rng.uniform(-1, 1)))
        truth.append((m1, m2))
    fits = fit_effective_masses(np.array(ks), np.array(es), "conduction")
    assert len(fits) == 6
    for fit, kk, e, (m1, m2) in zip(fits, ks, es, truth):
        single = fit_effective_mass(kk, e, "conduction")
        np.testing.assert_allclose(fit.masses_me, single.masses_me, rtol=1e-12)
        np.testing.assert_allclose(fit.masses_me, (m1, m2), rtol=1e-8)


_K = _grid()
_T = np.linspace(0.0, 2.0 * np.pi, 12, endpoint=False)
_CIRCLE = 0.03 * np.c_[np.cos(_T), np.sin(_T)]
_LINE = np.linspace(-0.04, 0.04, 9)[:, None] * np.array([1.0, 0.5])


@pytest.mark.parametrize(
    "k, e, band, kwargs, match",
    [
        (_K[:6], _band(_K[:6], np.eye(2)), "conduction", {}, "too few"),  # 6 points, 6 params
        (_K[:4], _band(_K[:4], np.eye(2)), "conduction", {"fix_k0": True}, "too few"),
        (_LINE, _band(_LINE, np.eye(2)), "conduction", {}, "degenerate"),  # collinear
        (_CIRCLE, _band(_CIRCLE, np.eye(2)), "conduction", {}, "degenerate"),  # on a conic
        (_K, np.where(np.arange(25) == 3, np.nan, 0.1), "conduction", {}, "non-finite"),
        (np.where(_K == _K[0], np.inf, _K), np.zeros(25), "valence", {}, "non-finite"),
        (_K, _band(_K, np.eye(2)), "valence", {}, "wrong sign"),  # minimum given as valence
        (_K, _band(_K, np.eye(2), sign=-1.0), "conduction", {}, "wrong sign"),
        (_K, _band(_K, np.diag([1.0, -1.0])), "conduction", {}, "saddle"),
        (_K, _band(_K, np.diag([1.0, 0.0])), "conduction", {}, "flat"),
        (_K, _band(_K, np.eye(2)), "cond", {}, "band must be"),
        (_K, np.zeros(24), "conduction", {}, "shape"),
        (_K[:, :1], np.zeros(25), "conduction", {}, "shape"),
        (_K, [["a"]] * 25, "conduction", {}, "numeric"),
    ],
)
def test_rejections(k, e, band, kwargs, match):
    with pytest.raises(MassFitError, match=match):
        fit_effective_mass(k, e, band, **kwargs)


def test_batch_error_names_valley():
    k = np.stack([_K, _K])
    e = np.stack([_band(_K, np.eye(2)), _band(_K, np.diag([1.0, -1.0]))])
    with pytest.raises(MassFitError, match="valley 1: saddle"):
        fit_effective_masses(k, e, "conduction")


def test_error_is_value_error():
    assert issubclass(MassFitError, ValueError)
