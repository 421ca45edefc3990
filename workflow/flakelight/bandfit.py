"""Effective-mass tensors from band energies sampled near a band extremum.

Model
-----
In-plane wave vectors k = (kx, ky) in 1/Angstrom (Cartesian), energies in eV::

    E(k) = E0 + HBAR2_OVER_2ME_EV_A2 * (k - k0)^T W (k - k0)

with ``W`` the symmetric 2x2 *band-curvature* inverse-mass tensor in 1/m_e and
``HBAR2_OVER_2ME_EV_A2`` = hbar^2 / (2 m_e) from :mod:`flakelight.units`.
Expanding gives a general quadratic, linear in six parameters
(c, gx, gy, Wxx, Wxy, Wyy)::

    E = c + g.k + C (Wxx kx^2 + 2 Wxy kx ky + Wyy ky^2),   C = hbar^2/(2 m_e)

which is solved by linear least squares (columns equilibrated, SVD with a
rank check). The extremum follows from grad E = 0: ``k0 = -W^-1 g / (2 C)`` and
``E0 = c + g.k0 / 2``. With ``fix_k0=True`` the extremum is pinned at k = 0
and only (c, Wxx, Wxy, Wyy) are fitted.

The *carrier* inverse-mass tensor is ``W`` for a conduction band (electrons)
and ``-W`` for a valence band (holes), so a proper extremum has positive
carrier masses. The principal masses are the inverses of its eigenvalues.

A third (z) column of ``k`` is ignored: the fit is in-plane. A warning is
attached when the z component varies.

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
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flakelight.units import HBAR2_OVER_2ME_EV_A2

__all__ = ["BANDS", "MassFit", "MassFitError", "fit_effective_mass", "fit_effective_masses"]

#: Accepted band kinds.
BANDS: tuple[str, ...] = ("conduction", "valence")

# Relative singular-value threshold below which the design matrix is rank deficient.
_RANK_RTOL = 1e-9
# Quadratic rms misfit, relative to the sampled energy range, below which the
# residual-reduction test of nonparabolicity is not applied.
_RMS_FLOOR_REL = 1e-2


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
        Carrier inverse-mass tensor in 1/m_e (Cartesian x, y); positive
        definite for a proper extremum (holes: minus the band curvature).
    masses_me : tuple of float
        Principal carrier masses (m1, m2) in m_e, ``m1 <= m2``.
    angle_deg : float
        Angle of the principal axis of ``m1`` from the x axis, degrees, in
        (-90, 90]. Arbitrary (0) for an isotropic tensor.
    k0 : numpy.ndarray, shape (2,)
        Extremum position, 1/Angstrom.
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
        Non-fatal notes (ignored kz variation, quartic test skipped, ...).
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


def _design(kxy: np.ndarray, fix_k0: bool) -> np.ndarray:
    """Design matrix, shape (..., m, p), of the quadratic model."""
    kx, ky = kxy[..., 0], kxy[..., 1]
    c = HBAR2_OVER_2ME_EV_A2
    cols = [np.ones_like(kx)]
    if not fix_k0:
        cols += [kx, ky]
    cols += [c * kx * kx, 2.0 * c * kx * ky, c * ky * ky]
    return np.stack(cols, axis=-1)


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


def fit_effective_masses(
    k_inv_angstrom,
    energies_ev,
    band: str,
    *,
    fix_k0: bool = False,
    quartic_fraction: float = 0.05,
    residual_ratio: float = 0.5,
) -> list[MassFit]:
    """Fit effective-mass tensors for many valleys sampled with the same point count.

    Vectorised: all valleys are solved as one stack of least-squares problems.

    Parameters
    ----------
    k_inv_angstrom : array_like, shape (n, m, 2) or (n, m, 3)
        Cartesian k points, 1/Angstrom, for n valleys of m points each; a
        z component is ignored.
    energies_ev : array_like, shape (n, m)
        Band energies, eV.
    band : {"conduction", "valence"}
        Band kind; fixes the carrier sign and the expected curvature.
    fix_k0 : bool
        Pin the extremum at k = 0 (4 parameters) instead of fitting it (6).
    quartic_fraction : float
        Threshold of the quartic-to-quadratic ratio that flags nonparabolicity.
    residual_ratio : float
        Flag when the quartic term lowers the rms residual below this
        fraction of the quadratic rms (above the numerical floor).

    Returns
    -------
    list of MassFit
        One per valley, in input order.

    Raises
    ------
    MassFitError
        Bad band name or shapes; non-finite values; fewer than p + 1 points
        (p = 6, or 4 with ``fix_k0``); degenerate k-point geometry (rank-
        deficient design: points on a line, circle or other conic); curvature
        of the wrong sign for the band, a saddle point or a flat direction.
        The message names the valley index.

    References
    ----------
    .. [1] E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957).
    """
    k, e = _validate(k_inv_angstrom, energies_ev, band)
    n, m = e.shape
    p = 4 if fix_k0 else 6
    if m < p + 1:
        raise MassFitError(
            f"{m} k points are too few: the {'fixed' if fix_k0 else 'free'}-extremum model has "
            f"{p} parameters and needs at least {p + 1} points"
        )
    kxy = k[..., :2]
    notes = [[] for _ in range(n)]
    if k.shape[-1] == 3:
        span = np.ptp(k[..., 2], axis=-1)
        for i in np.flatnonzero(span > 1e-12):
            notes[i].append(f"kz varies by {span[i]:.3g} 1/A; ignored (in-plane fit)")

    a = _design(kxy, fix_k0)
    coef, rank = _lstsq_batched(a, e)
    for i in np.flatnonzero(rank < p):
        raise MassFitError(
            f"valley {i}: degenerate k-point geometry (design rank {rank[i]} < {p}; "
            "points collinear or on a common conic)"
        )
    w = np.empty((n, 2, 2))
    w[:, 0, 0], w[:, 0, 1], w[:, 1, 1] = coef[:, -3], coef[:, -2], coef[:, -1]
    w[:, 1, 0] = w[:, 0, 1]
    sign = 1.0 if band == "conduction" else -1.0
    inv_mass = sign * w
    lam, vec = np.linalg.eigh(inv_mass)  # ascending
    scale = np.max(np.abs(lam), axis=-1)
    for i in range(n):
        lo, hi = lam[i]
        if hi <= 0.0:
            want = "upward (minimum)" if band == "conduction" else "downward (maximum)"
            raise MassFitError(f"valley {i}: curvature has the wrong sign for a {band} band; expected {want}")
        if lo < -1e-9 * scale[i]:
            raise MassFitError(f"valley {i}: saddle point (band-curvature eigenvalues of opposite sign)")
        if lo <= 1e-9 * scale[i]:
            raise MassFitError(f"valley {i}: flat direction (zero curvature, unbounded mass)")

    c = HBAR2_OVER_2ME_EV_A2
    if fix_k0:
        k0 = np.zeros((n, 2))
        e0 = coef[:, 0]
    else:
        g = coef[:, 1:3]
        k0 = -np.linalg.solve(w, g[..., None])[..., 0] / (2.0 * c)
        e0 = coef[:, 0] + 0.5 * np.einsum("ni,ni->n", g, k0)
    resid = e - np.einsum("nmp,np->nm", a, coef)
    rms = np.sqrt(np.mean(resid**2, axis=-1))

    # Quartic test: add q |k - k0|^4 to the same model and refit.
    dk = kxy - k0[:, None, :]
    r2 = np.einsum("nmi,nmi->nm", dk, dk)
    if m >= p + 2:
        a4 = np.concatenate([a, (c * c * r2 * r2)[..., None]], axis=-1)
        coef4, rank4 = _lstsq_batched(a4, e)
        rms4 = np.sqrt(np.mean((e - np.einsum("nmp,np->nm", a4, coef4)) ** 2, axis=-1))
        w4 = np.empty((n, 2, 2))
        w4[:, 0, 0], w4[:, 0, 1], w4[:, 1, 1] = coef4[:, -4], coef4[:, -3], coef4[:, -2]
        w4[:, 1, 0] = w4[:, 0, 1]
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

    results = []
    for i in range(n):
        lo, hi = lam[i]
        v = vec[i][:, 1]  # eigenvector of the largest inverse mass -> smallest mass m1
        angle = float(np.degrees(np.arctan2(v[1], v[0])))
        angle = angle - 180.0 if angle > 90.0 else angle + 180.0 if angle <= -90.0 else angle
        if np.isclose(lo, hi, rtol=1e-9, atol=0.0):
            angle = 0.0
        tensor = inv_mass[i].copy()
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
            )
        )
    return results


def fit_effective_mass(
    k_inv_angstrom,
    energies_ev,
    band: str,
    *,
    fix_k0: bool = False,
    quartic_fraction: float = 0.05,
    residual_ratio: float = 0.5,
) -> MassFit:
    """Fit the effective-mass tensor of one band extremum.

    Parameters
    ----------
    k_inv_angstrom : array_like, shape (m, 2) or (m, 3)
        Cartesian k points, 1/Angstrom; a z component is ignored.
    energies_ev : array_like, shape (m,)
        Band energies, eV.
    band : {"conduction", "valence"}
        Band kind.
    fix_k0 : bool
        Pin the extremum at k = 0 (4 parameters) instead of fitting it (6).
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
    try:
        return fit_effective_masses(
            k[None], e[None], band, fix_k0=fix_k0, quartic_fraction=quartic_fraction, residual_ratio=residual_ratio
        )[0]
    except MassFitError as exc:
        msg = str(exc)
        raise MassFitError(msg[len("valley 0: "):] if msg.startswith("valley 0: ") else msg) from None
