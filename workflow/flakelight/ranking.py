"""Temperature-dependent survival columns and the emitter ranking.

Everything here is cheap and depends on the operating temperature and the
ranking criteria only, so changing them never re-runs the exciton solves.

Score
-----
The score of a compound is a weighted mean of three components in [0, 1],
evaluated at the target layer count in the ranking environment:

* binding: ``clip((E_b/kT) / (2 x min_binding_over_kt), 0, 1)`` -- full marks
  at twice the required binding;
* margin: ``clip(margin / MARGIN_FULL_EV, 0, 1)`` with the direct-indirect
  margin in eV (full marks at 0.2 eV; no indirect pair counts as full);
* window: inside the target window ``1 - |lambda - centre| / width`` (1 at the
  centre, 0.5 at the edges), 0 outside.

Candidates (all criteria met) rank first by score, then everything else by
score; ties are broken by identifier, so the order is fully reproducible.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from flakelight import survival

#: Direct-indirect margin (eV) that earns the full margin component.
MARGIN_FULL_EV = 0.2


def add_survival(long: pd.DataFrame, wide: pd.DataFrame, settings: Mapping) -> pd.DataFrame:
    """Add binding/kT, the Saha bound fractions (2D layers, 3D bulk), survival and Wannier flags to the long table.

    The one place these columns are computed (in the shard job, on fresh and
    cached rows alike); columns of an earlier temperature are replaced.
    """
    lattice = long["entry_id"].map(wide.set_index("entry_id")["lattice_angstrom"]).to_numpy(dtype=float)
    out = long.drop(columns=[c for c in survival.SURVIVAL_COLUMNS if c in long.columns])
    for name, values in survival.survival_columns(long["binding_ev"], long["mu_inplane_me"], long["radius_angstrom"],
                                                  lattice, settings, long["layers"].to_numpy()).items():
        out[name] = values
    return out


def criteria(is_direct, complete, direct_margin_ev, binding_over_kt, emission_nm,
             ranking: Mapping) -> dict[str, np.ndarray]:
    """The four ranking criteria, vectorized: the one definition used by :func:`rank` and the Monte Carlo.

    Parameters
    ----------
    is_direct, complete : array_like of bool
        Direct character and "both band edges present" at the target layer
        count (:class:`flakelight.layers.GapCharacter` fields).
    direct_margin_ev : array_like
        Indirect minus direct gap, eV (NaN fails).
    binding_over_kt : array_like
        E_b / kT (NaN fails).
    emission_nm : array_like
        Emission wavelength, nm (NaN fails).
    ranking : mapping
        The ``ranking`` config section (require_direct, min_direct_margin_ev,
        min_binding_over_kt, window_nm).

    Returns
    -------
    dict of numpy.ndarray of bool
        ``pass_direct``, ``pass_margin``, ``pass_binding``, ``pass_window``,
        ``meets_all``.

    References
    ----------
    Common practice (thresholds are the configured criteria).
    """
    comp = np.asarray(complete, dtype=bool)
    direct = np.asarray(is_direct, dtype=bool) & comp
    lo, hi = sorted(float(x) for x in ranking["window_nm"])
    margin = np.nan_to_num(np.asarray(direct_margin_ev, dtype=float), nan=-np.inf)
    e_kt = np.nan_to_num(np.asarray(binding_over_kt, dtype=float), nan=-np.inf)
    lam = np.asarray(emission_nm, dtype=float)
    out = {
        "pass_direct": direct if ranking["require_direct"] else comp,
        "pass_margin": margin >= float(ranking["min_direct_margin_ev"]),
        "pass_binding": e_kt >= float(ranking["min_binding_over_kt"]),
        "pass_window": (lam >= lo) & (lam <= hi),
    }
    out["meets_all"] = out["pass_direct"] & out["pass_margin"] & out["pass_binding"] & out["pass_window"]
    return out


def rank(long: pd.DataFrame, wide: pd.DataFrame, settings: Mapping,
         probabilities: pd.DataFrame | None = None) -> pd.DataFrame:
    """Wide table with ranking criteria, score components, score and rank.

    ``long`` must carry the survival columns of :func:`add_survival`.
    ``probabilities`` (optional) is the uncertainty table keyed by entry_id; its
    columns are joined and, with ``order_by: probability``, drive the order.
    """
    r = settings["ranking"]
    env, target = r["environment"], int(r["target_layers"])
    sel = long[(long["layers"] == target) & (long["environment"] == env)].set_index("entry_id")
    out = wide.copy()
    at = sel.reindex(out["entry_id"])

    def col(name, dtype=float):
        return at[name].to_numpy(dtype=dtype)

    out["rank_environment"] = env
    out["rank_layers"] = target
    for name in ("gap_character", "optical_gap_ev", "emission_nm", "emission_band", "binding_ev",
                 "binding_over_kt", "direct_margin_ev", "bound_fraction", "wannier_ok", "radius_angstrom"):
        out[f"target_{name}"] = at[name].set_axis(out.index)
    e_kt = col("binding_over_kt")
    margin = col("direct_margin_ev")
    lam = col("emission_nm")
    lo, hi = sorted(float(x) for x in r["window_nm"])
    character = at["gap_character"].to_numpy(dtype=object)
    passed = criteria(character == "direct", np.isin(character, ["direct", "indirect"]), margin, e_kt, lam, r)
    for key in ("pass_direct", "pass_margin", "pass_binding", "pass_window"):
        out[key] = passed[key]
    out["meets_all_criteria"] = passed["meets_all"]

    with np.errstate(invalid="ignore", divide="ignore"):
        need = max(float(r["min_binding_over_kt"]), 1e-9)
        s_bind = np.clip(np.nan_to_num(e_kt / (2.0 * need), nan=0.0), 0.0, 1.0)
        s_margin = np.clip(np.nan_to_num(margin / MARGIN_FULL_EV, nan=0.0, posinf=1.0, neginf=0.0), 0.0, 1.0)
        centre, width = 0.5 * (lo + hi), max(hi - lo, 1e-9)
        s_window = np.where((lam >= lo) & (lam <= hi), 1.0 - np.abs(lam - centre) / width, 0.0)
    w = r["weights"]
    wb, wm, ww = float(w["binding"]), float(w["margin"]), float(w["window"])
    total = wb + wm + ww or 1.0
    out["score_binding"] = s_bind
    out["score_margin"] = s_margin
    out["score_window"] = s_window
    out["score"] = (wb * s_bind + wm * s_margin + ww * s_window) / total

    if probabilities is not None and "entry_id" in probabilities.columns:
        extra = [c for c in probabilities.columns if c == "entry_id" or c not in out.columns]
        out = out.merge(probabilities[extra], on="entry_id", how="left")
    by_probability = r.get("order_by", "score") == "probability" and "p_meets_all" in out.columns
    keys = ["meets_all_criteria", "p_meets_all", "score"] if by_probability else ["meets_all_criteria", "score"]
    frame = out.assign(_id=out["entry_id"])
    frame = frame.sort_values(keys + ["_id"], ascending=[False] * len(keys) + [True], kind="stable",
                              na_position="last")
    frame["rank"] = np.arange(1, len(frame) + 1, dtype="int32")
    return frame.drop(columns="_id").reset_index(drop=True)


def shortlist(ranked: pd.DataFrame, settings: Mapping) -> pd.DataFrame:
    """The shortlist for experimental teams: candidates only, plain headers with units."""
    r = settings["ranking"]
    top = ranked[ranked["meets_all_criteria"]].head(int(r["shortlist_size"]))
    n = int(r["target_layers"])
    table = pd.DataFrame({
        "Rank": top["rank"].to_numpy(),
        "Compound": top["entry_id"].to_numpy(),
        "Formula": top["formula"].to_numpy(),
        f"Gap character at {n} layer(s)": top["target_gap_character"].to_numpy(),
        "Thinning behaviour": top["thinning_verdict"].to_numpy(),
        f"Exciton energy in {r['environment']} (eV)": top["target_optical_gap_ev"].round(3).to_numpy(),
        "Emission wavelength (nm)": top["target_emission_nm"].round(1).to_numpy(),
        "Spectral band": top["target_emission_band"].to_numpy(),
        "Binding energy (meV)": (1000 * top["target_binding_ev"]).round(1).to_numpy(),
        f"Binding / kT at {settings['survival']['temperature_k']:g} K": top["target_binding_over_kt"].round(2).to_numpy(),
        "Direct-indirect margin (meV)": (1000 * top["target_direct_margin_ev"]).round(1).to_numpy(),
        "Score (0-1)": top["score"].round(3).to_numpy(),
    })
    if "p_meets_all" in top.columns:
        table["Probability all criteria met"] = top["p_meets_all"].round(2).to_numpy()
    table["Status"] = "model estimate, not a measurement"
    return table
