"""Temperature-dependent survival columns and the emitter ranking.

Everything here is cheap and depends on the operating temperature and the
ranking criteria only, so changing them never re-runs the exciton solves.

Score
-----
The score of a compound is a weighted mean of three components in [0, 1],
evaluated at the target layer count in the ranking environment:

* binding: ``clip((E_b/kT) / (2 x min_binding_over_kt), 0, 1)`` -- full marks
  at twice the required binding;
* margin: ``clip(margin / MARGIN_FULL_EV, 0, 1)`` with the exciton-level
  margin (lowest dark minus lowest bright exciton energy) in eV (full marks at
  0.2 eV; a compound without a dark competitor scores 0: missing data never
  count as brightness);
* window: inside the target window ``1 - |lambda - centre| / width`` (1 at the
  centre, 0.5 at the edges), 0 outside.

Candidates (all criteria met) rank first by score, then everything else by
score; ties are broken by identifier, so the order is fully reproducible.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from lamellume import excitons, survival

#: Direct-indirect margin (eV) that earns the full margin component.
MARGIN_FULL_EV = 0.2

#: Every long-table column that follows the operating temperature: written by
#: :func:`add_survival` only, replaced when the temperature changes.
TEMPERATURE_COLUMNS = survival.SURVIVAL_COLUMNS + ("bright_fraction",)


def add_survival(long: pd.DataFrame, wide: pd.DataFrame, settings: Mapping) -> pd.DataFrame:
    """Add binding/kT, the Saha bound fractions (2D layers, 3D bulk), survival and Wannier flags to the long table.

    The one place these columns are computed (in the shard job, on fresh and
    cached rows alike); columns of an earlier temperature are replaced.
    """
    lattice = long["entry_id"].map(wide.set_index("entry_id")["lattice_angstrom"]).to_numpy(dtype=float)
    out = long.drop(columns=[c for c in TEMPERATURE_COLUMNS if c in long.columns])
    for name, values in survival.survival_columns(long["binding_ev"], long["mu_inplane_me"], long["radius_angstrom"],
                                                  lattice, settings, long["layers"].to_numpy()).items():
        out[name] = values
    out["bright_fraction"] = excitons.thermal_bright_fraction(
        long["bright_exciton_ev"].to_numpy(dtype=float), long["dark_exciton_ev"].to_numpy(dtype=float),
        long["bright_weight"].to_numpy(dtype=float), long["dark_weight"].to_numpy(dtype=float),
        float(settings["survival"]["temperature_k"]))
    return out


def criteria(brightness, exciton_margin_ev, binding_over_kt, emission_nm, bright_fraction,
             ranking: Mapping, emission_compensated_nm=None) -> dict[str, np.ndarray]:
    """The four ranking criteria, vectorized: the one definition used by :func:`rank` and the Monte Carlo.

    Parameters
    ----------
    brightness : array_like of str
        Exciton-level verdict at the target layer count: "bright", "dark" or
        "unknown" (:func:`lamellume.excitons.brightness_verdict`); only
        "bright" passes when ``require_direct``; "unknown" never passes.
    exciton_margin_ev : array_like
        Lowest dark minus lowest bright exciton energy, eV (NaN fails).
    binding_over_kt : array_like
        E_b / kT (NaN fails).
    emission_nm : array_like
        Emission wavelength, nm (NaN fails).
    bright_fraction : array_like
        Thermal bright fraction (NaN fails when ``min_bright_fraction`` > 0).
    emission_compensated_nm : array_like, optional
        The other end of the emission bracket (full gap compensation); when
        given the window criterion needs both ends inside the window.
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
    verdict = np.asarray(brightness, dtype=object)
    known = np.isin(verdict, ["bright", "dark"])
    lo, hi = sorted(float(x) for x in ranking["window_nm"])
    margin = np.nan_to_num(np.asarray(exciton_margin_ev, dtype=float), nan=-np.inf)
    e_kt = np.nan_to_num(np.asarray(binding_over_kt, dtype=float), nan=-np.inf)
    lam = np.asarray(emission_nm, dtype=float)
    need = float(ranking.get("min_bright_fraction", 0.0))
    frac = np.nan_to_num(np.asarray(bright_fraction, dtype=float), nan=-np.inf)
    out = {
        "pass_direct": (verdict == "bright") if ranking["require_direct"] else known,
        "pass_margin": margin >= float(ranking["min_direct_margin_ev"]),
        "pass_binding": e_kt >= float(ranking["min_binding_over_kt"]),
        "pass_window": (lam >= lo) & (lam <= hi) & (
            True if emission_compensated_nm is None
            else (np.asarray(emission_compensated_nm, dtype=float) >= lo)
            & (np.asarray(emission_compensated_nm, dtype=float) <= hi)),
        "pass_bright_fraction": frac >= need if need > 0 else np.ones(verdict.shape, dtype=bool),
    }
    out["meets_all"] = (out["pass_direct"] & out["pass_margin"] & out["pass_binding"] & out["pass_window"]
                        & out["pass_bright_fraction"])
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
                 "binding_over_kt", "direct_margin_ev", "bound_fraction", "wannier_ok", "radius_angstrom",
                 "brightness", "bright_exciton_ev", "dark_exciton_ev", "exciton_margin_ev", "bright_pair",
                 "dark_pair", "bright_fraction", "binding_beyond_validity", "spin_given",
                 "optical_gap_compensated_ev", "emission_compensated_nm"):
        out[f"target_{name}"] = at[name].set_axis(out.index)
    e_kt = col("binding_over_kt")
    margin = col("exciton_margin_ev")
    lam = col("emission_nm")
    lo, hi = sorted(float(x) for x in r["window_nm"])
    passed = criteria(at["brightness"].to_numpy(dtype=object), margin, e_kt, lam, col("bright_fraction"), r,
                      col("emission_compensated_nm"))
    for key in ("pass_direct", "pass_margin", "pass_binding", "pass_window", "pass_bright_fraction"):
        out[key] = passed[key]
    out["meets_all_criteria"] = passed["meets_all"]

    with np.errstate(invalid="ignore", divide="ignore"):
        need = max(float(r["min_binding_over_kt"]), 1e-9)
        s_bind = np.clip(np.nan_to_num(e_kt / (2.0 * need), nan=0.0), 0.0, 1.0)
        s_margin = np.clip(np.nan_to_num(margin / MARGIN_FULL_EV, nan=0.0, posinf=0.0, neginf=0.0), 0.0, 1.0)
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
        "Emission if the gap compensates (nm)": top["target_emission_compensated_nm"].round(1).to_numpy(),
        "Spectral band": top["target_emission_band"].to_numpy(),
        "Binding energy (meV)": (1000 * top["target_binding_ev"]).round(1).to_numpy(),
        f"Binding / kT at {settings['survival']['temperature_k']:g} K": top["target_binding_over_kt"].round(2).to_numpy(),
        "Lowest exciton": top["target_brightness"].to_numpy(),
        "Dark - bright exciton (meV)": (1000 * top["target_exciton_margin_ev"]).round(1).to_numpy(),
        f"Bright fraction at {settings['survival']['temperature_k']:g} K":
            top["target_bright_fraction"].round(2).to_numpy(),
        "Direct-indirect band-gap margin (meV)": (1000 * top["target_direct_margin_ev"]).round(1).to_numpy(),
        "Score (0-1)": top["score"].round(3).to_numpy(),
        "Emission at": np.where(np.isfinite(top["gap_temperature_k"].to_numpy(dtype=float)) if "gap_temperature_k"
                                in top.columns else np.zeros(len(top), dtype=bool),
                                f"{settings['survival']['temperature_k']:g} K (thermal gap shift applied)",
                                "the calculation's temperature (no thermal gap data)"),
    })
    if "p_meets_all" in top.columns:
        table["Probability all criteria met"] = top["p_meets_all"].round(2).to_numpy()
    table["Status"] = "model estimate, not a measurement"
    return table
