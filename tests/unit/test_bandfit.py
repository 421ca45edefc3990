"""Tests of lamellume.bandfit: effective-mass tensors from sampled band energies.

Synthetic bands are built here from E = E0 + hbar^2/(2 m_e) (k - k0)^T W (k - k0)
with hbar, m_e and e typed below from CODATA (not the library's constant), or
from a two-band Kane dispersion E (1 + E / Eg) = hbar^2 k^2 / (2 m) (E. O. Kane,
J. Phys. Chem. Solids 1, 249 (1957)) for the nonparabolicity check. Rotations
between frames are built with scipy.spatial.transform (a general-purpose library),
not with the module's own rotation.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from lamellume.bandfit import MassFit, MassFitError, fit_effective_mass, fit_effective_masses

# CODATA 2018 recommended values (E. Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)):
HBAR_J_S = 1.054571817e-34  # reduced Planck constant (exact since the 2019 SI: h / 2 pi)
M_E_KG = 9.1093837015e-31  # electron mass (relative standard uncertainty 3e-10)
E_C = 1.602176634e-19  # elementary charge (exact, 2019 SI)
# hbar^2 / (2 m_e) in eV Angstrom^2 (about 3.81); the library's CODATA edition may differ
# in the 9th digit, so exact-recovery checks use rtol 1e-7.
C = HBAR_J_S**2 / (2.0 * M_E_KG) / E_C * 1e20


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
    np.testing.assert_allclose(fit.masses_me, (m1, m2), rtol=1e-7)
    np.testing.assert_allclose(fit.inverse_mass_tensor, w, rtol=1e-7, atol=1e-8)
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
    np.testing.assert_allclose(fit.masses_me, (m1, m2), rtol=1e-7)
    np.testing.assert_allclose(fit.k0, (0.0, 0.0), atol=0.0)
    np.testing.assert_allclose(fit.e0_ev, 0.7, atol=1e-10)


def test_fixed_k0_needs_fewer_points():
    # 5 points (parameters + 1) suffice with k0 fixed; a non-conic set is needed.
    k = np.array([[0.0, 0.0], [0.02, 0.0], [0.0, 0.02], [0.03, 0.01], [-0.01, 0.025]])
    w = _tensor(0.3, 0.6, 10.0)
    fit = fit_effective_mass(k, _band(k, w), "conduction", fix_k0=True)
    np.testing.assert_allclose(fit.masses_me, (0.3, 0.6), rtol=1e-7)


def test_valence_hole_masses_positive():
    # A valence band curving downward gives positive hole masses (sign convention).
    k = _grid()
    w = _tensor(0.5, 0.6, 0.0)
    fit = fit_effective_mass(k, _band(k, w, sign=-1.0), "valence")
    assert all(m > 0 for m in fit.masses_me)
    assert np.all(np.linalg.eigvalsh(fit.inverse_mass_tensor) > 0)


def test_in_plane_samples_with_constant_kz():
    # Samples in one plane perpendicular to the normal (kz constant, here 0.1 1/A off the origin):
    # an in-plane fit, the plane reported as k0 along the normal, no out-of-plane mass.
    k2 = _grid()
    w = _tensor(0.3, 0.4, 0.0)
    e = _band(k2, w)
    fit = fit_effective_mass(np.c_[k2, np.full(len(k2), 0.1)], e, "conduction")
    np.testing.assert_allclose(fit.masses_me, (0.3, 0.4), rtol=1e-7)
    np.testing.assert_allclose(fit.k0_normal, 0.1, rtol=1e-12)
    assert np.isnan(fit.perpendicular_mass_me)
    assert fit.warnings == ()


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
        np.testing.assert_allclose(fit.masses_me, (m1, m2), rtol=1e-7)


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


# ---------------------------------------------------------------------------
# Band samples in any frame (layer normal not along z)
# ---------------------------------------------------------------------------


def _frame_with_normal(normal, spin_deg=0.0):
    """Orthogonal Q (det +1) whose third column is the unit normal: crystal k = Q @ layer k.

    Built with scipy's Rotation.align_vectors (a general-purpose library) and turned about the
    normal by spin_deg, so the in-plane axes are arbitrary and unrelated to the module's choice.
    """
    n = np.asarray(normal, dtype=float) / np.linalg.norm(normal)
    if np.allclose(n, [0.0, 0.0, 1.0]):
        q = np.eye(3)
    elif np.allclose(n, [0.0, 0.0, -1.0]):
        q = Rotation.from_rotvec([np.pi, 0.0, 0.0]).as_matrix()
    else:
        q = Rotation.align_vectors([n], [[0.0, 0.0, 1.0]])[0].as_matrix()
    spin = Rotation.from_rotvec(np.radians(spin_deg) * np.array([0.0, 0.0, 1.0])).as_matrix()
    q = q @ spin
    np.testing.assert_allclose(q[:, 2], n, atol=1e-12)
    return q


def _grid3(half=(0.04, 0.04, 0.03), n=(5, 5, 3), center=(0.0, 0.0, 0.0)):
    axes = [np.linspace(-h, h, c) for h, c in zip(half, n)]
    g = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    return g + np.asarray(center)


def _inv_mass_3d(m1, m2, angle_deg, m_perp):
    w = np.zeros((3, 3))
    w[:2, :2] = _tensor(m1, m2, angle_deg)
    w[2, 2] = 1.0 / m_perp
    return w


NORMALS = [
    ("x", (1.0, 0.0, 0.0)),
    ("y", (0.0, 1.0, 0.0)),
    ("minus z", (0.0, 0.0, -1.0)),
    ("tilted", (0.3, -0.5, 0.8)),
    ("tilted near x", (0.95, 0.2, 0.1)),
]


@pytest.mark.parametrize("fix_k0", [False, True])
@pytest.mark.parametrize("band, sign", [("conduction", 1.0), ("valence", -1.0)])
@pytest.mark.parametrize("name, normal", NORMALS)
def test_crystal_frame_3d_samples(name, normal, band, sign, fix_k0):
    # Layer frame: in-plane masses 0.3 / 0.7 (axis at 25 deg), out-of-plane 2.0; samples on a
    # 3D grid around a shifted extremum (origin when fix_k0), then expressed in a crystal frame
    # whose layer normal is `normal`.
    k0 = np.zeros(3) if fix_k0 else np.array([0.01, -0.006, 0.004])
    kl = _grid3(center=k0)
    w = _inv_mass_3d(0.3, 0.7, 25.0, 2.0)
    e = 1.1 + sign * C * np.einsum("mi,ij,mj->m", kl - k0, w, kl - k0)
    q = _frame_with_normal(normal, spin_deg=40.0)
    kc = kl @ q.T
    scale = 2.7  # the normal may have any length
    fit = fit_effective_mass(kc, e, band, layer_normal=scale * np.asarray(normal), fix_k0=fix_k0)
    np.testing.assert_allclose(fit.masses_me, (0.3, 0.7), rtol=1e-7)
    np.testing.assert_allclose(fit.perpendicular_mass_me, 2.0, rtol=1e-7)
    np.testing.assert_allclose(fit.e0_ev, 1.1, atol=1e-9)
    np.testing.assert_allclose(fit.k0_normal, k0[2], atol=1e-9)
    np.testing.assert_allclose(np.linalg.norm(fit.k0), np.linalg.norm(k0[:2]), atol=1e-9)
    assert fit.rms_residual_ev < 1e-10 and not fit.nonparabolic


def test_issue_example_normal_along_y():
    # Normal along y; true in-plane masses 0.5 / 0.5, out-of-plane 2.0. Read as if z were the
    # normal, the x-y plane holds one in-plane and the out-of-plane direction (0.5 and 2.0).
    kl = _grid3()
    w = _inv_mass_3d(0.5, 0.5, 0.0, 2.0)
    e = C * np.einsum("mi,ij,mj->m", kl, w, kl)
    q = _frame_with_normal((0.0, 1.0, 0.0))
    kc = kl @ q.T
    wrong = fit_effective_mass(kc, e, "conduction")  # no normal: k taken as layer frame
    assert max(wrong.masses_me) > 1.9  # the out-of-plane mass leaks into the plane
    fit = fit_effective_mass(kc, e, "conduction", layer_normal=(0.0, 1.0, 0.0))
    np.testing.assert_allclose(fit.masses_me, (0.5, 0.5), rtol=1e-7)
    np.testing.assert_allclose(fit.perpendicular_mass_me, 2.0, rtol=1e-7)


@pytest.mark.parametrize("name, normal", NORMALS)
def test_crystal_frame_planar_samples(name, normal):
    # Samples only in the layer plane (constant offset 0.05 1/A along the normal): in-plane fit.
    kl = np.c_[_grid(), np.full(25, 0.05)]
    e = C * np.einsum("mi,ij,mj->m", kl[:, :2], _tensor(0.2, 0.9, -30.0), kl[:, :2])
    kc = kl @ _frame_with_normal(normal, spin_deg=-70.0).T
    fit = fit_effective_mass(kc, e, "conduction", layer_normal=normal)
    np.testing.assert_allclose(fit.masses_me, (0.2, 0.9), rtol=1e-7)
    np.testing.assert_allclose(fit.k0_normal, 0.05, atol=1e-12)
    assert np.isnan(fit.perpendicular_mass_me)


def test_in_plane_axes_match_dielectric_rotation():
    # The fitted in-plane tensor is expressed in the same in-plane axes as the dielectric tensor:
    # an in-plane direction u carrying both the light mass and the larger permittivity must come
    # out as the same principal axis in both.
    from lamellume.dielectric import to_layer_frame

    normal = np.array([0.3, -0.5, 0.8]) / np.linalg.norm([0.3, -0.5, 0.8])
    q = _frame_with_normal(normal, spin_deg=33.0)
    u = q[:, 0]  # an in-plane unit vector (crystal frame)
    eps_c = 4.0 * np.outer(normal, normal) + 12.0 * np.outer(u, u) + 8.0 * np.outer(q[:, 1], q[:, 1])
    eps_l = to_layer_frame(eps_c[None], normal[None])[0]
    kl = _grid3()
    e = C * np.einsum("mi,ij,mj->m", kl, _inv_mass_3d(0.25, 0.8, 0.0, 3.0), kl)  # light axis along u
    fit = fit_effective_mass(kl @ q.T, e, "conduction", layer_normal=normal)
    lam, vec = np.linalg.eigh(eps_l[:2, :2])
    eps_angle = np.degrees(np.arctan2(vec[1, 1], vec[0, 1]))
    d = (fit.angle_deg - eps_angle + 90.0) % 180.0 - 90.0
    assert abs(d) < 1e-6


def test_flat_out_of_plane_keeps_in_plane_masses():
    # Weakly coupled layers: no dispersion along the normal. In-plane masses are still fitted,
    # no out-of-plane mass is reported and a note says why.
    kl = _grid3()
    w = _inv_mass_3d(0.4, 0.4, 0.0, 1.0)
    w[2, 2] = 0.0
    e = C * np.einsum("mi,ij,mj->m", kl, w, kl)
    normal = (0.0, 1.0, 0.0)
    fit = fit_effective_mass(kl @ _frame_with_normal(normal).T, e, "conduction", layer_normal=normal)
    np.testing.assert_allclose(fit.masses_me, (0.4, 0.4), rtol=1e-7)
    assert np.isnan(fit.perpendicular_mass_me)
    assert any("out-of-plane" in note for note in fit.warnings)


def test_batch_mixed_planar_and_3d():
    kl3 = _grid3(n=(3, 3, 3))  # 27 points
    klp = np.c_[np.r_[_grid(), 0.5 * _grid()[:2]], np.zeros(27)]  # 27 in-plane points
    w = _inv_mass_3d(0.3, 0.6, 10.0, 1.5)
    e3 = C * np.einsum("mi,ij,mj->m", kl3, w, kl3)
    ep = C * np.einsum("mi,ij,mj->m", klp, w, klp)
    normal = np.array([[1.0, 0.0, 0.0], [1.0, 0.0, 0.0]])
    q = _frame_with_normal(normal[0])
    fits = fit_effective_masses(np.stack([kl3 @ q.T, klp @ q.T]), np.stack([e3, ep]), "conduction",
                                layer_normal=normal)
    for fit in fits:
        np.testing.assert_allclose(fit.masses_me, (0.3, 0.6), rtol=1e-7)
    np.testing.assert_allclose(fits[0].perpendicular_mass_me, 1.5, rtol=1e-7)
    assert np.isnan(fits[1].perpendicular_mass_me)


@pytest.mark.parametrize("normal", [(1.0, 0.0, 0.0), (0.0, 1.0, 0.0), (0.1, 0.0, 1.0)])
def test_two_component_k_with_tilted_normal_rejected(normal):
    k = _grid()
    with pytest.raises(MassFitError, match="2 components.*not along z"):
        fit_effective_mass(k, _band(k, np.eye(2)), "conduction", layer_normal=normal)


def test_two_component_k_with_normal_along_minus_z_accepted():
    # Normal along -z: the plane is the x-y plane (the in-plane y axis flips, masses do not change).
    k = _grid()
    fit = fit_effective_mass(k, _band(k, _tensor(0.3, 0.5, 20.0)), "conduction", layer_normal=(0, 0, -2.0))
    np.testing.assert_allclose(fit.masses_me, (0.3, 0.5), rtol=1e-7)


def test_samples_in_tilted_plane_rejected():
    # Points in a plane that is neither the layer plane nor contains the normal's full range
    # cannot separate in-plane from out-of-plane curvature.
    g = _grid()
    kl = np.c_[g, 0.5 * g[:, 0] - 0.2 * g[:, 1]]  # k_normal varies linearly: a tilted plane
    e = C * np.einsum("mi,ij,mj->m", kl, _inv_mass_3d(0.3, 0.3, 0.0, 2.0), kl)
    with pytest.raises(MassFitError, match="tilted against the layer"):
        fit_effective_mass(kl, e, "conduction", layer_normal=(0.0, 0.0, 1.0))


@pytest.mark.parametrize("normal, match", [((0.0, 0.0, 0.0), "non-zero"), ((np.nan, 0.0, 1.0), "finite")])
def test_bad_normal_rejected(normal, match):
    k = _grid3()
    with pytest.raises(MassFitError, match=match):
        fit_effective_mass(k, np.zeros(len(k)), "conduction", layer_normal=normal)


def test_3d_too_few_points():
    k = _grid3(n=(2, 2, 2))  # 8 points < 11 for the free 3D model
    with pytest.raises(MassFitError, match="too few.*3D"):
        fit_effective_mass(k, np.zeros(8), "conduction")
