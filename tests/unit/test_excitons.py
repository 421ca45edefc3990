"""Tests for lamellume.excitons: valley pairs, spin sub-bands, lowest bright/dark exciton, bright fraction."""

import itertools
import math

import numpy as np
import pytest

from lamellume import excitons as X

K, GAMMA, Q = 0, 1, 2  # arbitrary label codes
KB_EV_PER_K = 8.617333262e-5  # Boltzmann constant, CODATA 2018 (exact SI value / e), from memory


def _brute_pairs(owner, label, cond, split, spin):
    """Explicit loops over sub-bands (independent of the vectorised construction)."""
    subs = []
    for i in range(len(owner)):
        if np.isfinite(split[i]) and spin[i] != 0:
            subs += [(i, 0.0, spin[i]), (i, split[i], -spin[i])]
        else:
            subs.append((i, 0.0, 0))
    out = set()
    for (iv, ov, sv), (ic, oc, sc) in itertools.product(subs, subs):
        if owner[iv] != owner[ic] or cond[iv] or not cond[ic]:
            continue
        same = label[iv] == label[ic]
        allowed = sv == 0 or sc == 0 or sv == sc
        out.add((owner[iv], iv, ic, ov, oc, same, same and allowed))
    return out


def test_pairs_match_explicit_loops():
    rng = np.random.default_rng(3)
    n = 40
    owner = np.sort(rng.integers(0, 9, n))
    label = rng.integers(0, 3, n)
    cond = rng.random(n) < 0.5
    split = np.where(rng.random(n) < 0.4, rng.uniform(0, 0.3, n), np.nan)
    spin = rng.choice([-1, 0, 1], n)
    p = X.valley_pairs(owner, label, cond, split, spin)
    got = {(int(c), int(v), int(k), float(ov), float(oc), bool(s), bool(b))
           for c, v, k, ov, oc, s, b in zip(p.compound, p.valence, p.conduction, p.valence_offset_ev,
                                            p.conduction_offset_ev, p.same_label, p.bright)}
    want = _brute_pairs(owner, label, cond, split, spin)
    assert got == want and len(p.compound) == len(want)
    assert np.all(np.diff(p.compound) >= 0)


def test_pair_gaps_include_scissor_and_offsets():
    # one compound: valence K at -1.0 eV split 0.4 (edge up), conduction K at 1.0 split 0.03 (edge down)
    owner, label, cond = [0, 0], [K, K], [False, True]
    p = X.valley_pairs(owner, label, cond, [0.4, 0.03], [1, -1])
    gaps = X.pair_gaps_ev(p, np.array([[-1.0], [1.0]]), scissor_ev=[0.5])[:, 0]
    # by hand: 2.5 + {0, 0.03} + {0, 0.4}; bright when spins agree
    table = {(round(ov, 3), round(oc, 3)): (g, b) for ov, oc, g, b in
             zip(p.valence_offset_ev, p.conduction_offset_ev, gaps, p.bright)}
    assert table[(0.0, 0.0)] == (pytest.approx(2.5), False)     # up -> down: spin-dark
    assert table[(0.0, 0.03)] == (pytest.approx(2.53), True)    # up -> up
    assert table[(0.4, 0.0)] == (pytest.approx(2.9), True)      # down -> down
    assert table[(0.4, 0.03)] == (pytest.approx(2.93), False)


def _tmd_like(conduction_edge_spin, conduction_split_ev, valence_split_ev):
    """Monolayer with K valleys only, spin split as in the published k.p tables."""
    p = X.valley_pairs([0, 0], [K, K], [False, True], [valence_split_ev, conduction_split_ev],
                       [X.SPIN_UP, conduction_edge_spin])
    gaps = X.pair_gaps_ev(p, np.array([-1.0, 1.0]))
    lev = X.lowest_excitons(p.compound, gaps - 0.5, p.bright, 1)  # same binding for every pair
    return lev


def test_spin_dark_tungsten_like_and_bright_molybdenum_like():
    # Conduction-band spin splittings at K (from memory: Kormanyos et al., 2D Mater. 2, 022001 (2015)):
    # WSe2 |Delta_CB| ~ 36 meV with the lower sub-band of opposite spin to the top valence band (spin-dark);
    # MoSe2 |Delta_CB| ~ 21 meV with the lower sub-band of the same spin (bright). Valence splits 466 / 184 meV.
    w = _tmd_like(X.SPIN_DOWN, 0.036, 0.466)
    assert w.verdict[0] == "dark"
    np.testing.assert_allclose(w.margin_ev[0], -0.036, atol=1e-12)  # dark 36 meV below bright
    mo = _tmd_like(X.SPIN_UP, 0.021, 0.184)
    assert mo.verdict[0] == "bright"
    np.testing.assert_allclose(mo.margin_ev[0], 0.021, atol=1e-12)


def test_momentum_dark_exciton_below_direct_gap():
    # direct K-K gap 2.0 eV with a light pair (binding 0.30 eV); indirect Gamma-K gap 2.1 eV with a heavy
    # pair (binding 0.50 eV): the band gap is direct, the lowest exciton is the momentum-dark one (1.6 < 1.7).
    owner, label, cond = [0, 0, 0], [K, GAMMA, K], [False, False, True]
    edges = np.array([-1.0, -1.1, 1.0])
    p = X.valley_pairs(owner, label, cond)
    gaps = X.pair_gaps_ev(p, edges)
    binding = np.where(p.same_label, 0.30, 0.50)
    lev = X.lowest_excitons(p.compound, gaps - binding, p.bright, 1)
    np.testing.assert_allclose([lev.bright_ev[0], lev.dark_ev[0]], [1.7, 1.6], atol=1e-12)
    assert lev.verdict[0] == "dark" and lev.margin_ev[0] < 0
    assert p.valence[lev.dark_pair[0]] == 1 and p.valence[lev.bright_pair[0]] == 0


def test_missing_competitor_is_unknown_not_bright():
    p = X.valley_pairs([0, 0, 1, 1], [K, K, K, GAMMA], [False, True, False, True])
    gaps = X.pair_gaps_ev(p, np.array([-1.0, 1.0, -1.0, 1.5]))
    lev = X.lowest_excitons(p.compound, gaps[:, None] - 0.2, p.bright, 3)  # compound 2 has no valleys
    assert list(lev.verdict[:, 0]) == ["unknown", "dark", "unknown"]
    assert np.isnan(lev.margin_ev[0, 0]) and np.isnan(lev.bright_ev[1, 0])
    assert lev.bright_pair[2, 0] == X.NO_PAIR and lev.dark_pair[2, 0] == X.NO_PAIR


def test_lowest_over_trailing_axes():
    # two layer counts x two surroundings: the verdict can flip between them
    p = X.valley_pairs([0, 0, 0], [K, GAMMA, K], [False, False, True])
    e = np.array([[[1.7, 1.8], [1.9, 2.0]],     # K-K bright
                  [[1.6, 1.9], [2.0, 2.1]]])    # Gamma-K dark
    order = np.argsort(p.valence)               # pair rows follow valence valley order
    lev = X.lowest_excitons(p.compound, e[order.argsort()], p.bright, 1)
    assert lev.verdict.shape == (1, 2, 2)
    assert lev.verdict[0].tolist() == [["dark", "bright"], ["bright", "bright"]]


@pytest.mark.parametrize("compound, n_compounds", [
    ([0, 0, 0, 1, 2, 2, 2, 2, 3, 3], 5),      # unequal runs, compound 4 has no pair
    ([0, 0, 1, 1, 2, 2, 3, 3, 4, 4], 5),      # every compound two pairs (the Monte Carlo's repeats)
    ([1, 1, 1, 1, 1, 3, 3, 3, 3, 3], 4),      # compounds 0 and 2 have no pair
])
def test_segment_minimum_sorted_path_equals_scatter_path(compound, n_compounds):
    # pairs sorted by compound take the per-segment path; runs=None forces the general ufunc.at scatter,
    # an independent second code path: same minima, same first rows on ties, NO_PAIR where all inf
    inf = np.inf
    values = np.array([[1.0, inf], [0.5, inf], [0.5, 2.0], [inf, inf], [3.0, -1.0],
                       [3.0, -1.0], [inf, 2.5], [-0.0, 0.0], [0.0, -0.0], [0.0, 4.0]])
    compound = np.array(compound)
    fast = X._segment_min(values, compound, n_compounds)
    general = X._segment_min(values, compound, n_compounds, runs=None)
    for got, ref in zip(fast, general):
        np.testing.assert_array_equal(got, ref)
    assert np.all(fast[1][~np.isfinite(fast[0])] == X.NO_PAIR)
    # the bright search alone: the bright fields of the full search, the dark ones as without a dark pair
    bright = np.array([True, False, True, True, False, True, False, True, False, True])
    both = X.lowest_excitons(compound, values, bright, n_compounds)
    alone = X.lowest_excitons(compound, values, bright, n_compounds, dark=False)
    none = X.lowest_excitons(compound, np.where(bright[:, None], values, np.nan), bright, n_compounds)
    for field in X.ExcitonLevels._fields:
        np.testing.assert_array_equal(getattr(alone, field), getattr(none, field), err_msg=field)
    np.testing.assert_array_equal(alone.bright_ev, both.bright_ev)
    np.testing.assert_array_equal(alone.bright_pair, both.bright_pair)


def test_total_mass_isotropic_and_rotated():
    # isotropic: M = m_e + m_h (by hand)
    inv = np.array([np.eye(2) / 0.6, np.eye(2) / 0.5])
    p = X.valley_pairs([0, 0], [K, K], [False, True])
    np.testing.assert_allclose(X.pair_total_mass_me(p, inv), [1.1], rtol=1e-14)
    # anisotropic, electron axes rotated by 90 degrees: M = diag(0.2+1.0, 1.0+0.2) -> sqrt(det) = 1.2 (by hand)
    inv2 = np.array([np.diag([1 / 0.2, 1 / 1.0]), np.diag([1 / 1.0, 1 / 0.2])])
    np.testing.assert_allclose(X.pair_total_mass_me(p, inv2), [1.2], rtol=1e-14)
    # reduced inverse mass adds: 1/0.6 + 1/0.5 (by hand)
    np.testing.assert_allclose(X.pair_inverse_mass(p, inv)[0], np.eye(2) * (1 / 0.6 + 1 / 0.5), rtol=1e-14)


def test_degeneracy_counts():
    # hexagonal: K (2 points) to K: 2 direct combinations; Gamma (1) to Q (6): 6 combinations
    p = X.valley_pairs([0, 0, 0, 0], [K, GAMMA, K, Q], [False, False, True, True])
    g = X.pair_degeneracy(p, [2, 1, 2, 6])
    got = {(int(v), int(c)): gg for v, c, gg in zip(p.valence, p.conduction, g)}
    assert got == {(0, 2): 2, (0, 3): 12, (1, 2): 2, (1, 3): 6}


@pytest.mark.parametrize("delta_ev, t_k, wb, wd", [
    (-0.040, 300.0, 2.0, 2.0),   # WSe2-like spin-dark 40 meV below, room temperature
    (0.020, 77.0, 2.0, 12.0),    # bright 20 meV below a sixfold heavier competitor
    (0.100, 4.0, 1.0, 1.0),
])
def test_bright_fraction_by_hand(delta_ev, t_k, wb, wd):
    # f = w_B / (w_B + w_D exp(-(E_D - E_B)/kT)), evaluated here with math.exp (by hand)
    kt = KB_EV_PER_K * t_k
    want = wb / (wb + wd * math.exp(-delta_ev / kt))
    got = X.thermal_bright_fraction(1.0, 1.0 + delta_ev, wb, wd, t_k)
    np.testing.assert_allclose(got, want, rtol=1e-6)


def test_bright_fraction_limits():
    # T = 0: lower state takes all; equal energies share by weight; no competitor -> NaN (unknown)
    np.testing.assert_allclose(X.thermal_bright_fraction([1.0, 1.0, 1.0], [1.1, 0.9, 1.0], 1.0, [1.0, 1.0, 3.0], 0.0),
                               [1.0, 0.0, 0.25])
    assert np.isnan(X.thermal_bright_fraction(1.0, np.nan, 1.0, 1.0, 300.0))
    # high T: ratio of weights w_B/(w_B+w_D)
    np.testing.assert_allclose(X.thermal_bright_fraction(1.0, 1.01, 1.0, 3.0, 1e9), 0.25, rtol=1e-6)
    # weights: g M^(d/2) (by hand)
    np.testing.assert_allclose(X.state_weight([2, 6], [1.0, 4.0], [2, 3]), [2.0, 48.0])


def test_binding_fraction_flag():
    got = X.binding_fraction_exceeds([0.1, 0.6, np.nan], [1.0, 1.0, 1.0], 0.5)
    assert got.tolist() == [False, True, False]


def test_spin_input_checks():
    with pytest.raises(ValueError):
        X.spin_subbands(1, [-0.1], [1])
    with pytest.raises(ValueError):
        X.spin_subbands(1, [0.1], [2])
    s = X.spin_subbands(2, [0.1, np.nan], [1, 1])   # second: no split -> one sub-band, spin unknown
    assert s.valley.tolist() == [0, 0, 1] and s.spin.tolist() == [1, -1, 0]


def test_record_fields_reach_the_valley_table(record):
    from lamellume import ingest
    record["valleys"][2].update(spin_split_ev=0.03, edge_spin="down", degeneracy=2)
    record["valleys"][0].update(degeneracy=2)
    record["gap_temperature"] = {"form": "varshni", "alpha_ev_per_k": 4e-4, "beta_k": 200.0}
    record["band_edge_origin"] = {"eps_top": 1.0, "eps_bottom": 3.9, "method": "gw"}
    norm = ingest.normalize(record, source_file="x.json", input_hash="h", max_layers=3, geometry=None,
                            structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05)
    valleys = ingest.typed_frame(norm.valleys, ingest.valley_columns(3))
    assert valleys["edge_spin"].tolist() == [0, 0, -1, 0]
    assert valleys["degeneracy"].tolist() == [2.0, 1.0, 2.0, 1.0]
    np.testing.assert_allclose(valleys["spin_split_ev"], [np.nan, np.nan, 0.03, np.nan])
    entry = ingest.typed_frame([norm.entry], ingest.ENTRY_COLUMNS).iloc[0]
    assert (entry["edge_eps_bottom"], entry["edge_method"], entry["gap_t_form"]) == (3.9, "gw", "varshni")
    assert entry["gap_t_reference_k"] == 0.0 and entry["gap_t_beta_k"] == 200.0


@pytest.mark.parametrize("n_repeats", [1, 3])
def test_repeated_pairs_are_those_of_the_repeated_valleys(n_repeats):
    # The Monte Carlo's shortcut: the pairs of compounds repeated per sample equal valley_pairs of the
    # repeated valley arrays themselves (the independent path), row for row; a compound without valleys,
    # one without a conduction valley and spin sub-bands are included.
    rng = np.random.default_rng(3)
    counts = np.array([3, 0, 4, 1, 2, 5])
    owner = np.repeat(np.arange(counts.size), counts)
    label = rng.integers(0, 3, owner.size)
    cond = rng.random(owner.size) < 0.5
    cond[owner == 3] = False
    split = np.where(rng.random(owner.size) < 0.4, rng.uniform(0.0, 0.3, owner.size), np.nan)
    spin = rng.integers(-1, 2, owner.size)
    start = np.concatenate([[0], np.cumsum(counts)])
    rep = np.concatenate([np.tile(np.arange(start[c], start[c + 1]), n_repeats) for c in range(counts.size)])
    rep_owner = np.concatenate([np.repeat(np.arange(n_repeats) + c * n_repeats, counts[c])
                                for c in range(counts.size)])
    direct = X.valley_pairs(rep_owner, label[rep], cond[rep], split[rep], spin[rep])
    repeated = X.repeat_pairs(X.valley_pairs(owner, label, cond, split, spin), start, n_repeats)
    assert len(direct.compound) > 0
    for name, a, b in zip(X.Pairs._fields, direct, repeated):
        np.testing.assert_array_equal(a, b, err_msg=name)
