"""Dielectric tensors of layered compounds in the layer frame.

A layered compound's static (electronic plus, if the caller chooses, ionic)
relative permittivity is a symmetric positive-definite 3x3 tensor given in a
laboratory (crystal Cartesian) frame. The exciton models need it in the *layer
frame*, whose z axis is the unit layer normal, and reduced to a few scalars:
the in-plane constant eps_parallel, the out-of-plane constant
eps_perpendicular, an in-plane anisotropy measure, and the geometric mean used
by the bulk hydrogenic model.

All functions are pure and vectorized: the leading axis indexes compounds.
Dielectric constants are relative to the vacuum permittivity (dimensionless).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "LayerConstants",
    "rotation_to_layer_frame",
    "to_layer_frame",
    "layer_constants",
    "validate_tensor",
    "SYMMETRY_RTOL",
]

#: Default relative tolerance of the symmetry check in :func:`validate_tensor`:
#: max |T - T^T| must not exceed this times max |T|. First-principles codes
#: usually print tensors with 4-6 significant digits, so 1e-4 accepts rounding
#: noise while rejecting genuinely non-symmetric input.
SYMMETRY_RTOL: float = 1e-4

# Above this |n_x| the lab x axis is too close to the normal for its projection
# to be a well-conditioned in-plane axis; lab y is used instead (|n_x| > 0.9
# implies |n_y| < 0.44, so the y projection has length > 0.9).
_X_FALLBACK_COSINE = 0.9


def _unit(v, name):
    v = np.asarray(v, dtype=float)
    norm = np.linalg.norm(v, axis=-1, keepdims=True)
    if np.any(~np.isfinite(norm)) or np.any(norm <= 0.0):
        raise ValueError(f"{name} must be finite and non-zero")
    return v / norm


def rotation_to_layer_frame(normal):
    """Proper rotations taking each layer normal onto +z.

    The rows of each returned matrix R are the layer-frame axes (e1, e2, n)
    expressed in the laboratory frame, so ``R @ n = (0, 0, 1)`` and a lab
    vector v has layer-frame components ``R @ v``.

    In-plane axes are chosen deterministically: e1 is the lab x axis projected
    onto the layer plane and normalised; if the normal is within about 25.8
    degrees of +-x (|n_x| > 0.9) the lab y axis is projected instead.
    e2 = n x e1 completes a right-handed frame (det R = +1). For n = +z this
    gives the identity; for n = -z it gives diag(1, -1, -1) (a rotation by pi
    about x), with no special-casing and no loss of accuracy. In-plane scalar
    results of this module (eps_parallel, anisotropy) do not depend on the
    in-plane choice; in-plane *directions* (e.g. a mass-tensor angle) are
    measured from e1.

    Parameters
    ----------
    normal : array_like, shape (n, 3) or (3,)
        Layer normal in the laboratory frame (any non-zero length; it is
        normalised here; the sign is kept).

    Returns
    -------
    numpy.ndarray, shape (n, 3, 3) (or (3, 3) for a single normal)
        Rotation matrices, orthogonal with determinant +1.

    Raises
    ------
    ValueError
        If any normal is zero or non-finite.

    References
    ----------
    Gram-Schmidt construction of an orthonormal frame; e.g. G. H. Golub and
    C. F. Van Loan, *Matrix Computations*, 4th ed. (Johns Hopkins, 2013), sec. 5.2.
    """
    n = _unit(normal, "normal")
    use_y = np.abs(n[..., 0]) > _X_FALLBACK_COSINE
    ref = np.zeros_like(n)
    ref[..., 0] = np.where(use_y, 0.0, 1.0)
    ref[..., 1] = np.where(use_y, 1.0, 0.0)
    e1 = ref - np.sum(ref * n, axis=-1, keepdims=True) * n
    e1 /= np.linalg.norm(e1, axis=-1, keepdims=True)
    e2 = np.cross(n, e1)
    return np.stack([e1, e2, n], axis=-2)


def to_layer_frame(tensor, normal, rotation=None):
    """Express rank-2 tensors in the layer frame, T' = R T R^T.

    Parameters
    ----------
    tensor : array_like, shape (n, 3, 3)
        Tensor in the laboratory frame (e.g. relative permittivity, dimensionless).
    normal : array_like, shape (n, 3)
        Layer normal in the laboratory frame.
    rotation : array_like, shape (n, 3, 3), optional
        ``rotation_to_layer_frame(normal)`` when already computed (``normal``
        is then not used).

    Returns
    -------
    numpy.ndarray, shape (n, 3, 3)
        Tensor in the layer frame of :func:`rotation_to_layer_frame` (zz = along
        the normal).

    References
    ----------
    Transformation law of a Cartesian second-rank tensor; J. F. Nye, *Physical
    Properties of Crystals* (Oxford, 1957), ch. 1.
    """
    t = np.asarray(tensor, dtype=float)
    r = rotation_to_layer_frame(normal) if rotation is None else np.asarray(rotation, dtype=float)
    return r @ t @ np.swapaxes(r, -1, -2)


class LayerConstants(NamedTuple):
    """Scalar dielectric constants of a layered compound (all dimensionless).

    Attributes
    ----------
    eps_parallel : numpy.ndarray
        Mean of the two eigenvalues of the in-plane 2x2 block (= half its trace).
    eps_perpendicular : numpy.ndarray
        The zz component (along the layer normal).
    inplane_anisotropy : numpy.ndarray
        (lambda_max - lambda_min) / mean(lambda) of the in-plane eigenvalues;
        0 for an in-plane isotropic (e.g. hexagonal/tetragonal) layer.
    eps_bulk_effective : numpy.ndarray
        sqrt(eps_parallel * eps_perpendicular), the screening of the Coulomb
        interaction in an uniaxial medium (V = -e^2 / (4 pi eps0 sqrt(eps_par
        eps_perp) sqrt(rho^2 + (eps_par/eps_perp) z^2))); used by the bulk
        isotropic hydrogenic model.
    """

    eps_parallel: np.ndarray
    eps_perpendicular: np.ndarray
    inplane_anisotropy: np.ndarray
    eps_bulk_effective: np.ndarray


def layer_constants(tensor_layer_frame):
    """Reduce layer-frame dielectric tensors to the scalars used by the exciton models.

    The tensor is symmetrised first. Components coupling the plane to the
    normal (xz, yz), which are non-zero for monoclinic/triclinic stacking, are
    ignored: eps_perpendicular is the zz component, not an eigenvalue.

    Parameters
    ----------
    tensor_layer_frame : array_like, shape (n, 3, 3)
        Relative permittivity in the layer frame (dimensionless).

    Returns
    -------
    LayerConstants
        Arrays of shape (n,): eps_parallel, eps_perpendicular,
        inplane_anisotropy = (lambda_max - lambda_min) / ((lambda_max +
        lambda_min)/2) of the in-plane block, eps_bulk_effective =
        sqrt(eps_parallel * eps_perpendicular).

    References
    ----------
    L. D. Landau and E. M. Lifshitz, *Electrodynamics of Continuous Media*,
    2nd ed. (Pergamon, 1984), sec. 13 (field of a point charge in an
    anisotropic dielectric, giving the geometric-mean screening).
    """
    t = np.asarray(tensor_layer_frame, dtype=float)
    t = 0.5 * (t + np.swapaxes(t, -1, -2))
    a = t[..., 0, 0]
    d = t[..., 1, 1]
    b = t[..., 0, 1]
    mean = 0.5 * (a + d)
    half_split = np.hypot(0.5 * (a - d), b)
    eps_par = mean
    eps_perp = t[..., 2, 2]
    with np.errstate(invalid="ignore", divide="ignore"):
        anis = 2.0 * half_split / mean
        eff = np.sqrt(eps_par * eps_perp)
    return LayerConstants(eps_par, eps_perp, anis, eff)


def validate_tensor(tensor, symmetry_rtol=SYMMETRY_RTOL):
    """Per-compound reasons why a dielectric tensor is unphysical (None if fine).

    Checks, in order (all failing checks are reported, joined by "; "):

    1. every component finite (if not, the later checks are skipped);
    2. symmetric: max |T - T^T| <= symmetry_rtol * max |T|;
    3. positive definite: smallest eigenvalue of the symmetric part > 0;
    4. every eigenvalue >= 1 (a static relative permittivity below the vacuum
       value is unphysical for a passive insulator); reported only when the
       tensor is positive definite, since check 3 already covers it.

    Parameters
    ----------
    tensor : array_like, shape (n, 3, 3)
        Relative permittivity (dimensionless), any frame.
    symmetry_rtol : float, optional
        Relative symmetry tolerance (default :data:`SYMMETRY_RTOL` = 1e-4).

    Returns
    -------
    list of (str or None), length n
        None for a valid tensor, else a human-readable reason.

    References
    ----------
    Landau and Lifshitz, *Electrodynamics of Continuous Media*, secs. 13-14
    (symmetry and positivity of the static permittivity tensor; eps >= 1 for
    the static response of a stable dielectric, sec. 14 and the Kramers-Kronig
    relations, sec. 82).
    """
    t = np.asarray(tensor, dtype=float)
    if t.ndim == 2:
        t = t[None]
    if t.shape[-2:] != (3, 3):
        raise ValueError(f"tensor must have shape (n, 3, 3), got {t.shape}")
    n = t.shape[0]
    finite = np.all(np.isfinite(t), axis=(-1, -2))
    safe = np.where(finite[:, None, None], t, np.eye(3))
    asym = np.max(np.abs(safe - np.swapaxes(safe, -1, -2)), axis=(-1, -2))
    scale = np.max(np.abs(safe), axis=(-1, -2))
    sym_ok = asym <= symmetry_rtol * scale
    eig = np.linalg.eigvalsh(0.5 * (safe + np.swapaxes(safe, -1, -2)))
    lam_min = eig[:, 0]
    reasons = []
    for i in range(n):
        if not finite[i]:
            reasons.append("non-finite component")
            continue
        r = []
        if not sym_ok[i]:
            r.append(
                f"not symmetric (max |T-T^T| = {asym[i]:.3g} > "
                f"{symmetry_rtol:g} x max|T| = {symmetry_rtol * scale[i]:.3g})"
            )
        if lam_min[i] <= 0.0:
            r.append(f"not positive definite (smallest eigenvalue {lam_min[i]:.4g})")
        elif lam_min[i] < 1.0:
            r.append(f"eigenvalue < 1 (smallest eigenvalue {lam_min[i]:.4g})")
        reasons.append("; ".join(r) if r else None)
    return reasons
