"""Carrier and reduced effective masses in the layer plane and along the normal.

In-plane masses enter as 2x2 *inverse*-mass tensors (units 1/m_e) in the
layer frame (see :mod:`lamellume.dielectric`; angles are measured from its
in-plane axis e1, "x"). Inverse masses are the natural variable: band
curvature is linear in them, the electron-hole reduced inverse mass is their
sum, and an isotropic (scalar) mass is a multiple of the identity.

All functions are pure and vectorized over compounds (leading axis). Masses
are in units of the free-electron mass m_e; angles in degrees.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "inverse_mass_tensor_2d_from_scalar",
    "inverse_mass_tensor_2d_from_principal",
    "inverse_mass_tensor_2d_from_tensor",
    "reduced_inverse_mass_tensor",
    "PrincipalMasses",
    "principal_masses",
    "inplane_average_mass_me",
    "finite_tensor",
    "harmonic_mean_mass_me",
    "reduced_mass_perpendicular",
    "validate_masses",
    "MASS_MIN_ME",
    "MASS_MAX_ME",
]

#: Smallest effective mass (m_e) accepted by :func:`validate_masses`.
MASS_MIN_ME: float = 1e-3
#: Largest effective mass (m_e) accepted by :func:`validate_masses`; heavier
#: "masses" signal flat bands where the effective-mass picture fails.
MASS_MAX_ME: float = 100.0

# Relative splitting of the inverse-mass eigenvalues below which a tensor is
# treated as isotropic and its principal angle reported as 0.
_ISOTROPIC_RTOL = 1e-12


def inverse_mass_tensor_2d_from_scalar(mass_me):
    """Isotropic in-plane inverse-mass tensors (1/m) * I.

    Parameters
    ----------
    mass_me : array_like, shape (n,)
        Scalar in-plane effective mass in m_e (positive; for a hole, the hole mass).

    Returns
    -------
    numpy.ndarray, shape (n, 2, 2)
        Inverse-mass tensor in 1/m_e.

    References
    ----------
    N. W. Ashcroft and N. D. Mermin, *Solid State Physics* (1976), ch. 12,
    eq. (12.29) (effective-mass tensor as inverse band curvature).
    """
    m = np.asarray(mass_me, dtype=float)
    return (1.0 / m)[..., None, None] * np.eye(2)


def _rotation_2d(angle_deg):
    t = np.deg2rad(np.asarray(angle_deg, dtype=float))
    c, s = np.cos(t), np.sin(t)
    return np.stack([np.stack([c, -s], axis=-1), np.stack([s, c], axis=-1)], axis=-2)


def inverse_mass_tensor_2d_from_principal(m1_me, m2_me, angle_deg):
    """Inverse-mass tensors from principal masses and the orientation of the m1 axis.

    W = R(theta) diag(1/m1, 1/m2) R(theta)^T, where R(theta) rotates the x
    axis by theta counter-clockwise onto the m1 principal axis.

    Parameters
    ----------
    m1_me, m2_me : array_like, shape (n,)
        Principal in-plane masses in m_e (positive).
    angle_deg : array_like, shape (n,)
        Angle of the m1 principal axis from the layer-frame x axis, degrees.

    Returns
    -------
    numpy.ndarray, shape (n, 2, 2)
        Inverse-mass tensor in 1/m_e.

    References
    ----------
    Ashcroft and Mermin, *Solid State Physics*, ch. 12 (principal axes of the
    effective-mass tensor).
    """
    m1, m2, ang = np.broadcast_arrays(
        np.asarray(m1_me, float), np.asarray(m2_me, float), np.asarray(angle_deg, float)
    )
    r = _rotation_2d(ang)
    d = np.zeros(m1.shape + (2, 2))
    d[..., 0, 0] = 1.0 / m1
    d[..., 1, 1] = 1.0 / m2
    return r @ d @ np.swapaxes(r, -1, -2)


def inverse_mass_tensor_2d_from_tensor(mass_tensor_me):
    """Inverse-mass tensors from 2x2 effective-mass tensors (symmetrised, then inverted).

    Parameters
    ----------
    mass_tensor_me : array_like, shape (n, 2, 2)
        In-plane effective-mass tensor in m_e (symmetric positive definite).

    Returns
    -------
    numpy.ndarray, shape (n, 2, 2)
        Inverse-mass tensor in 1/m_e (NaN where the tensor is singular).

    References
    ----------
    Ashcroft and Mermin, *Solid State Physics*, ch. 12.
    """
    m = np.asarray(mass_tensor_me, dtype=float)
    m = 0.5 * (m + np.swapaxes(m, -1, -2))
    a, b, d = m[..., 0, 0], m[..., 0, 1], m[..., 1, 1]
    det = a * d - b * b
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = np.stack([np.stack([d, -b], -1), np.stack([-b, a], -1)], -2) / det[..., None, None]
    return np.where((det == 0)[..., None, None], np.nan, inv)


def reduced_inverse_mass_tensor(inv_electron, inv_hole):
    """Electron-hole reduced inverse-mass tensor, 1/mu = 1/m_e + 1/m_h.

    Valid when (i) both tensors are expressed in the same (layer) frame,
    (ii) the hole tensor is the *hole* inverse mass, i.e. positive definite
    (minus the valence-band curvature), and (iii) the exciton has zero
    centre-of-mass momentum and electron and hole band extrema sit at the
    same crystal momentum or are treated as such (direct exciton). The
    relative-motion Hamiltonian then has kinetic energy
    (hbar^2/2) k . (W_e + W_h) . k; for anisotropic tensors with different
    principal axes the centre-of-mass and relative motion do not separate
    exactly, and this sum is the standard approximation.

    Parameters
    ----------
    inv_electron, inv_hole : array_like, shape (n, 2, 2) (or (n, 3, 3))
        Inverse-mass tensors in 1/m_e, same frame.

    Returns
    -------
    numpy.ndarray
        Reduced inverse-mass tensor in 1/m_e, same shape.

    References
    ----------
    G. H. Wannier, Phys. Rev. 52, 191 (1937); R. S. Knox, *Theory of Excitons*
    (Academic, 1963), ch. 2 (effective-mass exciton, reduced mass).
    """
    return np.asarray(inv_electron, dtype=float) + np.asarray(inv_hole, dtype=float)


class PrincipalMasses(NamedTuple):
    """Principal in-plane masses (m_e) and orientation (degrees).

    Attributes
    ----------
    m_small_me : numpy.ndarray
        Lighter principal mass.
    m_large_me : numpy.ndarray
        Heavier principal mass.
    angle_deg : numpy.ndarray
        Angle of the *light* (m_small) axis from the layer-frame x axis, in
        (-90, 90]; 0 for an isotropic tensor.
    """

    m_small_me: np.ndarray
    m_large_me: np.ndarray
    angle_deg: np.ndarray


def principal_masses(inv_tensor):
    """Principal masses and orientation of 2x2 inverse-mass tensors (closed form).

    Parameters
    ----------
    inv_tensor : array_like, shape (n, 2, 2)
        Inverse-mass tensor in 1/m_e (symmetrised here).

    Returns
    -------
    PrincipalMasses
        (m_small_me, m_large_me, angle_deg), each of shape (n,); angle of the
        light axis from x in (-90, 90] degrees (0 if isotropic to relative 1e-12).

    References
    ----------
    Eigen-decomposition of a real symmetric 2x2 matrix; Golub and Van Loan,
    *Matrix Computations*, 4th ed., sec. 8.5.2 (Jacobi rotation angle).
    """
    w = np.asarray(inv_tensor, dtype=float)
    a = w[..., 0, 0]
    d = w[..., 1, 1]
    b = 0.5 * (w[..., 0, 1] + w[..., 1, 0])
    mean = 0.5 * (a + d)
    half = np.hypot(0.5 * (a - d), b)
    w_large = mean + half
    w_small = mean - half
    # Eigenvector of the largest inverse mass (lightest mass): angle 0.5*atan2(2b, a-d).
    ang = np.rad2deg(0.5 * np.arctan2(2.0 * b, a - d))
    ang = np.where(ang <= -90.0, ang + 180.0, ang)
    iso = half <= _ISOTROPIC_RTOL * np.abs(mean)
    ang = np.where(iso, 0.0, ang)
    with np.errstate(divide="ignore"):
        return PrincipalMasses(1.0 / w_large, 1.0 / w_small, ang)


def finite_tensor(tensor):
    """True where every entry of a 2x2 tensor (the last two axes) is finite.

    ``np.all(np.isfinite(t), axis=(-2, -1))``, written out entry by entry
    (a reduction over two short axes costs several times more).
    """
    t = np.asarray(tensor, dtype=float)
    return (np.isfinite(t[..., 0, 0]) & np.isfinite(t[..., 0, 1]) & np.isfinite(t[..., 1, 0])
            & np.isfinite(t[..., 1, 1]))


def inplane_average_mass_me(inv_tensor):
    """In-plane average mass used by the isotropic 2D exciton models: the geometric mean.

    mu_avg = sqrt(mu_1 mu_2) = 1 / sqrt(det W), with W the (reduced) inverse-mass
    tensor. It is rotation invariant and equals the 2D density-of-states mass
    (so the same mass enters the 2D Saha equation of :mod:`lamellume.survival`).

    Justification. Split the kinetic operator of the anisotropic 2D hydrogen
    problem into its isotropic part (inverse mass (W1+W2)/2, i.e. the
    harmonic-mean mass) and a d-wave remainder proportional to (W1-W2)(k_x^2 -
    k_y^2). The remainder has zero expectation value in the 1s state, so both
    the harmonic mean 2/(1/mu_1 + 1/mu_2) and the geometric mean agree with
    the anisotropic binding to first order in the anisotropy; second-order
    perturbation theory always *increases* the binding, which the harmonic
    mean (the smaller of the two) misses entirely. Against the variational
    anisotropic 2D binding (trial function exp(-sqrt(x^2/a^2 + y^2/b^2)) of
    Kohn and Luttinger, closed form in
    :func:`lamellume.hydrogenic.binding_2d_anisotropic`), the geometric mean
    over-binds by +1.2 % at mu_2/mu_1 = 2 and +3.0 % at mu_2/mu_1 = 3, while
    the harmonic mean under-binds by -4.6 % and -10.8 % (test_masses.py asserts
    |error| < 3.5 % for ratios up to 3). For stronger anisotropy use the
    variational function directly.

    Parameters
    ----------
    inv_tensor : array_like, shape (n, 2, 2)
        (Reduced) inverse-mass tensor in 1/m_e.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Geometric-mean mass in m_e.

    References
    ----------
    W. Kohn and J. M. Luttinger, Phys. Rev. 98, 915 (1955) (anisotropic
    exponential trial function); the comparison above is computed with it in
    this package's tests.
    """
    w = np.asarray(inv_tensor, dtype=float)
    det = w[..., 0, 0] * w[..., 1, 1] - 0.5 * (w[..., 0, 1] + w[..., 1, 0]) * 0.5 * (
        w[..., 0, 1] + w[..., 1, 0]
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        return 1.0 / np.sqrt(det)


def harmonic_mean_mass_me(inv_tensor):
    """Harmonic-mean (conductivity) in-plane mass 2 / tr(W), in m_e.

    Provided for comparison with :func:`inplane_average_mass_me`; it is the
    mass of the isotropic part of the kinetic operator.

    Parameters
    ----------
    inv_tensor : array_like, shape (n, 2, 2)
        Inverse-mass tensor in 1/m_e.

    Returns
    -------
    numpy.ndarray, shape (n,)
        2 / (1/mu_1 + 1/mu_2) in m_e.

    References
    ----------
    Ashcroft and Mermin, *Solid State Physics*, ch. 12 (conductivity mass).
    """
    w = np.asarray(inv_tensor, dtype=float)
    return 2.0 / (w[..., 0, 0] + w[..., 1, 1])


def reduced_mass_perpendicular(m_e_perp_me, m_h_perp_me):
    """Reduced mass along the layer normal, mu = m_e m_h / (m_e + m_h), in m_e.

    Missing values (NaN) propagate: a compound without out-of-plane masses gets
    NaN, and the bulk anisotropic model is then skipped for it by the caller.

    Parameters
    ----------
    m_e_perp_me, m_h_perp_me : array_like, shape (n,)
        Electron and hole masses along the normal in m_e (positive; NaN if absent).

    Returns
    -------
    numpy.ndarray, shape (n,)
        Reduced mass in m_e (NaN where either input is NaN).

    References
    ----------
    Knox, *Theory of Excitons* (1963), ch. 2.
    """
    me = np.asarray(m_e_perp_me, dtype=float)
    mh = np.asarray(m_h_perp_me, dtype=float)
    return 1.0 / (1.0 / me + 1.0 / mh)


def validate_masses(mass_me, allow_missing=False):
    """Per-compound reasons why effective masses are unusable (None if fine).

    Every value in a compound's row is checked: non-finite (NaN allowed only
    with ``allow_missing``; +-inf never), <= 0 (e.g. a hole mass given with the
    valence-band sign), or outside [MASS_MIN_ME, MASS_MAX_ME] = [1e-3, 100] m_e.

    Parameters
    ----------
    mass_me : array_like, shape (n,) or (n, k)
        Masses in m_e (scalar masses, principal pairs, or flattened tensors'
        principal values), one row per compound.
    allow_missing : bool, optional
        Accept NaN as "not provided" (e.g. out-of-plane masses).

    Returns
    -------
    list of (str or None), length n

    References
    ----------
    Bounds are common practice: effective masses of real semiconductors lie
    within roughly 0.01-10 m_e; values beyond 1e-3 or 100 m_e indicate a
    fitting failure or a flat band.
    """
    m = np.asarray(mass_me, dtype=float)
    if m.ndim == 0:
        m = m[None]
    m = m.reshape(m.shape[0], -1)
    reasons = []
    for row in m:
        r = []
        nan = np.isnan(row)
        if np.any(np.isinf(row)) or (np.any(nan) and not allow_missing):
            r.append("non-finite mass")
        v = row[np.isfinite(row)]
        if np.any(v <= 0.0):
            r.append(f"mass <= 0 ({v[v <= 0.0].min():.4g} m_e)")
        pos = v[v > 0.0]
        if np.any(pos > MASS_MAX_ME):
            r.append(f"absurd mass > {MASS_MAX_ME:g} m_e ({pos.max():.4g})")
        if np.any(pos < MASS_MIN_ME):
            r.append(f"absurd mass < {MASS_MIN_ME:g} m_e ({pos.min():.4g})")
        reasons.append("; ".join(r) if r else None)
    return reasons
