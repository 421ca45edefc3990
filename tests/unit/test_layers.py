"""Tests for lamellume.layers: chain confinement, gap character, crossover, emission."""

import numpy as np
import pytest
from scipy import constants

from lamellume import layers as L
from lamellume.units import HC_EV_NM

LAYERS = np.array([1, 2, 3, 4, 5, 6, L.BULK])
K, GAMMA, Q = 0, 1, 2  # arbitrary label codes used by the synthetic compounds


def _chain_lowest_level(n_sites, eps, hop):
    """Lowest eigenvalue of the open N-site chain, diagonal eps, hopping -hop."""
    h = np.diag(np.full(n_sites, eps)) - hop * (np.eye(n_sites, k=1) + np.eye(n_sites, k=-1))
    return np.linalg.eigvalsh(h)[0]


def _brute_force(owner, label, cond, edge, scissor, n_comp):
    """Reference gaps by explicit pair loops (independent of the vectorized code)."""
    n_l = edge.shape[1]
    out = {k: np.full((n_comp, n_l), np.nan) for k in ("fund", "direct", "indirect")}
    for c in range(n_comp):
        sel = np.flatnonzero(owner == c)
        for j in range(n_l):
            v = [(label[i], edge[i, j]) for i in sel if not cond[i] and np.isfinite(edge[i, j])]
            cb = [(label[i], edge[i, j] + scissor[c]) for i in sel
                  if cond[i] and np.isfinite(edge[i, j])]
            if not v or not cb:
                continue
            pairs = [(lc == lv, ec - ev) for lv, ev in v for lc, ec in cb]
            out["fund"][c, j] = min(g for _, g in pairs)
            d = [g for same, g in pairs if same]
            i_ = [g for same, g in pairs if not same]
            out["direct"][c, j] = min(d) if d else np.nan
            out["indirect"][c, j] = min(i_) if i_ else np.nan
    return out


# --------------------------------------------------------------------------- #
# constants and chain model
# --------------------------------------------------------------------------- #
def test_hc_from_codata():
    # hc = 1239.841984... eV nm from the exact SI h, c, e (CODATA 2018, scipy.constants)
    hc = constants.h * constants.c / constants.e / 1e-9
    np.testing.assert_allclose(HC_EV_NM, hc, rtol=1e-15)
    np.testing.assert_allclose(HC_EV_NM, 1239.84198, atol=1e-5)  # from memory
    np.testing.assert_allclose(L.emission_wavelength_nm(1.0), 1239.84198, atol=1e-5)


def test_chain_confinement_limits():
    # N = 1 gives the monolayer (factor 1), bulk gives 0, bilayer 1 - cos(pi/3) = 1/2;
    # large-N asymptote pi^2 / (2 N^2) from the Taylor series of cos (computed by hand)
    np.testing.assert_allclose(L.chain_confinement([1, 2, L.BULK]), [1.0, 0.5, 0.0], atol=1e-15)
    n = np.array([100, 1000, 10000])
    np.testing.assert_allclose(L.chain_confinement(n), np.pi**2 / (2 * (n + 1.0) ** 2), rtol=1e-3)
    f = L.chain_confinement(np.arange(1, 50))
    assert np.all(np.diff(f) < 0) and np.all(f > 0)


@pytest.mark.parametrize("n_sites", [1, 2, 3, 4, 5, 8, 13])
@pytest.mark.parametrize("eps,hop", [(-1.2, 0.15), (0.7, 0.4)])
def test_chain_model_matches_tight_binding_eigenvalues(n_sites, eps, hop):
    # independent check: numpy.linalg.eigvalsh of the N-site chain (common practice);
    # monolayer = eps, bulk band bottom = eps - 2 hop
    e1, ebulk = eps, eps - 2 * hop
    layers = np.array([1, n_sites, L.BULK]) if n_sites > 1 else np.array([1, L.BULK])
    edge = np.full((1, layers.size), np.nan)
    edge[0, 0], edge[0, -1] = e1, ebulk
    filled = L.fill_edges(edge, layers).filled_ev
    expected = _chain_lowest_level(n_sites, eps, hop)
    np.testing.assert_allclose(filled[0, layers == n_sites], expected, atol=1e-12)
    np.testing.assert_allclose(ebulk + (e1 - ebulk) * L.chain_confinement(n_sites), expected,
                               atol=1e-12)


def test_fill_edges_two_points_limits():
    # chain model: N = 1 reproduces the monolayer, N -> infinity tends to bulk (common practice)
    layers = np.array([1, 2, 10, 10000, L.BULK])
    edge = np.array([[2.1, np.nan, np.nan, np.nan, 1.6],
                     [-1.6, np.nan, np.nan, np.nan, -0.6]])
    res = L.fill_edges(edge, layers)
    np.testing.assert_allclose(res.filled_ev[:, 0], edge[:, 0])
    np.testing.assert_allclose(res.filled_ev[:, -1], edge[:, -1])
    np.testing.assert_allclose(res.filled_ev[:, 3], edge[:, -1], atol=1e-7)
    np.testing.assert_allclose(res.filled_ev[:, 1], 0.5 * (edge[:, 0] + edge[:, -1]))
    np.testing.assert_allclose(res.amplitude_ev, edge[:, 0] - edge[:, -1])
    np.testing.assert_array_equal(res.residual_ev, [0.0, 0.0])
    np.testing.assert_array_equal(res.n_given, [2, 2])
    assert res.anchored.all()
    np.testing.assert_array_equal(res.exponent, [1.0, 1.0])


def test_fill_edges_missing_anchor_gives_nan_row_and_flag():
    # monolayer and bulk are both required (module contract)
    edge = np.array([[np.nan, 1.9, 1.8, np.nan, np.nan, np.nan, 1.6],   # no monolayer
                     [2.0, 1.9, np.nan, np.nan, np.nan, np.nan, np.nan],  # no bulk
                     [2.0, np.nan, np.nan, np.nan, np.nan, np.nan, 1.6]])
    res = L.fill_edges(edge, LAYERS)
    np.testing.assert_array_equal(res.anchored, [False, False, True])
    assert np.isnan(res.filled_ev[:2]).all() and np.isnan(res.residual_ev[:2]).all()
    assert np.isfinite(res.filled_ev[2]).all()
    np.testing.assert_array_equal(res.n_given, [3, 2, 2])


def test_least_squares_amplitude_noise_free_recovers_amplitude():
    # exact data on the chain model: the fitted A is the generating one (common practice)
    amp, ebulk = np.array([0.45, -0.8]), np.array([1.3, -0.5])
    x = L.chain_confinement(LAYERS)
    edge = ebulk[:, None] + amp[:, None] * x[None, :]
    edge[:, [3, 5]] = np.nan  # N = 4 and 6 missing
    res = L.fill_edges(edge, LAYERS)
    np.testing.assert_allclose(res.amplitude_ev, amp, rtol=1e-13)
    np.testing.assert_allclose(res.residual_ev, 0.0, atol=1e-14)
    np.testing.assert_allclose(res.filled_ev, ebulk[:, None] + amp[:, None] * x, atol=1e-14)


def test_least_squares_amplitude_noisy_matches_lstsq():
    # reference: numpy.linalg.lstsq on the one-column design x(N), E_bulk fixed
    rng = np.random.default_rng(7)
    x = L.chain_confinement(LAYERS)
    n_v = 50
    ebulk = rng.normal(size=n_v)
    amp = rng.normal(scale=0.5, size=n_v)
    edge = ebulk[:, None] + amp[:, None] * x + rng.normal(scale=0.02, size=(n_v, LAYERS.size))
    edge[:, -1] = ebulk
    drop = rng.random((n_v, LAYERS.size)) < 0.4
    drop[:, [0, -1]] = False
    edge[drop] = np.nan
    res = L.fill_edges(edge, LAYERS)
    for i in range(n_v):
        cols = np.flatnonzero(np.isfinite(edge[i]) & (LAYERS != L.BULK))
        design = x[cols][:, None]
        a, *_ = np.linalg.lstsq(design, edge[i, cols] - ebulk[i], rcond=None)
        np.testing.assert_allclose(res.amplitude_ev[i], a[0], rtol=1e-12, atol=1e-14)
        rms = np.sqrt(np.mean((design @ a - (edge[i, cols] - ebulk[i])) ** 2))
        np.testing.assert_allclose(res.residual_ev[i], rms, rtol=1e-10, atol=1e-14)
        # given values kept exactly
        given = np.isfinite(edge[i])
        np.testing.assert_array_equal(res.filled_ev[i, given], edge[i, given])


@pytest.mark.parametrize("p_true", [0.6, 1.0, 1.7, 3.2])
def test_exponent_fit_recovers_power(p_true):
    # exact data A x^p with p inside EXPONENT_BOUNDS (common practice: bounded 1-D search)
    x = L.chain_confinement(LAYERS)
    amp, ebulk = np.array([0.7, -0.3]), np.array([0.1, 2.0])
    edge = ebulk[:, None] + amp[:, None] * x[None, :] ** p_true
    edge[0, 4] = np.nan
    res = L.fill_edges(edge, LAYERS, fit_exponent=True)
    np.testing.assert_allclose(res.exponent, p_true, rtol=1e-6)
    np.testing.assert_allclose(res.amplitude_ev, amp, rtol=1e-6)
    np.testing.assert_allclose(res.filled_ev[0, 4], ebulk[0] + amp[0] * x[4] ** p_true,
                               atol=1e-7)
    assert np.all(res.residual_ev < 1e-7)


def test_exponent_fit_needs_three_points_and_is_bounded():
    # two points: p undetermined -> stays 1; data steeper than the bound -> clipped
    x = L.chain_confinement(LAYERS)
    edge = np.full((2, LAYERS.size), np.nan)
    edge[0, [0, -1]] = [1.0, 0.0]
    edge[1] = x ** 8.0
    res = L.fill_edges(edge, LAYERS, fit_exponent=True)
    assert res.exponent[0] == 1.0
    lo, hi = L.EXPONENT_BOUNDS
    assert lo <= res.exponent[1] <= hi
    np.testing.assert_allclose(res.exponent[1], hi, rtol=1e-6)


# --------------------------------------------------------------------------- #
# synthetic compounds with a known crossing
# --------------------------------------------------------------------------- #
def _crossing_compound():
    """K valleys flat in N; Gamma valence rises with N and overtakes K between N=2 and 3.

    Gamma VB: E_1 = -1.6, E_bulk = -0.6 -> E(2) = -1.1 < -1.0 (K VBM, direct),
    E(3) = -0.6 - (1 - cos(pi/4)) = -0.8929 > -1.0 (Gamma VBM, indirect Gamma->K).
    """
    label = np.array([K, K, GAMMA, GAMMA])
    cond = np.array([False, True, False, True])
    edge = np.full((4, LAYERS.size), np.nan)
    edge[:, 0] = [-1.0, 0.8, -1.6, 2.5]
    edge[:, -1] = [-1.0, 0.8, -0.6, 2.5]
    return label, cond, edge


def test_known_crossing_between_two_and_three_layers():
    # analytic values from the chain model (computed by hand)
    label, cond, edge = _crossing_compound()
    filled = L.fill_edges(edge, LAYERS).filled_ev
    g = L.gap_character(np.zeros(4, int), label, cond, filled)
    x = L.chain_confinement(LAYERS)
    v_gamma = -0.6 - 1.0 * x
    np.testing.assert_array_equal(g.is_direct[0], [True, True, False, False, False, False, False])
    np.testing.assert_array_equal(g.vbm_label[0], [K, K, GAMMA, GAMMA, GAMMA, GAMMA, GAMMA])
    np.testing.assert_array_equal(g.cbm_label[0], K)
    np.testing.assert_array_equal(g.direct_label[0], K)
    np.testing.assert_allclose(g.direct_gap_ev[0], 1.8, atol=1e-14)
    np.testing.assert_allclose(g.indirect_gap_ev[0], np.minimum(0.8 - v_gamma, 3.5), atol=1e-14)
    np.testing.assert_allclose(g.fundamental_gap_ev[0], np.minimum(1.8, 0.8 - v_gamma), atol=1e-14)
    np.testing.assert_allclose(g.direct_margin_ev[0], (0.8 - v_gamma) - 1.8, atol=1e-14)
    np.testing.assert_allclose(g.direct_margin_ev[0, :3], [0.6, 0.1, 0.1 - (0.5 - x[2])],
                               atol=1e-14)
    c = L.layer_crossover(g.is_direct, LAYERS, g.complete)
    assert c.direct_through_layers[0] == 2
    assert c.character_switch_layers[0] == 3
    assert c.monolayer_direct[0] and not c.bulk_direct[0]


def _campaign():
    """Several compounds with different valley counts and known crossover outcomes."""
    owner, label, cond, rows, expect = [], [], [], [], []

    def add(valleys, through, switch):
        c = len(expect)
        for lab, is_c, e1, eb in valleys:
            owner.append(c), label.append(lab), cond.append(is_c)
            r = np.full(LAYERS.size, np.nan)
            r[0], r[-1] = e1, eb
            rows.append(r)
        expect.append((through, switch))

    label_x, cond_x, edge_x = _crossing_compound()
    add([(lab, c_, e[0], e[-1]) for lab, c_, e in zip(label_x, cond_x, edge_x)], 2, 3)
    # switch only in bulk: Gamma VB E(6) = -0.95 - 0.099 < -1.0 < E_bulk = -0.95 (by hand)
    add([(K, False, -1.0, -1.0), (K, True, 0.8, 0.8), (GAMMA, False, -1.95, -0.95)], 6, L.BULK)
    # never switches: single label, three valleys
    add([(K, False, -1.0, -0.9), (K, True, 1.0, 0.7), (K, True, 1.2, 1.0)], 6, L.NO_SWITCH)
    # indirect monolayer (Q conduction below K) becoming direct when K CB drops:
    # K CB E(N) = 0.2 + 0.8 x(N); Q CB flat at 0.55 -> K lower from N = 3 (x=0.293)
    add([(K, False, -1.0, -1.0), (K, True, 1.0, 0.2), (Q, True, 0.55, 0.55)], 0, 3)
    # no conduction valley at all: undetermined
    add([(K, False, -1.0, -1.0), (GAMMA, False, -1.5, -1.2)], L.UNDETERMINED, L.UNDETERMINED)
    return (np.array(owner), np.array(label), np.array(cond, bool), np.array(rows), expect)


def test_campaign_classification_and_crossover():
    owner, label, cond, edge, expect = _campaign()
    n_comp = len(expect) + 1  # the last compound owns no valley
    filled = L.fill_edges(edge, LAYERS).filled_ev
    g = L.gap_character(owner, label, cond, filled, n_compounds=n_comp)
    c = L.layer_crossover(g.is_direct, LAYERS, g.complete)
    through = [e[0] for e in expect] + [L.UNDETERMINED]
    switch = [e[1] for e in expect] + [L.UNDETERMINED]
    np.testing.assert_array_equal(c.direct_through_layers, through)
    np.testing.assert_array_equal(c.character_switch_layers, switch)
    assert not g.complete[4:].any() and g.complete[:4].all()
    assert np.isnan(g.fundamental_gap_ev[4:]).all()
    np.testing.assert_array_equal(g.cbm_label[4:], L.NO_LABEL)
    assert np.isnan(g.vbm_ev[5]).all()
    # single-label compound: no indirect pair -> margin +inf, still direct
    assert np.isnan(g.indirect_gap_ev[2]).all() and np.all(g.direct_margin_ev[2] == np.inf)
    # reference gaps from explicit pair loops
    ref = _brute_force(owner, label, cond, filled, np.zeros(n_comp), n_comp)
    np.testing.assert_allclose(g.fundamental_gap_ev, ref["fund"], atol=1e-14)
    np.testing.assert_allclose(g.direct_gap_ev, ref["direct"], atol=1e-14)
    np.testing.assert_allclose(g.indirect_gap_ev, ref["indirect"], atol=1e-14)


def test_crossover_independent_of_column_order():
    owner, label, cond, edge, expect = _campaign()
    filled = L.fill_edges(edge, LAYERS).filled_ev
    perm = np.array([6, 3, 0, 5, 1, 4, 2])
    g = L.gap_character(owner, label, cond, filled[:, perm])
    c = L.layer_crossover(g.is_direct, LAYERS[perm], g.complete)
    np.testing.assert_array_equal(c.direct_through_layers, [e[0] for e in expect])
    np.testing.assert_array_equal(c.character_switch_layers, [e[1] for e in expect])


def test_crossover_unknown_layer_stops_scan():
    # encoding contract of layer_crossover (module docstring)
    d = np.array([[True, True, True, True, True, True, True],
                  [True, True, True, True, True, True, True],
                  [False, False, True, True, True, True, True]])
    known = np.ones_like(d)
    known[0, 3] = False  # N = 4 unknown
    known[1, 0] = False  # monolayer unknown
    c = L.layer_crossover(d, LAYERS, known)
    np.testing.assert_array_equal(c.direct_through_layers, [3, L.UNDETERMINED, 0])
    np.testing.assert_array_equal(c.character_switch_layers, [L.UNDETERMINED, L.UNDETERMINED, 3])
    np.testing.assert_array_equal(c.bulk_direct, [True, True, True])


# --------------------------------------------------------------------------- #
# invariances, ties, vectorization
# --------------------------------------------------------------------------- #
def _random_campaign(seed, n_comp=40):
    rng = np.random.default_rng(seed)
    counts = rng.integers(1, 7, size=n_comp)  # 1..6 valleys per compound
    owner = np.repeat(np.arange(n_comp), counts)
    n_v = owner.size
    label = rng.integers(0, 4, size=n_v)
    cond = rng.random(n_v) < 0.5
    edge = np.where(cond[:, None], 1.0, -1.0) + rng.normal(scale=0.4, size=(n_v, LAYERS.size))
    edge[rng.random(edge.shape) < 0.05] = np.nan
    scissor = rng.uniform(0.0, 0.8, size=n_comp)
    return owner, label, cond, edge, scissor


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_batch_equals_one_compound_at_a_time(seed):
    owner, label, cond, edge, scissor = _random_campaign(seed)
    n_comp = scissor.size
    g = L.gap_character(owner, label, cond, edge, scissor_ev=scissor, n_compounds=n_comp)
    for c in range(n_comp):
        sel = owner == c
        one = L.gap_character(np.zeros(sel.sum(), int), label[sel], cond[sel], edge[sel],
                              scissor_ev=scissor[c:c + 1])
        for name, batch_field, one_field in zip(g._fields, g, one):
            np.testing.assert_array_equal(batch_field[c], one_field[0], err_msg=name)
    ref = _brute_force(owner, label, cond, edge, scissor, n_comp)
    np.testing.assert_allclose(g.fundamental_gap_ev, ref["fund"], atol=1e-13)
    np.testing.assert_allclose(g.direct_gap_ev, ref["direct"], atol=1e-13)
    np.testing.assert_allclose(g.indirect_gap_ev, ref["indirect"], atol=1e-13)
    with np.errstate(invalid="ignore"):
        ok = g.complete & np.isfinite(g.direct_gap_ev)
        np.testing.assert_array_equal(
            g.is_direct[ok], g.direct_gap_ev[ok] <= g.fundamental_gap_ev[ok] + 1e-9)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_without_indirect_fields_the_direct_ones_are_unchanged(seed):
    # the Monte Carlo's indirect=False: the fields it keeps against the brute-force search
    # (independent reference, _brute_force) and equal to those of the full call
    owner, label, cond, edge, scissor = _random_campaign(seed)
    n_comp = scissor.size
    full = L.gap_character(owner, label, cond, edge, scissor_ev=scissor, n_compounds=n_comp)
    part = L.gap_character(owner, label, cond, edge, scissor_ev=scissor, n_compounds=n_comp, indirect=False)
    for name in ("vbm_label", "cbm_label", "indirect_gap_ev", "direct_margin_ev"):
        assert getattr(part, name) is None, name
    for name in ("vbm_ev", "cbm_ev", "fundamental_gap_ev", "is_direct", "direct_gap_ev", "direct_label", "complete"):
        np.testing.assert_array_equal(getattr(part, name), getattr(full, name), err_msg=name)
    ref = _brute_force(owner, label, cond, edge, scissor, n_comp)
    np.testing.assert_allclose(part.fundamental_gap_ev, ref["fund"], atol=1e-13)
    np.testing.assert_allclose(part.direct_gap_ev, ref["direct"], atol=1e-13)


def _segment_cases():
    """Hand-made segment layouts and values: ties (0.0 and -0.0 too), +-inf rows, NaN, unequal and equal runs."""
    inf = np.inf
    uneven = np.array([[2.0, -inf], [1.0, 5.0], [1.0, 5.0],      # segment 0: tie at the minimum
                       [inf, inf],                                # segment 1: one row, all inf
                       [0.0, 3.0], [-0.0, np.nan], [0.0, 3.0], [7.0, -1.0],   # segment 2: signed zeros, NaN
                       [inf, 4.0], [inf, 4.0]])                   # segment 3: inf in one column
    equal = np.array([[3.0, 1.0], [3.0, 0.5], [inf, inf], [inf, inf], [-0.0, 2.0], [0.0, 2.0]])
    long_last = np.concatenate([uneven, uneven[::-1], uneven])   # 27 one-row segments, then one of 3 rows
    return [(uneven, [0, 3, 4, 8]), (equal, [0, 2, 4]), (equal[:, 0], [0, 2, 4]), (uneven[:, 1], [0, 3, 4, 8]),
            (uneven, [0, 1, 2, 3, 4, 5, 6, 7, 8, 9]), (long_last, list(range(27))),
            (long_last, list(range(11)))]   # ten rows, then one of 20: numpy's reduceat itself (by_position False)


@pytest.mark.parametrize("values, start", _segment_cases())
def test_segment_reductions_equal_reduceat(values, start):
    # the general path: numpy's reduceat over the same segments, compared bit for bit (signs of zero too)
    lay = L.segments(start, len(values))
    assert lay.by_position == (len(start) != 11)
    for ufunc in (np.minimum, np.maximum):
        got, ref = L.segment_reduce(ufunc, values, lay), ufunc.reduceat(values, start, axis=0)
        np.testing.assert_array_equal(np.signbit(got), np.signbit(ref))
        np.testing.assert_array_equal(got, ref)
    mask = np.isfinite(values) & (values > 0.5)
    np.testing.assert_array_equal(L.segment_reduce(np.logical_or, mask, lay),
                                  np.logical_or.reduceat(mask, start, axis=0))
    best, offset = L.segment_argmin(values, lay)
    np.testing.assert_array_equal(best, np.minimum.reduceat(values, start, axis=0))
    # the first row attaining the minimum, by an explicit scan of each segment
    for s, (a, b) in enumerate(zip(start, list(start[1:]) + [len(values)])):
        flat = values[a:b].reshape(b - a, -1)
        for col in range(flat.shape[1]):
            if np.isnan(best.reshape(len(start), -1)[s, col]):
                continue
            first = next(i for i in range(b - a) if flat[i, col] == best.reshape(len(start), -1)[s, col])
            assert offset.reshape(len(start), -1)[s, col] == first


@pytest.mark.parametrize("shift_ev", [-3.0, 0.37, 10.0])
def test_character_invariant_under_common_energy_shift(shift_ev):
    # physics: only energy differences matter (common practice)
    owner, label, cond, edge, scissor = _random_campaign(11)
    g0 = L.gap_character(owner, label, cond, edge, scissor_ev=scissor)
    g1 = L.gap_character(owner, label, cond, edge + shift_ev, scissor_ev=scissor)
    for name in ("is_direct", "vbm_label", "cbm_label", "direct_label", "complete"):
        np.testing.assert_array_equal(getattr(g0, name), getattr(g1, name), err_msg=name)
    for name in ("fundamental_gap_ev", "direct_gap_ev", "indirect_gap_ev", "direct_margin_ev"):
        np.testing.assert_allclose(getattr(g0, name), getattr(g1, name), atol=1e-12,
                                   err_msg=name)
    np.testing.assert_allclose(g1.vbm_ev, g0.vbm_ev + shift_ev, atol=1e-12)


def test_scissor_shifts_gaps_not_character():
    # a scissor moves every conduction edge rigidly (common practice)
    owner, label, cond, edge, _ = _random_campaign(5)
    n_comp = owner.max() + 1
    scissor = np.linspace(0.0, 1.5, n_comp)
    g0 = L.gap_character(owner, label, cond, edge)
    g1 = L.gap_character(owner, label, cond, edge, scissor_ev=scissor)
    for name in ("is_direct", "vbm_label", "cbm_label", "direct_label", "complete"):
        np.testing.assert_array_equal(getattr(g0, name), getattr(g1, name), err_msg=name)
    for name in ("fundamental_gap_ev", "direct_gap_ev", "indirect_gap_ev", "cbm_ev"):
        np.testing.assert_allclose(getattr(g1, name), getattr(g0, name) + scissor[:, None],
                                   atol=1e-12, err_msg=name)
    np.testing.assert_allclose(g1.direct_margin_ev, g0.direct_margin_ev, atol=1e-12)
    np.testing.assert_array_equal(g1.vbm_ev, g0.vbm_ev)


def test_degenerate_direct_and_indirect_counts_as_direct():
    # tie rule: direct within DEGENERACY_TOL_EV of the indirect gap is direct (module contract)
    label = np.array([K, K, GAMMA])
    cond = np.array([False, True, False])
    edge = np.array([[-1.0], [1.0], [-1.0 + 5e-10]])  # Gamma VB 5e-10 eV above K VB
    g = L.gap_character(np.zeros(3, int), label, cond, edge)
    assert g.is_direct[0, 0]
    assert g.vbm_label[0, 0] == K and g.cbm_label[0, 0] == K
    np.testing.assert_allclose(g.direct_margin_ev[0, 0], -5e-10, atol=1e-15)
    edge[2, 0] = -1.0 + 1e-6  # clearly above: indirect
    g = L.gap_character(np.zeros(3, int), label, cond, edge)
    assert not g.is_direct[0, 0] and g.vbm_label[0, 0] == GAMMA
    # exactly degenerate extrema at two labels: smallest label code reported
    g = L.gap_character(np.zeros(4, int), np.array([2, 1, 2, 1]),
                        np.array([False, False, True, True]),
                        np.array([[-1.0], [-1.0], [1.0], [1.0]]))
    assert g.is_direct[0, 0] and g.direct_label[0, 0] == 1 and g.vbm_label[0, 0] == 1
    np.testing.assert_allclose(g.direct_margin_ev[0, 0], 0.0)


def test_gap_character_rejects_unsorted_owner():
    with pytest.raises(ValueError):
        L.gap_character(np.array([1, 0]), np.array([0, 0]), np.array([False, True]),
                        np.zeros((2, 1)))


# --------------------------------------------------------------------------- #
# optical gap, emission, spectral bands
# --------------------------------------------------------------------------- #
def test_optical_gap_and_emission():
    # E_opt = E_direct - E_b; lambda = hc / E (CODATA via scipy.constants)
    e_opt = L.optical_gap_ev(np.array([2.0, 1.8, np.nan]), 0.5)
    np.testing.assert_allclose(e_opt, [1.5, 1.3, np.nan])
    # a binding that reaches the direct gap gives no optical gap (issue 12; outside the Wannier-Mott
    # picture, common practice): equal, larger, and far larger than the 0.08 eV gap
    np.testing.assert_allclose(L.optical_gap_ev(0.08, np.array([0.03, 0.08, 0.25, 2.98])),
                               [0.05, np.nan, np.nan, np.nan])
    np.testing.assert_allclose(L.optical_gap_of_exciton_ev(np.array([[0.05, 0.0], [-0.17, np.nan]])),
                               [[0.05, np.nan], [np.nan, np.nan]])
    lam = L.emission_wavelength_nm(np.array([[1.5, 0.0], [-1.0, np.nan]]))
    np.testing.assert_allclose(lam[0, 0], HC_EV_NM / 1.5)
    assert np.isnan(lam[0, 1]) and np.isnan(lam[1]).all()
    assert lam.shape == (2, 2)


def test_spectral_band_first_match_half_open_and_outside():
    # band edges below are illustrative config values (common practice)
    bands = [("visible", 380.0, 750.0), ("near_ir", 750.0, 1400.0), ("wide", 300.0, 2000.0)]
    w = np.array([[379.9, 380.0, 749.99], [750.0, 1500.0, np.nan], [2500.0, 200.0, 1399.0]])
    names = L.spectral_band(w, bands)
    assert names.dtype == object and names.shape == w.shape
    np.testing.assert_array_equal(names, [["wide", "visible", "visible"],
                                          ["near_ir", "wide", "outside"],
                                          ["outside", "outside", "near_ir"]])
    assert L.spectral_band(500.0, []) == "outside"
    assert L.spectral_band(500.0, bands, outside="") == "visible"
    with pytest.raises(ValueError):
        L.spectral_band(500.0, [("bad", 600.0, 500.0)])
