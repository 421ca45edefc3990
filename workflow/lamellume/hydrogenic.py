"""Hydrogenic (Wannier-Mott) exciton models: bulk, anisotropic bulk, 2D, fractional dimension.

Energies in eV (binding energies positive), lengths in Angstrom, masses in
m_e, dielectric constants relative. All functions are pure and broadcast over
compounds.

Radius convention (used consistently in this module): a "Bohr radius" or
"radius" is the **decay length of the ground-state (1s) envelope**,
psi ~ exp(-r / a). Hence a_3D = a0 eps / mu, a_2D = a_3D / 2 (psi_2D ~
exp(-2 r / a_3D)), and in D = alpha dimensions a_alpha = a_3D (alpha - 1) / 2.
The root-mean-square radius is sqrt(3) a_3D in 3D and sqrt(3/8) a_3D in 2D.
:func:`bulk_exciton` also gives the *in-plane rms radius* sqrt(<x^2 + y^2>),
the convention shared with the Rytova-Keldysh radius of the layers.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from lamellume.units import BOHR_RADIUS_ANGSTROM, RYDBERG_EV

__all__ = [
    "effective_rydberg_ev",
    "binding_3d_ev",
    "bohr_radius_3d_angstrom",
    "anisotropy_parameter",
    "AnisotropicExciton",
    "binding_3d_anisotropic",
    "binding_2d_ev",
    "bohr_radius_2d_angstrom",
    "binding_2d_anisotropic",
    "binding_fractional_ev",
    "bohr_radius_fractional_angstrom",
    "BulkExciton",
    "bulk_exciton",
]


def effective_rydberg_ev(mu_me, eps):
    """Effective Rydberg Ry* = Ry mu / eps^2 in eV.

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    eps : array_like
        Relative dielectric constant.

    Returns
    -------
    numpy.ndarray
        Ry* in eV.

    References
    ----------
    G. H. Wannier, Phys. Rev. 52, 191 (1937).
    """
    return RYDBERG_EV * np.asarray(mu_me, dtype=float) / np.asarray(eps, dtype=float) ** 2


def binding_3d_ev(mu_me, eps, n=1):
    """Binding energy of the n-th 3D Wannier-Mott level, Ry mu / (eps^2 n^2), in eV.

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    eps : array_like
        Relative dielectric constant (isotropic; for a uniaxial crystal see
        :func:`binding_3d_anisotropic`, or use sqrt(eps_par eps_perp)).
    n : int or array_like, optional
        Principal quantum number >= 1.

    Returns
    -------
    numpy.ndarray
        Binding energy in eV (positive).

    References
    ----------
    Wannier, Phys. Rev. 52, 191 (1937); R. J. Elliott, Phys. Rev. 108, 1384 (1957).
    """
    n = np.asarray(n, dtype=float)
    return effective_rydberg_ev(mu_me, eps) / n**2


def bohr_radius_3d_angstrom(mu_me, eps):
    """Exciton Bohr radius a0 eps / mu in Angstrom (1s decay length in 3D).

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    eps : array_like
        Relative dielectric constant.

    Returns
    -------
    numpy.ndarray
        Radius in Angstrom.

    References
    ----------
    Wannier, Phys. Rev. 52, 191 (1937).
    """
    return BOHR_RADIUS_ANGSTROM * np.asarray(eps, dtype=float) / np.asarray(mu_me, dtype=float)


# ---------------------------------------------------------------------------
# Anisotropic (uniaxial) bulk exciton, variational
# ---------------------------------------------------------------------------


def anisotropy_parameter(mu_par_me, mu_perp_me, eps_par, eps_perp):
    """Anisotropy parameter gamma = (mu_par eps_par) / (mu_perp eps_perp) (dimensionless).

    With u = sqrt(eps_par/eps_perp) z the uniaxial Hamiltonian becomes, in
    units Ry* = Ry mu_par/(eps_par eps_perp) and a* = a0 sqrt(eps_par
    eps_perp)/mu_par,  H = -nabla_rho^2 - gamma d^2/du^2 - 2/sqrt(rho^2 + u^2).
    gamma = 1 is isotropic; gamma -> 0 (heavy or weakly screened motion along
    the normal) approaches the 2D limit.

    Parameters
    ----------
    mu_par_me, mu_perp_me : array_like
        Reduced masses in the plane and along the normal, m_e.
    eps_par, eps_perp : array_like
        Dielectric constants in the plane and along the normal.

    Returns
    -------
    numpy.ndarray
        gamma.

    References
    ----------
    R. A. Faulkner, Phys. Rev. 184, 713 (1969) (the same reduction for donors,
    where the unique axis is the heavy longitudinal one; with isotropic
    screening gamma is the transverse-to-longitudinal mass ratio).
    """
    return (np.asarray(mu_par_me, float) * np.asarray(eps_par, float)) / (
        np.asarray(mu_perp_me, float) * np.asarray(eps_perp, float)
    )


def _angular_mean_inverse_ellipsoid(beta):
    """f(beta) = int_0^1 dt / sqrt(1 - (1 - beta^2) t^2), beta > 0 (vectorized).

    = arccos(beta)/sqrt(1-beta^2) (beta<1), arccosh(beta)/sqrt(beta^2-1)
    (beta>1); a Taylor series in x = 1 - beta^2 is used for |x| < 1e-3.
    """
    beta = np.asarray(beta, dtype=float)
    x = 1.0 - beta * beta
    small = np.abs(x) < 1e-3
    xs = np.where(small, x, 0.0)
    series = 1.0 + xs * (1.0 / 6.0 + xs * (3.0 / 40.0 + xs * (5.0 / 112.0 + xs * 35.0 / 1152.0)))
    bl = np.where(small | (beta > 1.0), 0.5, beta)
    bg = np.where(small | (beta <= 1.0), 2.0, beta)
    lower = np.arccos(bl) / np.sqrt(1.0 - bl * bl)
    upper = np.arccosh(bg) / np.sqrt(bg * bg - 1.0)
    return np.where(small, series, np.where(beta < 1.0, lower, upper))


def _binding_3d_aniso_ry(beta, gamma):
    """Variational binding (units Ry*) after optimising the overall size, for shape beta = b/a."""
    f = _angular_mean_inverse_ellipsoid(beta)
    b2 = beta * beta
    return 3.0 * b2 * f * f / (2.0 * b2 + gamma)


def _golden_max(func, lo, hi, iterations):
    """Vectorized golden-section maximisation of func(x) on [lo, hi] (arrays)."""
    invphi = (np.sqrt(5.0) - 1.0) / 2.0
    a = np.array(lo, dtype=float)
    b = np.array(hi, dtype=float)
    c = b - invphi * (b - a)
    d = a + invphi * (b - a)
    fc, fd = func(c), func(d)
    for _ in range(iterations):
        left = fc > fd  # maximum in [a, d]
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        new_c = b - invphi * (b - a)
        new_d = a + invphi * (b - a)
        # reuse one evaluation per branch
        c_next = np.where(left, new_c, d)
        d_next = np.where(left, c, new_d)
        f_new = func(np.where(left, c_next, d_next))
        fc, fd = np.where(left, f_new, fd), np.where(left, fc, f_new)
        c, d = c_next, d_next
    return 0.5 * (a + b)


class AnisotropicExciton(NamedTuple):
    """Ground state of an anisotropic hydrogenic exciton (variational).

    Attributes
    ----------
    binding_ev : numpy.ndarray
        Binding energy in eV (a lower bound on the exact binding).
    radius_a_angstrom : numpy.ndarray
        1s decay length along the first axis (3D: in-plane; 2D: x), Angstrom.
    radius_b_angstrom : numpy.ndarray
        1s decay length along the second axis (3D: along the normal, in real
        z, not the rescaled u; 2D: y), Angstrom.
    """

    binding_ev: np.ndarray
    radius_a_angstrom: np.ndarray
    radius_b_angstrom: np.ndarray


def binding_3d_anisotropic(mu_par_me, mu_perp_me, eps_par, eps_perp, iterations=120):
    """Variational 1s binding and radii of a uniaxial (layered) bulk exciton.

    Trial function psi = exp(-sqrt((x^2 + y^2)/a^2 + u^2/b^2)) in the
    coordinates of :func:`anisotropy_parameter`. Its energy is, in Ry* =
    Ry mu_par/(eps_par eps_perp) and a* = a0 sqrt(eps_par eps_perp)/mu_par,

        E(a, b) = 2/(3 a^2) + gamma/(3 b^2) - 2 f(b/a)/a,
        f(beta) = int_0^1 dt / sqrt(1 - (1 - beta^2) t^2)
                = arccos(beta)/sqrt(1 - beta^2)  (beta < 1; arccosh form for beta > 1).

    Minimising over a in closed form gives a = K/f with K = 2/3 + gamma/(3
    beta^2) and binding B(beta) = 3 beta^2 f(beta)^2 / (2 beta^2 + gamma);
    the shape ratio beta = b/a is then maximised by a vectorized golden-section
    search in log(beta) on [-25, 25]. For gamma = 1, beta = 1 and B = 1 (the
    isotropic result, reproduced to rounding). For gamma -> 0, B -> 3 pi^2/8
    = 3.70 (f -> pi/2), below the exact 2D value 4, as expected of a
    variational bound.

    Parameters
    ----------
    mu_par_me, mu_perp_me : array_like
        In-plane and out-of-plane reduced masses, m_e.
    eps_par, eps_perp : array_like
        In-plane and out-of-plane dielectric constants.
    iterations : int, optional
        Golden-section iterations (120 brackets log(beta) to ~1e-23).

    Returns
    -------
    AnisotropicExciton
        binding_ev (eV), radius_a_angstrom (in-plane decay length a * a*),
        radius_b_angstrom (decay length along the normal, b * a* *
        sqrt(eps_perp/eps_par)).

    References
    ----------
    W. Kohn and J. M. Luttinger, Phys. Rev. 98, 915 (1955) (trial function);
    R. A. Faulkner, Phys. Rev. 184, 713 (1969) (anisotropy parameter gamma);
    the closed form above is derived by scaling the trial function to a sphere.
    """
    mu_par, mu_perp, e_par, e_perp = np.broadcast_arrays(
        *(np.asarray(v, dtype=float) for v in (mu_par_me, mu_perp_me, eps_par, eps_perp))
    )
    gamma = anisotropy_parameter(mu_par, mu_perp, e_par, e_perp)
    g = np.where(np.isfinite(gamma) & (gamma > 0), gamma, 1.0)
    lo = np.full(g.shape, -25.0)
    hi = np.full(g.shape, 25.0)
    logb = _golden_max(lambda s: _binding_3d_aniso_ry(np.exp(s), g), lo, hi, iterations)
    beta = np.exp(logb)
    binding = _binding_3d_aniso_ry(beta, g)
    f = _angular_mean_inverse_ellipsoid(beta)
    a = (2.0 / 3.0 + g / (3.0 * beta * beta)) / f
    bad = ~(np.isfinite(gamma) & (gamma > 0))
    eps_eff = np.sqrt(e_par * e_perp)
    ry = np.where(bad, np.nan, effective_rydberg_ev(mu_par, eps_eff))
    astar = bohr_radius_3d_angstrom(mu_par, eps_eff)
    return AnisotropicExciton(
        binding * ry,
        a * astar,
        beta * a * astar * np.sqrt(e_perp / e_par),
    )


# ---------------------------------------------------------------------------
# Two dimensions
# ---------------------------------------------------------------------------


def binding_2d_ev(mu_me, eps, n=1):
    """Binding of the n-th level of the strict-2D hydrogenic exciton, Ry mu/(eps^2 (n-1/2)^2), eV.

    Ground state: 4 Ry*. Assumes the whole space (above and below the sheet)
    has dielectric constant eps; thin films in weaker surroundings need the
    Rytova-Keldysh model instead.

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e (in-plane average, see
        :func:`lamellume.masses.inplane_average_mass_me`).
    eps : array_like
        Relative dielectric constant.
    n : int or array_like, optional
        Principal quantum number >= 1.

    Returns
    -------
    numpy.ndarray
        Binding energy in eV.

    References
    ----------
    X. L. Yang, S. H. Guo, F. T. Chan, K. W. Wong and W. Y. Ching,
    Phys. Rev. A 43, 1186 (1991).
    """
    n = np.asarray(n, dtype=float)
    return effective_rydberg_ev(mu_me, eps) / (n - 0.5) ** 2


def bohr_radius_2d_angstrom(mu_me, eps):
    """2D exciton Bohr radius a0 eps / (2 mu) in Angstrom: the 1s decay length.

    The strict-2D ground state is psi ~ exp(-2 r / a_3D), so its decay length
    is half the 3D Bohr radius (its rms radius is sqrt(3/8) a_3D = 0.61 a_3D).

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    eps : array_like
        Relative dielectric constant.

    Returns
    -------
    numpy.ndarray
        Radius in Angstrom.

    References
    ----------
    Yang et al., Phys. Rev. A 43, 1186 (1991) (ground-state wavefunction).
    """
    return 0.5 * bohr_radius_3d_angstrom(mu_me, eps)


def _agm(a, b, iterations=40):
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    for _ in range(iterations):
        a, b = 0.5 * (a + b), np.sqrt(a * b)
    return a


def _binding_2d_aniso_ry(beta, gamma):
    """2D variational binding (units Ry mu_x/eps^2) for shape beta = b/a."""
    m = _agm(1.0, beta)
    b2 = beta * beta
    return 8.0 * b2 / (m * m * (b2 + gamma))


def binding_2d_anisotropic(mu_x_me, mu_y_me, eps, iterations=120):
    """Variational 1s binding and radii of a strict-2D exciton with anisotropic mass.

    H = -(hbar^2/2 mu_x) d^2/dx^2 - (hbar^2/2 mu_y) d^2/dy^2 - e^2/(4 pi eps0 eps r),
    trial function psi = exp(-sqrt(x^2/a^2 + y^2/b^2)). In units Ry mu_x/eps^2
    and a0 eps/mu_x, with gamma = mu_x/mu_y,

        E(a, b) = 1/(2 a^2) + gamma/(2 b^2) - 4 / AGM(a, b),

    using (1/2pi) int dphi / sqrt(a^2 cos^2 + b^2 sin^2) = 1/AGM(a, b) (Gauss).
    Minimising over a: a = (1 + gamma/beta^2) AGM(1, beta)/4 and
    B(beta) = 8 beta^2 / (AGM(1, beta)^2 (beta^2 + gamma)), maximised over
    beta = b/a by golden section. Isotropic limit: beta = 1, B = 4 (exact).

    Parameters
    ----------
    mu_x_me, mu_y_me : array_like
        Principal in-plane reduced masses in m_e.
    eps : array_like
        Relative dielectric constant.
    iterations : int, optional
        Golden-section iterations.

    Returns
    -------
    AnisotropicExciton
        binding_ev (eV), radius_a_angstrom (decay length along x),
        radius_b_angstrom (along y).

    References
    ----------
    Kohn and Luttinger, Phys. Rev. 98, 915 (1955) (trial function, here in 2D);
    C. F. Gauss, arithmetic-geometric mean and complete elliptic integrals
    (e.g. NIST DLMF 19.8.5).
    """
    mx, my, e = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (mu_x_me, mu_y_me, eps)))
    gamma = mx / my
    g = np.where(np.isfinite(gamma) & (gamma > 0), gamma, 1.0)
    lo = np.full(g.shape, -25.0)
    hi = np.full(g.shape, 25.0)
    logb = _golden_max(lambda s: _binding_2d_aniso_ry(np.exp(s), g), lo, hi, iterations)
    beta = np.exp(logb)
    binding = _binding_2d_aniso_ry(beta, g)
    a = (1.0 + g / (beta * beta)) * _agm(1.0, beta) / 4.0
    bad = ~(np.isfinite(gamma) & (gamma > 0))
    ry = np.where(bad, np.nan, effective_rydberg_ev(mx, e))
    astar = bohr_radius_3d_angstrom(mx, e)
    return AnisotropicExciton(binding * ry, a * astar, beta * a * astar)


# ---------------------------------------------------------------------------
# Fractional dimension
# ---------------------------------------------------------------------------


def binding_fractional_ev(mu_me, eps, alpha, n=1):
    """Hydrogenic binding in alpha dimensions, Ry* / (n + (alpha - 3)/2)^2, in eV.

    alpha = 3 gives :func:`binding_3d_ev`, alpha = 2 gives :func:`binding_2d_ev`.

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    eps : array_like
        Relative dielectric constant.
    alpha : array_like
        Effective dimension, 2 <= alpha <= 3 (2 is the strict-2D endpoint).
    n : int or array_like, optional
        Principal quantum number >= 1.

    Returns
    -------
    numpy.ndarray
        Binding energy in eV.

    References
    ----------
    X.-F. He, Phys. Rev. B 43, 2063 (1991).
    """
    alpha = np.asarray(alpha, dtype=float)
    n = np.asarray(n, dtype=float)
    return effective_rydberg_ev(mu_me, eps) / (n + 0.5 * (alpha - 3.0)) ** 2


def bohr_radius_fractional_angstrom(mu_me, eps, alpha):
    """1s decay length in alpha dimensions, a_3D (alpha - 1)/2, in Angstrom.

    The alpha-dimensional ground state is psi ~ exp(-2 r / ((alpha - 1) a_3D)),
    matching :func:`bohr_radius_3d_angstrom` (alpha = 3) and
    :func:`bohr_radius_2d_angstrom` (alpha = 2).

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    eps : array_like
        Relative dielectric constant.
    alpha : array_like
        Effective dimension in [2, 3].

    Returns
    -------
    numpy.ndarray
        Radius in Angstrom.

    References
    ----------
    X.-F. He, Phys. Rev. B 43, 2063 (1991).
    """
    return bohr_radius_3d_angstrom(mu_me, eps) * 0.5 * (np.asarray(alpha, dtype=float) - 1.0)


class BulkExciton(NamedTuple):
    """The bulk exciton of the model that gives its binding (arrays over compounds).

    Attributes
    ----------
    model : numpy.ndarray of str
        ``"3d-anisotropic"`` (variational uniaxial model, when an out-of-plane
        reduced mass is known) or ``"3d-hydrogenic"`` (isotropic, constant
        sqrt(eps_par eps_perp), in-plane mass).
    binding_1s_ev, binding_2s_ev, binding_3s_ev : numpy.ndarray
        Binding energies in eV. 2s and 3s follow the 1s of the same model as
        the hydrogenic series scaled to it, E_ns = E_1s / n^2: exact for the
        isotropic model; for the uniaxial model within 5 % of a numerical
        solution for anisotropy parameters 0.5 <= gamma <= 3, and an
        underestimate of the first excited level for strongly layered
        crystals (about 12 % at gamma = 0.2; tested in
        tests/unit/test_hydrogenic.py).
    decay_inplane_angstrom, decay_normal_angstrom : numpy.ndarray
        1s decay lengths in the plane and along the normal, Angstrom.
    rms_radius_inplane_angstrom : numpy.ndarray
        In-plane rms radius sqrt(<x^2 + y^2>) = sqrt(2) x in-plane decay
        length (the 1s envelope exp(-sqrt(rho^2/a^2 + z^2/b^2)) has
        <x^2> = <y^2> = a^2), Angstrom: the same convention as the
        Rytova-Keldysh radius of the layers.
    mott_radius_angstrom : numpy.ndarray
        Geometric mean of the decay lengths, (a^2 b)^(1/3), Angstrom: the
        Bohr radius to use in the 3D Mott criterion
        (:func:`lamellume.survival.mott_density_3d_per_cm3`).
    """

    model: np.ndarray
    binding_1s_ev: np.ndarray
    binding_2s_ev: np.ndarray
    binding_3s_ev: np.ndarray
    decay_inplane_angstrom: np.ndarray
    decay_normal_angstrom: np.ndarray
    rms_radius_inplane_angstrom: np.ndarray
    mott_radius_angstrom: np.ndarray


def bulk_exciton(mu_par_me, mu_perp_me, eps_par, eps_perp):
    """The bulk (3D) exciton: binding of 1s-3s and radii of one model per compound.

    Where the out-of-plane reduced mass is finite and positive, the
    variational uniaxial model (:func:`binding_3d_anisotropic`) gives the
    binding and the radii; elsewhere the isotropic hydrogenic model with
    eps = sqrt(eps_par eps_perp) and the in-plane mass. Every radius and the
    2s/3s levels come from the same model as the 1s binding (2s, 3s as
    E_1s / n^2, see :class:`BulkExciton`).

    Parameters
    ----------
    mu_par_me : array_like
        In-plane reduced mass (in-plane average for anisotropic bands), m_e.
    mu_perp_me : array_like
        Out-of-plane reduced mass, m_e; NaN when unknown.
    eps_par, eps_perp : array_like
        In-plane and out-of-plane dielectric constants.

    Returns
    -------
    BulkExciton

    References
    ----------
    Wannier, Phys. Rev. 52, 191 (1937); Kohn and Luttinger, Phys. Rev. 98,
    915 (1955); R. A. Faulkner, Phys. Rev. 184, 713 (1969).
    """
    mu_par, mu_perp, e_par, e_perp = np.broadcast_arrays(
        *(np.atleast_1d(np.asarray(v, dtype=float)) for v in (mu_par_me, mu_perp_me, eps_par, eps_perp)))
    eps = np.sqrt(e_par * e_perp)
    rydberg = effective_rydberg_ev(mu_par, eps)
    a_iso = bohr_radius_3d_angstrom(mu_par, eps)
    aniso = np.isfinite(mu_perp) & (mu_perp > 0) & np.isfinite(mu_par)
    e1 = np.array(rydberg, dtype=float, copy=True)
    a_in = np.array(a_iso, dtype=float, copy=True)
    a_n = np.array(a_iso, dtype=float, copy=True)
    if aniso.any():
        r = binding_3d_anisotropic(mu_par[aniso], mu_perp[aniso], e_par[aniso], e_perp[aniso])
        e1[aniso], a_in[aniso], a_n[aniso] = r.binding_ev, r.radius_a_angstrom, r.radius_b_angstrom
    return BulkExciton(
        model=np.where(aniso, "3d-anisotropic", "3d-hydrogenic").astype(object),
        binding_1s_ev=e1,
        binding_2s_ev=e1 / 4.0,
        binding_3s_ev=e1 / 9.0,
        decay_inplane_angstrom=a_in,
        decay_normal_angstrom=a_n,
        rms_radius_inplane_angstrom=np.sqrt(2.0) * a_in,
        mott_radius_angstrom=np.cbrt(a_in * a_in * a_n),
    )
