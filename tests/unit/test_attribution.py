"""Tests for lamellume.attribution (Saltelli 2010 first-order, Jansen 1999 total indices).

Every expected value is a closed form derived in the comment beside it (or in
the docstring of the helper that computes it) and evaluated with numpy/scipy
independently of the module: the module only ever sees model outputs.
"""

import math

import numpy as np
import pytest
from scipy import stats

from lamellume import attribution as A


def _draws(rng, shape_lead, n, d, k=2):
    return rng.standard_normal(tuple(shape_lead) + (k, n, d))


def _evaluate(model, design):
    """Apply model (..., N, D) -> (..., N) to every matrix of a design."""
    out = [model(design.a), model(design.b), model(design.ab)]
    out.append(None if design.ab_reduced is None else model(design.ab_reduced))
    return out


def _linear(sigmas):
    sig = np.asarray(sigmas, dtype=float)
    return lambda z: np.sum(sig * z, axis=-1)


# --------------------------------------------------------------------------- #
# One uncertain input
# --------------------------------------------------------------------------- #
@pytest.mark.parametrize("kind", ["continuous", "verdict"])
def test_single_uncertain_input_carries_everything(kind):
    # Closed form (derived here): when the output depends on z_0 only,
    # E[Y | z_0] = Y, so V_0 = V and V_{~0} = 0: S_0 = ST_0 = 1; every other
    # group leaves Y unchanged between A and A_B^(i), so S_i = ST_i = 0 exactly.
    n = 20_000
    rng = np.random.default_rng(1)
    if kind == "continuous":
        def model(z):
            return np.exp(0.3 * z[..., 0]) + z[..., 0] ** 3          # nonlinear, monotonic
    else:
        def model(z):
            return z[..., 0] > 0.4                                    # a 0/1 verdict
    design = A.sobol_design(_draws(rng, (), n, 4), [[0], [1], [2, 3]])
    res = A.sobol_indices(*_evaluate(model, design))
    # sampling error of S_0 ~ 1/sqrt(N) ~ 0.007 (CLT on the numerator); 0.03 is > 4 sigma
    np.testing.assert_allclose(res.first[0], 1.0, atol=0.03)
    np.testing.assert_allclose(res.total[0], 1.0, atol=0.03)
    np.testing.assert_array_equal(res.first[1:], 0.0)
    np.testing.assert_array_equal(res.total[1:], 0.0)


# --------------------------------------------------------------------------- #
# Linear model: sum of independent normal shifts with known variances
# --------------------------------------------------------------------------- #
def test_linear_gap_shifts_match_closed_form_and_groups_add():
    # Gap = E0 + sum_j sigma_j z_j with independent standard normals z_j.
    # Closed form (derived here): Var(Y) = sum sigma_j^2; E[Y | z_G] = E0 +
    # sum_{j in G} sigma_j z_j, so S_G = ST_G = sum_{j in G} sigma_j^2 / sum_j sigma_j^2
    # (additive model: first-order and total coincide, sum S = sum ST = 1).
    sig = np.array([0.05, 0.10, 0.02, 0.07])                 # eV
    groups = [[0], [1, 2], [3]]
    expected = np.array([sig[0] ** 2, sig[1] ** 2 + sig[2] ** 2, sig[3] ** 2]) / np.sum(sig ** 2)
    n = 40_000
    design = A.sobol_design(_draws(np.random.default_rng(2), (), n, 4), groups)
    res = A.sobol_indices(*_evaluate(lambda z: 1.8 + _linear(sig)(z), design))
    np.testing.assert_allclose(res.variance, np.sum(sig ** 2), rtol=0.03)   # var of 80k normals: ~0.5 %
    np.testing.assert_allclose(res.first, expected, atol=0.03)
    np.testing.assert_allclose(res.total, expected, atol=0.03)
    np.testing.assert_allclose(res.first.sum(), 1.0, atol=0.04)
    np.testing.assert_allclose(res.total.sum(), 1.0, atol=0.04)
    # the reported standard errors are of the size the error actually has
    assert np.all(np.abs(res.first - expected) < 5 * res.first_se)
    assert np.all(np.abs(res.total - expected) < 5 * res.total_se)


def test_vectorised_over_compounds_each_with_its_own_variances():
    # Same closed form as above, a different sigma vector per compound.
    rng = np.random.default_rng(3)
    sig = rng.uniform(0.01, 0.2, size=(6, 3))
    expected = sig ** 2 / np.sum(sig ** 2, axis=1, keepdims=True)
    n = 30_000
    design = A.sobol_design(_draws(rng, (6,), n, 3), [[0], [1], [2]])

    def model(z):
        return np.sum(sig[:, None, :] * z, axis=-1) if z.ndim == 3 else np.sum(sig[:, None, None, :] * z, axis=-1)

    res = A.sobol_indices(*_evaluate(model, design))
    assert res.first.shape == (6, 3)
    np.testing.assert_allclose(res.first, expected, atol=0.03)
    np.testing.assert_allclose(res.total, expected, atol=0.03)


def test_halved_linear_effect_is_three_quarters_of_first_order():
    # z_j = sqrt(1-c^2) u_j + c v_j; for Y = sum sigma_j z_j, Var(E[Y | u_j]) =
    # (1 - c^2) sigma_j^2 (derived here), so the expected variance removed by
    # halving (c = 1/2) is 3/4 of S_j, and c = 0 gives S_j itself.
    sig = np.array([0.05, 0.10, 0.03])
    s = sig ** 2 / np.sum(sig ** 2)
    n = 40_000
    rng = np.random.default_rng(4)
    for c, factor in ((0.5, 0.75), (0.0, 1.0)):
        design = A.sobol_design(_draws(rng, (), n, 3, k=4), [[0], [1], [2]], residual=c)
        res = A.sobol_indices(*_evaluate(_linear(sig), design))
        np.testing.assert_allclose(res.reduced, factor * s, atol=0.03)
        np.testing.assert_allclose(res.first, s, atol=0.03)
        # A and B stay standard normal under the split (their variance is sum sigma^2)
        np.testing.assert_allclose(res.variance, np.sum(sig ** 2), rtol=0.03)


# --------------------------------------------------------------------------- #
# A 0/1 verdict with closed-form indices
# --------------------------------------------------------------------------- #
def _threshold_first_order(sig_i, sig_rest, threshold):
    """S_i of Y = 1[sigma_i z_i + sigma_rest z_rest > t] (derived here).

    E[Y | z_i] = Phi((sigma_i z_i - t) / sigma_rest), and with X ~ N(m, s^2),
    E[Phi(X)^2] = P(W1 <= X, W2 <= X) = Phi_2(m/sqrt(1+s^2), m/sqrt(1+s^2);
    rho = s^2/(1+s^2)) for independent standard normals W1, W2. Here m =
    -t/sigma_rest, s = sigma_i/sigma_rest. The bivariate normal CDF comes from
    scipy.stats.multivariate_normal (an independent library).
    """
    m, s2 = -threshold / sig_rest, (sig_i / sig_rest) ** 2
    h = m / math.sqrt(1 + s2)
    rho = s2 / (1 + s2)
    e2 = stats.multivariate_normal(mean=[0, 0], cov=[[1, rho], [rho, 1]]).cdf([h, h])
    p = stats.norm.sf(threshold / math.hypot(sig_i, sig_rest))
    return (e2 - p * p) / (p * (1 - p)), p


def test_verdict_two_equal_inputs_sheppard():
    # Y = 1[z1 + z2 > 0]: p = 1/2, V = 1/4; E[Phi(z)^2] = 1/4 + asin(1/2)/(2 pi) = 1/3
    # (Sheppard's orthant formula, common practice), so V_1 = 1/12, S_1 = 1/3 and,
    # with two inputs, ST_1 = 1 - S_2 = 2/3. Sum S = 2/3 < 1 < sum ST = 4/3.
    n = 60_000
    design = A.sobol_design(_draws(np.random.default_rng(5), (), n, 2), [[0], [1]])
    res = A.sobol_indices(*_evaluate(lambda z: z[..., 0] + z[..., 1] > 0.0, design))
    np.testing.assert_allclose(res.mean, 0.5, atol=0.01)
    np.testing.assert_allclose(res.first, [1 / 3, 1 / 3], atol=0.03)
    np.testing.assert_allclose(res.total, [2 / 3, 2 / 3], atol=0.03)
    assert res.first.sum() < 1.0 < res.total.sum()


@pytest.mark.parametrize("sig1, sig2, t", [(0.10, 0.05, 0.03), (0.04, 0.12, -0.05), (0.08, 0.08, 0.10)])
def test_verdict_threshold_matches_bivariate_normal_closed_form(sig1, sig2, t):
    # first-order from _threshold_first_order; total ST_1 = 1 - S_2 (two inputs)
    s1, p = _threshold_first_order(sig1, sig2, t)
    s2, _ = _threshold_first_order(sig2, sig1, t)
    n = 60_000
    design = A.sobol_design(_draws(np.random.default_rng(6), (), n, 2), [[0], [1]])
    res = A.sobol_indices(*_evaluate(lambda z: sig1 * z[..., 0] + sig2 * z[..., 1] > t, design))
    np.testing.assert_allclose(res.mean, p, atol=0.01)
    np.testing.assert_allclose(res.first, [s1, s2], atol=0.035)
    np.testing.assert_allclose(res.total, [1 - s2, 1 - s1], atol=0.035)


def test_halved_effect_never_exceeds_first_order():
    # Law of total variance (derived in the attribution module docstring): u is part
    # of z, so Var E[Y|u] <= Var E[Y|z]. Checked on a nonlinear verdict with an
    # interaction, up to sampling error.
    n = 40_000
    design = A.sobol_design(_draws(np.random.default_rng(12), (), n, 3, k=4), [[0], [1], [2]], residual=0.5)
    res = A.sobol_indices(*_evaluate(lambda z: (z[..., 0] * z[..., 1] + 0.5 * z[..., 2] ** 2) > 0.3, design))
    assert np.all(res.reduced <= res.first + 4 * np.hypot(res.reduced_se, res.first_se))


def test_verdict_halved_effect_closed_form():
    # z_1 = sqrt(3)/2 u + v/2: E[Y | u] = Phi(sigma_1 sqrt(3)/2 u / sqrt(sigma_1^2/4 + sigma_2^2))
    # -> the threshold formula with sigma_i = sqrt(3)/2 sigma_1 and
    # sigma_rest = sqrt(sigma_1^2/4 + sigma_2^2) (derived here).
    sig1, sig2, t = 0.10, 0.06, 0.02
    expected, _ = _threshold_first_order(math.sqrt(0.75) * sig1, math.hypot(0.5 * sig1, sig2), t)
    n = 80_000
    design = A.sobol_design(_draws(np.random.default_rng(7), (), n, 2, k=4), [[0], [1]], residual=0.5)
    res = A.sobol_indices(*_evaluate(lambda z: sig1 * z[..., 0] + sig2 * z[..., 1] > t, design))
    np.testing.assert_allclose(res.reduced[0], expected, atol=0.03)
    assert res.reduced[0] < res.first[0]


# --------------------------------------------------------------------------- #
# Interactions: the Ishigami function
# --------------------------------------------------------------------------- #
def test_ishigami_first_and_total_with_interaction():
    # Y = sin x1 + a sin^2 x2 + b x3^4 sin x1, x_i uniform on [-pi, pi]
    # (Ishigami and Homma 1990). Closed form (derived here by integrating the
    # ANOVA terms): V = a^2/8 + b pi^4/5 + b^2 pi^8/18 + 1/2,
    # V1 = (1 + b pi^4/5)^2 / 2, V2 = a^2/8, V3 = 0,
    # V13 = b^2 pi^8/18 - b^2 pi^8/50 = 8 b^2 pi^8/225;
    # ST1 = (V1 + V13)/V, ST2 = S2, ST3 = V13/V. sum S < 1 < sum ST.
    a, b = 7.0, 0.1
    pi = math.pi
    v = a * a / 8 + b * pi ** 4 / 5 + b * b * pi ** 8 / 18 + 0.5
    v1, v2, v13 = (1 + b * pi ** 4 / 5) ** 2 / 2, a * a / 8, 8 * b * b * pi ** 8 / 225
    n = 100_000

    def model(z):
        x = pi * (2 * stats.norm.cdf(z) - 1)                       # normal -> uniform(-pi, pi)
        return np.sin(x[..., 0]) + a * np.sin(x[..., 1]) ** 2 + b * x[..., 2] ** 4 * np.sin(x[..., 0])

    design = A.sobol_design(_draws(np.random.default_rng(8), (), n, 3), [[0], [1], [2]])
    res = A.sobol_indices(*_evaluate(model, design))
    np.testing.assert_allclose(res.variance, v, rtol=0.02)
    np.testing.assert_allclose(res.first, [v1 / v, v2 / v, 0.0], atol=0.03)
    np.testing.assert_allclose(res.total, [(v1 + v13) / v, v2 / v, v13 / v], atol=0.03)
    assert res.first.sum() < 1.0 < res.total.sum()


# --------------------------------------------------------------------------- #
# Convergence
# --------------------------------------------------------------------------- #
def test_standard_error_falls_as_inverse_square_root_of_samples():
    # Replicates are independent compounds (leading axis). The spread of the
    # estimates across replicates at N and 16 N must shrink by sqrt(16) = 4
    # (central limit theorem); the reported standard error must match the spread.
    sig = np.array([0.06, 0.04])
    rng = np.random.default_rng(9)
    reps = 400
    spread, reported = {}, {}
    for n in (100, 1600):
        design = A.sobol_design(_draws(rng, (reps,), n, 2), [[0], [1]])
        res = A.sobol_indices(*_evaluate(lambda z: z[..., 0] * sig[0] + sig[1] * z[..., 1] > 0.02, design))
        spread[n] = res.first[:, 0].std()
        reported[n] = np.median(res.first_se[:, 0])
        # the mean over replicates converges on the closed form of the threshold verdict
        s1, _ = _threshold_first_order(sig[0], sig[1], 0.02)
        np.testing.assert_allclose(res.first[:, 0].mean(), s1, atol=4 * spread[n] / math.sqrt(reps) + 0.005)
    # std of a std estimate from 400 replicates: ~3.5 %; 20 % leaves room
    np.testing.assert_allclose(spread[100] / spread[1600], 4.0, rtol=0.2)
    for n in spread:
        np.testing.assert_allclose(reported[n], spread[n], rtol=0.25)


# --------------------------------------------------------------------------- #
# Design and guards
# --------------------------------------------------------------------------- #
def test_design_columns_and_sizes():
    rng = np.random.default_rng(10)
    z = _draws(rng, (), 5, 4)
    d = A.sobol_design(z, [[0, 2], [1]])
    np.testing.assert_array_equal(d.ab[0][:, [0, 2]], d.b[:, [0, 2]])
    np.testing.assert_array_equal(d.ab[0][:, [1, 3]], d.a[:, [1, 3]])
    np.testing.assert_array_equal(d.ab[1][:, 1], d.b[:, 1])
    np.testing.assert_array_equal(d.ab[1][:, [0, 2, 3]], d.a[:, [0, 2, 3]])
    assert A.design_size(100, 7) == 900                           # N (d + 2), Saltelli 2010 sec. 3
    assert A.design_size(100, 7, n_reduced=3) == 1200
    dr = A.sobol_design(_draws(rng, (), 5, 4, k=4), [[0, 2], [1], [3]], residual=0.5, reduced=[2, 0])
    assert dr.ab_reduced.shape == (2, 5, 4)
    np.testing.assert_array_equal(dr.ab_reduced[0][:, [0, 1, 2]], dr.a[:, [0, 1, 2]])   # group 2 = column 3
    assert not np.any(dr.ab_reduced[0][:, 3] == dr.a[:, 3])
    with pytest.raises(ValueError):
        A.sobol_design(z, [[0], [0, 1]])                          # overlapping groups
    with pytest.raises(ValueError):
        A.sobol_design(z, [[4]])
    with pytest.raises(ValueError):
        A.sobol_design(z, [[0]], residual=0.5)                    # needs four draw matrices


def test_constant_output_gives_nan_not_a_number_out_of_nothing():
    design = A.sobol_design(_draws(np.random.default_rng(11), (), 50, 2), [[0], [1]])
    res = A.sobol_indices(*_evaluate(lambda z: np.ones(z.shape[:-1], dtype=bool), design))
    assert np.all(np.isnan(res.first)) and np.all(np.isnan(res.total))
    assert res.variance == 0.0 and res.mean == 1.0
