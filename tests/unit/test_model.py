"""The exciton model's plumbing: label codes, pair selection and reduced masses, requested quantities."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import constants as sc

from lamellume import excitons, gapshift, keldysh, model

# CODATA via scipy.constants, independent of lamellume.units.
RY_EV = sc.value("Rydberg constant times hc in eV")
HC_EV_NM = sc.h * sc.c / sc.e * 1e9


def test_label_codes_are_lexical_within_each_compound():
    # Worked by hand: compound 0 has labels {Q, K, G} -> G=0, K=1, Q=2; compound 1 has {K, Q} -> K=0, Q=1.
    owner = np.array([1, 0, 0, 1, 0, 0])
    labels = np.array(["Q", "Q", "K", "K", "G", "K"])
    np.testing.assert_array_equal(model.label_codes(owner, labels), [1, 2, 1, 0, 0, 1])


def _two_valley_inputs(m_e_me: float, m_h_me: float, gap_ev: float = 2.0) -> model.ModelInputs:
    """One compound with one valence and one conduction valley at the same label (direct)."""
    inv = np.array([np.eye(2) / m_h_me, np.eye(2) / m_e_me])
    edges = np.array([[-5.0, -5.0], [-5.0 + gap_ev, -5.0 + gap_ev]])
    return model.ModelInputs(
        layers=np.array([1, 0]), owner=np.array([0, 0]), label_code=np.array([0, 0]),
        is_conduction=np.array([False, True]), edges_ev=edges, inv_mass=inv, mass_perp_me=np.full(2, np.nan),
        scissor_ev=np.zeros(1), eps_parallel=np.array([10.0]), eps_perpendicular=np.array([5.0]),
        eps_bulk=np.array([np.sqrt(50.0)]), spacing_angstrom=np.array([6.0]),
        r0_given_angstrom=np.array([40.0]), kappa=np.array([1.0, 4.5]))


@pytest.fixture(scope="module")
def table():
    return keldysh.build_table(keldysh.default_s_grid(per_decade=8))


def test_bright_pair_mass_and_bulk_binding(table):
    # Reduced mass of m_e = m_h = 0.5: mu = 0.25 (computed by hand); 3D hydrogenic binding
    # Ry mu / eps^2 with eps = sqrt(10 x 5) (Wannier-Mott, hydrogen scaled).
    res = model.evaluate(_two_valley_inputs(0.5, 0.5), model.ModelSettings(), table)
    np.testing.assert_allclose(res.pairs["bright"].mu_me, [[0.25, 0.25]], rtol=1e-12)
    np.testing.assert_allclose(res.bulk["bulk_binding_ev"], RY_EV * 0.25 / 50.0, rtol=1e-12)
    assert res.gap.is_direct.all()
    # stronger surroundings screen more: binding decreases with kappa (Rytova-Keldysh, common practice)
    eb = res.stack["binding_ev"][0, 0]
    assert eb[0] > eb[1] > 0
    # optical gap = direct gap - binding (definition)
    np.testing.assert_allclose(res.stack["optical_gap_ev"][0, 0], 2.0 - eb, rtol=1e-12)


def test_only_requested_quantities_are_computed(table):
    wanted = model.ModelSettings(stack=frozenset({"binding_ev"}), bulk=frozenset({"bulk_binding_ev"}),
                                 principal_masses=False)
    res = model.evaluate(_two_valley_inputs(0.5, 0.5), wanted, table)
    assert set(res.stack) == {"binding_ev"}
    assert "binding_3s_ev" not in res.bulk and "dark" not in res.pairs
    full = model.evaluate(_two_valley_inputs(0.5, 0.5), model.ModelSettings(), table)
    np.testing.assert_array_equal(res.stack["binding_ev"], full.stack["binding_ev"])


def test_layers_must_end_with_bulk(table):
    inputs = _two_valley_inputs(0.5, 0.5)
    bad = model.ModelInputs(**{**inputs.__dict__, "layers": np.array([1, 2])})
    with pytest.raises(ValueError):
        model.evaluate(bad, model.ModelSettings(), table)


def _three_valley_inputs(r0_angstrom: float, factor: float = 1.0) -> model.ModelInputs:
    """K valence (hole 0.5), G valence (hole 3.0, 0.1 eV lower), K conduction (electron 0.5): one compound."""
    inv = np.array([np.eye(2) / 0.5, np.eye(2) / 3.0, np.eye(2) / 0.5])
    edges = np.array([[-5.0, -5.0], [-5.1, -5.1], [-3.0, -3.0]])
    return model.ModelInputs(
        layers=np.array([1, 0]), owner=np.zeros(3, dtype=int), label_code=np.array([1, 0, 1]),
        is_conduction=np.array([False, False, True]), edges_ev=edges, inv_mass=inv,
        mass_perp_me=np.full(3, np.nan), scissor_ev=np.zeros(1), eps_parallel=np.array([10.0]),
        eps_perpendicular=np.array([5.0]), eps_bulk=np.array([np.sqrt(50.0)]), spacing_angstrom=np.array([6.0]),
        r0_given_angstrom=np.array([r0_angstrom]), kappa=np.array([2.0, 12.0]), degeneracy=np.array([2, 1, 2]),
        binding_factor_layers=factor)


def test_exciton_level_in_the_2d_hydrogen_limit(table):
    # r0 -> 0: Rytova-Keldysh is 2D hydrogen, E_b = 4 Ry mu / kappa^2 (Yang et al., Phys. Rev. A 43, 1186
    # (1991)). Bright K-K: gap 2.0, mu = 0.25; momentum-dark G-K: gap 2.1, mu = 0.5 * 3 / 3.5 = 3/7 (by hand).
    res = model.evaluate(_three_valley_inputs(1e-6), model.ModelSettings(), table)
    kappa = np.array([2.0, 12.0])
    bright = 2.0 - 4 * RY_EV * 0.25 / kappa**2
    dark = 2.1 - 4 * RY_EV * (3 / 7) / kappa**2
    np.testing.assert_allclose(res.stack["bright_exciton_ev"][0, 0], bright, rtol=1e-5)
    np.testing.assert_allclose(res.stack["dark_exciton_ev"][0, 0], dark, rtol=1e-5)
    # kappa = 2: dark 2.1 - 5.83 < bright 2.0 - 3.40 -> the momentum-dark exciton is lowest although the gap
    # is direct; kappa = 12: dark 2.1 - 0.162 > bright 2.0 - 0.094 -> bright
    assert res.gap.is_direct[0, 0]
    assert list(res.stack["brightness"][0, 0]) == ["dark", "bright"]
    # optical gap = the lowest bright exciton where its energy is positive: kappa 2 binds beyond the
    # gap (2.0 - 3.40 < 0), no optical gap there (issue 12; the exciton energy above stays)
    assert bright[0] < 0 < bright[1]
    np.testing.assert_allclose(res.stack["optical_gap_ev"][0, 0], [np.nan, bright[1]], rtol=1e-5)
    # bulk: 3D hydrogenic per pair, Ry mu / eps^2 with eps = sqrt(50) (Wannier-Mott)
    np.testing.assert_allclose(res.bulk["bright_exciton_ev"], 2.0 - RY_EV * 0.25 / 50, rtol=1e-12)
    np.testing.assert_allclose(res.bulk["dark_exciton_ev"], 2.1 - RY_EV * (3 / 7) / 50, rtol=1e-12)
    # weights g M^(d/2): bright K-K g = 2, M = 1.0; dark G-K g = 1 x 2, M = 3.5 (by hand)
    np.testing.assert_allclose(res.stack["bright_weight"][0, 0], [2.0, 2.0])
    np.testing.assert_allclose(res.stack["dark_weight"][0, 0], [7.0, 7.0])
    np.testing.assert_allclose(res.bulk["dark_weight"], [2 * 3.5 ** 1.5])


@pytest.mark.parametrize("edge_kappa", [2.0, 12.0, 3.0])
def test_compensated_gap_keeps_the_exciton_of_the_edges_surroundings(table, edge_kappa):
    # Full compensation: in every surroundings the compensated optical gap is the bright exciton of the
    # surroundings the edges belong to; r0 -> 0 gives 2D hydrogen there, E_b = 4 Ry mu / kappa^2 (Yang et
    # al., Phys. Rev. A 43, 1186 (1991)), mu = 0.25 (by hand). kappa 2.0 and 12.0 are configured
    # surroundings, 3.0 is not (both ways of finding the reference binding). kappa 2.0 binds beyond the gap
    # (2.0 - 3.40 eV < 0): no optical gap there (issue 12).
    res = model.evaluate(replace(_three_valley_inputs(1e-6), edge_kappa=edge_kappa), model.ModelSettings(), table)
    expected = 2.0 - 4 * RY_EV * 0.25 / edge_kappa**2
    if edge_kappa == 2.0:
        assert expected < 0
        expected = np.nan
    np.testing.assert_allclose(res.stack["optical_gap_compensated_ev"][0, 0], [expected, expected], rtol=1e-5)


def _four_compound_inputs() -> model.ModelInputs:
    """Four compounds in three surroundings, edges from suspended, from the last surroundings or from none.

    0: K/G valence, K conduction (a bright and a momentum-dark pair); 1: the same, heavier, r0 = 30;
    2: K valence, Q conduction only (no bright pair); 3: spin-split K valleys (bright and spin-dark pairs).
    """
    owner = np.array([0, 0, 0, 1, 1, 1, 2, 2, 3, 3])
    label = np.array([1, 0, 1, 1, 0, 1, 0, 1, 0, 0])
    cond = np.array([False, False, True, False, False, True, False, True, False, True])
    mass = np.array([0.5, 3.0, 0.5, 0.9, 2.0, 0.7, 0.6, 0.8, 0.45, 0.4])
    edges = np.array([-5.0, -5.1, -3.0, -5.0, -5.05, -3.4, -5.0, -3.1, -5.0, -3.2])[:, None] * np.ones((1, 2))
    return model.ModelInputs(
        layers=np.array([1, 0]), owner=owner, label_code=label, is_conduction=cond, edges_ev=edges,
        inv_mass=np.eye(2)[None] / mass[:, None, None], mass_perp_me=np.full(10, np.nan), scissor_ev=np.zeros(4),
        eps_parallel=np.full(4, 10.0), eps_perpendicular=np.full(4, 5.0), eps_bulk=np.full(4, np.sqrt(50.0)),
        spacing_angstrom=np.full(4, 6.0), r0_given_angstrom=np.array([1e-6, 30.0, 10.0, 40.0]),
        kappa=np.array([1.0, 2.45, 4.5]), degeneracy=np.array([2, 1, 2, 2, 1, 2, 1, 6, 2, 2]),
        spin_split_ev=np.array([np.nan] * 8 + [0.15, 0.03]), edge_spin=np.array([0] * 8 + [1, -1]),
        edge_kappa=np.array([1.0, 4.5, 3.0, 3.0]))


@pytest.mark.parametrize("resolved", [(2,), (0,), (0, 2)])
def test_exciton_level_resolved_in_some_surroundings_is_the_full_models_there(table, resolved):
    # the full model (every surroundings resolved) is the reference: where resolved, every exciton-level
    # quantity is the same number; elsewhere the lowest bright exciton, optical gap and emission are, and
    # the rest is not resolved (NaN, NO_PAIR, "unknown")
    inputs = _four_compound_inputs()
    full = model.evaluate(inputs, model.ModelSettings(), table)
    part = model.evaluate(inputs, model.ModelSettings(exciton_environments=resolved), table)
    others = [e for e in range(3) if e not in resolved]
    assert full.stack["bright_pair_index"][2].max() == excitons.NO_PAIR            # compound 2: no bright pair
    assert (full.stack["brightness"][3, 0] != "unknown").all()                    # compound 3: a spin-dark competitor
    for key in model.EXCITON_QUANTITIES + ("optical_gap_ev", "emission_nm"):
        np.testing.assert_array_equal(part.stack[key][:, :, list(resolved)], full.stack[key][:, :, list(resolved)],
                                      err_msg=key)
        if key in ("bright_exciton_ev", "bright_pair_index", "optical_gap_ev", "emission_nm"):
            np.testing.assert_array_equal(part.stack[key][:, :, others], full.stack[key][:, :, others], err_msg=key)
        elif key == "brightness":
            assert (part.stack[key][:, :, others] == "unknown").all()
        elif key.endswith("_pair_index"):
            assert (part.stack[key][:, :, others] == excitons.NO_PAIR).all()
        else:
            assert np.isnan(part.stack[key][:, :, others]).all(), key
    for key in full.bulk:
        np.testing.assert_array_equal(part.bulk[key], full.bulk[key], err_msg=key)
    # and each compound on its own (no pair of another compound can be picked): the same numbers
    for c in range(4):
        v = inputs.owner == c
        one = model.evaluate(replace(inputs, owner=np.zeros(v.sum(), dtype=int), **{
            f: getattr(inputs, f)[v] for f in ("label_code", "is_conduction", "edges_ev", "inv_mass", "mass_perp_me",
                                               "degeneracy", "spin_split_ev", "edge_spin")}, **{
            f: getattr(inputs, f)[c:c + 1] for f in ("scissor_ev", "eps_parallel", "eps_perpendicular", "eps_bulk",
                                                     "spacing_angstrom", "r0_given_angstrom", "edge_kappa")}),
            model.ModelSettings(), table)
        for key in model.EXCITON_QUANTITIES:
            if not key.endswith("_pair_index"):
                np.testing.assert_array_equal(part.stack[key][c][:, list(resolved)], one.stack[key][0][:, list(resolved)],
                                              err_msg=key)


def _small_and_wide_gap_inputs() -> model.ModelInputs:
    """Two compounds, one direct K-K pair each (electron and hole 0.5 m_e), r0 -> 0 (2D hydrogen limit).

    Compound 0: direct gap 0.08 eV, weak screening (every dielectric constant 2). Compound 1: direct gap
    4.0 eV, eps_par 10, eps_perp 5. Surroundings kappa 2 and 20; band edges of kappa = 2 surroundings.
    """
    inv = np.array([np.eye(2) / 0.5] * 4)
    edges = np.array([[-5.0, -5.0], [-4.92, -4.92], [-5.0, -5.0], [-1.0, -1.0]])
    return model.ModelInputs(
        layers=np.array([1, 0]), owner=np.array([0, 0, 1, 1]), label_code=np.zeros(4, dtype=int),
        is_conduction=np.array([False, True, False, True]), edges_ev=edges, inv_mass=inv,
        mass_perp_me=np.full(4, np.nan), scissor_ev=np.zeros(2), eps_parallel=np.array([2.0, 10.0]),
        eps_perpendicular=np.array([2.0, 5.0]), eps_bulk=np.array([2.0, np.sqrt(50.0)]),
        spacing_angstrom=np.array([6.0, 6.0]), r0_given_angstrom=np.array([1e-6, 1e-6]),
        kappa=np.array([2.0, 20.0]), edge_kappa=np.array([2.0, 2.0]))


def test_no_optical_gap_where_the_binding_reaches_the_direct_gap(table):
    # Issue 12: no row may carry a negative gap. Hand-computed references, mu = 0.5 x 0.5 / 1.0 = 0.25:
    # layers, r0 -> 0: 2D hydrogen E_b = 4 Ry mu / kappa^2 (Yang et al., Phys. Rev. A 43, 1186 (1991));
    # bulk: 3D hydrogen E_b = Ry mu / eps^2 (Wannier-Mott, hydrogen scaled). Ry from scipy.constants (CODATA).
    #   compound 0 (gap 0.08): kappa 2: E_b = Ry/4 = 3.401 eV > 0.08 -> exciton energy -3.32 eV: no optical gap;
    #                          kappa 20: E_b = Ry/400 = 0.0340 eV -> optical gap 0.0460 eV, emission hc/E;
    #                          compensated (edges of kappa 2): 0.08 - 3.401 < 0 in both: none;
    #                          bulk: E_b = Ry/16 = 0.850 eV > 0.08: none.
    #   compound 1 (gap 4.0): every value valid: 4 - Ry/4 = 0.599, 4 - Ry/400 = 3.966, bulk 4 - Ry/200 = 3.932.
    res = model.evaluate(_small_and_wide_gap_inputs(), model.ModelSettings(), table)
    eb = 4 * RY_EV * 0.25 / np.array([2.0, 20.0]) ** 2
    exciton = np.array([0.08 - eb, 4.0 - eb])
    optical = np.array([[np.nan, 0.08 - eb[1]], 4.0 - eb])
    compensated = np.array([[np.nan, np.nan], [4.0 - eb[0]] * 2])
    # the exciton energies and the verdict are kept as computed, negative one included (one pair per
    # compound: no dark competitor, verdict "unknown" everywhere, README "Methods")
    np.testing.assert_allclose(res.stack["bright_exciton_ev"][:, 0], exciton, rtol=1e-5)
    assert exciton[0, 0] < 0 and (res.stack["brightness"][:, 0] == "unknown").all()
    np.testing.assert_allclose(res.stack["optical_gap_ev"][:, 0], optical, rtol=1e-5)
    np.testing.assert_allclose(res.stack["emission_nm"][:, 0], HC_EV_NM / optical, rtol=1e-5)
    np.testing.assert_allclose(res.stack["optical_gap_compensated_ev"][:, 0], compensated, rtol=1e-5)
    np.testing.assert_allclose(res.stack["emission_compensated_nm"][:, 0], HC_EV_NM / compensated, rtol=1e-5)
    bulk = np.array([np.nan, 4.0 - RY_EV * 0.25 / 50.0])
    np.testing.assert_allclose(res.bulk["optical_gap_ev"], bulk, rtol=1e-12)
    np.testing.assert_allclose(res.bulk["emission_nm"], HC_EV_NM / bulk, rtol=1e-12)
    np.testing.assert_allclose(res.bulk["bright_exciton_ev"], [0.08 - RY_EV * 0.25 / 4.0, bulk[1]], rtol=1e-12)
    # every emptied value sits in a row flagged outside the effective-mass model (binding above half the
    # direct gap); the flag is wider: compound 1 at kappa 2 (3.40 > 2.0 eV) is flagged and keeps its gap
    flagged = excitons.binding_fraction_exceeds(res.stack["binding_ev"][:, 0], 0.08 * np.array([[1], [50]]), 0.5)
    np.testing.assert_array_equal(flagged, [[True, False], [True, False]])


def test_binding_factor_scales_every_layer_binding(table):
    base = model.evaluate(_three_valley_inputs(30.0), model.ModelSettings(), table)
    scaled = model.evaluate(_three_valley_inputs(30.0, factor=1.2), model.ModelSettings(), table)
    np.testing.assert_allclose(scaled.stack["binding_ev"], 1.2 * base.stack["binding_ev"], rtol=1e-14)
    np.testing.assert_allclose(2.0 - scaled.stack["bright_exciton_ev"], 1.2 * (2.0 - base.stack["bright_exciton_ev"]),
                               rtol=1e-12)


def test_thermal_shift_moves_every_gap_and_no_binding(table):
    # A Varshni compound (alpha 4.5e-4 eV/K, beta 220 K, calculated at 0 K) at 300 K: every gap, the
    # optical gaps and both exciton energies move by -alpha T^2/(T + beta) (Varshni 1967; computed by
    # hand here), bindings and the exciton margin do not. Without a temperature nothing moves.
    base = _three_valley_inputs(40.0)
    n = base.n_compounds
    thermal = gapshift.GapThermal(np.ones(n, dtype=np.int64), np.full(n, 4.5e-4), np.full(n, 220.0),
                                  np.full(n, np.nan), np.full(n, np.nan), np.zeros(n))
    ref = model.evaluate(base, model.ModelSettings(), table)
    same = model.evaluate(replace(base, gap_thermal=thermal), model.ModelSettings(), table)
    np.testing.assert_array_equal(same.stack["optical_gap_ev"], ref.stack["optical_gap_ev"])
    hot = model.evaluate(replace(base, gap_thermal=thermal, temperature_k=300.0), model.ModelSettings(), table)
    expected = -4.5e-4 * 300.0**2 / 520.0
    np.testing.assert_allclose(hot.thermal_shift_ev, expected, rtol=1e-14)
    for key in ("fundamental_gap_ev", "direct_gap_ev"):
        np.testing.assert_allclose(getattr(hot.gap, key) - getattr(ref.gap, key), expected, rtol=1e-9)
    for part in ("stack", "bulk"):
        for key in ("optical_gap_ev", "optical_gap_compensated_ev", "bright_exciton_ev"):
            np.testing.assert_allclose(getattr(hot, part)[key] - getattr(ref, part)[key], expected, rtol=1e-9)
        np.testing.assert_allclose(getattr(hot, part)["binding_ev"], getattr(ref, part)["binding_ev"], rtol=1e-12)
        np.testing.assert_allclose(getattr(hot, part)["exciton_margin_ev"], getattr(ref, part)["exciton_margin_ev"],
                                   rtol=1e-9, atol=1e-12)
    # emission follows the shifted optical gap: lambda = hc/E (CODATA via scipy.constants)
    np.testing.assert_allclose(hot.stack["emission_nm"], HC_EV_NM / hot.stack["optical_gap_ev"], rtol=1e-12)


def test_radiative_rate_of_the_bright_exciton_in_the_2d_hydrogen_limit(table):
    # r0 -> 0: the 1s envelope is 2D hydrogen, phi ~ exp(-r/a) with a = a0 kappa / (2 mu), so
    # |phi(0)|^2 = 2 / (pi a^2) (Yang et al., Phys. Rev. A 43, 1186 (1991)). Kane energy E_P = E_g / (2 mu)
    # (two-band k.p, Kane 1957); Gamma_0 = e^2 / (2 eps0 n c m_e) (E_P / E_X) |phi(0)|^2 with n = sqrt(kappa)
    # (Andreani et al., Solid State Commun. 77, 641 (1991)). All constants from scipy.constants.
    res = model.evaluate(_three_valley_inputs(1e-6), model.ModelSettings(), table)
    kappa = np.array([2.0, 12.0])
    mu, gap = 0.25, 2.0                     # the bright K-K pair (by hand)
    ex = gap - 4 * RY_EV * mu / kappa**2
    a_m = sc.value("Bohr radius") * kappa / (2 * mu)
    origin = 2 / (np.pi * a_m**2)
    gamma0 = sc.e**2 / (2 * sc.epsilon_0 * np.sqrt(kappa) * sc.c * sc.m_e) * (gap / (2 * mu) / ex) * origin
    np.testing.assert_allclose(res.stack["radiative_rate_0_per_s"][0, 0], gamma0, rtol=2e-4)
    # the bright exciton's translational mass: 0.5 + 0.5 m_e (by hand); also when a dark exciton lies lower
    np.testing.assert_allclose(res.stack["bright_mass_me"][0, 0], [1.0, 1.0], rtol=1e-12)
    assert np.isnan(res.bulk["radiative_rate_0_per_s"]).all()   # the 2D formula is not applied to bulk
