"""Temperature-dependent survival columns and the emitter ranking.

Everything here is cheap and depends on the operating temperature and the
ranking criteria only, so changing them never re-runs the exciton solves.

Score
-----
The score of a compound is a weighted mean of four parts in [0, 1], evaluated
at the target layer count in the ranking surroundings. Each part orders
candidates by something a lab cares about; none is full for nearly every
candidate (measured on the demo, README "Ranking"):

* bound (weight ``binding``): how far the 2D Saha bound fraction x at the
  planned pair density (``survival.pair_density_per_cm2``) clears the
  criterion ``min_bound_fraction``, in decades of the unbound share:
  ``clip(log10((1 - x_min) / (1 - x)) / BOUND_DECADES, 0, 1)``; full marks when
  the unbound share is 1/100 of what the criterion allows;
* margin: ``clip(margin / MARGIN_FULL_EV, 0, 1)`` with the exciton-level
  margin (lowest dark minus lowest bright exciton energy) in eV (full marks at
  0.2 eV, about 8 kT at 300 K; a compound without a dark competitor scores 0:
  missing data never count as brightness);
* window: the Monte Carlo probability that the emission bracket lies inside
  the target window given the input uncertainties (``p_pass_window``); without
  the Monte Carlo (``uncertainty.samples = 0``) 1 inside, 0 outside;
* brightness (a tie-breaker, small default weight): the radiative-rate proxy
  at the operating temperature (:mod:`lamellume.brightness`, thermal rate x
  bright fraction) on a log scale, ``clip(log10(rate / BRIGHTNESS_FLOOR_PER_S)
  / BRIGHTNESS_DECADES, 0, 1)``; a decade of radiative rate is a decade of
  quantum yield when non-radiative decay dominates.

Candidates (all criteria met) rank first by score, then everything else by
score; ties are broken by identifier, so the order is fully reproducible.
"""

from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from lamellume import brightness, survival, units

#: Exciton-level margin (eV) that earns the full margin part (about 8 kT at 300 K).
MARGIN_FULL_EV = 0.2
#: Decades of the unbound share below the criterion's that earn the full bound part.
BOUND_DECADES = 2.0
#: Brightness proxy (1/s) that earns 0 of the brightness part (10 ns radiative lifetime).
BRIGHTNESS_FLOOR_PER_S = 1.0e8
#: Decades above the floor that earn the full brightness part (full at 0.1 ns).
BRIGHTNESS_DECADES = 2.0


def score_definition(settings: Mapping) -> str:
    """The score of :func:`rank` in one line of plain words, with the run's weights and thresholds."""
    r = settings["ranking"]
    w = r["weights"]
    lo, hi = sorted(float(x) for x in r["window_nm"])
    return (f"weighted mean ({float(w.get('binding', 0)):g} bound, {float(w.get('margin', 0)):g} margin, "
            f"{float(w.get('window', 0)):g} window, {float(w.get('brightness', 0)):g} brightness) of four parts in "
            f"[0, 1]: bound = log10((1 - {float(r.get('min_bound_fraction', 0)):g}) / (1 - bound fraction at the "
            f"planned pair density)) / {BOUND_DECADES:g} capped at 1; margin = (dark - bright exciton) / "
            f"{MARGIN_FULL_EV * units.MEV_PER_EV:g} meV capped at 1 (0 without a dark competitor); window = "
            f"Monte Carlo probability that the emission lies inside {lo:g}-{hi:g} nm given the input uncertainties "
            f"(1 inside, 0 outside without it); brightness = log10(radiative-rate proxy / "
            f"{BRIGHTNESS_FLOOR_PER_S:.0e} s^-1) / {BRIGHTNESS_DECADES:g} capped at 1 (a tie-breaker)")


#: Every long-table column that follows the operating temperature: written by
#: :func:`add_survival` only, replaced when the temperature changes.
TEMPERATURE_COLUMNS = survival.SURVIVAL_COLUMNS + ("bright_fraction", "radiative_rate_thermal_per_s",
                                                   "brightness_proxy_per_s")


def add_survival(long: pd.DataFrame, wide: pd.DataFrame, settings: Mapping) -> pd.DataFrame:
    """Add binding/kT, the Saha bound fractions (2D layers, 3D bulk), survival and Wannier flags to the long table.

    The one place these columns are computed (in the shard job, on fresh and
    cached rows alike); columns of an earlier temperature are replaced.
    """
    from lamellume import excitons  # scipy.special: the shard job's, not rank_candidates' (it never calls this)

    lattice = long["entry_id"].map(wide.set_index("entry_id")["lattice_angstrom"]).to_numpy(dtype=float)
    out = long.drop(columns=[c for c in TEMPERATURE_COLUMNS if c in long.columns])
    for name, values in survival.survival_columns(long["binding_ev"], long["mu_inplane_me"], long["radius_angstrom"],
                                                  lattice, settings, long["layers"].to_numpy()).items():
        out[name] = values
    out["bright_fraction"] = excitons.thermal_bright_fraction(
        long["bright_exciton_ev"].to_numpy(dtype=float), long["dark_exciton_ev"].to_numpy(dtype=float),
        long["bright_weight"].to_numpy(dtype=float), long["dark_weight"].to_numpy(dtype=float),
        float(settings["survival"]["temperature_k"]))
    out["radiative_rate_thermal_per_s"], out["brightness_proxy_per_s"] = brightness.emitted_rate_per_s(
        long["radiative_rate_0_per_s"].to_numpy(dtype=float), long["bright_exciton_ev"].to_numpy(dtype=float),
        long["bright_mass_me"].to_numpy(dtype=float), float(settings["survival"]["temperature_k"]),
        out["bright_fraction"].to_numpy(dtype=float), np.sqrt(long["kappa"].to_numpy(dtype=float)))
    return out


def criteria(brightness, exciton_margin_ev, binding_over_kt, emission_nm, bright_fraction,
             ranking: Mapping, emission_compensated_nm=None, bound_fraction=None) -> dict[str, np.ndarray]:
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
        E_b / kT (NaN fails when ``min_binding_over_kt`` > 0).
    emission_nm : array_like
        Emission wavelength, nm (NaN fails).
    bright_fraction : array_like
        Thermal bright fraction (NaN fails when ``min_bright_fraction`` > 0).
    emission_compensated_nm : array_like, optional
        The other end of the emission bracket (full gap compensation); when
        given the window criterion needs both ends inside the window.
    bound_fraction : array_like, optional
        2D Saha bound fraction at the planned pair density (NaN fails when
        ``min_bound_fraction`` > 0; None: that part of the criterion is not applied).
    ranking : mapping
        The ``ranking`` config section (require_direct, min_direct_margin_ev,
        min_binding_over_kt, min_bound_fraction, window_nm).

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
    need_kt = float(ranking.get("min_binding_over_kt", 0.0))
    need_bound = float(ranking.get("min_bound_fraction", 0.0))
    bound_ok = np.ones(verdict.shape, dtype=bool)
    if bound_fraction is not None and need_bound > 0:
        bound_ok = np.nan_to_num(np.asarray(bound_fraction, dtype=float), nan=-np.inf) >= need_bound
    lam = np.asarray(emission_nm, dtype=float)
    need = float(ranking.get("min_bright_fraction", 0.0))
    frac = np.nan_to_num(np.asarray(bright_fraction, dtype=float), nan=-np.inf)
    out = {
        "pass_direct": (verdict == "bright") if ranking["require_direct"] else known,
        "pass_margin": margin >= float(ranking["min_direct_margin_ev"]),
        "pass_binding": bound_ok & ((e_kt >= need_kt) if need_kt > 0 else True),
        "pass_window": (lam >= lo) & (lam <= hi) & (
            True if emission_compensated_nm is None
            else (np.asarray(emission_compensated_nm, dtype=float) >= lo)
            & (np.asarray(emission_compensated_nm, dtype=float) <= hi)),
        "pass_bright_fraction": frac >= need if need > 0 else np.ones(verdict.shape, dtype=bool),
    }
    out["meets_all"] = (out["pass_direct"] & out["pass_margin"] & out["pass_binding"] & out["pass_window"]
                        & out["pass_bright_fraction"])
    return out


#: Score parts and their weight keys (``ranking.weights``).
SCORE_WEIGHTS = {"binding": "binding", "margin": "margin", "window": "window", "brightness": "brightness"}


def score_parts(bound_fraction, exciton_margin_ev, pass_window, brightness_per_s, ranking: Mapping,
                p_window=None) -> dict[str, np.ndarray]:
    """The four score parts in [0, 1] (see the module docstring); NaN inputs score 0.

    Parameters
    ----------
    bound_fraction : array_like
        2D Saha bound fraction at the planned pair density.
    exciton_margin_ev : array_like
        Lowest dark minus lowest bright exciton energy, eV.
    pass_window : array_like of bool
        The window criterion (used where ``p_window`` is missing).
    brightness_per_s : array_like
        Brightness proxy (thermal radiative rate x bright fraction), 1/s.
    ranking : mapping
        The ``ranking`` config section (``min_bound_fraction``).
    p_window : array_like, optional
        Monte Carlo probability of the window criterion (NaN or None: not computed).

    Returns
    -------
    dict of numpy.ndarray
        ``binding`` (bound part), ``margin``, ``window``, ``brightness``.

    References
    ----------
    Common practice (scoring choices, documented in README "Ranking").
    """
    x = np.asarray(bound_fraction, dtype=float)
    x_min = min(float(ranking.get("min_bound_fraction", 0.0)), 1.0 - 1e-12)
    with np.errstate(invalid="ignore", divide="ignore"):
        s_bound = np.log10((1.0 - x_min) / np.maximum(1.0 - x, 1e-300)) / BOUND_DECADES
        s_margin = np.asarray(exciton_margin_ev, dtype=float) / MARGIN_FULL_EV
        s_bright = np.log10(np.asarray(brightness_per_s, dtype=float) / BRIGHTNESS_FLOOR_PER_S) / BRIGHTNESS_DECADES
    window = np.asarray(pass_window, dtype=bool).astype(float)
    if p_window is not None:
        p = np.asarray(p_window, dtype=float)
        window = np.where(np.isfinite(p), p, window)

    def unit(v):
        return np.clip(np.nan_to_num(v, nan=0.0, posinf=0.0, neginf=0.0), 0.0, 1.0)
    return {"binding": unit(s_bound), "margin": unit(s_margin), "window": unit(window),
            "brightness": unit(s_bright)}


def weighted_score(parts: Mapping[str, np.ndarray], weights: Mapping) -> np.ndarray:
    """Weighted mean of the score parts (weights of :data:`SCORE_WEIGHTS`; a missing weight is 0)."""
    w = {k: float(weights.get(key, 0.0)) for k, key in SCORE_WEIGHTS.items()}
    total = sum(w.values()) or 1.0
    return sum(w[k] * np.asarray(parts[k], dtype=float) for k in w) / total


def ranks_above(meets_all, score, entry_id: str, other_meets_all: bool, other_score: float,
                other_entry_id: str) -> np.ndarray:
    """Whether the key (meets_all, score, entry_id) comes before another in the order of :func:`rank`.

    The order of ``ranking.order_by: score``: candidates (every criterion met)
    first, then the higher score, then the identifier in ascending order.
    Vectorised over ``meets_all`` and ``score`` (one compound's samples); the
    other key is one compound's.

    References
    ----------
    Common practice (a lexicographic order; the one :func:`rank` sorts by).
    """
    m = np.asarray(meets_all, dtype=bool)
    s = np.asarray(score, dtype=float)
    om, osc = bool(other_meets_all), float(other_score)
    return (m & (not om)) | ((m == om) & ((s > osc) | ((s == osc) & (str(entry_id) < str(other_entry_id)))))


#: Long-table columns :func:`rank` copies to the wide table as ``target_<name>`` (the row at the
#: target layer count and environment); with the keys below, every long column it reads.
TARGET_COLUMNS = ("gap_character", "optical_gap_ev", "emission_nm", "emission_band", "binding_ev",
                  "binding_over_kt", "direct_margin_ev", "bound_fraction", "wannier_ok", "radius_angstrom",
                  "brightness", "bright_exciton_ev", "dark_exciton_ev", "exciton_margin_ev", "bright_pair",
                  "dark_pair", "bright_fraction", "binding_beyond_validity", "spin_given",
                  "optical_gap_compensated_ev", "emission_compensated_nm", "radiative_rate_0_per_s",
                  "radiative_rate_thermal_per_s", "brightness_proxy_per_s", "mott_density_per_cm2")
#: The long-table columns that pick the ranked row of each compound.
TARGET_KEYS = ("entry_id", "layers", "environment")


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
    for name in TARGET_COLUMNS:
        out[f"target_{name}"] = at[name].set_axis(out.index)
    e_kt = col("binding_over_kt")
    margin = col("exciton_margin_ev")
    lam = col("emission_nm")
    bound = col("bound_fraction")
    passed = criteria(at["brightness"].to_numpy(dtype=object), margin, e_kt, lam, col("bright_fraction"), r,
                      col("emission_compensated_nm"), bound)
    for key in ("pass_direct", "pass_margin", "pass_binding", "pass_window", "pass_bright_fraction"):
        out[key] = passed[key]
    out["meets_all_criteria"] = passed["meets_all"]

    p_window = None
    if probabilities is not None and "p_pass_window" in probabilities.columns:
        p_window = out["entry_id"].map(probabilities.set_index("entry_id")["p_pass_window"]).to_numpy(dtype=float)
    parts = score_parts(bound, margin, passed["pass_window"], col("brightness_proxy_per_s"), r, p_window)
    for key, values in parts.items():
        out[f"score_{key}"] = values
    out["score"] = weighted_score(parts, r["weights"])

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
