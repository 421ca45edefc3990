"""What to recompute next: which uncertain input decides each borderline verdict.

Pure numpy/pandas; no file I/O. For every entry whose Monte Carlo probability
of meeting every ranking criterion (``p_meets_all`` of
:func:`lamellume.uncertainty.propagate_uncertainty`) lies in the configured
band, the variance of the verdict (and of each criterion and two continuous
quantities) is attributed to the input groups by the Saltelli (2010) /
Jansen (1999) estimators of :mod:`lamellume.attribution`. The model is the
propagation's own: the same distributions, the same per-sample evaluation
(:func:`lamellume.uncertainty.evaluate_draws`); only the draws are arranged
as a pick-freeze design.

Input groups (``refinement.groups``)
------------------------------------
``mass`` and ``band_edges`` give one group per valley (the valley's mass
factor, the valley's edge shift); ``dielectric`` (the tensor's factor),
``screening_length`` (the r0 factor), ``scissor`` (the scissor shift) and
``model_error`` (the binding models' own error, Rytova-Keldysh and bulk, as
sampled by the propagation) one group per entry. A group whose uncertainty is zero for an entry carries
nothing and is not evaluated. Inputs left out of ``groups`` keep varying but
are not attributed.

Shortlist membership (``on_shortlist``)
---------------------------------------
The shortlist is the first ``ranking.shortlist_size`` rows of the ranked
table, ordered by the key (meets every criterion, score, identifier)
(:func:`lamellume.ranking.rank`). In one sample of one compound, with every
other compound held at its nominal key, the compound is on the shortlist iff
its sample key ranks above the key of the shortlist_size-th of the *other*
compounds (:func:`lamellume.ranking.ranks_above`): the nominal key at
position size + 1 when the compound is itself on the nominal shortlist, else
the one at position size (:class:`ShortlistCuts`; with fewer other compounds
than the shortlist size it is always on). The sample's score is
:func:`lamellume.ranking.score_parts` / :func:`~lamellume.ranking.weighted_score`
of the sample's own values; its window part is the sample's window indicator
(0 or 1; its mean over samples is the ``p_pass_window`` of the nominal
score). ``p_on_shortlist`` is the fraction of the N base samples of matrix A
on the shortlist; a compound is attributed when ``p_meets_all`` or
``p_on_shortlist`` lies in the band (``refinement.verdicts`` chooses which).
Membership is not sampled where the verdict bounds it outside the band
(:func:`membership_decided`: p_on_shortlist <= p_meets_all against a
candidate's key, >= against a non-candidate's).
With ``ranking.order_by: probability`` the order uses a probability that one
sample does not have, so membership is not attributed (the log says so).

Expected effects
----------------
``share_first`` (S_i) is the expected fraction of the output's variance
removed if the input were known exactly ("removed"); ``share_halved`` the
expected fraction removed by a refinement that halves its standard deviation
(see :mod:`lamellume.attribution`). For a 0/1 verdict the variance is
p (1 - p), so an absolute effect ``share x p (1 - p)`` ranks the campaign's
refinements: a coin-flip compound settled by one input ranks above a nearly
decided one.

Determinism
-----------
Entry e draws from ``default_rng(SeedSequence(entropy of
uncertainty.entry_seed_sequence(seed, e), spawn_key=(1,)))``: a stream of its
own, independent of the propagation's, of shard layout and of entry order.
Work proceeds in blocks of at most ``uncertainty.BLOCK_CELLS`` (entry x
sample) cells where one entry's design fits in a block.

References
----------
A. Saltelli et al., Comput. Phys. Commun. 181, 259 (2010); M. J. W. Jansen,
Comput. Phys. Commun. 117, 35 (1999); A. Saltelli et al., *Global
Sensitivity Analysis: The Primer* (Wiley, 2008), sec. 1.2.15.
"""

from __future__ import annotations

from typing import Mapping, NamedTuple

import numpy as np
import pandas as pd


from lamellume import attribution, keldysh, ranking, tables, uncertainty

__all__ = ["GROUP_KINDS", "OUTPUTS", "VERDICTS", "COLUMNS", "LIST_COLUMNS", "PROBABILITY_COLUMNS", "UNITS",
           "DESCRIPTIONS", "ShortlistCut", "ShortlistCuts", "shortlist_cuts", "membership_decided", "sample_score", "on_shortlist",
           "attribution_seed_sequence", "borderline", "empty_frame", "display_frame", "attribute",
           "shortlist_probability", "refinement_list", "plain_words"]

#: Input group kinds, their display name and what a group would recompute.
GROUP_KINDS: dict[str, tuple[str, str]] = {
    "mass": ("effective mass", "a denser k-point mesh or band fit around the valley"),
    "dielectric": ("dielectric tensor", "a better dielectric (linear-response) calculation"),
    "screening_length": ("screening length r0", "a monolayer polarisability calculation"),
    "band_edges": ("band edge", "a higher-level (e.g. many-body) band-edge calculation"),
    "scissor": ("scissor shift", "a many-body gap correction"),
    "model_error": ("binding model error", "a many-body (e.g. Bethe-Salpeter) exciton calculation"),
}

#: Attributed outputs: (name, display name, kind).
OUTPUTS: dict[str, tuple[str, str]] = {
    "meets_all": ("meets every criterion", "verdict"),
    "pass_direct": ("gap direct", "verdict"),
    "pass_margin": ("direct-gap margin large enough", "verdict"),
    "pass_binding": ("binding strong enough for the temperature", "verdict"),
    "pass_window": ("emission inside the target window", "verdict"),
    "on_shortlist": ("on the shortlist, the other compounds at their ranks", "verdict"),
    "target_binding_ev": ("binding energy at the target layer count", "eV"),
    "target_optical_gap_ev": ("optical gap at the target layer count", "eV"),
}
_CRITERIA = ("pass_direct", "pass_margin", "pass_binding", "pass_window")
#: Verdicts that select compounds (``refinement.verdicts``) and rank the list: name -> plain words,
#: and the column of each verdict's probability.
VERDICTS: dict[str, str] = {"meets_all": "meets every criterion", "on_shortlist": "makes the shortlist"}
#: The list's words for each value of its ``verdict`` column (``both``: see :func:`refinement_list`).
_VERDICT_WORDS = {**VERDICTS, "both": "meets every criterion, and with it makes the shortlist"}

def _declared(names) -> dict[str, tuple[str, str, str]]:
    """(dtype, unit, description) of each column as :mod:`lamellume.tables` declares it (the one declaration)."""
    return {n: (tables.COLUMNS[n].dtype, tables.COLUMNS[n].unit, tables.COLUMNS[n].description) for n in names}


#: Columns of the per-entry attribution table, in order: name -> (dtype, unit, description).
COLUMNS: dict[str, tuple[str, str, str]] = _declared((
    "entry_id", "input_hash", "physics_hash", "output", "input_group", "input_kind", "valley_index", "p_meets_all",
    "p_on_shortlist", "shortlist_cut", "mean", "variance", "share_first", "share_first_se", "share_total",
    "share_total_se", "share_halved", "share_halved_se", "n_base", "seed"))

#: Columns of the campaign refinement list (:func:`refinement_list`), in order.
LIST_COLUMNS: dict[str, tuple[str, str, str]] = _declared((
    "rank", "entry_id", "input_group", "input_kind", "valley_index", "recompute", "verdict", "p_meets_all",
    "p_on_shortlist", "share_first", "share_total", "share_halved", "expected_effect", "mostly_through", "advice"))

#: Columns of the per-record cache of ``p_on_shortlist`` (:func:`shortlist_probability`).
PROBABILITY_COLUMNS: dict[str, tuple[str, str, str]] = {
    k: COLUMNS[k] for k in ("entry_id", "input_hash", "physics_hash", "shortlist_cut", "p_on_shortlist")}

UNITS: dict[str, str] = {k: v[1] for k, v in {**COLUMNS, **LIST_COLUMNS}.items() if v[1] not in ("", "-")}
DESCRIPTIONS: dict[str, str] = {k: v[2] for k, v in {**COLUMNS, **LIST_COLUMNS}.items()}


class ShortlistCut(NamedTuple):
    """The ranking key of one compound: candidate flag, score, identifier."""

    meets_all: bool
    score: float
    entry_id: str

    def text(self) -> str:
        """The key in words, exact (the score's shortest round-trip form): the cache key of a record."""
        return (f"{'candidate' if self.meets_all else 'not a candidate'}, score {float(self.score)!r}, "
                f"compound {self.entry_id}")


class ShortlistCuts(NamedTuple):
    """The nominal shortlist and the two keys its membership is measured against.

    Attributes
    ----------
    members : frozenset of str
        Compounds of the nominal shortlist.
    last_in, first_out : ShortlistCut or None
        Keys at positions shortlist_size and shortlist_size + 1 of the ranked
        table (None: no such row).
    """

    members: frozenset
    last_in: ShortlistCut | None
    first_out: ShortlistCut | None

    def against(self, entry_id: str) -> ShortlistCut | None:
        """The key of the shortlist_size-th of the *other* compounds (None: always on the shortlist)."""
        return self.first_out if entry_id in self.members else self.last_in


def shortlist_cuts(ranked: pd.DataFrame, size: int) -> ShortlistCuts:
    """The cut keys of a ranked table (:func:`lamellume.ranking.rank`, columns rank,
    entry_id, meets_all_criteria, score) for a shortlist of ``size`` rows."""
    if int(size) < 1:
        raise ValueError("the shortlist size must be at least 1")
    ranked = ranked.sort_values("rank", kind="stable").reset_index(drop=True)

    def key(i: int) -> ShortlistCut | None:
        if i >= len(ranked):
            return None
        return ShortlistCut(bool(ranked["meets_all_criteria"].iloc[i]), float(ranked["score"].iloc[i]),
                            str(ranked["entry_id"].iloc[i]))
    return ShortlistCuts(frozenset(ranked["entry_id"].astype(str).iloc[:int(size)]), key(int(size) - 1),
                         key(int(size)))


def cut_text(cut: ShortlistCut | None) -> str:
    """:meth:`ShortlistCut.text`, or 'none' for a compound that is always on the shortlist."""
    return "none" if cut is None else cut.text()


def membership_decided(p_meets_all, cut_candidate, band) -> np.ndarray:
    """Records whose shortlist membership lies outside ``band`` by their verdict alone.

    Against a candidate's key a compound must meet every criterion, so
    p_on_shortlist <= p_meets_all; against a non-candidate's key every
    candidate ranks above it, so p_on_shortlist >= p_meets_all. A record whose
    ``p_meets_all`` lies beyond the band on the side its cut bounds cannot have
    ``p_on_shortlist`` inside it and need not be sampled.

    Parameters
    ----------
    p_meets_all : array_like
        Probability of meeting every criterion (NaN: never decided).
    cut_candidate : array_like of object
        Per record: True (its cut key is a candidate's), False (a non-candidate's)
        or None (no cut: always on the shortlist; not decided here).
    band : pair of float
        The refinement band.

    References
    ----------
    Common practice (P(A and B) <= P(A) <= P(A or B)).
    """
    lo, hi = sorted(float(x) for x in band)
    p = np.asarray(p_meets_all, dtype=float)
    cut = np.asarray(cut_candidate, dtype=object)
    return ((cut == True) & (p < lo)) | ((cut == False) & (p > hi))  # noqa: E712 (None stays undecided)


def sample_score(values: Mapping[str, np.ndarray], ranking_settings: Mapping) -> np.ndarray:
    """The score of each sample: :func:`lamellume.ranking.score_parts` and
    :func:`~lamellume.ranking.weighted_score` of the sample's own values (window part: the
    sample's window indicator)."""
    parts = ranking.score_parts(values["target_bound_fraction"], values["target_exciton_margin_ev"],
                                values["pass_window"], values["target_brightness_proxy_per_s"], ranking_settings)
    return ranking.weighted_score(parts, ranking_settings["weights"])


def on_shortlist(values: Mapping[str, np.ndarray], entry_ids, cuts, ranking_settings: Mapping) -> np.ndarray:
    """Per-sample membership (n, S) of n compounds; ``cuts[i]``: the key compound i must rank above."""
    score = np.atleast_2d(sample_score(values, ranking_settings))
    meets = np.atleast_2d(np.asarray(values["meets_all"], dtype=bool))
    out = np.ones(meets.shape, dtype=bool)
    for i, (eid, cut) in enumerate(zip(entry_ids, cuts)):
        if cut is not None:
            out[i] = ranking.ranks_above(meets[i], score[i], str(eid), *cut)
    return out


def attribution_seed_sequence(seed: int, entry_id: str) -> np.random.SeedSequence:
    """The entry's attribution stream: the propagation's entropy with spawn key (1,).

    References
    ----------
    NumPy ``SeedSequence`` spawn keys (independent child streams); common practice.
    """
    return np.random.SeedSequence(uncertainty.entry_seed_sequence(seed, entry_id).entropy, spawn_key=(1,))


def borderline(probability, band) -> np.ndarray:
    """Mask of probabilities inside the closed band [low, high] (NaN: outside)."""
    lo, hi = sorted(float(x) for x in band)
    p = np.asarray(probability, dtype=float)
    return np.isfinite(p) & (p >= lo) & (p <= hi)


def _typed(frame: pd.DataFrame | None, columns: Mapping[str, tuple[str, str, str]]) -> pd.DataFrame:
    """``frame`` reduced to ``columns`` in their order and dtypes (strings as object); None: no rows."""
    if frame is None:
        return pd.DataFrame({c: pd.Series(dtype=d if d != "string" else object) for c, (d, _, _) in columns.items()})
    frame = frame[list(columns)]
    return frame.astype({c: object if d == "string" else d for c, (d, _, _) in columns.items()})


def empty_frame() -> pd.DataFrame:
    """An attribution table without rows (columns and dtypes of :data:`COLUMNS`)."""
    return _typed(None, COLUMNS)


#: Per-record groups: kind -> the draw columns of a record with k valleys.
_RECORD_COLUMNS = {"dielectric": lambda k: [0], "screening_length": lambda k: [1], "scissor": lambda k: [2],
                   "model_error": lambda k: [3 + 2 * k, 4 + 2 * k]}


def _group_sigmas(prep) -> dict[str, np.ndarray]:
    """Standard uncertainty behind each group kind: per record for :data:`_RECORD_COLUMNS`
    kinds, per valley for ``mass`` and ``band_edges`` (a group with 0 carries nothing)."""
    n = len(prep.ids)
    return {"dielectric": np.asarray(prep.sig_eps, dtype=float), "screening_length": np.asarray(prep.sig_r0, dtype=float),
            "scissor": np.asarray(prep.sig_scissor, dtype=float),
            "model_error": np.full(n, max(prep.sig_model_layers, prep.sig_model_bulk)),
            "mass": np.asarray(prep.sig_mass, dtype=float), "band_edges": np.asarray(prep.sig_edge, dtype=float)}


def _entry_groups(prep, e: int, kinds, labels, bands, vindex, sigmas) -> tuple[list, list, list, list]:
    """Active groups of entry e: column lists, display names, kinds, valley indices (-1: none);
    ``sigmas`` from :func:`_group_sigmas`."""
    v0, v1 = int(prep.vstart[e]), int(prep.vstart[e + 1])
    k = v1 - v0
    cols, names, kind_of, valley = [], [], [], []
    for kind in kinds:
        sig = sigmas[kind]
        if kind in _RECORD_COLUMNS:
            if sig[e] > 0:
                cols.append(_RECORD_COLUMNS[kind](k)), names.append(GROUP_KINDS[kind][0]), kind_of.append(kind)
                valley.append(-1)
            continue
        base = 3 if kind == "mass" else 3 + k
        for j in range(k):
            if sig[v0 + j] > 0:
                cols.append([base + j])
                names.append(f"{GROUP_KINDS[kind][0]}, valley {labels[v0 + j]} ({bands[v0 + j]})")
                kind_of.append(kind)
                valley.append(int(vindex[v0 + j]))
    return cols, names, kind_of, valley


def _has_groups(prep, kinds) -> np.ndarray:
    """Per entry: whether any input group of ``kinds`` is uncertain (as :func:`_entry_groups` finds them)."""
    n = len(prep.ids)
    out = np.zeros(n, dtype=bool)
    sigmas = _group_sigmas(prep)
    owner = np.repeat(np.arange(n), np.diff(prep.vstart))
    for kind in kinds:
        if kind in _RECORD_COLUMNS:
            out |= sigmas[kind] > 0
        else:
            out |= np.bincount(owner, weights=(sigmas[kind] > 0).astype(float), minlength=n) > 0
    return out


def attribute(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping, table: keldysh.KeldyshTable,
              block_cells: int = uncertainty.BLOCK_CELLS,
              cuts: Mapping[str, ShortlistCut | None] | None = None) -> pd.DataFrame:
    """Sobol indices of every output of the given entries on their input groups.

    Parameters
    ----------
    entries, valleys : pandas.DataFrame
        Normalised shard tables of the entries to attribute (the caller picks
        the borderline ones with :func:`borderline`); an optional
        ``p_meets_all`` column of ``entries`` (the propagation's probability)
        is copied to the rows.
    settings : mapping
        The propagation's settings (uncertainty, survival, ranking, layers,
        monolayer, environments) plus ``refinement`` (samples, effect, groups).
    table : lamellume.keldysh.KeldyshTable
    block_cells : int, optional
        Memory bound in (entry x sample) cells; never changes results.
    cuts : mapping, optional
        Per entry_id the key it must rank above to be on the shortlist
        (:meth:`ShortlistCuts.against`; None values: always on). Given, the
        output ``on_shortlist`` is attributed too; omitted, it is not.

    Returns
    -------
    pandas.DataFrame
        One row per (entry, output, input group), columns :data:`COLUMNS`
        (``physics_hash`` copied from ``entries`` when present), sorted by
        entry_id, output, input_group.

    References
    ----------
    Saltelli et al., Comput. Phys. Commun. 181, 259 (2010); Jansen, Comput.
    Phys. Commun. 117, 35 (1999).
    """
    ref = settings["refinement"]
    n_base = int(ref["samples"])
    n_halved = int(ref["per_compound"]) if ref["effect"] == "halved" else 0
    seed = int(settings["uncertainty"]["seed"])
    kinds = [k for k in GROUP_KINDS if k in set(ref["groups"])]
    if len(entries) == 0 or n_base < 2 or not kinds:
        return empty_frame()

    entries = entries.sort_values("entry_id", kind="stable").reset_index(drop=True)
    valleys = valleys[valleys["entry_id"].isin(set(entries["entry_id"]))]
    prep = uncertainty.prepare_inputs(entries, valleys, settings, score_inputs=cuts is not None,
                                        ranking_environment_only=True)
    vt = valleys.assign(_o=pd.Index(prep.ids).get_indexer(valleys["entry_id"]))
    vt = vt.sort_values(["_o", "valley_index"], kind="stable")
    labels, bands = vt["label"].astype(str).to_numpy(), vt["band"].astype(str).to_numpy()
    vindex = vt["valley_index"].to_numpy(dtype=np.int64)
    sigmas = _group_sigmas(prep)
    groups = [_entry_groups(prep, e, kinds, labels, bands, vindex, sigmas) for e in range(len(prep.ids))]
    n_groups = np.array([len(g[0]) for g in groups])

    # entries with the same number of groups evaluate together: reorder so they are contiguous
    order = np.lexsort((np.arange(len(n_groups)), n_groups))
    order = order[n_groups[order] > 0]
    if not len(order):
        return empty_frame()
    entries = entries.iloc[order].reset_index(drop=True)
    prep = uncertainty.prepare_inputs(entries, valleys, settings, score_inputs=cuts is not None,
                                        ranking_environment_only=True)
    groups = [groups[i] for i in order]
    cut_of = None if cuts is None else [cuts[str(e)] for e in prep.ids]
    n_groups = n_groups[order]

    rows: list[pd.DataFrame] = []
    start = 0
    while start < len(order):
        d = int(n_groups[start])
        step = max(1, block_cells // ((d + 2) * n_base))
        stop = start
        while stop < len(order) and n_groups[stop] == d and stop - start < step:
            stop += 1
        rows.append(_attribute_block(prep, start, stop, groups[start:stop], n_base, n_halved, seed, table,
                                     block_cells, None if cut_of is None else cut_of[start:stop],
                                     settings["ranking"]))
        start = stop
    frame = pd.concat(rows, ignore_index=True)
    frame["input_hash"] = frame["entry_id"].map(entries.set_index("entry_id")["input_hash"])
    if "physics_hash" in entries:
        frame["physics_hash"] = frame["entry_id"].map(entries.set_index("entry_id")["physics_hash"])
    else:
        frame["physics_hash"] = ""
    frame["p_meets_all"] = (frame["entry_id"].map(entries.set_index("entry_id")["p_meets_all"])
                            if "p_meets_all" in entries else np.nan)
    frame["shortlist_cut"] = "" if cuts is None else frame["entry_id"].map(
        {str(e): cut_text(cuts[str(e)]) for e in prep.ids})
    frame["n_base"] = np.int32(n_base)
    frame["seed"] = np.int64(seed)
    return _typed(frame, COLUMNS).sort_values(["entry_id", "output", "input_group"], kind="stable").reset_index(drop=True)


def _evaluate_design(prep, a: int, b: int, zs, table, block_cells: int) -> dict[str, np.ndarray]:
    """Model outputs (b - a, S) of entries a..b-1 on their draws zs[i] (S, 3 + 2 k_i + 2), in blocks.

    Columns of one entry's draws: eps, r0, scissor, k mass, k edge, then the
    Rytova-Keldysh and bulk model errors.
    """
    n_e = b - a
    s_tot = zs[0].shape[0]
    k = np.diff(prep.vstart[a:b + 1])
    z_ent = np.empty((3, n_e, s_tot))
    z_mass = np.empty((int(k.sum()), s_tot))
    z_edge = np.empty_like(z_mass)
    z_model = np.empty((2, n_e, s_tot))
    pos = 0
    for i, z in enumerate(zs):
        ke = int(k[i])
        z_ent[:, i, :] = z[:, :3].T
        z_mass[pos:pos + ke] = z[:, 3:3 + ke].T
        z_edge[pos:pos + ke] = z[:, 3 + ke:3 + 2 * ke].T
        z_model[:, i, :] = z[:, 3 + 2 * ke:].T
        pos += ke
    step = s_tot if n_e * s_tot <= block_cells else max(1, block_cells // n_e)
    parts = [uncertainty.evaluate_draws(prep, a, b, z_ent[:, :, s0:s0 + step], z_mass[:, s0:s0 + step],
                                        z_edge[:, s0:s0 + step], table, z_model[:, :, s0:s0 + step])
             for s0 in range(0, s_tot, step)]
    if len(parts) == 1:
        return parts[0]
    return {key: np.concatenate([p[key] for p in parts], axis=1) for key in parts[0]}


def _design(prep, e: int, group_cols, n_base: int, halved: bool, seed: int) -> attribution.SobolDesign:
    """The pick-freeze design of entry e: its own stream (:func:`attribution_seed_sequence`), so
    matrix A does not depend on the groups, the shard or the other entries."""
    rng = np.random.default_rng(attribution_seed_sequence(seed, prep.ids[e]))
    k = int(prep.vstart[e + 1] - prep.vstart[e])
    draws = rng.standard_normal((4 if halved else 2, n_base, 5 + 2 * k))
    return attribution.sobol_design(draws, group_cols, residual=0.5 if halved else None)


def _outputs(prep, a: int, b: int, zs, table, block_cells: int, cuts, ranking_settings) -> dict[str, np.ndarray]:
    """:data:`OUTPUTS` of entries a..b-1 on their draws (with ``on_shortlist`` when ``cuts`` are given)."""
    res = _evaluate_design(prep, a, b, zs, table, block_cells)
    if cuts is not None:
        res["on_shortlist"] = on_shortlist(res, prep.ids[a:b], cuts, ranking_settings)
    return {name: v for name, v in res.items() if name in OUTPUTS}


def _halved_choice(idx: Mapping[str, attribution.SobolIndices], r: int) -> np.ndarray:
    """The r groups per entry that get the halved design: best rank by first-order share over the
    attributed verdicts (so each verdict's largest share is among them), ties by the larger share."""
    verdicts = [v for v in VERDICTS if v in idx]
    firsts = np.stack([np.nan_to_num(idx[v].first, nan=-np.inf) for v in verdicts])       # (V, n_e, d)
    order = np.argsort(-firsts, axis=2, kind="stable")
    place = np.empty_like(order)
    np.put_along_axis(place, order, np.arange(order.shape[2])[None, None, :], axis=2)
    best, share = place.min(axis=0), firsts.max(axis=0)
    return np.lexsort((np.arange(best.shape[1])[None, :].repeat(best.shape[0], 0), -share, best), axis=1)[:, :r]


def _attribute_block(prep, a: int, b: int, groups, n_base: int, n_halved: int, seed: int, table,
                     block_cells: int, cuts=None, ranking_settings=None) -> pd.DataFrame:
    """Indices of entries a..b-1, which share the number of groups d.

    Stage 1 evaluates A, B and every A_B^(i); with ``n_halved`` > 0, stage 2
    evaluates the halved-uncertainty matrices of the n_halved groups with the
    largest first-order share of the verdicts (the halved effect never exceeds
    the first-order one; see :mod:`lamellume.attribution`).
    """
    n_e = b - a
    d = len(groups[0][0])
    r = min(n_halved, d)
    designs = [_design(prep, a + i, groups[i][0], n_base, bool(r), seed) for i in range(n_e)]
    stage1 = [np.concatenate([g.a[None], g.b[None], g.ab], axis=0).reshape((d + 2) * n_base, -1) for g in designs]
    y1 = {name: np.asarray(v, dtype=float).reshape(n_e, d + 2, n_base)
          for name, v in _outputs(prep, a, b, stage1, table, block_cells, cuts, ranking_settings).items()}
    idx = {name: attribution.sobol_indices(y[:, 0], y[:, 1], y[:, 2:]) for name, y in y1.items()}
    halved = {name: (np.full((n_e, d), np.nan), np.full((n_e, d), np.nan)) for name in y1}
    if r:
        top = _halved_choice(idx, r)
        stage2 = [g.ab_reduced[top[i]].reshape(r * n_base, -1) for i, g in enumerate(designs)]
        res2 = _outputs(prep, a, b, stage2, table, block_cells, cuts, ranking_settings)
        rows = np.arange(n_e)[:, None]
        for name, y in y1.items():
            y2 = np.asarray(res2[name], dtype=float).reshape(n_e, r, n_base)
            red = attribution.sobol_indices(y[:, 0], y[:, 1], y[:, 2:][rows, top], y2)
            halved[name][0][rows, top] = red.reduced
            halved[name][1][rows, top] = red.reduced_se
    p_on = y1["on_shortlist"][:, 0].mean(axis=1) if "on_shortlist" in y1 else np.full(n_e, np.nan)
    out = []
    for name in (o for o in OUTPUTS if o in y1):
        res = idx[name]
        out.append(pd.DataFrame({
            "entry_id": np.repeat(prep.ids[a:b], d),
            "output": name,
            "input_group": [g for grp in groups for g in grp[1]],
            "input_kind": [g for grp in groups for g in grp[2]],
            "valley_index": [g for grp in groups for g in grp[3]],
            "mean": np.repeat(res.mean, d),
            "variance": np.repeat(res.variance, d),
            "share_first": res.first.reshape(-1), "share_first_se": res.first_se.reshape(-1),
            "share_total": res.total.reshape(-1), "share_total_se": res.total_se.reshape(-1),
            "share_halved": halved[name][0].reshape(-1), "share_halved_se": halved[name][1].reshape(-1),
            "p_on_shortlist": np.repeat(p_on, d),
        }))
    return pd.concat(out, ignore_index=True)


def shortlist_probability(entries: pd.DataFrame, valleys: pd.DataFrame, settings: Mapping,
                          table: keldysh.KeldyshTable, cuts: Mapping[str, ShortlistCut | None],
                          block_cells: int = uncertainty.BLOCK_CELLS) -> pd.Series:
    """``p_on_shortlist`` of each entry on the N base samples of its matrix A, without the rest of the design.

    The same draws and the same value as :func:`attribute` reports for the entry
    (matrix A depends only on the campaign seed and the identifier), at the cost
    of N model runs per entry: what selects the compounds whose membership is in
    doubt. Entries without an uncertain input group get NaN (nothing varies).

    Returns
    -------
    pandas.Series
        Indexed by entry_id (sorted), the fraction of samples on the shortlist.
    """
    ref = settings["refinement"]
    n_base = int(ref["samples"])
    halved = ref["effect"] == "halved" and int(ref["per_compound"]) > 0
    seed = int(settings["uncertainty"]["seed"])
    kinds = [k for k in GROUP_KINDS if k in set(ref["groups"])]
    entries = entries.sort_values("entry_id", kind="stable").reset_index(drop=True)
    out = pd.Series(np.nan, index=pd.Index(entries["entry_id"].astype(str), name="entry_id"), name="p_on_shortlist")
    if not len(entries) or n_base < 2 or not kinds:
        return out
    valleys = valleys[valleys["entry_id"].isin(set(entries["entry_id"]))]
    prep = uncertainty.prepare_inputs(entries, valleys, settings, score_inputs=True, ranking_environment_only=True)
    active = _has_groups(prep, kinds)
    step = max(1, block_cells // n_base)
    for a in range(0, len(prep.ids), step):
        b = min(a + step, len(prep.ids))
        zs = [_design(prep, e, [], n_base, halved, seed).a for e in range(a, b)]
        member = _outputs(prep, a, b, zs, table, block_cells, [cuts[str(e)] for e in prep.ids[a:b]],
                          settings["ranking"])["on_shortlist"]
        out.iloc[a:b] = np.where(active[a:b], member.mean(axis=1), np.nan)
    return out


def refinement_list(frame: pd.DataFrame, effect: str = "halved", per_entry: int = 3, band=None,
                    verdicts=tuple(VERDICTS)) -> pd.DataFrame:
    """The campaign's ranked (compound, verdict, input, expected effect) list from :func:`attribute` rows.

    Parameters
    ----------
    frame : pandas.DataFrame
        Attribution rows of the whole campaign (:data:`COLUMNS`).
    effect : {"halved", "removed"}
        Which expected effect ranks the list.
    per_entry : int, optional
        At most this many inputs per compound and verdict (the largest effects).
    band : pair of float, optional
        Only verdicts whose probability (``p_meets_all``, ``p_on_shortlist``)
        lies in this band are listed (None: every attributed verdict).
    verdicts : sequence of str, optional
        The verdicts of :data:`VERDICTS` to list.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`LIST_COLUMNS`, ranked by ``expected_effect`` (ties by
        entry_id, verdict, input_group); inputs with a non-positive effect are left out.
        A compound whose membership equals its verdict in every sample of its
        design gets one set of rows with verdict ``both``.
    """
    verdict = frame[frame["output"].isin([v for v in VERDICTS if v in set(verdicts)])].copy()
    if band is not None and len(verdict):
        p = np.where(verdict["output"] == "meets_all", verdict["p_meets_all"], verdict["p_on_shortlist"])
        verdict = verdict[borderline(p, band)]
    verdict = _merge_identical_verdicts(verdict)
    if not len(verdict):
        return _typed(None, LIST_COLUMNS)
    share = verdict["share_halved"] if effect == "halved" else verdict["share_first"]
    verdict["expected_effect"] = (share * verdict["variance"]).to_numpy(dtype=float)
    verdict = verdict[np.isfinite(verdict["expected_effect"]) & (verdict["expected_effect"] > 0)]
    verdict = verdict.sort_values(["expected_effect", "entry_id", "output", "input_group"],
                                  ascending=[False, True, True, True], kind="stable")
    verdict = verdict.groupby(["entry_id", "output"], sort=False).head(per_entry)

    crit = frame[frame["output"].isin(_CRITERIA)].assign(
        _w=lambda f: (f["share_first"] * f["variance"]).fillna(0.0))
    crit = crit.sort_values(["_w", "output"], ascending=[False, True], kind="stable")
    best = crit[crit["_w"] > 0].drop_duplicates(["entry_id", "input_group"])
    through = best.set_index(["entry_id", "input_group"])["output"].map(lambda o: OUTPUTS[o][0])
    key = pd.MultiIndex.from_frame(verdict[["entry_id", "input_group"]])
    out = pd.DataFrame({
        "rank": np.arange(1, len(verdict) + 1, dtype=np.int32),
        "entry_id": verdict["entry_id"].to_numpy(dtype=object),
        "input_group": verdict["input_group"].to_numpy(dtype=object),
        "input_kind": verdict["input_kind"].to_numpy(dtype=object),
        "valley_index": verdict["valley_index"].to_numpy(dtype=np.int32),
        "recompute": verdict["input_kind"].map(lambda k: GROUP_KINDS[k][1]).to_numpy(dtype=object),
        "verdict": verdict["output"].to_numpy(dtype=object),
        "p_meets_all": verdict["p_meets_all"].to_numpy(dtype=float),
        "p_on_shortlist": verdict["p_on_shortlist"].to_numpy(dtype=float),
        "share_first": verdict["share_first"].to_numpy(dtype=float),
        "share_total": verdict["share_total"].to_numpy(dtype=float),
        "share_halved": verdict["share_halved"].to_numpy(dtype=float),
        "expected_effect": verdict["expected_effect"].to_numpy(dtype=float),
        "mostly_through": through.reindex(key).fillna("").to_numpy(dtype=object),
    })
    out["advice"] = [plain_words(r) for r in out.itertuples(index=False)]
    return out


def _merge_identical_verdicts(verdict: pd.DataFrame) -> pd.DataFrame:
    """One set of rows, verdict ``both``, for a compound whose membership follows the criteria in
    every sample of its design (identical mean, variance and shares for every input): the
    shortlist then holds exactly its candidates near it, and two identical rows would say one thing twice."""
    cols = ["mean", "variance", "share_first", "share_total", "share_halved"]
    meets = verdict[verdict["output"] == "meets_all"].set_index(["entry_id", "input_group"])[cols]
    on = verdict[verdict["output"] == "on_shortlist"].set_index(["entry_id", "input_group"])[cols]
    if not len(meets) or not len(on):
        return verdict
    a, b = meets.align(on, join="outer")
    same = ((a.to_numpy() == b.to_numpy()) | (np.isnan(a.to_numpy()) & np.isnan(b.to_numpy()))).all(axis=1)
    same = pd.Series(same, index=a.index).groupby(level="entry_id").all()
    both = set(same.index[same])
    if not both:
        return verdict
    in_both = verdict["entry_id"].isin(both)
    verdict = verdict[~(in_both & (verdict["output"] == "on_shortlist"))].copy()
    verdict.loc[verdict["entry_id"].isin(both) & (verdict["output"] == "meets_all"), "output"] = "both"
    return verdict


def _percent(x: float) -> str:
    return "under 1 %" if not np.isfinite(x) or x < 0.005 else f"{100 * x:.0f} %"


def plain_words(row) -> str:
    """One recommendation, e.g. 'Recompute the dielectric tensor of X: it decides 70 % of ...'."""
    kind = getattr(row, "verdict", "meets_all")
    if kind == "both":
        doubt = (f"{row.entry_id} meets every criterion and, with it, whether it makes the shortlist (now "
                 f"{100 * row.p_meets_all:.0f} % and {100 * row.p_on_shortlist:.0f} % likely, the other compounds "
                 f"as ranked)")
    elif kind == "on_shortlist":
        doubt = (f"{row.entry_id} makes the shortlist (now {100 * row.p_on_shortlist:.0f} % likely, the other "
                 f"compounds as ranked)")
    else:
        doubt = f"{row.entry_id} meets every criterion (now {100 * row.p_meets_all:.0f} % likely)"
    text = (f"Recompute the {row.input_group} of {row.entry_id} ({row.recompute}): it decides "
            f"{_percent(row.share_first)} of whether {doubt}")
    if row.mostly_through:
        text += f", mostly through '{row.mostly_through}'"
    if np.isfinite(row.share_halved):
        text += f"; halving its uncertainty is expected to remove {_percent(row.share_halved)} of the doubt"
    return text + "."


#: Header of each refinement-list column in the CSV handed to groups (units in brackets).
DISPLAY: dict[str, str] = {
    "rank": "Rank",
    "entry_id": "Compound",
    "input_group": "Input to recompute",
    "recompute": "Suggested recomputation",
    "verdict": "Verdict in doubt",
    "p_meets_all": "Chance of meeting every criterion now (%)",
    "p_on_shortlist": "Chance of making the shortlist now (%)",
    "share_first": "Share of the verdict's doubt this input decides (%)",
    "share_total": "Share including interactions with other inputs (%)",
    "share_halved": "Expected share removed by halving its uncertainty (%)",
    "expected_effect": "Expected drop of the verdict variance p(1-p) (1)",
    "mostly_through": "Mostly through the criterion",
    "advice": "Advice (model estimate, not a measurement)",
}
_PERCENT = ("p_meets_all", "p_on_shortlist", "share_first", "share_total", "share_halved")


def display_frame(ranked: pd.DataFrame) -> pd.DataFrame:
    """The refinement list with display headers, fractions as percentages (one decimal)."""
    out = ranked[list(DISPLAY)].copy()
    out["verdict"] = out["verdict"].map(lambda v: _VERDICT_WORDS.get(v, v))
    for c in _PERCENT:
        out[c] = (100.0 * out[c].astype(float)).round(1)
    out["expected_effect"] = out["expected_effect"].astype(float).round(4)
    return out.rename(columns=DISPLAY)
