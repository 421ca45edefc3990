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
        "optical_gap_compensated_ev": sc.h * sc.c / sc.e / (r[4] * 1e-9), "emission_compensated_nm": r[4]}
        for r in rows])
    wide = pd.DataFrame({"entry_id": [r[0] for r in rows], "formula": "F", "lattice_angstrom": 3.2,
                         "thinning_verdict": "v"})
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
    kt = sc.k * 300.0 / sc.e
    assert r["score_binding"] == pytest.approx(min(0.2 / kt / 6.0, 1.0))
    assert r["score_margin"] == pytest.approx(0.1 / ranking.MARGIN_FULL_EV)
    assert r["score_window"] == pytest.approx(1.0)  # window centre
    assert r["score"] == pytest.approx(0.4 * r["score_binding"] + 0.3 * r["score_margin"] + 0.3)


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
