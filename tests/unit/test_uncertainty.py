"""Tests for lamellume.uncertainty (Monte Carlo propagation of input uncertainties).

Each check names its source beside it: an analytic result ("derived here",
"computed by hand"), the first-order law of propagation (JCGM 100:2008, GUM),
or the point estimate of lamellume.screen / lamellume.ranking themselves.
"""

import copy
import math

import numpy as np
import pandas as pd
import pytest
from scipy import special

from lamellume import hydrogenic, ingest, ranking, screen
from lamellume import uncertainty as U
from lamellume.units import RYDBERG_EV

from mc_setup import NO_MODEL_ERROR, ZERO_DEFAULTS, config_sections, zero_uncertainty


# --------------------------------------------------------------------------- #
# Fixtures
# --------------------------------------------------------------------------- #
@pytest.fixture(scope="module")
def settings():
    return config_sections()


@pytest.fixture(scope="module")
def table(coarse_table):
    return coarse_table


@pytest.fixture(scope="module")
def demo(screened_demo):
    """The demo campaign normalised and screened by the pipeline itself."""
    return screened_demo["frames"]


_zero = zero_uncertainty


def _synthetic(ids, m_e=0.5, m_h=0.7, eps=10.0, r0=None, edges=None, max_layers=6):
    """Hand-built entry/valley rows (one label K, isotropic masses and tensor)."""
    rows, vrows = [], []
    for ident in ids:
        row = {c: np.nan for c in ingest.ENTRY_COLUMNS}
        row.update(entry_id=ident, source_file=f"{ident}.json", input_hash=f"h-{ident}", formula="X",
                   provenance="synthetic", energy_reference="vacuum level", structure_file="",
                   structure_hash="", dielectric_frame="layer", normal_x=0.0, normal_y=0.0, normal_z=1.0,
                   normal_source="layer frame", spacing_angstrom=6.0, spacing_source="record",
                   lattice_angstrom=3.3, lattice_source="record", is_layered_structure=None,
                   r0_given_angstrom=np.nan if r0 is None else r0, r0_source="test", scissor_ev=0.0,
                   warnings="")
        for name, _, _ in ingest.TENSOR_COMPONENTS:
            row[f"eps_inf_{name}"] = eps if name in ("xx", "yy", "zz") else 0.0
        rows.append(row)
        for i, (band, mass, e1, eb) in enumerate(edges or [("valence", m_h, -5.9, -5.7),
                                                          ("conduction", m_e, -3.8, -4.0)]):
            v = {c: np.nan for c in ingest.valley_columns(max_layers)}
            v.update(entry_id=ident, valley_index=i, input_hash=f"h-{ident}", label="K", band=band,
                     edge_1l_ev=e1, edge_bulk_ev=eb, inv_mass_xx=1 / mass, inv_mass_xy=0.0,
                     inv_mass_yy=1 / mass, mass_perp_me=np.nan, mass_source="given",
                     mass_fit_rms_ev=np.nan, mass_nonparabolic=False)
            vrows.append(v)
    return (pd.DataFrame(rows, columns=ingest.ENTRY_COLUMNS),
            pd.DataFrame(vrows, columns=ingest.valley_columns(max_layers)))


# --------------------------------------------------------------------------- #
# Small helpers
# --------------------------------------------------------------------------- #
@pytest.mark.parametrize("u", [0.0, 0.01, 0.15, 0.5])
def test_lognormal_sigma_gives_relative_std(u):
    # Johnson, Kotz & Balakrishnan (1994) ch. 14: CV of a log-normal = sqrt(exp(sigma^2) - 1).
    s = U.lognormal_sigma(u)
    assert math.sqrt(math.expm1(s * s)) == pytest.approx(u, rel=1e-12, abs=0)
    if u == 0.0:
        assert s == 0.0  # exactly: zero uncertainty must give factors of exactly 1


@pytest.mark.parametrize("mu, eps, power, expected", [
    (0.03, 0.04, 2.0, math.sqrt(0.03**2 + 4 * 0.04**2)),  # computed by hand: GUM eq. (10)
    (0.10, 0.00, 2.0, 0.10),
    (0.00, 0.05, 2.0, 0.10),
    (0.02, 0.05, 1.0, math.sqrt(0.02**2 + 0.05**2)),
])
def test_first_order_binding_rel_unc(mu, eps, power, expected):
    np.testing.assert_allclose(U.first_order_binding_rel_unc(mu, eps, power), expected, rtol=1e-14)


def test_reduced_mass_rel_unc_limits():
    # derived here: equal masses and equal u give u/sqrt(2); a very heavy hole leaves only the electron term.
    np.testing.assert_allclose(U.reduced_mass_rel_unc(0.5, 0.5, 0.1, 0.1), 0.1 / math.sqrt(2), rtol=1e-14)
    np.testing.assert_allclose(U.reduced_mass_rel_unc(0.5, 5e6, 0.1, 0.3), 0.1, rtol=1e-6)


def test_row_percentiles_match_numpy():
    # numpy.nanpercentile (linear method) is the reference definition.
    rng = np.random.default_rng(3)
    v = rng.normal(size=(7, 53))
    v[1, ::3] = np.nan
    v[2, :] = np.nan
    v[3, 5] = np.inf
    ref = np.nanpercentile(np.where(np.isfinite(v), v, np.nan)[[0, 1, 3, 4, 5, 6]], U.PERCENTILES, axis=1)
    got = U.row_percentiles(v, U.PERCENTILES)
    np.testing.assert_allclose(got[:, [0, 1, 3, 4, 5, 6]], ref, rtol=1e-13, atol=1e-15)
    assert np.all(np.isnan(got[:, 2]))


def test_truncated_normal_map():
    # Truncated standard normal on [a, inf): mean phi(a)/(1 - Phi(a)) (Johnson, Kotz & Balakrishnan ch. 13).
    a = -0.5
    z = np.random.default_rng(11).standard_normal((1, 400_000))
    t = U._truncate_below(z, np.array([special.ndtr(a)]))
    assert t.min() >= a
    mean = math.exp(-a * a / 2) / math.sqrt(2 * math.pi) / (1 - special.ndtr(a))
    assert t.mean() == pytest.approx(mean, abs=4e-3)
    # no truncation (p_lo = 0) leaves the draws untouched
    assert np.array_equal(U._truncate_below(z, np.array([0.0])), z)


def test_output_columns_are_the_report_contract():
    # names read by ranking.rank and by the HTML report: must stay exactly these.
    for name in ("entry_id", "input_hash", "p_gap_direct", "p_meets_all", "n_samples", "seed"):
        assert name in U.OUTPUT_COLUMNS
    for q in ("target_binding_ev", "target_optical_gap_ev", "target_emission_nm", "bulk_binding_ev"):
        for p in ("p16", "p50", "p84"):
            assert f"{q}_{p}" in U.OUTPUT_COLUMNS


# --------------------------------------------------------------------------- #
# Linear case against the analytic first-order result
# --------------------------------------------------------------------------- #
def test_linear_propagation_bulk_hydrogenic(settings, table):
    # 3D hydrogenic E = Ry mu / eps^2 (Wannier 1937); first-order GUM law with
    # (sigma_E/E)^2 = (sigma_mu/mu)^2 + 4 (sigma_eps/eps)^2 at 1 % input uncertainties.
    entries, valleys = _synthetic(["lin-a"], m_e=0.5, m_h=0.7, eps=10.0)
    entries["eps_rel_unc"] = 0.01
    valleys["mass_rel_unc"] = 0.01
    s = copy.deepcopy(settings)
    s["uncertainty"].update(ZERO_DEFAULTS)
    s["excitons"].update(NO_MODEL_ERROR)
    out = U.propagate_samples(entries, valleys, s, table, samples=40_000, seed=1)
    eb = out["bulk_binding_ev"][0]
    expected = U.first_order_binding_rel_unc(U.reduced_mass_rel_unc(0.5, 0.7, 0.01, 0.01), 0.01)
    # MC standard error of a std estimate ~ 1/sqrt(2N) = 0.35 %; second-order terms ~ 1 %.
    assert np.std(eb) / np.mean(eb) == pytest.approx(expected, rel=0.02)
    # the 68 % interval of the summary table agrees as well
    tab = U.propagate_uncertainty(entries, valleys, s, table, samples=40_000, seed=1)
    half = 0.5 * (tab["bulk_binding_ev_p84"] - tab["bulk_binding_ev_p16"]) / tab["bulk_binding_ev_p50"]
    assert half.iloc[0] == pytest.approx(expected, rel=0.03)


def test_linear_propagation_keldysh_2d_hydrogen_limit(settings, table):
    # Rytova-Keldysh with r0 -> 0 is 2D hydrogen, E = 4 Ry mu / kappa^2 (Yang et al. 1991);
    # kappa of the surroundings is fixed and r0 is given, so only the mass term remains
    # (the eps uncertainty must not leak in).
    entries, valleys = _synthetic(["lin-b"], m_e=0.4, m_h=0.6, r0=1e-4)
    entries["eps_rel_unc"] = 0.05
    valleys["mass_rel_unc"] = 0.01
    s = copy.deepcopy(settings)
    s["uncertainty"].update(ZERO_DEFAULTS)
    s["excitons"].update(NO_MODEL_ERROR)
    out = U.propagate_samples(entries, valleys, s, table, samples=40_000, seed=2)
    eb = out["target_binding_ev"][0]
    expected = U.first_order_binding_rel_unc(U.reduced_mass_rel_unc(0.4, 0.6, 0.01, 0.01), 0.0)
    assert np.std(eb) / np.mean(eb) == pytest.approx(expected, rel=0.02)


# --------------------------------------------------------------------------- #
# Zero uncertainty reproduces the screen and the ranking exactly
# --------------------------------------------------------------------------- #
def _uneven(valleys):
    """Every other record without its last valley: records of unequal valley (and pair) counts side by side."""
    last = valleys.groupby("entry_id")["valley_index"].transform("max") == valleys["valley_index"]
    every_other = valleys["entry_id"].isin(sorted(set(valleys["entry_id"]))[::2])
    return valleys[~(last & every_other)].reset_index(drop=True)


@pytest.mark.parametrize("environment, target, uneven", [("encapsulated", 1, False), ("suspended", 2, False),
                                                         ("on_silica", 1, False), ("encapsulated", 1, True)])
def test_zero_uncertainty_reproduces_screen(demo, settings, table, environment, target, uneven):
    # Reference: lamellume.screen.screen_entries / ranking.rank on the same inputs (point estimate).
    valleys = _uneven(demo["valleys"]) if uneven else demo["valleys"]
    e, v, s = _zero(demo["entries"], valleys, settings)
    s["ranking"].update(environment=environment, target_layers=target)
    out = U.propagate_uncertainty(e, v, s, table, samples=16)
    long, wide = screen.screen_entries(demo["entries"], valleys, s, table)
    at = long[(long["layers"] == target) & (long["environment"] == environment)]
    at = at.set_index("entry_id").reindex(out["entry_id"])
    for q, ref in (("target_binding_ev", "binding_ev"), ("target_optical_gap_ev", "optical_gap_ev"),
                   ("target_emission_nm", "emission_nm")):
        for p in ("p16", "p50", "p84"):
            np.testing.assert_array_equal(out[f"{q}_{p}"].to_numpy(), at[ref].to_numpy(dtype=float))
    bulk = wide.set_index("entry_id").reindex(out["entry_id"])["bulk_binding_ev"].to_numpy(dtype=float)
    np.testing.assert_array_equal(out["bulk_binding_ev_p50"].to_numpy(), bulk)
    # every surroundings' emission percentiles: the screen's emission there (one model, every kappa at once)
    for env in s["environments"]:
        there = long[(long["layers"] == target) & (long["environment"] == env)].set_index("entry_id")
        want = there.reindex(out["entry_id"])["emission_nm"].to_numpy(dtype=float)
        for p in ("p16", "p84"):
            np.testing.assert_array_equal(out[f"emission_nm_{p}__{env}"].to_numpy(), want, err_msg=env)
    # p_direct is 0 or 1 and equals the screen's gap character
    p_direct = out["p_gap_direct"].to_numpy()
    assert set(np.unique(p_direct)) <= {0.0, 1.0}
    np.testing.assert_array_equal(p_direct == 1.0, (at["gap_character"] == "direct").to_numpy())
    # p_meets_all is 0 or 1 and equals the ranking's verdict
    ranked = ranking.rank(ranking.add_survival(long, wide, s), wide, s).set_index("entry_id")
    meets = ranked.reindex(out["entry_id"])["meets_all_criteria"].to_numpy(dtype=bool)
    assert set(np.unique(out["p_meets_all"])) <= {0.0, 1.0}
    np.testing.assert_array_equal(out["p_meets_all"].to_numpy() == 1.0, meets)


@pytest.mark.parametrize("overrides", [
    {},
    {"require_direct": False},
    {"target_layers": 2, "environment": "suspended"},
    {"min_direct_margin_ev": 0.0, "min_binding_over_kt": 8.0, "window_nm": [1000, 600]},
    {"min_bound_fraction": 0.98},
])
def test_criteria_agree_with_ranking(demo, settings, table, overrides):
    # Reference: the pass_* columns of lamellume.ranking.rank on the demo data.
    s = copy.deepcopy(settings)
    s["ranking"].update(overrides)
    long, wide = screen.screen_entries(demo["entries"], demo["valleys"], s, table)
    long = ranking.add_survival(long, wide, s)
    ranked = ranking.rank(long, wide, s)
    r = s["ranking"]
    at = long[(long["layers"] == int(r["target_layers"])) & (long["environment"] == r["environment"])]
    at = at.set_index("entry_id").reindex(ranked["entry_id"])
    verdict = at["brightness"].to_numpy(dtype=object)
    margin = at["exciton_margin_ev"].to_numpy(dtype=float)
    e_kt = at["binding_over_kt"].to_numpy(dtype=float)
    lam = at["emission_nm"].to_numpy(dtype=float)
    lam_full = at["emission_compensated_nm"].to_numpy(dtype=float)
    lo, hi = sorted(r["window_nm"])
    # The configured rules restated here (common practice: a NaN quantity fails its test).
    with np.errstate(invalid="ignore"):
        got = {"pass_direct": (verdict == "bright") if r["require_direct"] else np.isin(verdict, ["bright", "dark"]),
               "pass_margin": np.nan_to_num(margin, nan=-np.inf) >= r["min_direct_margin_ev"],
               "pass_binding": (np.nan_to_num(e_kt, nan=-np.inf) >= r["min_binding_over_kt"])
               & (np.nan_to_num(at["bound_fraction"].to_numpy(dtype=float), nan=-np.inf) >= r["min_bound_fraction"]),
               "pass_window": (lam >= lo) & (lam <= hi) & (lam_full >= lo) & (lam_full <= hi)}
    got["meets_all"] = got["pass_direct"] & got["pass_margin"] & got["pass_binding"] & got["pass_window"]
    for key in ("pass_direct", "pass_margin", "pass_binding", "pass_window"):
        np.testing.assert_array_equal(got[key], ranked[key].to_numpy(dtype=bool), err_msg=key)
    np.testing.assert_array_equal(got["meets_all"], ranked["meets_all_criteria"].to_numpy(dtype=bool))
    assert ranked["meets_all_criteria"].any() or overrides  # the default criteria select someone


# --------------------------------------------------------------------------- #
# Determinism, independence of the shard, chunking, convergence
# --------------------------------------------------------------------------- #
def test_same_seed_identical_other_seed_differs(demo, settings, table):
    # common practice: reproducible streams from an explicit seed.
    a = U.propagate_uncertainty(demo["entries"], demo["valleys"], settings, table, samples=64)
    b = U.propagate_uncertainty(demo["entries"], demo["valleys"], settings, table, samples=64)
    pd.testing.assert_frame_equal(a, b)
    c = U.propagate_uncertainty(demo["entries"], demo["valleys"], settings, table, samples=64, seed=8)
    assert not np.array_equal(a["target_binding_ev_p50"], c["target_binding_ev_p50"])
    assert (c["seed"] == 8).all() and (a["seed"] == settings["uncertainty"]["seed"]).all()


def test_independent_of_shard_composition_and_order(demo, settings, table):
    # derived here: each entry's stream is seeded by (seed, its identifier) only.
    e, v = demo["entries"], demo["valleys"]
    full = U.propagate_uncertainty(e, v, settings, table, samples=50).set_index("entry_id")
    pick = list(e["entry_id"].iloc[[3, 11, 17, 29]])
    sub_e = e[e["entry_id"].isin(pick)].iloc[::-1]
    sub_v = v[v["entry_id"].isin(pick)].sample(frac=1.0, random_state=5)
    sub = U.propagate_uncertainty(sub_e, sub_v, settings, table, samples=50).set_index("entry_id")
    pd.testing.assert_frame_equal(sub, full.loc[sorted(pick)])


@pytest.mark.parametrize("block", [1, 7, 50, 333])
def test_block_size_never_changes_results(demo, settings, table, block):
    # derived here: sample chunks of one entry's stream concatenate to the same stream.
    e = demo["entries"].iloc[:6]
    v = demo["valleys"][demo["valleys"]["entry_id"].isin(e["entry_id"])]
    ref = U.propagate_uncertainty(e, v, settings, table, samples=50)
    got = U.propagate_uncertainty(e, v, settings, table, samples=50, block_cells=block)
    pd.testing.assert_frame_equal(got, ref)


def test_estimate_converges_as_one_over_sqrt_n(settings, table):
    # Monte Carlo standard error ~ N^-1/2 (JCGM 101:2008, sec. 7.9): 16x the samples -> 4x less spread.
    entries, valleys = _synthetic(["conv"], r0=30.0)
    s = copy.deepcopy(settings)

    def spread(n):
        est = [U.propagate_uncertainty(entries, valleys, s, table, samples=n, seed=k)["target_binding_ev_p50"].iloc[0]
               for k in range(24)]
        return np.std(est)

    ratio = spread(100) / spread(1600)
    assert 2.5 < ratio < 6.5


# --------------------------------------------------------------------------- #
# Edge cases
# --------------------------------------------------------------------------- #
def test_zero_samples_gives_a_typed_table(demo, settings, table):
    out = U.propagate_uncertainty(demo["entries"], demo["valleys"], settings, table, samples=0)
    assert list(out.columns) == U.output_columns(settings)
    assert len(out) == len(demo["entries"])
    assert (out["n_samples"] == 0).all() and out["n_samples"].dtype == np.int32
    assert out.filter(like="_p").isna().all().all() and out["p_meets_all"].isna().all()
    assert out["p_meets_all"].dtype == np.float64


def test_empty_shard(settings, table):
    e, v = _synthetic([])
    out = U.propagate_uncertainty(e, v, settings, table)
    assert list(out.columns) == U.output_columns(settings) and len(out) == 0


def test_probabilities_and_intervals_are_ordered(demo, settings, table):
    out = U.propagate_uncertainty(demo["entries"], demo["valleys"], settings, table, samples=200)
    for q in U.QUANTITIES:
        assert (out[f"{q}_p16"] <= out[f"{q}_p50"]).all() and (out[f"{q}_p50"] <= out[f"{q}_p84"]).all()
    for p in ("p_gap_direct", "p_meets_all"):
        assert out[p].between(0.0, 1.0).all()
    assert (out["p_meets_all"] <= out["p_gap_direct"] + 1e-15).all()  # require_direct is on
    # with uncertainty some demo entries are neither certain passes nor certain failures
    assert ((out["p_meets_all"] > 0) & (out["p_meets_all"] < 1)).any()


def test_median_is_point_estimate_for_single_lognormal_input(settings, table):
    # derived here: E_bulk = Ry mu/eps^2 is monotonic in a median-1 eps factor, so its median
    # is the point estimate when eps is the only uncertain input (up to the MC error of a median, ~0.4 %).
    entries, valleys = _synthetic(["med"], eps=8.0)
    entries["eps_rel_unc"] = 0.2
    s = copy.deepcopy(settings)
    s["uncertainty"].update(ZERO_DEFAULTS)
    s["excitons"].update(NO_MODEL_ERROR)
    out = U.propagate_samples(entries, valleys, s, table, samples=20_001, seed=4)
    mu = 1 / (1 / 0.5 + 1 / 0.7)
    np.testing.assert_allclose(np.median(out["bulk_binding_ev"][0]), hydrogenic.binding_3d_ev(mu, 8.0), rtol=0.01)


def test_eps_stays_at_least_one(settings, table):
    # eps >= 1 by truncation: with eps = 1.05 and 50 % uncertainty the bulk binding never
    # exceeds the eps = 1 value Ry mu (Wannier 1937).
    entries, valleys = _synthetic(["lowe"], eps=1.05)
    entries["eps_rel_unc"] = 0.5
    s = copy.deepcopy(settings)
    s["uncertainty"].update(ZERO_DEFAULTS)
    s["excitons"].update(NO_MODEL_ERROR)
    out = U.propagate_samples(entries, valleys, s, table, samples=5000, seed=9)
    mu = 1 / (1 / 0.5 + 1 / 0.7)
    assert out["bulk_binding_ev"].max() <= RYDBERG_EV * mu * (1 + 1e-12)
    assert out["bulk_binding_ev"].min() < RYDBERG_EV * mu / 1.05**2  # the upper side is sampled


def test_model_error_alone_spreads_the_binding(settings, table):
    # Only the binding models' own error: every input uncertainty zero. The target (Rytova-Keldysh)
    # binding is the nominal one times a median-1 log-normal factor with relative std u_layers, the
    # bulk binding the nominal one times an independent factor with u_bulk, so their coefficients of
    # variation are u_layers and u_bulk (Johnson, Kotz and Balakrishnan (1994), ch. 14:
    # CV = sqrt(exp(sigma^2) - 1)) and their medians the nominal values.
    entries, valleys = _synthetic(["model-err"], m_e=0.4, m_h=0.6, r0=30.0)
    for col in ("eps_rel_unc", "r0_rel_unc"):
        entries[col] = 0.0
    valleys["mass_rel_unc"] = 0.0
    valleys["edge_unc_ev"] = 0.0
    s = copy.deepcopy(settings)
    s["uncertainty"].update(ZERO_DEFAULTS)
    s["excitons"].update(NO_MODEL_ERROR)
    flat = U.propagate_samples(entries, valleys, s, table, samples=50, seed=3)
    assert np.ptp(flat["target_binding_ev"][0]) == 0.0 and np.ptp(flat["bulk_binding_ev"][0]) == 0.0
    # without model error the bulk binding is the 3D hydrogenic one, Ry mu / eps^2 (mu = 0.24 by hand;
    # Ry from scipy.constants, CODATA, not through lamellume.units)
    from scipy import constants as sc
    ry_ev = sc.value("Rydberg constant times hc in eV")
    np.testing.assert_allclose(flat["bulk_binding_ev"][0, 0], ry_ev * 0.24 / 10.0**2, rtol=1e-12)
    s["excitons"].update({"model_rel_unc_layers": 0.1, "model_rel_unc_bulk": 0.2})
    out = U.propagate_samples(entries, valleys, s, table, samples=40_000, seed=3)
    eb, bulk = out["target_binding_ev"][0], out["bulk_binding_ev"][0]
    assert np.std(eb) / np.mean(eb) == pytest.approx(0.1, rel=0.03)
    assert np.std(bulk) / np.mean(bulk) == pytest.approx(0.2, rel=0.03)
    # medians: standard error of a sample median 1.25 sigma / sqrt(N), about 6e-4 and 1.2e-3 here
    assert np.median(eb) == pytest.approx(flat["target_binding_ev"][0, 0], rel=4e-3)
    assert np.median(bulk) == pytest.approx(flat["bulk_binding_ev"][0, 0], rel=7e-3)
    # two independent factors: sample correlation within 4 standard errors (1 / sqrt(N)) of zero
    assert abs(np.corrcoef(np.log(eb), np.log(bulk))[0, 1]) < 4 / np.sqrt(40_000)
