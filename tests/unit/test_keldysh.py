"""Tests for lamellume.keldysh (Rytova-Keldysh monolayer excitons).

Each check names its source: a paper, "computed with sympy/mpmath", or
"derived here" (the derivation is in the module docstring of lamellume.keldysh).
"""

import io

import mpmath
import numpy as np
import pytest
import sympy as sp
from scipy import integrate, special

from lamellume import keldysh as K
from lamellume.units import BOHR_RADIUS_ANGSTROM, HARTREE_EV, RYDBERG_EV

E2 = HARTREE_EV * BOHR_RADIUS_ANGSTROM  # e^2/(4 pi eps0) in eV Angstrom
NU = np.arange(1, 4) - 0.5  # n - 1/2 for 1s, 2s, 3s


# ---------------------------------------------------------------------------
# 2D hydrogen reference values (computed with sympy)
# ---------------------------------------------------------------------------


def _hydrogen_2d_s_states():
    """|psi_n(0)|^2 and rms radius of 2D hydrogen s states of -Lap - 2/rho (sympy)."""
    rho = sp.symbols("rho", positive=True)
    out = []
    for n in (1, 2, 3):
        nu = sp.Rational(2 * n - 1, 2)
        radial = sp.exp(-rho / nu) * sp.assoc_laguerre(n - 1, 0, 2 * rho / nu)
        # it is an eigenfunction with E = -1/nu^2 (Yang et al. 1991)
        lap = sp.diff(radial, rho, 2) + sp.diff(radial, rho) / rho
        residual = sp.simplify(-lap - 2 / rho * radial + radial / nu**2)
        assert residual == 0
        norm = sp.integrate(radial**2 * 2 * sp.pi * rho, (rho, 0, sp.oo))
        psi0_sq = sp.nsimplify(radial.subs(rho, 0) ** 2 / norm)
        r2 = sp.integrate(radial**2 * rho**3, (rho, 0, sp.oo)) / sp.integrate(
            radial**2 * rho, (rho, 0, sp.oo))
        out.append((psi0_sq, sp.sqrt(r2)))
    return out


HYDROGEN = _hydrogen_2d_s_states()


@pytest.fixture(scope="module")
def table():
    return K.build_table()


# ---------------------------------------------------------------------------
# Potential
# ---------------------------------------------------------------------------


def _momentum_space_potential(r, r0, kappa):
    """-e^2 int_0^inf J0(q r)/(kappa + r0 q) dq by quad between zeros of J0 and
    repeated averaging of the alternating partial sums (independent of H0, Y0)."""
    zeros = special.jn_zeros(0, 400) / r
    edges = np.concatenate([[0.0], zeros])
    def g(q):
        return special.j0(q * r) / (kappa + r0 * q)
    pieces = [integrate.quad(g, a, b, epsabs=0, epsrel=1e-13, limit=200)[0]
              for a, b in zip(edges[:-1], edges[1:])]
    partial = np.cumsum(pieces)[-40:]
    for _ in range(30):  # Euler-type averaging of an alternating series
        partial = 0.5 * (partial[1:] + partial[:-1])
    return -E2 * partial[-1]


@pytest.mark.parametrize("r0, kappa", [(45.0, 1.0), (45.0, 2.45), (7.0, 3.0)])
@pytest.mark.parametrize("r", [0.05, 1.0, 10.0, 60.0, 400.0])
def test_potential_matches_momentum_space_integral(r, r0, kappa):
    # source: V(q) = -2 pi e^2/(q (kappa + r0 q)), Cudazzo et al. PRB 84, 085406 (2011)
    ref = _momentum_space_potential(r, r0, kappa)
    np.testing.assert_allclose(K.keldysh_potential_ev(r, r0, kappa), ref, rtol=1e-9)


@pytest.mark.parametrize("x", [1e-9, 1e-3, 0.7, 5.0, 14.999, 15.0, 15.001, 29.0,
                               100.0, 1e4, 1e7])
def test_struve_difference_against_mpmath(x):
    # source: computed with mpmath at 40 digits (struveh, bessely); scipy is good
    # to a few ulp below x = 15, the Gauss-Laguerre branch to ~1 ulp above
    with mpmath.workdps(40):
        ref = float(mpmath.struveh(0, x) - mpmath.bessely(0, x))
    r0, kappa = 10.0, 2.0
    v = K.keldysh_potential_ev(x * r0 / kappa, r0, kappa)
    np.testing.assert_allclose(v, -np.pi * E2 / (2 * r0) * ref, rtol=1e-14)


def test_potential_coulomb_limits():
    # source: H0(x) - Y0(x) ~ (2/pi)(1/x - 1/x^3 + 9/x^5 - 225/x^7), Abramowitz &
    # Stegun 12.1.31; first omitted term 11025/x^9 is 3e-11 relative at x = 62.5
    r0, kappa = 40.0, 2.5
    r = np.array([1e3, 1e4, 1e6])
    x = kappa * r / r0
    coulomb = -E2 / (kappa * r)
    np.testing.assert_allclose(K.keldysh_potential_ev(r, r0, kappa),
                               coulomb * (1 - x**-2 + 9 * x**-4 - 225 * x**-6), rtol=1e-10)
    # r0 = 0 is exactly Coulomb (definition)
    np.testing.assert_allclose(K.keldysh_potential_ev(r, 0.0, kappa), coulomb, rtol=1e-15)


def test_potential_log_limit_and_origin():
    # source: H0(x) - Y0(x) = -(2/pi)(ln(x/2) + gamma) + O(x), A&S 9.1.13 and 12.1.3
    r0, kappa = 30.0, 1.5
    r = np.array([1e-7, 1e-5])
    expected = E2 / r0 * (np.log(kappa * r / (2 * r0)) + np.euler_gamma)
    np.testing.assert_allclose(K.keldysh_potential_ev(r, r0, kappa), expected, rtol=2e-6)
    assert K.keldysh_potential_ev(0.0, r0, kappa) == -np.inf
    with pytest.raises(ValueError):
        K.keldysh_potential_ev(-1.0, r0, kappa)


def test_potential_broadcasts_over_compounds():
    # common practice: (compounds, 1) x (environments,) -> (compounds, environments)
    r0 = np.linspace(5, 80, 7)[:, None]
    kappa = np.array([1.0, 2.45, 4.0])
    v = K.keldysh_potential_ev(10.0, r0, kappa)
    assert v.shape == (7, 3)
    np.testing.assert_allclose(v[3, 1], K.keldysh_potential_ev(10.0, r0[3, 0], 2.45))


# ---------------------------------------------------------------------------
# Reduced solvers
# ---------------------------------------------------------------------------


def test_s_zero_is_2d_hydrogen():
    # source: Yang et al., Phys. Rev. A 43, 1186 (1991): E_n = -Ry*/(n-1/2)^2;
    # radii computed with sympy from the Laguerre eigenfunctions
    f, g = K.solve_reduced(0.0)
    np.testing.assert_allclose(f, [4.0, 4.0 / 9.0, 4.0 / 25.0], rtol=1e-9)
    np.testing.assert_allclose(g, [float(r) for _, r in HYDROGEN], rtol=1e-9)


S_AGREE = [1e-4, 3e-3, 1e-2, 0.3, 1.0, 10.0, 300.0, 1e4]


@pytest.mark.parametrize("s", S_AGREE)
def test_two_independent_solvers_agree(s):
    # source: derived here; real-space log-mesh FD vs Gaussian Galerkin with
    # momentum-space matrix elements. Measured: 1s/2s <= 3e-8, 3s <= 5e-7 in f;
    # g: 1s/2s <= 4e-7, 3s <= 2e-5 (the Gaussian basis is the weaker method).
    fa, ga = K.solve_reduced(s, method="real-space")
    fb, gb = K.solve_reduced(s, method="gaussian")
    np.testing.assert_allclose(fb[:2], fa[:2], rtol=1e-6)
    np.testing.assert_allclose(fb[2], fa[2], rtol=1e-6)
    np.testing.assert_allclose(gb[:2], ga[:2], rtol=1e-6)
    np.testing.assert_allclose(gb[2], ga[2], rtol=5e-5)


@pytest.mark.parametrize("s", [1e-5, 1.0, 1e5])
def test_real_space_solver_converged(s):
    # source: derived here; refining h and widening the domain must not matter
    f, g = K.solve_reduced(s)
    rho_min, rho_max = K._default_domain(s)
    for options in ({"h0": 0.03}, {"rho_min": rho_min * 1e-2},
                    {"rho_max": rho_max * 1.5}):
        f2, g2 = K.solve_reduced(s, **options)
        np.testing.assert_allclose(f2, f, rtol=1e-9)
        np.testing.assert_allclose(g2, g, rtol=1e-9)


def test_small_s_first_order_perturbation_slope():
    # source: derived here (first-order perturbation theory, module docstring):
    # f_n(s) = f_n(0) - 4 pi |psi_n(0)|^2 s + O(s^2 ln s); |psi_n(0)|^2 by sympy
    slope = np.array([4 * np.pi * float(p) for p, _ in HYDROGEN])
    np.testing.assert_allclose(slope, 4.0 / NU**3, rtol=1e-14)  # = 1/(pi nu^3)
    f0 = 1.0 / NU**2
    err = []
    for s in (1e-4, 1e-5):
        f, _ = K.solve_reduced(s)
        rel = np.abs((f0 - f) / s / slope - 1)
        err.append(rel)
        # remainder bound O(s ln(1/s)): 192/32 * s ln(1/s) for 1s, same scale for others
        assert np.all(rel < 10 * s * np.log(1 / s))
    assert np.all(err[1] < err[0] / 5)


def test_small_s_non_analytic_second_order_1s():
    # source: derived here: f_1s = 4 - 32 s + 192 s^2 ln(1/s) + C s^2 (128 from
    # first order, 64 from second order). R(s) = (f - 4 + 32 s)/s^2 then obeys
    # R(s1) - R(s2) = 192 ln(s2/s1), independent of the unknown C.
    def remainder(s):
        return (K.solve_reduced(s)[0][0] - 4.0 + 32.0 * s) / s**2
    diff = remainder(1e-5) - remainder(1e-4)
    np.testing.assert_allclose(diff, 192.0 * np.log(10.0), rtol=0.02)


def test_large_s_logarithmic_regime():
    # source: derived here: s f_n(s) = ln s + 3 ln2 - 2 gamma - 2 eps_n
    #   + sqrt(2/s) <t>_n + O(ln s / s), eps_n, <t>_n of -Lap + ln t (same radial
    #   solver, different potential; <t> by Hellmann-Feynman).
    lam = 1e-4
    eps, _ = K._radial_levels(np.log, 1e-9, 60.0)
    ep, _ = K._radial_levels(lambda t: np.log(t) + lam * t, 1e-9, 60.0)
    em, _ = K._radial_levels(lambda t: np.log(t) - lam * t, 1e-9, 60.0)
    mean_t = (ep - em) / (2 * lam)
    const = 3 * np.log(2) - 2 * np.euler_gamma - 2 * eps
    for s in (1e4, 1e5):
        f, g = K.solve_reduced(s)
        leading = f * s - np.log(s) - const
        remainder = leading - np.sqrt(2 / s) * mean_t
        assert np.all(np.abs(remainder) < 10 * np.log(s) / s)
        # the sqrt(2/s) term removes > 90 % of the deviation (measured: 95-99 %)
        assert np.all(np.abs(remainder) < np.abs(leading) / 10)
        # radius: g -> sqrt(s/2) t_rms with relative correction O(s^-1/2)
        _, t_rms = K._radial_levels(np.log, 1e-9, 60.0)
        assert np.all(np.abs(g / (np.sqrt(s / 2) * t_rms) - 1) < 2 / np.sqrt(s))


def test_scaling_law_with_dimensional_solver():
    # source: derived here (module docstring): E_b = Ry mu/kappa^2 f(s),
    # r_rms = a0 kappa/mu g(s), s = r0 mu/(kappa^2 a0)
    mu_a, kappa_a, r0_a = 0.2, 1.0, 40.0
    s = r0_a * mu_a / (kappa_a**2 * BOHR_RADIUS_ANGSTROM)
    mu_b, kappa_b = 0.5, 2.0
    r0_b = s * kappa_b**2 * BOHR_RADIUS_ANGSTROM / mu_b
    f, g = K.solve_reduced(s)
    for mu, kappa, r0 in ((mu_a, kappa_a, r0_a), (mu_b, kappa_b, r0_b)):
        eb, rad = K.solve_levels_ev(mu, r0, kappa)
        np.testing.assert_allclose(eb / (RYDBERG_EV * mu / kappa**2), f, rtol=1e-8)
        np.testing.assert_allclose(rad / (BOHR_RADIUS_ANGSTROM * kappa / mu), g, rtol=1e-8)
    # same r0/a* (= kappa s) but kappa = 2: s halves and f changes by far more than 1%
    r0_c = r0_a * mu_a / kappa_a * kappa_b / mu_b
    eb_c, _ = K.solve_levels_ev(mu_b, r0_c, kappa_b)
    f_c = eb_c / (RYDBERG_EV * mu_b / kappa_b**2)
    assert np.all(np.abs(f_c / f - 1) > 0.01)
    np.testing.assert_allclose(f_c, K.solve_reduced(s / 2)[0], rtol=1e-8)


def test_binding_decreases_and_orders():
    # source: common practice (screening weakens binding; node theorem ordering)
    s = np.logspace(-5, 5, 41)
    f = np.array([K.solve_reduced(x)[0] for x in s[::4]])
    assert np.all(np.diff(f, axis=0) < 0)
    assert np.all(f[:, 1] < f[:, 0]) and np.all(f[:, 2] < f[:, 1])


# ---------------------------------------------------------------------------
# Table
# ---------------------------------------------------------------------------


def test_table_against_direct_solves_off_grid(table):
    # source: derived here; random log-uniform s in [1e-4, 1e4] (fixed seed)
    rng = np.random.default_rng(20260101)
    s = 10 ** rng.uniform(-4, 4, 25)
    direct = [K.solve_reduced(x) for x in s]
    for i, state in enumerate(K.STATES):
        f = np.array([d[0][i] for d in direct])
        g = np.array([d[1][i] for d in direct])
        np.testing.assert_allclose(table.binding_ratio(s, state), f, rtol=1e-6)
        np.testing.assert_allclose(table.radius_ratio(s, state), g, rtol=1e-6)


def test_table_grid_values_against_gaussian_solver(table):
    # source: derived here; table (real-space) vs the independent Gaussian solver
    for s in (1e-4, 0.05, 2.0, 700.0):
        f, _ = K.solve_reduced(s, method="gaussian")
        got = [table.binding_ratio(s, st) for st in K.STATES]
        np.testing.assert_allclose(got, f, rtol=1e-5)


def test_table_small_s_and_zero(table):
    # source: Yang et al. PRA 43, 1186 (1991) at s = 0; linear small-s law (derived here)
    np.testing.assert_allclose([table.binding_ratio(0.0, st) for st in K.STATES],
                               1 / NU**2, rtol=1e-10)
    s = np.array([1e-8, 3e-7, 4e-6, 9.9e-6])
    direct = np.array([K.solve_reduced(x)[0] for x in s])
    for i, state in enumerate(K.STATES):
        np.testing.assert_allclose(table.binding_ratio(s, state), direct[:, i], rtol=1e-7)


def test_table_extrapolation_above_grid(table):
    # source: derived here; f ~ (ln s + K)/s matched at s_max, error ~ sqrt(2/s)/ln s
    s = 4e5
    f, g = K.solve_reduced(s)
    got = [table.binding_ratio(s, st) for st in K.STATES]
    np.testing.assert_allclose(got, f, rtol=2e-3)


def test_table_vectorised_monotone_and_ordered(table):
    # source: common practice
    s = np.logspace(-6, 6, 200_000).reshape(400, 500)
    f1 = table.binding_ratio(s, "1s")
    assert f1.shape == s.shape
    flat = [table.binding_ratio(s.ravel(), st) for st in K.STATES]
    assert np.all(np.diff(flat[0]) < 0)
    assert np.all(flat[1] < flat[0]) and np.all(flat[2] < flat[1])
    assert np.all(np.diff(table.radius_ratio(s.ravel(), "1s")) > 0)
    assert np.isscalar(table.binding_ratio(1.0)) or table.binding_ratio(1.0).ndim == 0
    with pytest.raises(ValueError):
        table.binding_ratio(-1.0)
    with pytest.raises(ValueError):
        table.binding_ratio(1.0, "2p")


def test_table_round_trip_npz(table):
    # source: common practice (the I/O layer stores to_arrays() as .npz)
    buf = io.BytesIO()
    np.savez(buf, **table.to_arrays())
    buf.seek(0)
    with np.load(buf) as data:
        loaded = K.KeldyshTable.from_arrays(dict(data))
    s = np.logspace(-7, 6, 1001)
    for st in K.STATES:
        np.testing.assert_array_equal(loaded.binding_ratio(s, st), table.binding_ratio(s, st))
        np.testing.assert_array_equal(loaded.radius_ratio(s, st), table.radius_ratio(s, st))
    with pytest.raises(KeyError):
        K.KeldyshTable.from_arrays({"s": table.s})


def test_numpy_spline_pieces_match_scipy_bspline(table):
    # source: scipy.interpolate.make_interp_spline (reference library); the table
    # evaluates the same quintic spline from stored piecewise-polynomial pieces
    from scipy import interpolate

    s = np.logspace(np.log10(table.s[1]), np.log10(table.s[-1]), 20001)
    for key in ("f_1s", "f_3s", "g_2s"):
        spline = interpolate.make_interp_spline(np.log(table.s[1:]), np.log(getattr(table, key)[1:]), k=5)
        ref = np.exp(spline(np.log(s)))
        got = table.binding_ratio(s, key[2:]) if key[0] == "f" else table.radius_ratio(s, key[2:])
        np.testing.assert_allclose(got, ref, rtol=1e-13, atol=0)
        # the grid points themselves are interpolated exactly
        grid = table.binding_ratio(table.s[1:], key[2:]) if key[0] == "f" else table.radius_ratio(table.s[1:], key[2:])
        np.testing.assert_allclose(grid, getattr(table, key)[1:], rtol=1e-13)


def test_piece_lookup_finds_the_pieces_of_searchsorted(table):
    # source: numpy.searchsorted (reference library): the bin look-up must give the same piece for
    # every point, breakpoints themselves, points a rounding step either side of them, and both ends
    rng = np.random.default_rng(7)
    breaks = table._spline_pieces("f_1s")[0]
    x = np.concatenate([rng.uniform(breaks[0] - 1.0, breaks[-1] + 1.0, 200_000), breaks,
                        np.nextafter(breaks, np.inf), np.nextafter(breaks, -np.inf)])
    np.testing.assert_array_equal(K._piece_index(K._piece_lookup(breaks), x),
                                  np.searchsorted(breaks, x, side="right"))
    # an uneven grid (pieces of very different length) as well
    uneven = np.cumsum(rng.uniform(0.01, 1.0, 50))
    y = np.concatenate([rng.uniform(uneven[0] - 1, uneven[-1] + 1, 100_000), uneven])
    np.testing.assert_array_equal(K._piece_index(K._piece_lookup(uneven), y),
                                  np.searchsorted(uneven, y, side="right"))


def test_stored_pieces_are_used_only_when_consistent(table):
    # source: common practice (a cache entry that does not fit its grid is rebuilt, never trusted)
    arrays = table.to_arrays()
    assert {"f_1s_breaks", "f_1s_coefs"} <= set(arrays)
    loaded = K.KeldyshTable.from_arrays(arrays)
    assert set(loaded._pieces) == set(K.KeldyshTable._KEYS[1:])
    broken = dict(arrays)
    broken["f_1s_breaks"] = arrays["f_1s_breaks"][:-1]
    broken["g_1s_coefs"] = np.full_like(arrays["g_1s_coefs"], np.nan)
    refit = K.KeldyshTable.from_arrays(broken)
    assert "f_1s" not in refit._pieces and "g_1s" not in refit._pieces
    s = np.logspace(-4, 4, 101)
    np.testing.assert_array_equal(refit.binding_ratio(s), table.binding_ratio(s))
    np.testing.assert_array_equal(refit.radius_ratio(s), table.radius_ratio(s))


# ---------------------------------------------------------------------------
# Dimensional functions
# ---------------------------------------------------------------------------


def test_dimensional_binding_and_radius(table):
    # source: derived here; table route vs the direct dimensional solve
    mu = np.array([0.15, 0.27, 0.5])[:, None]
    r0 = np.array([10.0, 45.0, 80.0])[:, None]
    kappa = np.array([1.0, 2.45, 4.0])
    eb = K.keldysh_binding_ev(mu, r0, kappa, table)
    rad = K.keldysh_radius_angstrom(mu, r0, kappa, table, "2s")
    assert eb.shape == rad.shape == (3, 3)
    for i in range(3):
        for j in range(3):
            e_dir, r_dir = K.solve_levels_ev(mu[i, 0], r0[i, 0], kappa[j])
            np.testing.assert_allclose(eb[i, j], e_dir[0], rtol=1e-6)
            np.testing.assert_allclose(rad[i, j], r_dir[1], rtol=1e-6)


def test_screening_lengths():
    # source: Cudazzo et al., PRB 84, 085406 (2011): r0 = 2 pi alpha_2D;
    # bulk estimate alpha_2D = d (eps - 1)/(4 pi) gives r0 = d (eps - 1)/2
    alpha = np.array([1.0, 6.5])
    np.testing.assert_allclose(K.screening_length_from_polarizability_angstrom(alpha),
                               2 * np.pi * alpha)
    eps, d = np.array([15.0, 5.0]), np.array([6.15, 3.35])
    np.testing.assert_allclose(K.screening_length_from_bulk_angstrom(eps, d),
                               K.screening_length_from_polarizability_angstrom(
                                   d * (eps - 1) / (4 * np.pi)), rtol=1e-14)


def test_olsen_estimate():
    # source: Olsen et al., PRL 116, 056401 (2016): E_b = 8 mu/(1 + sqrt(1 + 32 pi
    # alpha mu/3))^2 Hartree (alpha in bohr, kappa = 1); r0 -> 0 gives 2D hydrogen
    mu = np.array([0.1, 0.3])
    kappa = np.array([1.0, 3.0])[:, None]
    np.testing.assert_allclose(K.olsen_binding_ev(mu, 0.0, kappa),
                               4 * RYDBERG_EV * mu / kappa**2, rtol=1e-14)
    np.testing.assert_allclose(K.olsen_binding_ev(mu, 1e-9, kappa),
                               4 * RYDBERG_EV * mu / kappa**2, rtol=1e-8)
    alpha_bohr = 6.0
    r0 = 2 * np.pi * alpha_bohr * BOHR_RADIUS_ANGSTROM
    literal = 8 * mu / (1 + np.sqrt(1 + 32 * np.pi * alpha_bohr * mu / 3)) ** 2 * HARTREE_EV
    np.testing.assert_allclose(K.olsen_binding_ev(mu, r0, 1.0), literal, rtol=1e-12)
