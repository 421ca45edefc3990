"""Tests for lamellume.dielectric: layer frames, layer constants, tensor validation."""

import numpy as np
import pytest

from lamellume.dielectric import (
    layer_constants,
    rotation_to_layer_frame,
    to_layer_frame,
    validate_tensor,
)

RNG = np.random.default_rng(20261202)


def _random_unit_vectors(n):
    v = RNG.normal(size=(n, 3))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def _random_spd(n, lo=1.5, hi=20.0):
    q, _ = np.linalg.qr(RNG.normal(size=(n, 3, 3)))
    lam = RNG.uniform(lo, hi, size=(n, 3))
    return q @ (lam[:, :, None] * np.swapaxes(q, 1, 2)), lam


def test_rotation_is_proper_and_maps_normal_to_z():
    # Definition of a proper rotation (R R^T = 1, det R = +1) and of the layer frame.
    normals = np.vstack(
        [_random_unit_vectors(200), [[0, 0, 1], [0, 0, -1], [1, 0, 0], [-1, 0, 0], [0, 1, 0]]]
    )
    r = rotation_to_layer_frame(3.7 * normals)  # any length is accepted
    np.testing.assert_allclose(r @ np.swapaxes(r, 1, 2), np.broadcast_to(np.eye(3), r.shape), atol=1e-14)
    np.testing.assert_allclose(np.linalg.det(r), 1.0, atol=1e-14)
    np.testing.assert_allclose(np.einsum("nij,nj->ni", r, normals), np.tile([0, 0, 1.0], (len(normals), 1)), atol=1e-14)


def test_normal_along_z_gives_identity_and_minus_z_a_pi_rotation():
    # Deterministic axis choice documented in rotation_to_layer_frame.
    r = rotation_to_layer_frame(np.array([[0, 0, 1.0], [0, 0, -2.0]]))
    np.testing.assert_array_equal(r[0], np.eye(3))
    np.testing.assert_array_equal(r[1], np.diag([1.0, -1.0, -1.0]))


def test_nearly_z_normal_is_continuous():
    # Robustness near +z: a tiny tilt gives a rotation within O(tilt) of the identity.
    r = rotation_to_layer_frame(np.array([[1e-9, -2e-9, 1.0]]))
    np.testing.assert_allclose(r[0], np.eye(3), atol=1e-8)


def test_known_tilt_about_y():
    # Hand-derived: normal tilted by 30 deg from z towards x -> rotation by -30 deg about y.
    t = np.deg2rad(30.0)
    c, s = np.cos(t), np.sin(t)
    r = rotation_to_layer_frame(np.array([[s, 0.0, c]]))[0]
    np.testing.assert_allclose(r, [[c, 0, -s], [0, 1, 0], [s, 0, c]], atol=1e-15)


def test_rotate_diagonal_tensor_into_lab_and_back():
    # Tensor transformation law (Nye): T_lab = R^T D R  =>  to_layer_frame(T_lab) = D.
    normals = _random_unit_vectors(50)
    r = rotation_to_layer_frame(normals)
    d = np.zeros((50, 3, 3))
    d[:, [0, 1, 2], [0, 1, 2]] = RNG.uniform(1.5, 15.0, size=(50, 3))
    lab = np.swapaxes(r, 1, 2) @ d @ r
    np.testing.assert_allclose(to_layer_frame(lab, normals), d, atol=1e-12)


def test_eigenvalues_invariant_under_frame_change():
    # Rotations preserve the spectrum of a symmetric tensor.
    t, lam = _random_spd(100)
    out = to_layer_frame(t, _random_unit_vectors(100))
    np.testing.assert_allclose(np.linalg.eigvalsh(out), np.sort(lam, axis=1), rtol=1e-12)


def test_layer_constants_of_diagonal_tensor():
    # Hand-computed: diag(4, 6, 2) -> eps_par 5, eps_perp 2, anisotropy 2/5, geometric mean sqrt(10).
    c = layer_constants(np.diag([4.0, 6.0, 2.0])[None])
    np.testing.assert_allclose(c.eps_parallel, [5.0])
    np.testing.assert_allclose(c.eps_perpendicular, [2.0])
    np.testing.assert_allclose(c.inplane_anisotropy, [0.4])
    np.testing.assert_allclose(c.eps_bulk_effective, [np.sqrt(10.0)])


def test_layer_constants_invariant_under_inplane_rotation():
    # eps_par and the anisotropy use in-plane eigenvalues only -> independent of the e1 choice.
    d = np.diag([4.0, 6.0, 2.0])
    phis = np.deg2rad(np.linspace(0, 180, 7))
    rz = np.array([[[np.cos(p), -np.sin(p), 0], [np.sin(p), np.cos(p), 0], [0, 0, 1]] for p in phis])
    c = layer_constants(rz @ d @ np.swapaxes(rz, 1, 2))
    np.testing.assert_allclose(c.eps_parallel, 5.0, rtol=1e-14)
    np.testing.assert_allclose(c.inplane_anisotropy, 0.4, rtol=1e-12)
    np.testing.assert_allclose(c.eps_perpendicular, 2.0, rtol=1e-14)


def test_isotropic_layer_has_zero_anisotropy_and_bulk_eps():
    # Isotropic medium: every constant equals eps (common practice).
    c = layer_constants(7.0 * np.eye(3)[None])
    assert c.inplane_anisotropy[0] == 0.0
    np.testing.assert_allclose([c.eps_parallel[0], c.eps_perpendicular[0], c.eps_bulk_effective[0]], 7.0)


def test_validate_tensor_reasons():
    # Definitions in validate_tensor's docstring.
    good = np.diag([5.0, 5.0, 3.0])
    nonfinite = good.copy()
    nonfinite[0, 1] = np.nan
    asym = good.copy()
    asym[0, 1] = 0.1  # |T - T^T| = 0.1 > 1e-4 * 5
    tiny_asym = good.copy()
    tiny_asym[0, 1] = 1e-5  # rounding-level asymmetry is accepted
    not_pd = np.diag([5.0, -1.0, 3.0])
    below_one = np.diag([5.0, 0.5, 3.0])
    reasons = validate_tensor(np.stack([good, nonfinite, asym, tiny_asym, not_pd, below_one]))
    assert reasons[0] is None
    assert "non-finite" in reasons[1]
    assert "not symmetric" in reasons[2]
    assert reasons[3] is None
    assert "not positive definite" in reasons[4]
    assert "eigenvalue < 1" in reasons[5]
    assert validate_tensor(good) == [None]


def test_zero_normal_rejected():
    with pytest.raises(ValueError):
        rotation_to_layer_frame(np.zeros((1, 3)))


def test_to_layer_frame_with_a_computed_rotation_is_the_same():
    # common practice: handing in rotation_to_layer_frame(normal), computed for many normals at
    # once, gives each tensor exactly the result of the call that computes it alone
    rng = np.random.default_rng(5)
    normals = rng.normal(size=(50, 3))
    tensors = rng.normal(size=(50, 3, 3))
    rotations = rotation_to_layer_frame(normals)
    for t, n, r in zip(tensors, normals, rotations):
        np.testing.assert_array_equal(to_layer_frame(t[None], n[None], rotation=r[None]),
                                      to_layer_frame(t[None], n[None]))
