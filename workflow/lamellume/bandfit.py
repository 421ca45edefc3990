"""Effective-mass tensors from band energies sampled near a band extremum.

Frame
-----
The masses are needed in the *layer frame* (z along the layer normal, in-plane
axes e1, e2 of :func:`lamellume.dielectric.rotation_to_layer_frame`, the same
axes in which the dielectric tensor is expressed). Band samples may be given in
any Cartesian frame together with the layer normal in that frame:

* 3-component k points are rotated into the layer frame, k' = R k, before the
  fit. When k' varies along the normal, the full 3D quadratic form is fitted
  and its in-plane 2x2 block (the curvature at fixed k_normal) gives the
  in-plane masses; its normal component gives the out-of-plane mass. When the
  samples lie in one plane perpendicular to the normal (k'_z constant within
  a relative ``1e-4`` of the in-plane span, printing precision), the in-plane
  2D form is fitted. Samples in a plane *tilted* against the layer cannot
  separate in-plane from out-of-plane curvature and are rejected.
* 2-component k points (kx, ky) are in-plane only by construction; they are
  accepted only when the normal is along +-z (within 1e-6 in cosine) and
  rejected with a reason otherwise, because the out-of-plane part of k is
  unknown.

Without a normal, k is taken to be in the layer frame already (normal = z).

Model
-----
Wave vectors k in 1/Angstrom (layer frame, d = 2 or 3 components), energies in eV::

    E(k) = E0 + HBAR2_OVER_2ME_EV_A2 * (k - k0)^T W (k - k0)

with ``W`` the symmetric d x d *band-curvature* inverse-mass tensor in 1/m_e
and ``HBAR2_OVER_2ME_EV_A2`` = hbar^2 / (2 m_e) from :mod:`lamellume.units`.
Expanding gives a general quadratic, linear in 1 + d + d (d + 1) / 2
parameters (c, g, W_ij)::

    E = c + g.k + C sum_ij W_ij k_i k_j,   C = hbar^2/(2 m_e)

which is solved by linear least squares (columns equilibrated, SVD with a
rank check). The extremum follows from grad E = 0: ``k0 = -W^-1 g / (2 C)``
and ``E0 = E(k0)``. With ``fix_k0=True`` the extremum is pinned at k = 0 and
only (c, W_ij) are fitted. In 3D, when the out-of-plane curvature is not that
of an extremum (flat or of the wrong sign, common for weakly coupled layers),
the extremum is searched in the plane k_normal = mean of the samples and no
out-of-plane mass is reported.

The *carrier* inverse-mass tensor is ``W`` for a conduction band (electrons)
and ``-W`` for a valence band (holes), so a proper extremum has positive
carrier masses. The principal masses are the inverses of its eigenvalues.

Nonparabolicity
---------------
After the quadratic fit, one isotropic quartic term ``q |k - k0|^4`` (k0 from
the quadratic fit) is added and the model refitted. The band is flagged
non-parabolic when either

* the quartic contribution at the sampled point farthest from k0 exceeds
  ``quartic_fraction`` (default 5 %) of the quadratic contribution there, or
* the quartic term lowers the rms residual below ``residual_ratio``
  (default 0.5) times the quadratic rms, and that quadratic rms exceeds
  1 % of the sampled energy range (so a misfit that is real but negligible,
  or round-off on an exact parabola, is not flagged).

This is the leading correction of a two-band Kane dispersion,
``E (1 + E / Eg) = hbar^2 k^2 / (2 m)`` gives ``E ~ x - x^2 / Eg`` with
``x = hbar^2 k^2 / (2 m)``, so the quartic fraction is about ``x_max / Eg``.

References
----------
.. [1] E. O. Kane, "Band structure of indium antimonide", J. Phys. Chem.
   Solids 1, 249 (1957) (two-band non-parabolic dispersion).
.. [2] N. W. Ashcroft, N. D. Mermin, *Solid State Physics* (1976), ch. 12
   (effective-mass tensor as the inverse band-curvature tensor).
.. [3] J. F. Nye, *Physical Properties of Crystals* (Oxford, 1957), ch. 1
   (rotation of a second-rank tensor; here of k and of W).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from lamellume.dielectric import rotation_to_layer_frame
from lamellume.units import HBAR2_OVER_2ME_EV_A2

__all__ = ["BANDS", "MassFit", "MassFitError", "fit_effective_mass", "fit_effective_masses"]

#: Accepted band kinds.
BANDS: tuple[str, ...] = ("conduction", "valence")

# Relative singular-value threshold below which the design matrix is rank deficient.
_RANK_RTOL = 1e-9
# Quadratic rms misfit, relative to the sampled energy range, below which the
# residual-reduction test of nonparabolicity is not applied.
_RMS_FLOOR_REL = 1e-2
# Spread of k along the normal, relative to the in-plane spread, below which the
# samples are taken to lie in one plane (k printed with 4-6 significant digits).
_PLANAR_RTOL = 1e-4
# 2-component k points need |n_z| / |n| >= 1 - this (about 0.08 degrees; the
# neglected out-of-plane part then changes masses by < 1e-5 relative).
_NORMAL_Z_TOL = 1e-6
# Relative curvature below which a direction counts as flat.
_FLAT_RTOL = 1e-9


class MassFitError(ValueError):
    """Band energies from which no meaningful effective mass can be fitted."""


@dataclass(frozen=True, eq=False)
class MassFit:
    """Result of an effective-mass fit at one band extremum.

    Attributes
    ----------
    band : str
        ``"conduction"`` or ``"valence"``.
    inverse_mass_tensor : numpy.ndarray, shape (2, 2)
        In-plane carrier inverse-mass tensor in 1/m_e, in the layer frame's
        in-plane axes (e1, e2 of
        :func:`lamellume.dielectric.rotation_to_layer_frame`; x, y when no
        normal is given); positive definite for a proper extremum (holes:
        minus the band curvature).
    masses_me : tuple of float
        Principal in-plane carrier masses (m1, m2) in m_e, ``m1 <= m2``.
    angle_deg : float
        Angle of the principal axis of ``m1`` from e1, degrees, in
        (-90, 90]. Arbitrary (0) for an isotropic tensor.
    k0 : numpy.ndarray, shape (2,)
        In-plane extremum position (layer frame), 1/Angstrom.
    e0_ev : float
        Band energy at the extremum, eV.
    rms_residual_ev : float
        Root-mean-square residual of the quadratic fit, eV.
    nonparabolic : bool
        True when the quartic test (module docstring) flags the band.
    quartic_fraction : float
        |quartic| / |quadratic| contribution at the farthest sampled point
        (NaN when too few points to fit the quartic term).
    rms_residual_quartic_ev : float
        rms residual with the quartic term added, eV (NaN if not fitted).
    n_points : int
        Number of k points used.
    warnings : tuple of str
        Non-fatal notes (rotation into the layer frame, quartic test skipped, ...).
    perpendicular_mass_me : float
        Carrier mass along the layer normal in m_e (inverse of the normal
        component of the carrier inverse-mass tensor, i.e. the curvature at
        fixed in-plane k). NaN unless the samples vary along the normal and
        that curvature is of the extremum's sign.
    k0_normal : float
        Component of the extremum along the layer normal, 1/Angstrom (the
        plane of the samples for in-plane samples; 0 for 2-component k).
    """

    band: str
    inverse_mass_tensor: np.ndarray
    masses_me: tuple[float, float]
    angle_deg: float
    k0: np.ndarray
    e0_ev: float
    rms_residual_ev: float
    nonparabolic: bool
    quartic_fraction: float
    rms_residual_quartic_ev: float
    n_points: int
    warnings: tuple[str, ...] = ()
    perpendicular_mass_me: float = math.nan
    k0_normal: float = 0.0


def _pairs(d: int) -> list[tuple[int, int]]:
    """Upper-triangle index pairs (i <= j) of a d x d tensor, row by row."""
    return [(i, j) for i in range(d) for j in range(i, d)]


def _design(k: np.ndarray, fix_k0: bool) -> np.ndarray:
    """Design matrix, shape (..., m, p), of the quadratic model in d = k.shape[-1] dimensions."""
    d = k.shape[-1]
    c = HBAR2_OVER_2ME_EV_A2
    cols = [np.ones_like(k[..., 0])]
    if not fix_k0:
        cols += [k[..., i] for i in range(d)]
    cols += [(1.0 if i == j else 2.0) * c * k[..., i] * k[..., j] for i, j in _pairs(d)]
    return np.stack(cols, axis=-1)


def _curvature(coef: np.ndarray, d: int) -> np.ndarray:
    """Symmetric band-curvature tensors W (n, d, d) from the trailing coefficients."""
    pairs = _pairs(d)
    q = coef[:, coef.shape[1] - len(pairs):]
    w = np.empty((coef.shape[0], d, d))
    for col, (i, j) in enumerate(pairs):
        w[:, i, j] = w[:, j, i] = q[:, col]
    return w


def _lstsq_batched(a: np.ndarray, y: np.ndarray):
    """Least squares for stacked systems a (n, m, p), y (n, m) -> coef (n, p), rank (n,)."""
    norms = np.linalg.norm(a, axis=-2, keepdims=True)
    norms = np.where(norms > 0.0, norms, 1.0)
    a_s = a / norms
    u, s, vt = np.linalg.svd(a_s, full_matrices=False)
    smax = s[..., :1]
    keep = s > _RANK_RTOL * smax
    rank = keep.sum(axis=-1)
    uty = np.einsum("nmp,nm->np", u, y)
    s_inv = np.where(keep, 1.0 / np.where(keep, s, 1.0), 0.0)
    coef_s = np.einsum("npq,np->nq", vt, uty * s_inv)
    return coef_s / norms[..., 0, :], rank


def _validate(k, energies, band):
    if band not in BANDS:
        raise MassFitError(f"band must be one of {BANDS}, got {band!r}")
    try:
        k = np.asarray(k, dtype=float)
        e = np.asarray(energies, dtype=float)
    except (TypeError, ValueError) as exc:
        raise MassFitError(f"k points and energies must be numeric arrays ({exc})") from None
    if k.ndim != 3 or k.shape[-1] not in (2, 3):
        raise MassFitError(f"k points must have shape (m, 2) or (m, 3), got {k.shape[1:]}")
    if e.shape != k.shape[:2]:
        raise MassFitError(f"energies shape {e.shape[1:]} does not match {k.shape[1]} k points")
    if not np.all(np.isfinite(k)) or not np.all(np.isfinite(e)):
        raise MassFitError("k points or energies contain non-finite values (NaN or inf)")
    return k, e


def _to_layer_frame(k: np.ndarray, layer_normal, notes: list[list[str]]) -> np.ndarray:
    """k points (n, m, 2 or 3) as 3-component layer-frame vectors (n, m, 3)."""
    n = k.shape[0]
    k3 = k if k.shape[-1] == 3 else np.concatenate([k, np.zeros(k.shape[:2] + (1,))], axis=-1)
    if layer_normal is None:
        return k3
    try:
        normal = np.broadcast_to(np.asarray(layer_normal, dtype=float), (n, 3))
    except (TypeError, ValueError) as exc:
        raise MassFitError(f"layer normal must be a 3-vector per valley ({exc})") from None
    length = np.linalg.norm(normal, axis=-1)
    for i in np.flatnonzero(~np.isfinite(length) | (length <= 0.0)):
        raise MassFitError(f"valley {i}: layer normal must be finite and non-zero")
    cos_z = np.abs(normal[:, 2]) / length
    if k.shape[-1] == 2:
        for i in np.flatnonzero(cos_z < 1.0 - _NORMAL_Z_TOL):
            shown = ", ".join(f"{v:.4g}" for v in normal[i] / length[i])
            raise MassFitError(
                f"valley {i}: k points have 2 components (kx, ky) but the layer normal ({shown}) is not "
                "along z, so their out-of-plane part is unknown; give (kx, ky, kz) in the frame of the normal"
            )
    r = rotation_to_layer_frame(normal)
    for i in np.flatnonzero(cos_z < 1.0 - _NORMAL_Z_TOL):
        notes[i].append("k points rotated into the layer frame (normal not along z)")
    return np.einsum("nij,nmj->nmi", r, k3)


def _fit_group(k, e, band, fix_k0, quartic_fraction, residual_ratio, index):
    """Fit valleys whose samples have the same dimension d = k.shape[-1] (layer frame).

    Returns per-valley in-plane inverse mass (n, 2, 2), perpendicular carrier
    inverse mass (n,) (NaN for d = 2), k0 (n, d), e0, rms, quartic fraction,
    quartic rms, flag and notes.
    """
    n, m, d = k.shape
    p = (1 if fix_k0 else 1 + d) + d * (d + 1) // 2
    if m < p + 1:
        kind = "fixed" if fix_k0 else "free"
        where = "in the plane" if d == 2 else "in 3D (k varies along the normal)"
        raise MassFitError(
            f"valley {index[0]}: {m} k points are too few: the {kind}-extremum model {where} has {p} "
            f"parameters and needs at least {p + 1} points"
        )
    notes = [[] for _ in range(n)]
    a = _design(k, fix_k0)
    coef, rank = _lstsq_batched(a, e)
    for i in np.flatnonzero(rank < p):
        if d == 3:
            raise MassFitError(
                f"valley {index[i]}: k points vary along the layer normal but do not determine a 3D "
                f"quadratic (design rank {rank[i]} < {p}); points in a plane tilted against the layer "
                "cannot separate in-plane from out-of-plane curvature"
            )
        raise MassFitError(
            f"valley {index[i]}: degenerate k-point geometry (design rank {rank[i]} < {p}; "
            "points collinear or on a common conic)"
        )
    w = _curvature(coef, d)
    sign = 1.0 if band == "conduction" else -1.0
    inv_mass = sign * w
    inplane = inv_mass[:, :2, :2]
    lam = np.linalg.eigvalsh(inplane)  # ascending
    scale = np.max(np.abs(lam), axis=-1)
    for i in range(n):
        lo, hi = lam[i]
        if hi <= 0.0:
            want = "upward (minimum)" if band == "conduction" else "downward (maximum)"
            raise MassFitError(
                f"valley {index[i]}: curvature has the wrong sign for a {band} band; expected {want}")
        if lo < -_FLAT_RTOL * scale[i]:
            raise MassFitError(f"valley {index[i]}: saddle point (band-curvature eigenvalues of opposite sign)")
        if lo <= _FLAT_RTOL * scale[i]:
            raise MassFitError(f"valley {index[i]}: flat direction (zero curvature, unbounded mass)")

    c = HBAR2_OVER_2ME_EV_A2
    perp = np.full(n, np.nan)
    if fix_k0:
        k0 = np.zeros((n, d))
    else:
        g = coef[:, 1:1 + d]
        k0 = np.empty((n, d))
        if d == 2:
            k0[:] = -np.linalg.solve(w, g[..., None])[..., 0] / (2.0 * c)
        else:
            full_lam = np.linalg.eigvalsh(inv_mass)
            proper = full_lam[:, 0] > _FLAT_RTOL * np.max(np.abs(full_lam), axis=-1)
            for i in range(n):
                if proper[i]:
                    k0[i] = -np.linalg.solve(w[i], g[i]) / (2.0 * c)
                else:
                    kz = float(np.mean(k[i, :, 2]))
                    rhs = g[i, :2] / (2.0 * c) + w[i, :2, 2] * kz
                    k0[i, :2] = -np.linalg.solve(w[i, :2, :2], rhs)
                    k0[i, 2] = kz
    if d == 3:
        nz = inv_mass[:, 2, 2]
        ok = nz > _FLAT_RTOL * np.max(np.abs(np.linalg.eigvalsh(inv_mass)), axis=-1)
        perp = np.where(ok, nz, np.nan)
        where = "" if fix_k0 else ", extremum searched in the mean sampled plane"
        for i in np.flatnonzero(~ok):
            notes[i].append(f"out-of-plane curvature is flat or of the wrong sign for an extremum; "
                            f"no out-of-plane mass{where}")
    e0 = np.einsum("np,np->n", _design(k0[:, None, :], fix_k0)[:, 0, :], coef)
    resid = e - np.einsum("nmp,np->nm", a, coef)
    rms = np.sqrt(np.mean(resid**2, axis=-1))

    # Quartic test: add q |k - k0|^4 to the same model and refit.
    dk = k - k0[:, None, :]
    r2 = np.einsum("nmi,nmi->nm", dk, dk)
    if m >= p + 2:
        a4 = np.concatenate([a, (c * c * r2 * r2)[..., None]], axis=-1)
        coef4, rank4 = _lstsq_batched(a4, e)
        rms4 = np.sqrt(np.mean((e - np.einsum("nmp,np->nm", a4, coef4)) ** 2, axis=-1))
        w4 = _curvature(coef4[:, :-1], d)
        far = np.argmax(r2, axis=-1)
        dk_far = dk[np.arange(n), far]
        quad_far = c * np.abs(np.einsum("ni,nij,nj->n", dk_far, w4, dk_far))
        quart_far = np.abs(coef4[:, -1]) * (c * r2[np.arange(n), far]) ** 2
        frac = np.where(rank4 == p + 1, quart_far / np.where(quad_far > 0, quad_far, np.inf), np.nan)
        floor = _RMS_FLOOR_REL * np.ptp(e, axis=-1)
        flag = (np.nan_to_num(frac) > quartic_fraction) | ((rms > floor) & (rms4 < residual_ratio * rms))
        rms4 = np.where(rank4 == p + 1, rms4, np.nan)
        for i in np.flatnonzero(rank4 < p + 1):
            notes[i].append("quartic test skipped: k points do not constrain a |k|^4 term")
    else:
        frac = np.full(n, np.nan)
        rms4 = np.full(n, np.nan)
        flag = np.zeros(n, dtype=bool)
        for i in range(n):
            notes[i].append(f"quartic test skipped: needs at least {p + 2} points")
    return inplane, perp, k0, e0, rms, frac, rms4, flag, notes


def fit_effective_masses(
    k_inv_angstrom,
    energies_ev,
    band: str,
    *,
    layer_normal=None,
    fix_k0: bool = False,
    quartic_fraction: float = 0.05,
    residual_ratio: float = 0.5,
) -> list[MassFit]:
    """Fit effective-mass tensors for many valleys sampled with the same point count.

    Vectorised: valleys of the same sample dimension are solved as one stack
    of least-squares problems.

    Parameters
    ----------
    k_inv_angstrom : array_like, shape (n, m, 2) or (n, m, 3)
        Cartesian k points, 1/Angstrom, for n valleys of m points each, in
        the frame in which ``layer_normal`` is given (module docstring).
    energies_ev : array_like, shape (n, m)
        Band energies, eV.
    band : {"conduction", "valence"}
        Band kind; fixes the carrier sign and the expected curvature.
    layer_normal : array_like, shape (3,) or (n, 3), optional
        Layer normal in the frame of k (any length). None: k is in the layer
        frame already (normal along z).
    fix_k0 : bool
        Pin the extremum at k = 0 instead of fitting it.
    quartic_fraction : float
        Threshold of the quartic-to-quadratic ratio that flags nonparabolicity.
    residual_ratio : float
        Flag when the quartic term lowers the rms residual below this
        fraction of the quadratic rms (above the numerical floor).

    Returns
    -------
    list of MassFit
        One per valley, in input order; tensors in the layer frame.

    Raises
    ------
    MassFitError
        Bad band name or shapes; non-finite values; 2-component k with a
        normal not along z; fewer than p + 1 points (p = 6 in the plane, 10
        in 3D; 4 and 7 with ``fix_k0``); degenerate k-point geometry
        (rank-deficient design: points on a line, a conic, or a plane tilted
        against the layer); in-plane curvature of the wrong sign for the
        band, a saddle point or a flat direction. The message names the
        valley index.

    References
    ----------
    .. [1] E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957).
    .. [2] J. F. Nye, *Physical Properties of Crystals* (Oxford, 1957), ch. 1.
    """
    k, e = _validate(k_inv_angstrom, energies_ev, band)
    n, m = e.shape
    notes: list[list[str]] = [[] for _ in range(n)]
    kl = _to_layer_frame(k, layer_normal, notes)
    span_par = np.max(np.ptp(kl[..., :2], axis=1), axis=-1)
    span_perp = np.ptp(kl[..., 2], axis=1)
    planar = span_perp <= _PLANAR_RTOL * span_par

    inplane = np.empty((n, 2, 2))
    perp = np.full(n, np.nan)
    k0 = np.empty((n, 2))
    k0_normal = np.empty(n)
    e0, rms, frac, rms4 = (np.empty(n) for _ in range(4))
    flag = np.zeros(n, dtype=bool)
    for is_planar in (True, False):
        idx = np.flatnonzero(planar == is_planar)
        if idx.size == 0:
            continue
        kk = kl[idx, :, :2] if is_planar else kl[idx]
        if is_planar and not fix_k0:
            # k0 along the normal is the samples' plane.
            k0_normal[idx] = np.mean(kl[idx, :, 2], axis=-1)
        elif is_planar:
            k0_normal[idx] = 0.0
        out = _fit_group(kk, e[idx], band, fix_k0, quartic_fraction, residual_ratio, idx)
        inplane[idx], perp[idx], k0_d, e0[idx], rms[idx], frac[idx], rms4[idx], flag[idx], sub = out
        k0[idx] = k0_d[:, :2]
        if not is_planar:
            k0_normal[idx] = k0_d[:, 2]
        for j, i in enumerate(idx):
            notes[i].extend(sub[j])

    results = []
    for i in range(n):
        lam, vec = np.linalg.eigh(inplane[i])
        lo, hi = lam
        v = vec[:, 1]  # eigenvector of the largest inverse mass -> smallest mass m1
        angle = float(np.degrees(np.arctan2(v[1], v[0])))
        angle = angle - 180.0 if angle > 90.0 else angle + 180.0 if angle <= -90.0 else angle
        if np.isclose(lo, hi, rtol=1e-9, atol=0.0):
            angle = 0.0
        tensor = inplane[i].copy()
        tensor.flags.writeable = False
        kk = k0[i].copy()
        kk.flags.writeable = False
        results.append(
            MassFit(
                band=band,
                inverse_mass_tensor=tensor,
                masses_me=(float(1.0 / hi), float(1.0 / lo)),
                angle_deg=angle,
                k0=kk,
                e0_ev=float(e0[i]),
                rms_residual_ev=float(rms[i]),
                nonparabolic=bool(flag[i]),
                quartic_fraction=float(frac[i]),
                rms_residual_quartic_ev=float(rms4[i]),
                n_points=int(m),
                warnings=tuple(notes[i]),
                perpendicular_mass_me=float(1.0 / perp[i]) if np.isfinite(perp[i]) else math.nan,
                k0_normal=float(k0_normal[i]),
            )
        )
    return results


def fit_effective_mass(
    k_inv_angstrom,
    energies_ev,
    band: str,
    *,
    layer_normal=None,
    fix_k0: bool = False,
    quartic_fraction: float = 0.05,
    residual_ratio: float = 0.5,
) -> MassFit:
    """Fit the effective-mass tensor of one band extremum.

    Parameters
    ----------
    k_inv_angstrom : array_like, shape (m, 2) or (m, 3)
        Cartesian k points, 1/Angstrom, in the frame of ``layer_normal``.
    energies_ev : array_like, shape (m,)
        Band energies, eV.
    band : {"conduction", "valence"}
        Band kind.
    layer_normal : array_like, shape (3,), optional
        Layer normal in the frame of k; None means k is in the layer frame.
    fix_k0 : bool
        Pin the extremum at k = 0 instead of fitting it.
    quartic_fraction, residual_ratio : float
        Nonparabolicity thresholds (see :func:`fit_effective_masses`).

    Returns
    -------
    MassFit

    Raises
    ------
    MassFitError
        See :func:`fit_effective_masses`.

    References
    ----------
    .. [1] E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957).
    """
    try:
        k = np.asarray(k_inv_angstrom, dtype=float)
        e = np.asarray(energies_ev, dtype=float)
    except (TypeError, ValueError) as exc:
        raise MassFitError(f"k points and energies must be numeric arrays ({exc})") from None
    if k.ndim != 2:
        raise MassFitError(f"k points must have shape (m, 2) or (m, 3), got {k.shape}")
    if e.ndim != 1:
        raise MassFitError(f"energies must have shape (m,), got {e.shape}")
    normal = None if layer_normal is None else np.asarray(layer_normal, dtype=float)[None]
    try:
        return fit_effective_masses(
            k[None], e[None], band, layer_normal=normal, fix_k0=fix_k0,
            quartic_fraction=quartic_fraction, residual_ratio=residual_ratio,
        )[0]
    except MassFitError as exc:
        msg = str(exc)
        raise MassFitError(msg[len("valley 0: "):] if msg.startswith("valley 0: ") else msg) from None
