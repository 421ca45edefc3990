"""Variance-based attribution: which uncertain input decides a verdict.

Pure numpy; no file I/O, no model. The caller owns the model: it maps
standard-normal draws to inputs, evaluates the model on the sample matrices
built here and hands the outputs back to :func:`sobol_indices`.

Method
------
Inputs are the columns of a matrix of independent standard normals (each
column drives one uncertain input through the model's own map: a log-normal
factor, a normal shift, ...). Columns are grouped (for example all columns of
one valley's mass); indices are reported per group. With two independent
matrices A and B (N samples each) and, for group i, the matrix A_B^(i) equal
to A except for group i's columns, which come from B, the estimators are

* first-order (Saltelli et al. 2010, table 2 (b)):
  ``V_i = mean( f(B) (f(A_B^(i)) - f(A)) )``, ``S_i = V_i / V``;
* total (Jansen 1999; Saltelli et al. 2010, table 2 (f)):
  ``VT_i = mean( (f(A) - f(A_B^(i)))**2 ) / 2``, ``ST_i = VT_i / V``;

with V the variance of the pooled f(A) and f(B). f(B) in the first-order
numerator is centred on the pooled mean: the expectation is unchanged (the
difference has mean 0) but the estimator no longer carries an error
proportional to the output's offset (common practice; Sobol' et al. 2007
recommend the same for the first-order estimator). Cost: N (d + 2) model
evaluations for d groups. For independent inputs ``0 <= S_i <= ST_i``,
``sum_i S_i <= 1 <= sum_i ST_i`` (equalities for an additive model), up to
sampling error. S_i is the expected fraction of the output variance removed
if group i were known exactly (factor prioritisation; Saltelli et al. 2008,
sec. 1.2.15): the "removed" effect.

Halved (or otherwise reduced) uncertainty
-----------------------------------------
Shrinking an input's standard deviation by a factor c (c = 1/2: halved), in
the sense of a refined calculation whose result is not yet known, splits its
normal draw as ``z = sqrt(1 - c**2) u + c v`` with u (what the refinement
will learn) and v (what stays uncertain) independent standard normals. The
expected variance removed is then the first-order variance of u, estimated
with the same Saltelli formula from the matrix A_B^(u,i), which takes u from
B and v from A (A and B themselves are built as ``sqrt(1 - c**2) u + c v`` so
their columns stay standard normal). c = 0 gives back S_i; for an additive
Gaussian model the reduced effect is ``(1 - c**2) S_i`` (3/4 S_i when
halved), for a threshold verdict it can be much smaller. It never exceeds S_i
(u is part of z, so by the law of total variance Var E[Y|u] <= Var E[Y|z]);
a caller may therefore compute it only for the groups with the largest S_i.
Cost: N more evaluations per group.

Standard errors
---------------
Each estimator is a mean over N independent terms divided by V; its standard
error is reported as ``std(terms) / sqrt(N) / V`` (central limit theorem on
the numerator, V taken as known), which falls as N**-1/2.

References
----------
A. Saltelli, P. Annoni, I. Azzini, F. Campolongo, M. Ratto and S. Tarantola,
"Variance based sensitivity analysis of model output. Design and estimator for
the total sensitivity index", Comput. Phys. Commun. 181, 259 (2010).
M. J. W. Jansen, "Analysis of variance designs for model output", Comput.
Phys. Commun. 117, 35 (1999).
I. M. Sobol', "Global sensitivity indices for nonlinear mathematical models
and their Monte Carlo estimates", Math. Comput. Simul. 55, 271 (2001).
I. M. Sobol', S. Tarantola, D. Gatelli, S. S. Kucherenko and W. Mauntz,
"Estimating the approximation error when fixing unessential factors in global
sensitivity analysis", Reliab. Eng. Syst. Saf. 92, 957 (2007).
A. Saltelli et al., *Global Sensitivity Analysis: The Primer* (Wiley, 2008),
sec. 1.2.15 (factor prioritisation setting).
"""

from __future__ import annotations

from typing import NamedTuple, Sequence

import numpy as np

__all__ = ["SobolDesign", "SobolIndices", "sobol_design", "sobol_indices", "design_size"]


class SobolDesign(NamedTuple):
    """Sample matrices of a pick-freeze design.

    Attributes
    ----------
    a, b : numpy.ndarray, shape (..., N, D)
        The two independent base matrices (standard normals).
    ab : numpy.ndarray, shape (..., d, N, D)
        ``ab[..., i, :, :]`` is A with group i's columns taken from B.
    ab_reduced : numpy.ndarray or None, shape (..., r, N, D)
        A with the "learned" part u of group i taken from B, for the r groups
        asked for (present when the design was built with a ``residual``).
    """

    a: np.ndarray
    b: np.ndarray
    ab: np.ndarray
    ab_reduced: np.ndarray | None


class SobolIndices(NamedTuple):
    """Per-group indices, vectorised over leading (compound) axes.

    Attributes
    ----------
    mean : numpy.ndarray, shape (...)
        Mean of the pooled f(A), f(B) (for a 0/1 verdict: its probability).
    variance : numpy.ndarray, shape (...)
        Variance of the pooled f(A), f(B) (output units squared).
    first, total : numpy.ndarray, shape (..., d)
        First-order S_i and total ST_i indices (fractions of ``variance``;
        NaN where the variance is 0).
    first_se, total_se : numpy.ndarray, shape (..., d)
        Their standard errors (see module docstring).
    reduced, reduced_se : numpy.ndarray or None, shape (..., r)
        Expected fraction of ``variance`` removed if a group's uncertainty
        were reduced by the design's ``residual`` factor, and its error (for
        the r groups of ``y_ab_reduced``).
    """

    mean: np.ndarray
    variance: np.ndarray
    first: np.ndarray
    total: np.ndarray
    first_se: np.ndarray
    total_se: np.ndarray
    reduced: np.ndarray | None
    reduced_se: np.ndarray | None


def design_size(n_base: int, n_groups: int, n_reduced: int = 0) -> int:
    """Model evaluations of a design: N (d + 2), plus N per reduced-uncertainty matrix."""
    return int(n_base) * (int(n_groups) + 2 + int(n_reduced))


def _group_masks(groups: Sequence[Sequence[int]], n_dims: int) -> np.ndarray:
    masks = np.zeros((len(groups), n_dims), dtype=bool)
    for i, cols in enumerate(groups):
        cols = np.asarray(cols, dtype=np.int64).reshape(-1)
        if cols.size == 0:
            raise ValueError(f"group {i} has no columns")
        if cols.min() < 0 or cols.max() >= n_dims:
            raise ValueError(f"group {i} refers to a column outside 0..{n_dims - 1}")
        if masks[:, cols].any():
            raise ValueError(f"group {i} shares a column with another group")
        masks[i, cols] = True
    return masks


def sobol_design(draws: np.ndarray, groups: Sequence[Sequence[int]],
                 residual: float | None = None, reduced: Sequence[int] | None = None) -> SobolDesign:
    """Build the pick-freeze sample matrices from independent standard normals.

    Parameters
    ----------
    draws : array_like, shape (..., K, N, D)
        Independent standard normals; K = 2 without ``residual`` (A, B) and
        K = 4 with it (u_A, v_A, u_B, v_B). Leading axes (compounds) are kept.
    groups : sequence of sequences of int
        Column indices of each group (disjoint; columns in no group keep A's
        values in every matrix, i.e. they vary but are not attributed).
    residual : float, optional
        Factor c in [0, 1) by which a group's standard deviation would shrink
        (0.5 = halved); adds :attr:`SobolDesign.ab_reduced`.
    reduced : sequence of int, optional
        Groups (indices into ``groups``) that get a reduced-uncertainty matrix,
        in this order (default: all).

    Returns
    -------
    SobolDesign
        Every matrix has standard-normal columns.

    References
    ----------
    Saltelli et al., Comput. Phys. Commun. 181, 259 (2010), sec. 3 (the
    matrices A, B and A_B^(i)).
    """
    z = np.asarray(draws, dtype=float)
    k_needed = 2 if residual is None else 4
    if z.ndim < 3 or z.shape[-3] != k_needed:
        raise ValueError(f"draws must have shape (..., {k_needed}, N, D)")
    masks = _group_masks(groups, z.shape[-1])
    if residual is None:
        a, b = z[..., 0, :, :], z[..., 1, :, :]
        ab_reduced = None
    else:
        c = float(residual)
        if not 0.0 <= c < 1.0:
            raise ValueError("residual must lie in [0, 1)")
        s = np.sqrt(1.0 - c * c)
        u_a, v_a, u_b, v_b = (z[..., j, :, :] for j in range(4))
        a, b = s * u_a + c * v_a, s * u_b + c * v_b
        mixed = s * u_b + c * v_a
        chosen = masks if reduced is None else masks[np.asarray(reduced, dtype=np.int64).reshape(-1)]
        ab_reduced = np.where(chosen[:, None, :], mixed[..., None, :, :], a[..., None, :, :])
    ab = np.where(masks[:, None, :], b[..., None, :, :], a[..., None, :, :])
    return SobolDesign(a=a, b=b, ab=ab, ab_reduced=ab_reduced)


def sobol_indices(y_a, y_b, y_ab, y_ab_reduced=None) -> SobolIndices:
    """First-order (Saltelli 2010) and total (Jansen 1999) indices from model outputs.

    Parameters
    ----------
    y_a, y_b : array_like, shape (..., N)
        Model output on A and on B (float or bool; a bool verdict is 0/1).
    y_ab : array_like, shape (..., d, N)
        Model output on each A_B^(i).
    y_ab_reduced : array_like, shape (..., r, N), optional
        Model output on each A_B^(u,i) of a design built with ``residual``
        (r groups; the reduced effects are returned in that order).

    Returns
    -------
    SobolIndices
        Indices are NaN where the pooled variance is 0 (nothing to attribute)
        or an output is not finite in some sample.

    References
    ----------
    Saltelli et al., Comput. Phys. Commun. 181, 259 (2010), table 2, (b) and
    (f); Jansen, Comput. Phys. Commun. 117, 35 (1999).
    """
    fa = np.asarray(y_a, dtype=float)
    fb = np.asarray(y_b, dtype=float)
    fab = np.asarray(y_ab, dtype=float)
    if fa.shape != fb.shape or fab.shape[:-2] != fa.shape[:-1] or fab.shape[-1] != fa.shape[-1]:
        raise ValueError("y_a, y_b must have shape (..., N) and y_ab shape (..., d, N)")
    n = fa.shape[-1]
    pooled = np.concatenate([fa, fb], axis=-1)
    mean = pooled.mean(axis=-1)
    variance = pooled.var(axis=-1)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_v = np.where(variance > 0.0, 1.0 / variance, np.nan)[..., None]
        root_n = np.sqrt(n)

        def ratio(terms):
            return terms.mean(axis=-1) * inv_v, terms.std(axis=-1) / root_n * inv_v

        fb_c = (fb - mean[..., None])[..., None, :]
        first, first_se = ratio(fb_c * (fab - fa[..., None, :]))
        total, total_se = ratio(0.5 * (fa[..., None, :] - fab) ** 2)
        reduced = reduced_se = None
        if y_ab_reduced is not None:
            fr = np.asarray(y_ab_reduced, dtype=float)
            if fr.shape[:-2] != fa.shape[:-1] or fr.shape[-1] != n:
                raise ValueError("y_ab_reduced must have shape (..., r, N)")
            reduced, reduced_se = ratio(fb_c * (fr - fa[..., None, :]))
    return SobolIndices(mean=mean, variance=variance, first=first, total=total, first_se=first_se,
                        total_se=total_se, reduced=reduced, reduced_se=reduced_se)
