r"""Rytova-Keldysh excitons in a single layer: potential, solvers, lookup table.

Physics
-------
An electron and a hole confined to a layer of vanishing thickness whose sheet
polarisability is described by a screening length :math:`r_0`, with dielectric
media of constants :math:`\varepsilon_t` above and :math:`\varepsilon_b` below,
interact through the Rytova-Keldysh potential (Gaussian units, :math:`e^2` stands
for :math:`e^2/4\pi\varepsilon_0`)

.. math::

    V(r) = -\frac{\pi e^2}{2 r_0}
           \left[H_0\!\left(\frac{\kappa r}{r_0}\right)
                 - Y_0\!\left(\frac{\kappa r}{r_0}\right)\right],
    \qquad \kappa = \frac{\varepsilon_t + \varepsilon_b}{2},

with :math:`H_0` the Struve and :math:`Y_0` the Bessel function of the second
kind. Its two-dimensional Fourier transform is
:math:`V(q) = -2\pi e^2 / [q(\kappa + r_0 q)]`, equivalently
:math:`V(r) = -e^2 \int_0^\infty J_0(qr)\,dq / (\kappa + r_0 q)`. For
:math:`r \gg r_0/\kappa` it tends to :math:`-e^2/(\kappa r)`; for
:math:`r \ll r_0/\kappa` it is logarithmic,
:math:`V \approx (e^2/r_0)[\ln(\kappa r / 2 r_0) + \gamma_E]`.

Scaling (one-parameter family)
------------------------------
The relative-motion Hamiltonian is
:math:`H = -\frac{\hbar^2}{2\mu}\nabla^2 + V(r)`. Measure lengths in
:math:`a^* = a_0 \kappa/\mu` and energies in :math:`E^* = \mathrm{Ry}\,\mu/\kappa^2`
(:math:`\mu` in units of :math:`m_e`), writing :math:`r = a^*\rho`. The kinetic
term becomes :math:`\hbar^2/(2\mu a^{*2}) = \mathrm{Ry}\,a_0^2\mu/a^{*2}\cdot 1/\mu^2
\cdot\mu^2/\kappa^2`, i.e. exactly :math:`E^*`, so
:math:`H/E^* = -\nabla_\rho^2 + w_s(\rho)`. The argument of the Struve/Bessel
functions is :math:`\kappa a^* \rho / r_0 = \rho/s` and the prefactor is
:math:`\pi e^2/(2 r_0 E^*) = \pi \kappa^2 a_0 \cdot 2/(2 r_0 \mu) = \pi/s`
(using :math:`e^2 = 2\,\mathrm{Ry}\,a_0`), so

.. math::

    w_s(\rho) = -\frac{\pi}{s}\left[H_0(\rho/s) - Y_0(\rho/s)\right],
    \qquad w_s(k) = -\frac{4\pi}{k(1 + s k)},
    \qquad s = \frac{r_0 \mu}{\kappa^2 a_0}.

The reduced problem depends on :math:`s` alone, hence
:math:`E_b = E^* f_n(s)` and :math:`\sqrt{\langle r^2\rangle} = a^* g_n(s)`.
The often quoted ratio :math:`r_0/a^* = \kappa s` is *not* sufficient when
:math:`\kappa \neq 1`. For :math:`s \to 0`, :math:`w_0 = -2/\rho` is the 2D
hydrogen atom (in these Rydberg-like units) with :math:`f_n(0) = 1/(n-1/2)^2`.

Limits used for checks
----------------------
* Small :math:`s`: :math:`w_s - w_0` has Fourier transform
  :math:`4\pi s/(1+sk)`, of integral :math:`4\pi s`; first-order perturbation
  theory gives :math:`f_n(s) = f_n(0) - 4\pi s|\psi_n(0)|^2 + O(s^2\ln s)
  = f_n(0) - 4 s/(n-1/2)^3 + O(s^2 \ln s)`, using
  :math:`|\psi_n(0)|^2 = 1/[\pi (n-1/2)^3]`. The next term is non-analytic:
  for 1s, first order contributes :math:`+128 s^2\ln(1/s)` to :math:`f` (the
  :math:`1/k` tail of :math:`\int dk\,k^2/[(1+sk)(16+k^2)^{3/2}]`) and second
  order (plane-wave intermediate states up to :math:`k\sim 1/s`)
  :math:`+64 s^2\ln(1/s)`, so :math:`f_{1s} = 4 - 32 s + 192 s^2\ln(1/s)
  + O(s^2)`.
* Large :math:`s`: for :math:`\rho \ll s`,
  :math:`w_s \approx (2/s)[\ln(\rho/2s) + \gamma_E] - 2\rho/s^2`. Scaling
  :math:`\rho = \sqrt{s/2}\,t` maps the logarithmic part to
  :math:`-\nabla_t^2 + \ln t` with eigenvalues :math:`\epsilon_n`, giving
  :math:`s f_n(s) = \ln s + 3\ln 2 - 2\gamma_E - 2\epsilon_n
  + \sqrt{2/s}\,\langle t\rangle_n + \ldots` (the linear term
  :math:`-2\rho/s^2` of the potential, treated to first order, adds
  :math:`2\langle\rho\rangle/s^2` to :math:`f`).

Numerics
--------
* ``method="real-space"`` (accurate solver, used for the table): radial
  equation for s states on a uniform mesh in :math:`x = \ln\rho` (the log
  singularity of the potential and the Coulomb cusp at :math:`s=0` are smooth in
  :math:`x`), three-point differences, symmetric Neumann condition at
  :math:`\rho_\mathrm{min}`, Dirichlet at :math:`\rho_\mathrm{max}`; the pencil
  :math:`A u = E B u` with diagonal :math:`B` is symmetrised to a tridiagonal
  matrix and solved by Sturm bisection (LAPACK ``stebz``) with an explicit tiny
  absolute tolerance. (The default tolerance of ``stebz`` is
  :math:`\epsilon\|T\|`, which on this strongly graded matrix is of order one
  and would silently return wrong energies.) Three meshes
  :math:`h, h/2, h/4` are combined by Richardson extrapolation
  (:math:`O(h^6)`). Relative accuracy about 1e-10 in :math:`f`.
* ``method="gaussian"`` (independent check): Galerkin method in an
  even-tempered basis of 2D Gaussians :math:`e^{-\alpha\rho^2}`; overlap and
  kinetic matrices are analytic, the potential matrix uses the momentum-space
  form, :math:`\langle\alpha|w_s|\beta\rangle = -(4\pi/\sqrt c)\,F(2s\sqrt c)`,
  :math:`c=\alpha+\beta`, :math:`F(\beta) = \int_0^\infty e^{-t^2}dt/(1+\beta t)
  = \beta^{-1}[\sqrt\pi D(1/\beta) - \tfrac12 e^{-1/\beta^2}
  \mathrm{Ei}(1/\beta^2)]` with Dawson's integral :math:`D`. Near-linear
  dependencies are removed by canonical orthogonalisation. Agrees with the
  real-space solver to about 1e-8 (1s, 2s) and 5e-7 (3s) in :math:`f` for
  :math:`10^{-4} \le s \le 10^4`; poor at :math:`s=0` (Gaussians cannot
  represent the Coulomb cusp).

References
----------
.. [1] N. S. Rytova, Moscow Univ. Phys. Bull. 3, 30 (1967);
   L. V. Keldysh, JETP Lett. 29, 658 (1979).
.. [2] P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).
.. [3] X. L. Yang, S. H. Guo, F. T. Chan, K. W. Wong, W. Y. Ching,
   Phys. Rev. A 43, 1186 (1991) (2D hydrogen atom).
.. [4] T. Olsen, S. Latini, F. Rasmussen, K. S. Thygesen,
   Phys. Rev. Lett. 116, 056401 (2016).
.. [5] L. F. Richardson, Phil. Trans. R. Soc. A 210, 307 (1911)
   (extrapolation); W. Kahan, LAPACK ``dstebz`` (Sturm bisection).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from lamellume.units import (
    BOHR_RADIUS_ANGSTROM,
    HARTREE_EV,
    HBAR2_OVER_2ME_EV_A2,
    RYDBERG_EV,
)

__all__ = [
    "STATES",
    "KeldyshTable",
    "build_table",
    "default_s_grid",
    "keldysh_binding_ev",
    "keldysh_potential_ev",
    "keldysh_radius_angstrom",
    "olsen_binding_ev",
    "reduced_potential",
    "screening_length_from_bulk_angstrom",
    "screening_length_from_polarizability_angstrom",
    "screening_parameter",
    "solve_levels_ev",
    "solve_reduced",
]

#: Names of the s states handled here, in order of increasing energy.
STATES: tuple[str, ...] = ("1s", "2s", "3s")

#: e^2 / (4 pi eps0) in eV Angstrom (= Hartree * Bohr radius).
_E2_EV_ANGSTROM: float = HARTREE_EV * BOHR_RADIUS_ANGSTROM

# Gauss-Laguerre rule for H0(x) - Y0(x) = (2/pi) int_0^inf exp(-x t)/sqrt(1+t^2) dt,
# used for x >= _SWITCH_X where scipy's struve loses digits (1e-13 at x=30,
# 1e-8 at x=1e6); the rule is accurate to 1 ulp for x >= 15.
_GL_NODES, _GL_WEIGHTS = np.polynomial.laguerre.laggauss(60)
_SWITCH_X: float = 15.0


def _h0_minus_y0(x):
    """Struve H0 minus Bessel Y0 for x >= 0 (vectorised, +inf at x = 0)."""
    from scipy import special  # the solver only; table lookups never need it

    x = np.asarray(x, dtype=float)
    out = np.empty_like(x)
    small = x < _SWITCH_X
    xs = x[small]
    with np.errstate(divide="ignore"):
        out[small] = special.struve(0.0, xs) - special.y0(xs)
    big = ~small
    if np.any(big):
        xl = x[big]
        acc = np.zeros_like(xl)
        for node, weight in zip(_GL_NODES, _GL_WEIGHTS):
            acc += weight / np.sqrt(1.0 + (node / xl) ** 2)
        out[big] = 2.0 / (np.pi * xl) * acc
    return out


def keldysh_potential_ev(r_angstrom, r0_angstrom, kappa):
    r"""Rytova-Keldysh electron-hole potential energy in eV.

    Parameters
    ----------
    r_angstrom : float or array_like
        Electron-hole distance in Angstrom (>= 0).
    r0_angstrom : float or array_like
        Screening length of the layer in Angstrom (>= 0); ``0`` gives the
        Coulomb potential ``-e^2/(4 pi eps0 kappa r)``.
    kappa : float or array_like
        Mean dielectric constant of the surroundings,
        ``(eps_top + eps_bottom)/2`` (dimensionless, > 0).

    Returns
    -------
    numpy.ndarray or float
        ``V(r) = -(pi e^2/(4 pi eps0)) / (2 r0) [H0(kappa r/r0) - Y0(kappa r/r0)]``
        in eV, broadcast over the inputs; ``-inf`` at ``r = 0``.

    Notes
    -----
    ``H0 - Y0`` is taken from scipy below ``x = 15`` (there accurate to a few
    ulp, including the logarithmic singularity at small x) and from a 60-point
    Gauss-Laguerre rule on the integral representation
    ``(2/pi) int_0^inf exp(-x t) (1+t^2)^(-1/2) dt`` above, where the
    difference of two oscillating functions would lose digits.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    .. [2] P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).
    """
    r, r0, kap = np.broadcast_arrays(
        np.asarray(r_angstrom, dtype=float),
        np.asarray(r0_angstrom, dtype=float),
        np.asarray(kappa, dtype=float),
    )
    if np.any(r < 0) or np.any(r0 < 0) or np.any(kap <= 0):
        raise ValueError("need r >= 0, r0 >= 0 and kappa > 0")
    out = np.empty(r.shape, dtype=float)
    coul = r0 == 0
    with np.errstate(divide="ignore"):
        out[coul] = -_E2_EV_ANGSTROM / (kap[coul] * r[coul])
        keld = ~coul
        x = kap[keld] * r[keld] / r0[keld]
        out[keld] = -np.pi * _E2_EV_ANGSTROM / (2.0 * r0[keld]) * _h0_minus_y0(x)
    return out[()] if out.ndim == 0 else out


def reduced_potential(rho, s):
    r"""Dimensionless Keldysh potential ``w_s(rho)`` in units of ``E* = Ry mu/kappa^2``.

    Parameters
    ----------
    rho : array_like
        Distance in units of ``a* = a0 kappa / mu`` (> 0).
    s : float
        Screening parameter ``r0 mu / (kappa^2 a0)`` (>= 0).

    Returns
    -------
    numpy.ndarray
        ``-(pi/s) [H0(rho/s) - Y0(rho/s)]``, or ``-2/rho`` for ``s = 0``.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    """
    rho = np.asarray(rho, dtype=float)
    if s == 0:
        return -2.0 / rho
    return -(np.pi / s) * _h0_minus_y0(rho / s)


def screening_parameter(mu_me, r0_angstrom, kappa):
    """Dimensionless screening parameter ``s = r0 mu / (kappa^2 a0)``.

    Parameters
    ----------
    mu_me : array_like
        Reduced exciton mass in m_e.
    r0_angstrom : array_like
        Screening length in Angstrom.
    kappa : array_like
        Mean dielectric constant of the surroundings.

    Returns
    -------
    numpy.ndarray
        ``s`` broadcast over the inputs.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979) (scaling of the potential).
    """
    mu = np.asarray(mu_me, dtype=float)
    kap = np.asarray(kappa, dtype=float)
    return np.asarray(r0_angstrom, dtype=float) * mu / (kap**2 * BOHR_RADIUS_ANGSTROM)


# ----------------------------------------------------------------------------
# Real-space radial solver (log mesh, finite differences, Richardson)
# ----------------------------------------------------------------------------


def _radial_mesh_levels(potential, kinetic, x_min, n_points, h, n_states):
    """Lowest s-state levels of ``-kinetic * Laplacian + potential`` on one mesh.

    Mesh ``x_i = x_min + i h`` (``rho = exp(x)``), i = 0..n_points-1, with a
    Dirichlet node at ``i = n_points``. ``potential`` is a callable of rho or
    its values on the mesh already. Returns energies (ascending) and
    ``<rho^2>`` for each state.
    """
    x = x_min + h * np.arange(n_points)
    rho = np.exp(x)
    weight = np.ones(n_points)
    weight[0] = 0.5  # symmetric Neumann row = trapezoid end weight
    values = potential(rho) if callable(potential) else potential
    b = weight * rho**2
    diag = np.full(n_points, 2.0 * kinetic / h**2)
    diag[0] = kinetic / h**2
    diag = diag + b * values
    off = np.full(n_points - 1, -kinetic / h**2)
    sb = np.sqrt(b)
    d = diag / b
    e = off / (sb[:-1] * sb[1:])
    from scipy.linalg import eigh_tridiagonal  # solver only; table lookups never need it

    # An explicit tiny absolute tolerance: the default eps*||T|| is O(1) here.
    tol = 1e-14 * kinetic / rho[-1] ** 2
    energies, vecs = eigh_tridiagonal(
        d, e, select="i", select_range=(0, n_states - 1),
        lapack_driver="stebz", tol=tol,
    )
    u2 = (vecs / sb[:, None]) ** 2
    r2 = np.sum((b * rho**2)[:, None] * u2, axis=0) / np.sum(b[:, None] * u2, axis=0)
    return energies, r2


def _radial_levels(potential, rho_min, rho_max, n_states=3, kinetic=1.0, h0=0.04,
                   n_levels=3):
    """Richardson-extrapolated s levels of ``-kinetic Lap + potential(rho)``.

    Parameters
    ----------
    potential : callable
        ``potential(rho)`` in the energy unit of the result.
    rho_min, rho_max : float
        Radial domain (same length unit as ``rho``).
    kinetic : float
        Coefficient of the Laplacian (energy times length squared).
    h0 : float
        Coarsest spacing in ``ln rho``; meshes ``h0 / 2**k``, k < n_levels.

    Returns
    -------
    energies, rms_radii : numpy.ndarray
        Shape ``(n_states,)``.
    """
    x_min = np.log(rho_min)
    m0 = int(np.ceil(np.log(rho_max / rho_min) / h0))
    # The meshes nest: node i of mesh k is node i 2**(n_levels-1-k) of the finest
    # (the same float, as the spacings differ by powers of two), so the potential
    # is evaluated once, on the finest mesh.
    top = n_levels - 1
    fine = potential(np.exp(x_min + h0 / 2**top * np.arange(m0 * 2**top)))
    results = [
        _radial_mesh_levels(fine[::2 ** (top - k)], kinetic, x_min, m0 * 2**k, h0 / 2**k, n_states)
        for k in range(n_levels)
    ]
    e = np.array([r[0] for r in results])
    r2 = np.array([r[1] for r in results])
    for order in range(1, n_levels):  # eliminate h^2, h^4, ...
        fac = 4.0**order
        e = (fac * e[1:] - e[:-1]) / (fac - 1.0)
        r2 = (fac * r2[1:] - r2[:-1]) / (fac - 1.0)
    return e[0], np.sqrt(r2[0])


def _default_domain(s):
    """Radial domain (units of a*) that converges 1s-3s to better than 1e-11."""
    rho_min = 1e-12 if s == 0 else 1e-7 * min(s, 1.0)
    rho_max = 150.0 + 60.0 * np.sqrt(s)
    return rho_min, rho_max


def _solve_real_space(s, n_states, h0=0.04, rho_min=None, rho_max=None):
    dmin, dmax = _default_domain(s)
    rho_min = dmin if rho_min is None else rho_min
    rho_max = dmax if rho_max is None else rho_max
    e, g = _radial_levels(lambda rho: reduced_potential(rho, s), rho_min, rho_max,
                          n_states=n_states, h0=h0)
    return -e, g


# ----------------------------------------------------------------------------
# Gaussian-basis Galerkin solver (momentum-space potential matrix elements)
# ----------------------------------------------------------------------------


def _exp_ei_scaled(z):
    """``exp(-z) Ei(z)`` for z > 0 without overflow."""
    from scipy import special  # the solver only; table lookups never need it

    z = np.asarray(z, dtype=float)
    out = np.empty_like(z)
    small = z < 50.0
    out[small] = np.exp(-z[small]) * special.expi(z[small])
    t = 1.0 / z[~small]
    acc = np.zeros_like(t)
    term = t.copy()
    for k in range(1, 40):  # asymptotic series sum_k (k-1)!/z^k, converged for z >= 50
        acc += term
        term = term * k * t
    out[~small] = acc
    return out


def _f_integral(beta):
    """``F(beta) = int_0^inf exp(-t^2) / (1 + beta t) dt`` for beta >= 0."""
    from scipy import special  # the solver only; table lookups never need it

    beta = np.asarray(beta, dtype=float)
    out = np.full(beta.shape, 0.5 * np.sqrt(np.pi))
    pos = beta > 0
    a = 1.0 / beta[pos]
    out[pos] = (np.sqrt(np.pi) * special.dawsn(a) - 0.5 * _exp_ei_scaled(a * a)) * a
    return out


def _solve_gaussian(s, n_states, ratio=1.7, alpha_min=None, alpha_max=None,
                    cutoff=1e-14):
    if alpha_min is None:
        alpha_min = 1e-6 / (1.0 + s)
    if alpha_max is None:
        alpha_max = 1e8 if s == 0 else max(1e4, min(100.0 / s**2, 1e8))
    n = int(np.ceil(np.log(alpha_max / alpha_min) / np.log(ratio))) + 1
    alpha = alpha_min * ratio ** np.arange(n)
    ai, aj = alpha[:, None], alpha[None, :]
    c = ai + aj
    norm = np.sqrt(2.0 * alpha / np.pi)
    scale = np.outer(norm, norm)
    overlap = np.pi / c * scale
    kinetic = 4.0 * np.pi * ai * aj / c**2 * scale
    pot = -(4.0 * np.pi / np.sqrt(c)) * _f_integral(2.0 * s * np.sqrt(c)) * scale
    r2mat = np.pi / c**2 * scale
    lam, vec = np.linalg.eigh(overlap)
    keep = lam > cutoff * lam.max()
    x = vec[:, keep] / np.sqrt(lam[keep])
    energies, coef = np.linalg.eigh(x.T @ (kinetic + pot) @ x)
    cvec = x @ coef[:, :n_states]
    r2 = (np.einsum("in,ij,jn->n", cvec, r2mat, cvec)
          / np.einsum("in,ij,jn->n", cvec, overlap, cvec))
    return -energies[:n_states], np.sqrt(r2)


def solve_reduced(s, n_states=3, method="real-space", **options):
    r"""Reduced binding energies ``f_n(s)`` and rms radii ``g_n(s)`` of s states.

    Parameters
    ----------
    s : float
        Screening parameter ``r0 mu / (kappa^2 a0)`` (>= 0).
    n_states : int
        Number of s states (1s, 2s, ...), 1 to 5 (the default domains are
        checked to 1e-10 for up to 5s).
    method : {"real-space", "gaussian"}
        ``"real-space"``: log-mesh finite differences with Richardson
        extrapolation (accurate, ~1e-10 relative). ``"gaussian"``: Galerkin
        method in even-tempered Gaussians with momentum-space matrix elements
        (independent check, ~1e-8 for 1s/2s, ~5e-7 for 3s on
        ``1e-4 <= s <= 1e4``; not accurate at ``s = 0``).
    **options
        Passed to the solver (real-space: ``h0``, ``rho_min``, ``rho_max``;
        gaussian: ``ratio``, ``alpha_min``, ``alpha_max``, ``cutoff``).

    Returns
    -------
    f : numpy.ndarray
        Binding energies ``E_b / E*`` with ``E* = Ry mu / kappa^2``,
        shape ``(n_states,)``, positive, 1s first.
    g : numpy.ndarray
        ``sqrt(<r^2>) / a*`` with ``a* = a0 kappa / mu``, shape ``(n_states,)``.

    References
    ----------
    .. [1] X. L. Yang et al., Phys. Rev. A 43, 1186 (1991) (``s = 0`` limit).
    .. [2] L. F. Richardson, Phil. Trans. R. Soc. A 210, 307 (1911).
    """
    s = float(s)
    if not s >= 0:
        raise ValueError(f"s must be >= 0, got {s}")
    if not 1 <= n_states <= 5:
        raise ValueError(f"n_states must be 1..5, got {n_states}")
    if method == "real-space":
        return _solve_real_space(s, n_states, **options)
    if method == "gaussian":
        return _solve_gaussian(s, n_states, **options)
    raise ValueError(f"unknown method {method!r}")


def solve_levels_ev(mu_me, r0_angstrom, kappa, n_states=3):
    """Direct dimensional solve: s-state binding energies (eV) and rms radii (Angstrom).

    Solves ``-(hbar^2/2 mu) Lap + V(r)`` with :func:`keldysh_potential_ev` in eV
    and Angstrom, without the reduced scaling (used to test it).

    Parameters
    ----------
    mu_me : float
        Reduced mass in m_e.
    r0_angstrom : float
        Screening length in Angstrom.
    kappa : float
        Mean dielectric constant of the surroundings.
    n_states : int
        Number of s states.

    Returns
    -------
    binding_ev, radius_angstrom : numpy.ndarray
        Shape ``(n_states,)``.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    """
    a_star = BOHR_RADIUS_ANGSTROM * kappa / mu_me
    s = float(screening_parameter(mu_me, r0_angstrom, kappa))
    rho_min, rho_max = _default_domain(s)
    e, g = _radial_levels(
        lambda r: keldysh_potential_ev(r, r0_angstrom, kappa),
        rho_min * a_star, rho_max * a_star, n_states=n_states,
        kinetic=HBAR2_OVER_2ME_EV_A2 / mu_me,
    )
    return -e, g


# ----------------------------------------------------------------------------
# Lookup table
# ----------------------------------------------------------------------------


def default_s_grid(per_decade=32, log10_min=-5.0, log10_max=5.0):
    """Default table grid: ``0`` followed by a log grid from 1e-5 to 1e5."""
    n = int(round((log10_max - log10_min) * per_decade)) + 1
    return np.concatenate([[0.0], np.logspace(log10_min, log10_max, n)])


@dataclass(frozen=True, eq=False)
class KeldyshTable:
    r"""Reduced Keldysh binding energies and radii on an ``s`` grid.

    Attributes
    ----------
    s : numpy.ndarray
        Grid of screening parameters; ``s[0] == 0`` (2D hydrogen limit),
        ``s[1:]`` positive and increasing (log spaced).
    f_1s, f_2s, f_3s : numpy.ndarray
        ``E_b / E*`` with ``E* = Ry mu / kappa^2``.
    g_1s, g_2s, g_3s : numpy.ndarray
        ``sqrt(<r^2>) / a*`` with ``a* = a0 kappa / mu``.

    Notes
    -----
    Interpolation: quintic spline of ``ln f`` (``ln g``) versus ``ln s`` on
    ``s[1:]``; linear in ``s`` between ``0`` and ``s[1]`` (the exact small-s
    expansion is linear, ``f = f(0) - 4 s/(n-1/2)^3 + O(s^2 ln s)``); above
    ``s[-1]`` the large-s forms ``f ~ (ln s + K)/s`` and ``g ~ sqrt(s)`` are
    matched to the last grid point (relative error ~ ``sqrt(2/s)/ln s``, i.e.
    < 1e-3 just above 1e5 and falling).

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    .. [2] X. L. Yang et al., Phys. Rev. A 43, 1186 (1991).
    """

    s: np.ndarray
    f_1s: np.ndarray
    f_2s: np.ndarray
    f_3s: np.ndarray
    g_1s: np.ndarray
    g_2s: np.ndarray
    g_3s: np.ndarray
    _pieces: dict = field(default_factory=dict, init=False, repr=False)

    _KEYS = ("s", "f_1s", "f_2s", "f_3s", "g_1s", "g_2s", "g_3s")

    def __post_init__(self):
        arrays = {}
        for key in self._KEYS:
            arr = np.array(getattr(self, key), dtype=float)
            arr.setflags(write=False)
            object.__setattr__(self, key, arr)
            arrays[key] = arr
        s = arrays["s"]
        if s.ndim != 1 or s.size < 8 or s[0] != 0.0 or np.any(np.diff(s) <= 0):
            raise ValueError("s grid must be 1-D, start at 0 and increase (>= 8 points)")
        for key in self._KEYS[1:]:
            if arrays[key].shape != s.shape or np.any(~(arrays[key] > 0)):
                raise ValueError(f"{key} must be positive with the shape of s")

    def _evaluate(self, kind, s, state):
        if state not in STATES:
            raise ValueError(f"state must be one of {STATES}, got {state!r}")
        key = f"{kind}_{state}"
        values = getattr(self, key)
        s = np.asarray(s, dtype=float)
        if np.any(s < 0):
            raise ValueError("s must be >= 0")
        s0, s1, s_max = 0.0, self.s[1], self.s[-1]
        low = s < s1
        high = s > s_max
        if not (low.any() or high.any()):   # every point on the spline (or NaN): no masked copies
            with np.errstate(invalid="ignore"):
                out = _evaluate_pieces(*self._spline_pieces(key), np.log(s), self._lookup(key))
                np.exp(out, out=out)   # in place: a fresh array
            return out[()] if out.ndim == 0 else out
        out = np.full(s.shape, np.nan)
        mid = (s >= s1) & (s <= s_max)
        out[low] = values[0] + (values[1] - values[0]) * (s[low] - s0) / s1
        if np.any(mid):
            out[mid] = np.exp(_evaluate_pieces(*self._spline_pieces(key), np.log(s[mid]), self._lookup(key)))
        if np.any(high):
            sh = s[high]
            if kind == "f":
                k_const = values[-1] * s_max - np.log(s_max)
                out[high] = (np.log(sh) + k_const) / sh
            else:
                out[high] = values[-1] * np.sqrt(sh / s_max)
        return out[()] if out.ndim == 0 else out

    def binding_ratio(self, s, state="1s"):
        """Interpolated ``f_n(s) = E_b / E*`` (vectorised over ``s`` >= 0).

        Parameters
        ----------
        s : array_like
            Screening parameter(s) ``r0 mu / (kappa^2 a0)``.
        state : {"1s", "2s", "3s"}

        Returns
        -------
        numpy.ndarray or float
            Same shape as ``s``; NaN where ``s`` is NaN.

        References
        ----------
        .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
        """
        return self._evaluate("f", s, state)

    def radius_ratio(self, s, state="1s"):
        """Interpolated ``g_n(s) = sqrt(<r^2>) / a*`` (vectorised over ``s`` >= 0).

        Parameters
        ----------
        s : array_like
            Screening parameter(s) ``r0 mu / (kappa^2 a0)``.
        state : {"1s", "2s", "3s"}

        Returns
        -------
        numpy.ndarray or float
            Same shape as ``s``.

        References
        ----------
        .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
        """
        return self._evaluate("g", s, state)

    def _spline_pieces(self, key):
        """Breakpoints and local polynomial coefficients of the ``ln key`` vs ``ln s`` spline."""
        pieces = self._pieces.get(key)
        if pieces is None:
            pieces = _log_spline_pieces(self.s[1:], getattr(self, key)[1:])
            self._pieces[key] = pieces
        return pieces

    def _lookup(self, key):
        """Bin look-up of the spline pieces of ``key`` (:func:`_piece_lookup`), built on first use."""
        lookup = self._pieces.get((key, "lookup"))
        if lookup is None:
            lookup = _piece_lookup(self._spline_pieces(key)[0])
            self._pieces[(key, "lookup")] = lookup
        return lookup

    def to_arrays(self):
        """Plain dict of numpy arrays for saving.

        Keys ``s``, ``f_1s`` ... ``g_3s`` hold the table; ``<key>_breaks`` and
        ``<key>_coefs`` hold its splines in piecewise-polynomial form, so a
        loaded table evaluates with numpy alone (no spline fit, no
        :mod:`scipy.interpolate` import in the shard jobs).
        """
        out = {key: np.array(getattr(self, key)) for key in self._KEYS}
        for key in self._KEYS[1:]:
            breaks, coefs = self._spline_pieces(key)
            out[f"{key}_breaks"], out[f"{key}_coefs"] = np.array(breaks), np.array(coefs)
        return out

    @classmethod
    def from_arrays(cls, arrays):
        """Rebuild a table from the dict produced by :meth:`to_arrays`.

        Stored spline pieces are used when present and consistent with the
        grid (same end points, one more breakpoint than pieces); otherwise the
        splines are fitted again on first use.
        """
        missing = [key for key in cls._KEYS if key not in arrays]
        if missing:
            raise KeyError(f"missing arrays: {missing}")
        table = cls(**{key: np.asarray(arrays[key], dtype=float) for key in cls._KEYS})
        log_ends = np.log(table.s[[1, -1]])
        for key in cls._KEYS[1:]:
            if f"{key}_breaks" not in arrays or f"{key}_coefs" not in arrays:
                continue
            breaks = np.asarray(arrays[f"{key}_breaks"], dtype=float)
            coefs = np.asarray(arrays[f"{key}_coefs"], dtype=float)
            if (breaks.ndim == 1 and coefs.ndim == 2 and breaks.size >= 2
                    and coefs.shape[1] == breaks.size - 1 and np.array_equal(breaks[[0, -1]], log_ends)
                    and np.all(np.isfinite(coefs))):
                table._pieces[key] = (breaks, coefs)
        return table


def _log_spline_pieces(s, values):
    """Quintic not-a-knot spline of ``ln values`` vs ``ln s`` as (breakpoints, coefficients).

    ``coefs[m, i]`` multiplies ``(x - breaks[i])**(5 - m)`` on piece ``i``
    (the local power basis of :class:`scipy.interpolate.PPoly`), with
    zero-length pieces at repeated boundary knots dropped.
    """
    from scipy import interpolate  # fitting only; evaluation below is plain numpy

    spline = interpolate.make_interp_spline(np.log(s), np.log(values), k=5)
    pp = interpolate.PPoly.from_spline(spline)
    keep = np.diff(pp.x) > 0
    breaks = np.append(pp.x[:-1][keep], pp.x[-1])
    return breaks, np.ascontiguousarray(pp.c[:, keep])


def _piece_lookup(breaks):
    """Uniform bins over the breakpoints, each holding the piece index at its left edge.

    The bin width is a quarter of the shortest piece, so a point and the left
    edge of the bin it is computed to fall in are never two breakpoints apart:
    one comparison each way then gives exactly ``searchsorted(breaks, x,
    "right")`` (see :func:`_piece_index`), at a third of its cost for the
    unsorted points of the Monte Carlo.
    """
    width = float(np.min(np.diff(breaks))) / 4.0
    n_bins = int(np.ceil((breaks[-1] - breaks[0]) / width)) + 2
    left = breaks[0] + width * np.arange(n_bins)
    padded = np.concatenate([[-np.inf], breaks, [np.inf]])
    return float(breaks[0]), 1.0 / width, np.searchsorted(breaks, left, side="right"), padded


def _piece_index(lookup, x):
    """``searchsorted(breaks, x, side="right")`` through the bins of :func:`_piece_lookup` (x not NaN)."""
    start, inv_width, at_left, padded = lookup
    x = np.asarray(x)
    # the operations of ((x - start) * inv_width).astype(...) etc., in place where the arrays are
    # fresh (large temporaries cost more than the arithmetic); np.take: fancy indexing, faster
    t = np.subtract(x, start, out=np.empty(x.shape))
    t *= inv_width
    j = t.astype(np.intp)
    np.clip(j, 0, at_left.size - 1, out=j)
    k = np.take(at_left, j)
    k += x >= np.take(padded, k + 1)
    k -= x < np.take(padded, k)
    return k


def _evaluate_pieces(breaks, coefs, x, lookup=None):
    """Evaluate a piecewise polynomial (local power basis, Horner's rule) at ``x``.

    ``lookup`` (:func:`_piece_lookup` of ``breaks``) finds the pieces faster;
    the result is the same.
    """
    k = np.searchsorted(breaks, x, side="right") if lookup is None else _piece_index(lookup, x)
    k -= 1   # a fresh array (or a number): the piece index
    i = np.clip(k, 0, breaks.size - 2, out=k if isinstance(k, np.ndarray) and k.ndim else None)
    dx = x - np.take(breaks, i)
    out = np.asarray(np.take(coefs[0], i), dtype=float)   # a fresh array, updated in place below
    for m in range(1, coefs.shape[0]):
        out *= dx   # out * dx + c, the same two roundings
        out += np.take(coefs[m], i)
    return out


def build_table(s_grid=None, workers: int = 1):
    """Tabulate ``f_n(s)`` and ``g_n(s)`` for 1s-3s with the real-space solver.

    Parameters
    ----------
    s_grid : array_like, optional
        Grid starting at 0 and increasing; default :func:`default_s_grid`
        (0 plus 321 points, 1e-5 ... 1e5). Takes about 4 s on one core.
    workers : int, optional
        Processes to solve the grid with (the table is the same, point for point).

    Returns
    -------
    KeldyshTable

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    .. [2] X. L. Yang et al., Phys. Rev. A 43, 1186 (1991).
    """
    s_grid = default_s_grid() if s_grid is None else np.asarray(s_grid, dtype=float)
    if workers > 1:  # the grid points are independent: solve parts in forked processes
        import multiprocessing

        with multiprocessing.get_context("fork").Pool(workers) as pool:
            parts = pool.map(tabulate, np.array_split(s_grid, workers))
        f = np.concatenate([p[0] for p in parts], axis=1)
        g = np.concatenate([p[1] for p in parts], axis=1)
    else:
        f, g = tabulate(s_grid)
    return table_from_levels(s_grid, f, g)


def tabulate(s_grid) -> tuple[np.ndarray, np.ndarray]:
    """Reduced 1s-3s binding energies ``f`` and rms radii ``g``, each (3, len(s_grid)), by the real-space solver.

    The points are independent, so a grid may be split and its parts solved apart
    (:func:`build_table` does so over processes).
    """
    s_grid = np.asarray(s_grid, dtype=float)
    f = np.empty((3, s_grid.size))
    g = np.empty((3, s_grid.size))
    for i, s in enumerate(s_grid):
        f[:, i], g[:, i] = _solve_real_space(float(s), 3)
    return f, g


def table_from_levels(s_grid, f, g) -> KeldyshTable:
    """The :class:`KeldyshTable` of levels ``f``, ``g`` (3, n) from :func:`tabulate` on ``s_grid``."""
    return KeldyshTable(s=np.asarray(s_grid, dtype=float), f_1s=f[0], f_2s=f[1], f_3s=f[2],
                        g_1s=g[0], g_2s=g[1], g_3s=g[2])


# ----------------------------------------------------------------------------
# Dimensional convenience functions
# ----------------------------------------------------------------------------


def screening_length_from_polarizability_angstrom(alpha_2d_angstrom):
    """Screening length ``r0 = 2 pi alpha_2D`` in Angstrom.

    Parameters
    ----------
    alpha_2d_angstrom : array_like
        Static in-plane sheet polarisability in Gaussian units (a length), Angstrom.

    Returns
    -------
    numpy.ndarray
        ``r0`` in Angstrom.

    References
    ----------
    .. [1] P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).
    """
    return 2.0 * np.pi * np.asarray(alpha_2d_angstrom, dtype=float)


def screening_length_from_bulk_angstrom(eps_parallel, spacing_angstrom):
    """Approximate screening length ``r0 ~ d (eps_par - 1) / 2`` in Angstrom.

    An approximation: it assigns the bulk in-plane susceptibility per layer,
    ``alpha_2D ~ d (eps_par - 1) / (4 pi)``, neglecting changes of the
    polarisability on exfoliation and local-field effects.

    Parameters
    ----------
    eps_parallel : array_like
        In-plane static dielectric constant of the bulk crystal.
    spacing_angstrom : array_like
        Interlayer spacing ``d`` in Angstrom.

    Returns
    -------
    numpy.ndarray
        ``r0`` in Angstrom.

    References
    ----------
    .. [1] P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).
    """
    eps = np.asarray(eps_parallel, dtype=float)
    return np.asarray(spacing_angstrom, dtype=float) * (eps - 1.0) / 2.0


def _state_scales(mu_me, r0_angstrom, kappa):
    mu = np.asarray(mu_me, dtype=float)
    kap = np.asarray(kappa, dtype=float)
    s = screening_parameter(mu, r0_angstrom, kap)
    return s, RYDBERG_EV * mu / kap**2, BOHR_RADIUS_ANGSTROM * kap / mu


def keldysh_binding_ev(mu_me, r0_angstrom, kappa, table, state="1s"):
    """Exciton binding energy in eV of a monolayer (Rytova-Keldysh, from a table).

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    r0_angstrom : array_like
        Screening length in Angstrom.
    kappa : array_like
        ``(eps_top + eps_bottom)/2`` of the surroundings.
    table : KeldyshTable
        From :func:`build_table` (or loaded via :meth:`KeldyshTable.from_arrays`).
    state : {"1s", "2s", "3s"}

    Returns
    -------
    numpy.ndarray
        ``E_b = Ry mu / kappa^2 * f_n(r0 mu / (kappa^2 a0))`` in eV, broadcast.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    .. [2] P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).
    """
    mu = np.asarray(mu_me, dtype=float)
    kap = np.asarray(kappa, dtype=float)
    # the scales of _state_scales without the length scale (not needed here); arrays broadcast late, so
    # products of the compact inputs are formed once and only the last operation runs over every point
    return RYDBERG_EV * mu / kap**2 * table.binding_ratio(screening_parameter(mu, r0_angstrom, kap), state)


def keldysh_radius_angstrom(mu_me, r0_angstrom, kappa, table, state="1s"):
    """Exciton rms radius ``sqrt(<r^2>)`` in Angstrom of a monolayer (from a table).

    Parameters
    ----------
    mu_me, r0_angstrom, kappa, table, state
        As in :func:`keldysh_binding_ev`.

    Returns
    -------
    numpy.ndarray
        ``a0 kappa / mu * g_n(s)`` in Angstrom, broadcast.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    """
    s, _, a_star = _state_scales(mu_me, r0_angstrom, kappa)
    return a_star * table.radius_ratio(s, state)


def olsen_binding_ev(mu_me, r0_angstrom, kappa=1.0):
    r"""Quick 1s binding estimate of Olsen et al., generalised to surroundings.

    For a suspended layer the reference gives
    ``E_b = 8 mu / (1 + sqrt(1 + 32 pi alpha mu / 3))^2`` Hartree with
    ``alpha`` the 2D polarisability in bohr and ``r0 = 2 pi alpha``. Written in
    the reduced variables this is ``E_b = E* * 16 / (1 + sqrt(1 + 16 s / 3))^2``
    with ``E* = Ry mu`` and ``s = r0 mu / a0``. For ``kappa != 1`` we apply the
    same exact scaling of the Keldysh problem, ``E* = Ry mu / kappa^2`` and
    ``s = r0 mu / (kappa^2 a0)``; this generalisation is ours, not the
    reference's. ``r0 -> 0`` gives the 2D hydrogen value ``4 Ry mu / kappa^2``.

    Parameters
    ----------
    mu_me : array_like
        Reduced mass in m_e.
    r0_angstrom : array_like
        Screening length in Angstrom.
    kappa : array_like
        ``(eps_top + eps_bottom)/2``.

    Returns
    -------
    numpy.ndarray
        Binding energy estimate in eV, broadcast.

    References
    ----------
    .. [1] T. Olsen, S. Latini, F. Rasmussen, K. S. Thygesen,
       Phys. Rev. Lett. 116, 056401 (2016).
    """
    s, e_star, _ = _state_scales(mu_me, r0_angstrom, kappa)
    return e_star * 16.0 / (1.0 + np.sqrt(1.0 + 16.0 * s / 3.0)) ** 2
