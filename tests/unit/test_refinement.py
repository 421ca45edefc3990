"""Tests for lamellume.refinement (what to recompute next) and its pipeline wiring.

The indices of the estimators themselves are checked against closed forms in
test_attribution.py. Here the model is the screen's own, so the references are
(a) exact facts of the method (one uncertain input carries all the variance;
S_i <= ST_i, sum S <= 1 <= sum ST for independent inputs -- Saltelli et al.,
Comput. Phys. Commun. 181, 259 (2010)), and (b) brute-force re-runs of the
Monte Carlo propagation with the named input's uncertainty halved: the
attribution predicts the result of those re-runs, it is not used to make them.
"""

import copy

import numpy as np
import pandas as pd
import pytest
from scipy import special

from lamellume import io, pipeline, ranking, refinement, uncertainty

from mc_setup import config_sections, zero_uncertainty


@pytest.fixture(scope="module")
def settings():
    return config_sections()


@pytest.fixture(scope="module")
def demo(screened_demo, coarse_table, settings):
    """The demo campaign screened and propagated by the pipeline; the borderline entries attributed."""
    frames = screened_demo["frames"]
    entries, valleys = frames["entries"], frames["valleys"]
    unc = uncertainty.propagate_uncertainty(entries, valleys, settings, coarse_table)
    entries = entries.merge(unc[["entry_id", "p_meets_all"]], on="entry_id")
    chosen = entries[refinement.borderline(entries["p_meets_all"], settings["refinement"]["band"])]
    assert len(chosen) >= 10                       # the demo is built to have borderline compounds
    rows = refinement.attribute(chosen, valleys, settings, coarse_table)
    # the campaign's ranking (one shard: the whole demo) and the shortlist's cut keys
    r = settings["ranking"]
    long = ranking.add_survival(frames["long"], frames["wide"], settings)
    target = long[(long["layers"] == r["target_layers"]) & (long["environment"] == r["environment"])]
    ranked = ranking.rank(target, frames["wide"], settings, unc)
    campaign = refinement.shortlist_cuts(ranked, r["shortlist_size"])
    ranked_ids = set(ranked["entry_id"])
    cuts = {e: campaign.against(e) for e in entries["entry_id"] if e in ranked_ids}
    ranked_path = screened_demo["tmp"] / "ranked.parquet"
    io.write_parquet(ranked[["entry_id", "rank", "meets_all_criteria", "score"]], ranked_path)
    return {"entries": entries, "valleys": valleys, "table": coarse_table, "borderline": chosen, "rows": rows,
            "tmp": screened_demo["tmp"], "outputs": screened_demo["outputs"], "unc": unc, "ranked": ranked,
            "cuts": cuts, "ranked_path": str(ranked_path), "table_path": screened_demo["table_path"]}


@pytest.fixture(scope="module")
def membership(demo, settings):
    """Compounds whose shortlist membership is in doubt (p_on_shortlist in the band), attributed."""
    entries = demo["entries"][demo["entries"]["entry_id"].isin(set(demo["cuts"]))]
    p_on = refinement.shortlist_probability(entries, demo["valleys"], settings, demo["table"], demo["cuts"])
    chosen = entries[entries["entry_id"].isin(set(p_on.index[refinement.borderline(p_on, settings["refinement"]["band"])]))]
    assert len(chosen) >= 5
    rows = refinement.attribute(chosen, demo["valleys"], settings, demo["table"], cuts=demo["cuts"])
    return {"p_on": p_on, "chosen": chosen, "rows": rows}


_zeroed = zero_uncertainty


def _only_uncertain(demo, settings, top):
    """The record of ``top`` (a listed row) with every uncertainty zero but its additive input's
    (band edge or scissor, 0.1 eV), and 512 base samples."""
    ent = demo["entries"][demo["entries"]["entry_id"] == top["entry_id"]]
    val = demo["valleys"][demo["valleys"]["entry_id"] == top["entry_id"]]
    e, v, s = _zeroed(ent, val, settings)
    if top["input_kind"] == "scissor":
        e["scissor_unc_ev"] = 0.1
    else:
        v.loc[v["valley_index"] == top["valley_index"], "edge_unc_ev"] = 0.1
    s["refinement"]["samples"] = 512
    return e, v, s


def _effective(frame, column, default):
    return frame[column].astype(float).fillna(float(default))


# --------------------------------------------------------------------------- #
# Facts of the method, on the screen's own model
# --------------------------------------------------------------------------- #
def test_one_uncertain_input_carries_the_whole_verdict(demo, settings):
    # Method fact (Sobol' 2001): if only one input varies, S = ST = 1 for every
    # output that varies at all; no other group is attributed.
    top = refinement.refinement_list(demo["rows"]).iloc[0]
    assert top["input_kind"] in ("band_edges", "scissor")
    e, v, s = _only_uncertain(demo, settings, top)
    rows = refinement.attribute(e, v, s, demo["table"])
    assert set(rows["input_group"]) == {top["input_group"]}
    # outputs that vary beyond rounding (an input of a dark pair moves the verdict, not the bright exciton)
    varied = rows[rows["variance"] > 1e-20 * np.maximum(1.0, rows["mean"].to_numpy() ** 2)]
    assert {"meets_all"} <= set(varied["output"])
    for col in ("share_first", "share_total"):
        err = varied[f"{col}_se"].to_numpy()
        assert np.all(np.abs(varied[col].to_numpy() - 1.0) <= 4 * err + 0.02), varied[["output", col, f"{col}_se"]]


def test_model_error_alone_carries_the_whole_verdict(demo, settings):
    # Sobol' (2001), as above, with the binding model's own error as the one uncertain input: the
    # binding factor is log-normal with a relative standard deviation of the configured 20 % (its
    # definition, excitons.model_rel_unc_layers), so the binding's spread over the base samples
    # is 20 % of its mean up to sampling error (sd of a sample sd ~ 1/sqrt(2N), common practice).
    me = demo["rows"][(demo["rows"]["input_kind"] == "model_error") & (demo["rows"]["output"] == "meets_all")]
    assert len(me)                                   # the group is attributed on the demo by default
    eid = me.sort_values(["share_first", "entry_id"]).iloc[-1]["entry_id"]
    ent = demo["entries"][demo["entries"]["entry_id"] == eid]
    val = demo["valleys"][demo["valleys"]["entry_id"] == eid]
    e, v, s = _zeroed(ent, val, settings)
    s["excitons"]["model_rel_unc_layers"] = 0.2
    s["refinement"]["samples"] = 512
    rows = refinement.attribute(e, v, s, demo["table"])
    assert set(rows["input_kind"]) == {"model_error"}
    eb = rows[rows["output"] == "target_binding_ev"].iloc[0]
    np.testing.assert_allclose(np.sqrt(eb["variance"]) / eb["mean"], 0.2, rtol=0.15)
    for col in ("share_first", "share_total"):
        assert abs(eb[col] - 1.0) <= 4 * eb[f"{col}_se"] + 0.02, eb


def test_indices_order_and_sums_as_the_method_says(demo):
    # Independent inputs: S_i <= ST_i and sum S <= 1 <= sum ST (Saltelli et al. 2010,
    # sec. 2), each up to sampling error (the reported standard errors, summed in quadrature).
    rows = demo["rows"]
    verdict = rows[(rows["output"] == "meets_all") & (rows["variance"] > 0)]
    assert len(verdict)
    slack = 4 * np.hypot(verdict["share_first_se"], verdict["share_total_se"]) + 0.02
    assert np.all(verdict["share_first"] <= verdict["share_total"] + slack)
    for _, g in verdict.groupby("entry_id"):
        s_err = 4 * np.sqrt(np.sum(g["share_first_se"] ** 2)) + 0.02
        t_err = 4 * np.sqrt(np.sum(g["share_total_se"] ** 2)) + 0.02
        assert g["share_first"].sum() <= 1.0 + s_err
        assert g["share_total"].sum() >= 1.0 - t_err
    # a 0/1 verdict's variance is p (1 - p) of its own samples (Bernoulli; common practice)
    np.testing.assert_allclose(verdict["variance"], verdict["mean"] * (1 - verdict["mean"]), rtol=1e-12)


def test_results_do_not_depend_on_shard_layout_order_or_blocks(demo, settings):
    rows, chosen = demo["rows"], demo["borderline"]
    subset = chosen.iloc[::3].sample(frac=1.0, random_state=1)           # another shard, shuffled
    alone = refinement.attribute(subset, demo["valleys"], settings, demo["table"], block_cells=700)
    expected = rows[rows["entry_id"].isin(set(subset["entry_id"]))].reset_index(drop=True)
    pd.testing.assert_frame_equal(alone, expected)


# --------------------------------------------------------------------------- #
# End to end on the demo: re-running with the named input halved
# --------------------------------------------------------------------------- #
def _shift_and_halve(ent, val, settings, row, shift_sd):
    """Copies with the named additive input's uncertainty halved and its centre moved by shift_sd sigma."""
    e, v = ent.copy(), val.copy()
    unc = settings["uncertainty"]
    if row.input_kind == "scissor":
        scissor = e["scissor_ev"].astype(float)
        given = e["scissor_unc_ev"].astype(float)
        sigma = given.where(given.notna(), np.where(scissor != 0, unc["default_scissor_ev"], 0.0))
        e["scissor_ev"] = scissor + shift_sd * sigma
        e["scissor_unc_ev"] = 0.5 * sigma
    else:
        assert row.input_kind == "band_edges"
        m = v["valley_index"] == row.valley_index
        sigma = _effective(v.loc[m], "edge_unc_ev", unc["default_edge_ev"])
        for c in [c for c in v.columns if c.startswith("edge_") and c.endswith("_ev") and c != "edge_unc_ev"]:
            v.loc[m, c] = v.loc[m, c] + shift_sd * sigma
        v.loc[m, "edge_unc_ev"] = 0.5 * sigma
    return e, v


def test_each_borderline_compound_names_an_input_whose_halving_moves_its_probability(demo, settings):
    """Re-run the propagation with the first listed input's uncertainty halved.

    A refinement that halves the standard deviation s of an input learns the
    part sqrt(3)/2 s u of its error (u standard normal) and leaves s/2: the
    refined run is centred at the nominal value + sqrt(3)/2 s u with width s/2.
    Re-running the propagation at the M quantiles u_j = Phi^-1((j - 1/2)/M)
    gives the probabilities the refinement can end with. They must spread
    measurably (beyond the binomial error of a run), and their variance must
    agree with the attribution's expected effect share_halved x p(1 - p)
    (brute-force double-loop Monte Carlo versus the pick-freeze estimate).
    """
    listed = refinement.refinement_list(demo["rows"], per_entry=3)
    firsts = listed.drop_duplicates("entry_id")
    assert set(firsts["entry_id"]) == set(demo["borderline"]["entry_id"])
    n_samples, m = 2000, 16
    u = special.ndtri((np.arange(m) + 0.5) / m)
    checked = 0
    for row in firsts.itertuples(index=False):
        if row.input_kind not in ("band_edges", "scissor"):
            continue                                   # centre shifts are additive only for these
        ent = demo["entries"][demo["entries"]["entry_id"] == row.entry_id]
        val = demo["valleys"][demo["valleys"]["entry_id"] == row.entry_id]
        p = []
        for uj in u:
            e, v = _shift_and_halve(ent, val, settings, row, np.sqrt(0.75) * uj)
            p.append(uncertainty.propagate_samples(e, v, settings, demo["table"],
                                                   samples=n_samples)["meets_all"][0].mean())
        p = np.array(p)
        noise = np.sqrt(0.25 / n_samples)              # largest binomial error of one re-run
        assert p.max() - p.min() > 6 * noise, (row.entry_id, p)
        # variance of the refined probability vs the expected effect (same quantity, two estimators);
        # the quantile grid and the pick-freeze estimate both carry errors of a few 0.01
        brute = p.var() / (row.p_meets_all * (1 - row.p_meets_all))
        assert abs(brute - row.share_halved) <= 0.1 + 3 * demo["rows"].set_index(
            ["entry_id", "output", "input_group"]).loc[(row.entry_id, "meets_all", row.input_group),
                                                       "share_halved_se"], (row.entry_id, brute, row.share_halved)
        checked += 1
    # (with exciton-level criteria about 60 % of the demo's first inputs are edges or scissors)
    assert checked >= 0.5 * len(firsts)


# --------------------------------------------------------------------------- #
# Shortlist membership (on_shortlist)
# --------------------------------------------------------------------------- #
def test_nominal_draw_scores_as_the_ranking_does(demo, settings):
    # Consistency of two code paths: the score inputs of the nominal screen (model.evaluate once,
    # ranking.add_survival, ranking.rank's target_* columns) against those of the Monte Carlo path
    # (uncertainty.evaluate_draws per sample, refinement.sample_score) with every input exact. The
    # window part is the criterion itself in both (one sample has no probability); scores agree to
    # rounding, verdicts exactly.
    e, v, s = _zeroed(demo["entries"], demo["valleys"], settings)
    e = e[e["entry_id"].isin(set(demo["cuts"]))].sort_values("entry_id").reset_index(drop=True)
    prep = uncertainty.prepare_inputs(e, v[v["entry_id"].isin(set(e["entry_id"]))], s, score_inputs=True)
    n, n_v = len(prep.ids), int(prep.vstart[-1])
    values = uncertainty.evaluate_draws(prep, 0, n, np.zeros((3, n, 1)), np.zeros((n_v, 1)), np.zeros((n_v, 1)),
                                        demo["table"], np.zeros((2, n, 1)))
    score = refinement.sample_score(values, s["ranking"])[:, 0]
    r = settings["ranking"]
    nominal = demo["ranked"].drop(columns=[c for c in demo["ranked"].columns if c.startswith("p_")])
    # rank's score with the window part the criterion itself (as rank scores without the Monte Carlo)
    parts = ranking.score_parts(nominal["target_bound_fraction"], nominal["target_exciton_margin_ev"],
                                nominal["pass_window"], nominal["target_brightness_proxy_per_s"], r)
    expected = pd.Series(ranking.weighted_score(parts, r["weights"]), index=nominal["entry_id"]).reindex(prep.ids)
    np.testing.assert_allclose(score, expected.to_numpy(), rtol=1e-9, atol=1e-12)
    meets = pd.Series(nominal["meets_all_criteria"].to_numpy(), index=nominal["entry_id"]).reindex(prep.ids)
    np.testing.assert_array_equal(values["meets_all"][:, 0], meets.to_numpy(dtype=bool))
    assert np.ptp(score) > 0.1                   # the scores spread: a check that can fail


def test_nominal_membership_is_the_ranked_shortlist(demo, settings):
    # Two code paths for membership: the first shortlist_size rows of ranking.rank's table versus
    # ranks_above of each compound's nominal key against its cut key (the size-th of the others).
    ranked = demo["ranked"]
    size = settings["ranking"]["shortlist_size"]
    for row in ranked.itertuples(index=False):
        cut = demo["cuts"][row.entry_id]
        on = True if cut is None else bool(ranking.ranks_above(row.meets_all_criteria, row.score, row.entry_id,
                                                                *cut))
        assert on == (row.rank <= size), row.entry_id


def test_membership_depends_on_one_input_only(demo, membership, settings):
    # Sobol' (2001): with one uncertain input, S = ST = 1 for a verdict that varies. The compound
    # and its input are the first of the membership list with an additive input (edge or scissor).
    listed = refinement.refinement_list(membership["rows"], verdicts=["on_shortlist"])
    top = listed[listed["input_kind"].isin(["band_edges", "scissor"])].iloc[0]
    e, v, s = _only_uncertain(demo, settings, top)
    rows = refinement.attribute(e, v, s, demo["table"], cuts=demo["cuts"])
    assert set(rows["input_group"]) == {top["input_group"]}
    on = rows[rows["output"] == "on_shortlist"].iloc[0]
    assert 0.02 < on["mean"] < 0.98, on                       # membership varies with this input alone
    for col in ("share_first", "share_total"):
        assert abs(on[col] - 1.0) <= 4 * on[f"{col}_se"] + 0.02, on


def test_membership_probability_is_the_attributions_own(membership):
    # The selection's p_on_shortlist (matrix A alone) and the attribution's (stage 1) are the same draws.
    rows = membership["rows"].drop_duplicates("entry_id").set_index("entry_id")["p_on_shortlist"]
    np.testing.assert_array_equal(rows.to_numpy(), membership["p_on"].reindex(rows.index).to_numpy())


def test_halving_the_first_input_moves_membership_as_predicted(demo, membership, settings):
    """Brute force for a compound near the cut, as for meets_all above: the membership probability
    after a refinement that halves the first listed input, at M quantiles of what it can find, has
    the variance share_halved x p(1 - p) (double-loop Monte Carlo versus the pick-freeze estimate)."""
    listed = refinement.refinement_list(membership["rows"], verdicts=["on_shortlist"],
                                        band=settings["refinement"]["band"])
    firsts = listed.drop_duplicates("entry_id")
    firsts = firsts[firsts["input_kind"].isin(["band_edges", "scissor"])]
    assert len(firsts)
    rows = membership["rows"].set_index(["entry_id", "output", "input_group"])
    n_samples, m = 2000, 16
    u = special.ndtri((np.arange(m) + 0.5) / m)
    rng = np.random.default_rng(11)
    for row in firsts.head(2).itertuples(index=False):
        ent = demo["entries"][demo["entries"]["entry_id"] == row.entry_id]
        val = demo["valleys"][demo["valleys"]["entry_id"] == row.entry_id]
        p = []
        for uj in u:
            e, v = _shift_and_halve(ent, val, settings, row, np.sqrt(0.75) * uj)
            prep = uncertainty.prepare_inputs(e, v, settings, score_inputs=True)
            k = int(prep.vstart[-1])
            values = uncertainty.evaluate_draws(
                prep, 0, 1, rng.standard_normal((3, 1, n_samples)), rng.standard_normal((k, n_samples)),
                rng.standard_normal((k, n_samples)), demo["table"], rng.standard_normal((2, 1, n_samples)))
            p.append(refinement.on_shortlist(values, prep.ids, [demo["cuts"][row.entry_id]],
                                             settings["ranking"])[0].mean())
        p = np.array(p)
        assert p.max() - p.min() > 6 * np.sqrt(0.25 / n_samples), (row.entry_id, p)
        var = rows.loc[(row.entry_id, "on_shortlist", row.input_group)]
        brute = p.var() / var["variance"]
        assert abs(brute - var["share_halved"]) <= 0.1 + 3 * var["share_halved_se"], (row.entry_id, brute, var)


# --------------------------------------------------------------------------- #
# Pipeline: per-record cache, the list and its CSV
# --------------------------------------------------------------------------- #
def test_run_attribution_caches_per_record(demo, settings, tmp_path):
    entries, valleys = demo["entries"], demo["valleys"]
    prop = tmp_path / "uncertainty.parquet"
    io.write_parquet(entries[["entry_id", "p_meets_all"]], prop)
    cache = tmp_path / "cache"
    out1, out2 = tmp_path / "a1.parquet", tmp_path / "a2.parquet"
    settings = copy.deepcopy(settings)
    settings["refinement"]["verdicts"] = ["meets_all"]
    first = pipeline.run_attribution(demo["outputs"]["entries"], demo["outputs"]["valleys"], str(prop),
                                     demo["table_path"], settings, str(cache), str(out1))
    assert first == {"borderline": len(demo["borderline"]), "computed": len(demo["borderline"]), "reused": 0}
    again = pipeline.run_attribution(demo["outputs"]["entries"], demo["outputs"]["valleys"], str(prop),
                                     demo["table_path"], settings, str(cache), str(out2))
    assert again["computed"] == 0 and again["reused"] == len(demo["borderline"])
    pd.testing.assert_frame_equal(io.read_parquet(out1), io.read_parquet(out2))
    # one revised record: only it is recomputed
    revised = io.read_parquet(demo["outputs"]["entries"])
    target = demo["borderline"]["entry_id"].iloc[0]
    revised.loc[revised["entry_id"] == target, "input_hash"] = "revised"
    rev_path = tmp_path / "entries.parquet"
    io.write_parquet(revised, rev_path)
    third = pipeline.run_attribution(str(rev_path), demo["outputs"]["valleys"], str(prop), demo["table_path"],
                                     settings, str(cache), str(tmp_path / "a3.parquet"))
    assert third["computed"] == 1 and third["reused"] == len(demo["borderline"]) - 1
    # a changed refinement setting invalidates the cache
    s = copy.deepcopy(settings)
    s["refinement"]["samples"] = settings["refinement"]["samples"] + 16
    fourth = pipeline.run_attribution(str(rev_path), demo["outputs"]["valleys"], str(prop), demo["table_path"],
                                      s, str(cache), str(tmp_path / "a4.parquet"))
    assert fourth["reused"] == 0
    # every column carries its unit and description
    units = io.parquet_units(out1)
    assert units["share_first"] == "1" and units["p_meets_all"] == "1"


def test_run_attribution_selects_and_caches_membership_by_cut(demo, membership, settings, tmp_path):
    entries = demo["entries"]
    prop = tmp_path / "uncertainty.parquet"
    io.write_parquet(entries[["entry_id", "p_meets_all"]], prop)
    cache, ranked_path = tmp_path / "cache", demo["ranked_path"]

    def run(name, ranked=ranked_path, s=settings):
        counts = pipeline.run_attribution(demo["outputs"]["entries"], demo["outputs"]["valleys"], str(prop),
                                          demo["table_path"], s, str(cache), str(tmp_path / name), ranked)
        return counts, io.read_parquet(tmp_path / name)

    counts, rows = run("a1.parquet")
    # selected: p_meets_all or p_on_shortlist in the band. Not sampled for membership: records
    # whose p_meets_all lies beyond the band on the side their cut key bounds (against a
    # non-candidate's key every candidate ranks above, so p_on_shortlist >= p_meets_all; against
    # a candidate's key p_on_shortlist <= p_meets_all)
    lo, hi = sorted(settings["refinement"]["band"])
    p_all = entries.set_index("entry_id")["p_meets_all"]
    border = set(demo["borderline"]["entry_id"])
    bounded = {e for e, c in demo["cuts"].items() if e not in border and c is not None
               and ((c.meets_all and p_all[e] < lo) or (not c.meets_all and p_all[e] > hi))}
    assert bounded                                  # the demo has such records (its cut is a non-candidate)
    # the bound agrees with the sampled membership of those records (the fixture samples every one)
    sampled = membership["p_on"].reindex(sorted(bounded))
    assert not refinement.borderline(sampled, settings["refinement"]["band"]).any(), sampled
    expected = border | set(membership["chosen"]["entry_id"])
    assert set(rows["entry_id"]) == expected and counts["borderline"] == len(expected)
    assert counts["membership_bounded"] == len(bounded)
    assert counts["membership_computed"] == len(demo["cuts"]) - len(border) - len(bounded)
    again, rows2 = run("a2.parquet")
    assert again["computed"] == 0 and again["membership_computed"] == 0
    pd.testing.assert_frame_equal(rows, rows2)
    # a moved cut: the ranked table with the last shortlist row's score lowered re-runs the
    # compounds measured against it, and only those
    ranked = io.read_parquet(ranked_path)
    size = settings["ranking"]["shortlist_size"]
    ranked.loc[ranked["rank"] == size + 1, "score"] -= 1e-6
    moved = tmp_path / "ranked.parquet"
    io.write_parquet(ranked, moved)
    third, _ = run("a3.parquet", str(moved))
    members = set(ranked.loc[ranked["rank"] <= size, "entry_id"])
    assert third["computed"] == len(expected & members) and third["reused"] == len(expected - members)
    # ranking by probability: membership is not attributed (logged), the verdict still is
    s = copy.deepcopy(settings)
    s["ranking"]["order_by"] = "probability"
    fourth, rows4 = run("a4.parquet", s=s)
    assert "on_shortlist" not in set(rows4["output"]) and set(rows4["entry_id"]) == set(demo["borderline"]["entry_id"])


def test_refinement_list_ranks_and_writes_a_plannable_csv(demo, settings, tmp_path):
    rows = demo["rows"]
    path = tmp_path / "shard.parquet"
    io.write_parquet(rows, path)
    outputs = {"attribution": str(tmp_path / "attribution.parquet"),
               "refinement": str(tmp_path / "refinement.parquet"), "csv": str(tmp_path / "refinement.csv")}
    n = pipeline.run_refinement_list([str(path)], settings, outputs, "cfg")
    ranked = io.read_parquet(outputs["refinement"])
    assert len(ranked) == n > 0
    assert list(ranked["rank"]) == list(range(1, n + 1))
    assert np.all(np.diff(ranked["expected_effect"]) <= 0)
    assert ranked.groupby("entry_id").size().max() <= settings["refinement"]["per_compound"]
    # expected effect = share halved x p(1-p) of the attribution's own base samples
    verdict = rows[rows["output"] == "meets_all"].set_index(["entry_id", "input_group"])
    ref = verdict.loc[list(zip(ranked["entry_id"], ranked["input_group"]))]
    np.testing.assert_allclose(ranked["expected_effect"], ref["share_halved"] * ref["variance"], rtol=1e-12)
    csv = pd.read_csv(outputs["csv"])
    assert list(csv.columns) == list(refinement.DISPLAY.values())
    first = ranked.iloc[0]
    assert first["entry_id"] in first["advice"] and first["input_group"] in first["advice"]
    assert "%" in first["advice"]


def test_disabled_or_nothing_borderline_gives_an_empty_table(demo, settings, tmp_path):
    prop = tmp_path / "uncertainty.parquet"
    io.write_parquet(demo["entries"][["entry_id", "p_meets_all"]], prop)
    s = copy.deepcopy(settings)
    s["refinement"]["enabled"] = False
    counts = pipeline.run_attribution(demo["outputs"]["entries"], demo["outputs"]["valleys"], str(prop),
                                      demo["table_path"], s, str(tmp_path / "c"), str(tmp_path / "a.parquet"),
                                      demo["ranked_path"])
    assert counts == {"borderline": 0, "computed": 0, "reused": 0}
    frame = io.read_parquet(tmp_path / "a.parquet")
    assert len(frame) == 0 and list(frame.columns) == list(refinement.COLUMNS)


def test_membership_equal_to_the_verdict_is_listed_once(demo, settings):
    # Where membership equals the verdict in every sample, its attribution rows equal the verdict's
    # (the same sample vectors); the list then says it once (verdict "both"); a compound whose
    # membership differs in one share keeps both sets.
    meets = demo["rows"][demo["rows"]["output"] == "meets_all"].assign(p_on_shortlist=0.5)
    on = meets.assign(output="on_shortlist")
    other = on["entry_id"].iloc[0]
    on.loc[on["entry_id"] == other, "share_first"] += 0.01
    listed = refinement.refinement_list(pd.concat([meets, on], ignore_index=True), band=(0.1, 0.9))
    by_entry = listed.groupby("entry_id")["verdict"].agg(set)
    assert by_entry[other] <= {"meets_all", "on_shortlist"} and "on_shortlist" in by_entry[other]
    assert all(v == {"both"} for e, v in by_entry.items() if e != other)
    row = listed[listed["verdict"] == "both"].iloc[0]
    assert "makes the shortlist" in row["advice"] and "meets every criterion" in row["advice"]


def test_attribution_in_the_ranking_surroundings_alone_changes_nothing(demo, membership, settings, monkeypatch):
    # The attribution evaluates the model in the ranking surroundings only (every attributed output is
    # taken there); with every configured surroundings evaluated, the rows are bit for bit the same.
    chosen = membership["chosen"].iloc[:4]
    fast = refinement.attribute(chosen, demo["valleys"], settings, demo["table"], cuts=demo["cuts"])
    full = uncertainty.prepare_inputs
    monkeypatch.setattr(uncertainty, "prepare_inputs",
                        lambda *a, ranking_environment_only=False, **k: full(*a, **k))
    pd.testing.assert_frame_equal(fast, refinement.attribute(chosen, demo["valleys"], settings, demo["table"],
                                                             cuts=demo["cuts"]), check_exact=True)
    assert len(settings["environments"]) > 1
