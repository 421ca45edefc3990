"""Survival columns, criteria, score and order of the emitter ranking."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import constants as sc

from lamellume import ranking

SETTINGS = {
    "survival": {"temperature_k": 300.0, "pair_density_per_cm2": 1e12, "pair_density_per_cm3": 1e17, "wannier_ratio": 2.0},
    "environments": {"hbn": {"top": 4.5, "bottom": 4.5}},
    "ranking": {"environment": "hbn", "target_layers": 1, "require_direct": True, "min_direct_margin_ev": 0.05,
                "min_binding_over_kt": 3.0, "window_nm": [600, 900],
                "weights": {"binding": 0.4, "margin": 0.3, "window": 0.3}, "shortlist_size": 2,
                "order_by": "score"},
}


def tables(rows):
    """Minimal long/wide tables: one monolayer row in 'hbn' per compound."""
    long = pd.DataFrame([{
        "entry_id": r[0], "layers": 1, "environment": "hbn", "gap_character": r[1], "binding_ev": r[2],
        "direct_margin_ev": r[3], "emission_nm": r[4], "optical_gap_ev": sc.h * sc.c / sc.e / (r[4] * 1e-9),
        "emission_band": "x", "mu_inplane_me": 0.25, "radius_angstrom": 15.0,
        "brightness": {"direct": "bright", "indirect": "dark"}.get(r[1], r[1]), "exciton_margin_ev": r[3],
        "bright_exciton_ev": sc.h * sc.c / sc.e / (r[4] * 1e-9),
        "dark_exciton_ev": sc.h * sc.c / sc.e / (r[4] * 1e-9) + r[3], "bright_weight": 2.0, "dark_weight": 2.0,
        "bright_pair": "K->K", "dark_pair": "K->Q", "binding_beyond_validity": False, "spin_given": False,
        "optical_gap_compensated_ev": sc.h * sc.c / sc.e / (r[4] * 1e-9), "emission_compensated_nm": r[4],
        "kappa": 4.5, "radiative_rate_0_per_s": 2.0e12, "bright_mass_me": 1.0, "mott_density_per_cm2": 1.4e13}
        for r in rows])
    wide = pd.DataFrame({"entry_id": [r[0] for r in rows], "formula": "F", "lattice_angstrom": 3.2,
                         "thinning_verdict": "v", "thinning_state": "direct when thin",
                         "direct_through_layers": pd.array([1] * len(rows), dtype="Int16")})
    return ranking.add_survival(long, wide, SETTINGS), wide


def test_binding_over_kt_uses_codata_boltzmann():
    long, _ = tables([("a", "direct", 0.2, 0.1, 700.0)])
    kt = sc.k * 300.0 / sc.e  # 25.85 meV at room temperature (common practice: ~26 meV)
    assert long["binding_over_kt"].iloc[0] == pytest.approx(0.2 / kt, rel=1e-12)
    assert kt == pytest.approx(0.02585, abs=1e-5)
    assert long["wannier_ok"].iloc[0]  # 15 A > 2 x 3.2 A


@pytest.mark.parametrize("row, failing", [
    (("a", "direct", 0.2, 0.1, 700.0), set()),
    (("b", "indirect", 0.2, -0.1, 700.0), {"pass_direct", "pass_margin"}),
    (("c", "direct", 0.05, 0.1, 700.0), {"pass_binding"}),      # 0.05 eV < 3 kT = 0.078 eV
    (("d", "direct", 0.2, 0.01, 700.0), {"pass_margin"}),
    (("e", "direct", 0.2, 0.1, 1000.0), {"pass_window"}),
])
def test_each_criterion(row, failing):
    long, wide = tables([row])
    ranked = ranking.rank(long, wide, SETTINGS)
    passes = {c for c in ("pass_direct", "pass_margin", "pass_binding", "pass_window") if not ranked[c].iloc[0]}
    assert passes == failing
    assert bool(ranked["meets_all_criteria"].iloc[0]) == (not failing)


def test_score_components_and_weights():
    long, wide = tables([("a", "direct", 0.2, 0.1, 750.0)])
    r = ranking.rank(long, wide, SETTINGS).iloc[0]
    x = r["target_bound_fraction"]
    # bound part: decades of the unbound share below what the criterion allows (0.5 by default here: off -> 1)
    assert r["score_binding"] == pytest.approx(min(np.log10(1.0 / (1.0 - x)) / 2.0, 1.0))
    assert r["score_margin"] == pytest.approx(0.1 / ranking.MARGIN_FULL_EV)
    assert r["score_window"] == pytest.approx(1.0)  # inside the window, no Monte Carlo: pass/fail
    b = np.log10(r["target_brightness_proxy_per_s"] / 1e8) / 2.0
    assert r["score_brightness"] == pytest.approx(b)
    assert r["score"] == pytest.approx(0.4 * r["score_binding"] + 0.3 * r["score_margin"] + 0.3)
    with_b = {**SETTINGS, "ranking": {**SETTINGS["ranking"],
                                      "weights": {"binding": 0.3, "margin": 0.3, "window": 0.3, "brightness": 0.1}}}
    r2 = ranking.rank(long, wide, with_b).iloc[0]
    assert r2["score"] == pytest.approx(0.3 * r["score_binding"] + 0.3 * r["score_margin"] + 0.3 + 0.1 * b)


def test_window_part_is_the_monte_carlo_probability_not_the_distance_from_the_centre():
    # two compounds inside the window, one at its centre: with p_pass_window given the part is that probability
    long, wide = tables([("a", "direct", 0.2, 0.1, 750.0), ("b", "direct", 0.2, 0.1, 610.0)])
    probs = pd.DataFrame({"entry_id": ["a", "b"], "p_pass_window": [0.55, 0.97]})
    r = ranking.rank(long, wide, SETTINGS, probs).set_index("entry_id")
    assert r.loc["a", "score_window"] == pytest.approx(0.55)
    assert r.loc["b", "score_window"] == pytest.approx(0.97)
    assert r.index[0] == "b"


def test_bound_criterion_is_the_saha_fraction_at_the_planned_density():
    # E_b = 0.1 eV (3.9 kT at 300 K) passes a 3 kT floor, but at 1e10 cm^-2 (continuous-wave) fewer than
    # half of the pairs are bound. Independent solve of the 2D Saha law n (1 - x)^2 = S x with numpy.roots,
    # S = mu m_e kT / (2 pi hbar^2) exp(-E_b/kT) (Saha 1920; scipy.constants).
    kt_j = sc.k * 300.0
    saha = 0.25 * sc.m_e * kt_j / (2 * np.pi * sc.hbar**2) * np.exp(-0.1 * sc.e / kt_j) * 1e-4  # cm^-2
    x_of = {}
    for n in (1e12, 1e10):
        roots = np.roots([n, -(2 * n + saha), n]).real
        x_of[n] = roots[(roots >= 0) & (roots <= 1)][0]
    assert x_of[1e12] > 0.5 > x_of[1e10]
    for n, passes in ((1e12, True), (1e10, False)):
        settings = {**SETTINGS, "survival": {**SETTINGS["survival"], "pair_density_per_cm2": n},
                    "ranking": {**SETTINGS["ranking"], "min_bound_fraction": 0.5}}
        long, wide = tables([("a", "direct", 0.1, 0.1, 750.0)])
        long = ranking.add_survival(long, wide, settings)
        r = ranking.rank(long, wide, settings).iloc[0]
        assert r["target_bound_fraction"] == pytest.approx(x_of[n], rel=1e-6)
        assert bool(r["pass_binding"]) is passes
        want = np.clip(np.log10(0.5 / (1 - x_of[n])) / 2.0, 0, 1)
        assert r["score_binding"] == pytest.approx(want, rel=1e-6, abs=1e-12)


def test_thermal_brightness_columns_follow_the_temperature():
    # <Gamma> = (4/3) Gamma_0 E_c / kT, E_c = (n E_X)^2 / (2 M c^2) (Andreani et al. 1991), n = sqrt(kappa);
    # times the bright fraction. Independent: scipy.constants.
    long, _ = tables([("a", "direct", 0.2, 0.1, 750.0)])
    ex = sc.h * sc.c / sc.e / 750e-9
    ec_j = (np.sqrt(4.5) * ex * sc.e) ** 2 / (2 * 1.0 * sc.m_e * sc.c**2)
    thermal = 4.0 / 3.0 * 2.0e12 * ec_j / (sc.k * 300.0)
    assert long["radiative_rate_thermal_per_s"].iloc[0] == pytest.approx(thermal, rel=1e-9)
    assert long["brightness_proxy_per_s"].iloc[0] == pytest.approx(thermal * long["bright_fraction"].iloc[0],
                                                                   rel=1e-9)
    cold = {**SETTINGS, "survival": {**SETTINGS["survival"], "temperature_k": 77.0}}
    again = ranking.add_survival(long, tables([("a", "direct", 0.2, 0.1, 750.0)])[1], cold)
    assert again["radiative_rate_thermal_per_s"].iloc[0] == pytest.approx(thermal * 300.0 / 77.0, rel=1e-9)


def test_candidates_first_and_ties_by_identifier():
    rows = [("z", "direct", 0.3, 0.3, 750.0), ("a", "direct", 0.3, 0.3, 750.0),
            ("m", "indirect", 0.9, -0.2, 750.0), ("b", "direct", 0.3, 0.1, 750.0)]
    long, wide = tables(rows)
    ranked = ranking.rank(long, wide, SETTINGS)
    assert list(ranked["entry_id"]) == ["a", "z", "b", "m"]
    assert list(ranked["rank"]) == [1, 2, 3, 4]
    again = ranking.rank(long.sample(frac=1, random_state=1), wide.sample(frac=1, random_state=2), SETTINGS)
    assert list(again["entry_id"]) == ["a", "z", "b", "m"]


def test_order_by_probability():
    rows = [("a", "direct", 0.3, 0.3, 750.0), ("b", "direct", 0.3, 0.1, 750.0)]
    long, wide = tables(rows)
    probs = pd.DataFrame({"entry_id": ["a", "b"], "p_meets_all": [0.4, 0.9]})
    settings = {**SETTINGS, "ranking": {**SETTINGS["ranking"], "order_by": "probability"}}
    assert list(ranking.rank(long, wide, settings, probs)["entry_id"]) == ["b", "a"]
    assert list(ranking.rank(long, wide, SETTINGS, probs)["entry_id"]) == ["a", "b"]


def test_unknown_brightness_never_passes_and_scores_no_margin():
    # a record without a dark competitor: verdict 'unknown', margin NaN (not +inf)
    long, wide = tables([("u", "unknown", 0.2, np.nan, 750.0)])
    r = ranking.rank(long, wide, SETTINGS).iloc[0]
    assert not r["pass_direct"] and not r["pass_margin"] and not r["meets_all_criteria"]
    assert r["score_margin"] == 0.0
    assert np.isnan(r["target_bright_fraction"])


def test_bright_fraction_column_and_criterion():
    # dark 30 meV above bright, equal weights, 300 K: f = 1 / (1 + exp(-0.030 / kT)) (by hand)
    long, wide = tables([("a", "direct", 0.2, 0.030, 750.0)])
    kt = sc.k * 300.0 / sc.e
    want = 1.0 / (1.0 + np.exp(-0.030 / kt))
    assert long["bright_fraction"].iloc[0] == pytest.approx(want, rel=1e-9)
    strict = {**SETTINGS, "ranking": {**SETTINGS["ranking"], "min_direct_margin_ev": 0.0,
                                      "min_bright_fraction": 0.8}}
    r = ranking.rank(long, wide, strict).iloc[0]
    assert want < 0.8 and not r["pass_bright_fraction"] and not r["meets_all_criteria"]
    loose = {**SETTINGS, "ranking": {**strict["ranking"], "min_bright_fraction": 0.7}}
    assert ranking.rank(long, wide, loose).iloc[0]["meets_all_criteria"]


def test_window_applies_to_the_whole_emission_bracket():
    # no-shift end at 750 nm (inside 600-900 nm), full-compensation end at 950 nm (outside): fails
    long, wide = tables([("a", "direct", 0.2, 0.1, 750.0)])
    long["emission_compensated_nm"] = 950.0
    r = ranking.rank(long, wide, SETTINGS).iloc[0]
    assert not r["pass_window"] and not r["meets_all_criteria"]
    long["emission_compensated_nm"] = 880.0
    assert ranking.rank(long, wide, SETTINGS).iloc[0]["pass_window"]


def test_ranks_above_follows_the_order_rank_sorts_by():
    # Two code paths for one order: rank's sort of the whole table versus the pairwise key
    # comparison the attribution uses. Keys with ties in the flag and in the score (the
    # identifier then decides; a lexicographic order, common practice).
    rng = np.random.default_rng(3)
    n = 40
    keys = pd.DataFrame({"entry_id": [f"c{i:02d}" for i in rng.permutation(n)],
                         "meets_all_criteria": rng.random(n) < 0.4,
                         "score": rng.choice([0.2, 0.5, 0.5, 0.7, 0.9], n)})
    # the order rank() sorts by (its final statement, on the same three columns)
    ordered = keys.sort_values(["meets_all_criteria", "score", "entry_id"], ascending=[False, False, True],
                               kind="stable").reset_index(drop=True)
    for j in range(n):
        other = ordered.iloc[j]
        mine = np.array([ranking.ranks_above(ordered["meets_all_criteria"].iloc[i], ordered["score"].iloc[i],
                                             ordered["entry_id"].iloc[i], bool(other.iloc[1]), float(other.iloc[2]),
                                             other.iloc[0]) for i in range(n)])
        np.testing.assert_array_equal(mine, np.arange(n) < j)


def test_brightness_proxy_breaks_ties_but_never_gates():
    # Issue 18: the radiative-rate proxy is a tie-breaker in the score, not a criterion. Two compounds
    # alike but for their intrinsic rate (2e12 and 2e9 s^-1): both meet every criterion, the brighter
    # ranks first, and the score differs by the brightness weight times the part difference, where each
    # part is log10(proxy / 1e8 s^-1) / 2 clipped to [0, 1] (README "How compounds are ranked").
    settings = {**SETTINGS, "ranking": {**SETTINGS["ranking"],
                                        "weights": {"binding": 0.3, "margin": 0.3, "window": 0.3, "brightness": 0.1}}}
    long, wide = tables([("dim", "direct", 0.2, 0.1, 750.0), ("lit", "direct", 0.2, 0.1, 750.0)])
    long.loc[long["entry_id"] == "dim", "radiative_rate_0_per_s"] = 2.0e9
    long = ranking.add_survival(long, wide, settings)
    r = ranking.rank(long, wide, settings)
    assert list(r["entry_id"]) == ["lit", "dim"] and r["meets_all_criteria"].all()
    proxy = r.set_index("entry_id")["target_brightness_proxy_per_s"]
    assert proxy["lit"] / proxy["dim"] == pytest.approx(1000.0, rel=1e-12)   # linear in Gamma_0 (Andreani 1991)
    part = np.clip(np.log10(proxy / 1e8) / 2.0, 0.0, 1.0)
    s = r.set_index("entry_id")["score"]
    assert s["lit"] - s["dim"] == pytest.approx(0.1 * (part["lit"] - part["dim"]), rel=1e-9)
    # a vanishing proxy only zeroes its part: every criterion still holds
    long.loc[:, "radiative_rate_0_per_s"] = 1.0
    r = ranking.rank(ranking.add_survival(long, wide, settings), wide, settings)
    assert r["meets_all_criteria"].all() and (r["score_brightness"] == 0.0).all()
