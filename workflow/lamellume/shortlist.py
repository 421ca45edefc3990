"""The shortlist handed to experimental teams, and the settings sheet beside it.

Two tables that a spreadsheet opens cleanly and that read without the page:

* :func:`shortlist_table` -- the first ``ranking.shortlist_size`` compounds of the
  ranked list (candidates first), one row each, under column names that never
  change with the settings (:data:`lamellume.tables.SHORTLIST_COLUMNS`). The layer
  count, the surroundings and their dielectric constants and the temperature the
  values are for are columns of their own; a ``Candidate`` column says yes or
  no and ``Criteria missed`` names, in words, what a non-candidate misses.
* :func:`settings_table` -- one row per setting or stamp of the run that wrote the
  shortlist (temperature, emission window, criteria, score definition, config
  hash, code version, campaign, date), as setting / value / unit / meaning.

Pure: frames in, frames out; :func:`lamellume.io.write_csv` writes both.
"""

from __future__ import annotations

import math
from typing import Mapping

import numpy as np
import pandas as pd

from lamellume import ranking, tables
from lamellume.units import MEV_PER_EV

#: Caution written at the top of the settings sheet (and in the README).
CAUTION = ("Model estimates from first-principles inputs, not measurements; follow your laboratory's own safety "
           "rules and judgement when making and measuring samples.")


def missed_words(settings: Mapping) -> dict[str, str]:
    """Plain words for each failed ranking criterion (key: the ``pass_*`` column)."""
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    lo, hi = sorted(float(v) for v in r["window_nm"])
    return {
        "pass_direct": ("lowest exciton not bright (dark, or unknown: no competing valley given)"
                        if r["require_direct"] else "brightness of the lowest exciton unknown"),
        "pass_margin": (f"dark exciton less than {float(r['min_direct_margin_ev']) * MEV_PER_EV:g} meV above "
                        "the bright one"),
        "pass_binding": " or ".join(
            ([f"fewer than {float(r['min_bound_fraction']) * 100:g} % of pairs bound at "
              f"{float(settings['survival']['pair_density_per_cm2']):.2g} cm^-2 and {t_k:g} K"]
             if float(r.get("min_bound_fraction", 0.0)) > 0 else [])
            + ([f"binding below {float(r['min_binding_over_kt']):g} kT at {t_k:g} K"]
               if float(r.get("min_binding_over_kt", 0.0)) > 0 else [])) or "not bound",
        "pass_window": f"emission not wholly inside {lo:g}-{hi:g} nm",
        "pass_bright_fraction": (f"bright fraction below {float(r.get('min_bright_fraction', 0.0)):g} "
                                 f"at {t_k:g} K"),
    }


#: The brightness criterion's words for a row whose lowest exciton is known (target_brightness).
_BRIGHTNESS_MISSED = {"dark": "lowest exciton dark",
                      "unknown": "brightness of the lowest exciton unknown (no competing valley given)"}


def _missed(top: pd.DataFrame, settings: Mapping) -> np.ndarray:
    words = missed_words(settings)
    out = []
    for row in top.to_dict("records"):
        missed = []
        for key, text in words.items():
            if key in row and not bool(row[key]):
                if key == "pass_direct" and settings["ranking"]["require_direct"]:
                    text = _BRIGHTNESS_MISSED.get(str(row.get("target_brightness")), text)
                missed.append(_with_values(key, text, row, settings))
        out.append("; ".join(missed))
    return np.asarray(out, dtype=object)


def _finite(row: Mapping, name: str) -> float:
    try:
        value = float(row.get(name))
    except (TypeError, ValueError):
        return math.nan
    return value


def _with_values(key: str, text: str, row: Mapping, settings: Mapping) -> str:
    """The words of a missed criterion with the row's own numbers where they say more."""
    r = settings["ranking"]
    if key == "pass_margin":
        m = _finite(row, "target_exciton_margin_ev") * MEV_PER_EV
        need = float(r["min_direct_margin_ev"]) * MEV_PER_EV
        if math.isfinite(m):
            where = f"only {m:.0f} meV above" if m >= 0 else f"{-m:.0f} meV below"
            return f"dark exciton {where} the bright one ({need:g} meV above needed)"
    if key == "pass_window":
        ends = sorted(v for v in (_finite(row, "target_emission_nm"), _finite(row, "target_emission_compensated_nm"))
                      if math.isfinite(v))
        if ends:
            span = f"{ends[0]:.0f} nm" if round(ends[0]) == round(ends[-1]) else f"{ends[0]:.0f}-{ends[-1]:.0f} nm"
            return f"emission {span} {text.removeprefix('emission ')}"
    return text


def _column(top: pd.DataFrame, name: str, scale: float = 1.0, digits: int | None = None) -> np.ndarray:
    """A numeric column of the ranked rows (NaN where the ranked table lacks it), scaled and rounded."""
    if name not in top.columns:
        return np.full(len(top), np.nan)
    values = pd.to_numeric(top[name], errors="coerce").to_numpy(dtype=float) * scale
    return np.round(values, digits) if digits is not None else values


def shortlist_table(ranked: pd.DataFrame, settings: Mapping) -> pd.DataFrame:
    """The shortlist: the first ``shortlist_size`` rows of the ranked table, fixed column names.

    Parameters
    ----------
    ranked : the ranked wide table of :func:`lamellume.ranking.rank` (Monte Carlo
        percentiles and probabilities joined when computed).
    settings : the ranking settings (``ranking``, ``survival``, ``environments``).

    Returns
    -------
    pandas.DataFrame with the columns of :data:`lamellume.tables.SHORTLIST_COLUMNS`,
    in that order, typed as declared there. Percentile and probability columns are
    empty when the Monte Carlo is off (``uncertainty.samples: 0``).
    """
    r = settings["ranking"]
    top = ranked.head(int(r["shortlist_size"])).reset_index(drop=True)
    env = str(r["environment"])
    surroundings = settings["environments"][env]
    n = len(top)
    data = {
        "Rank": _column(top, "rank"),
        "Compound": top["entry_id"].astype(str).to_numpy() if n else np.array([], dtype=object),
        "Formula": top["formula"].astype(str).to_numpy() if n else np.array([], dtype=object),
        "Candidate": np.where(top["meets_all_criteria"].astype(bool).to_numpy(), "yes", "no") if n
        else np.array([], dtype=object),
        "Criteria missed": _missed(top, settings),
        "Layers": np.full(n, int(r["target_layers"])),
        "Surroundings": np.full(n, env, dtype=object),
        "Dielectric constant above": np.full(n, float(surroundings["top"])),
        "Dielectric constant below": np.full(n, float(surroundings["bottom"])),
        "Temperature (K)": np.full(n, float(settings["survival"]["temperature_k"])),
        "Gap character": top["target_gap_character"].astype(str).to_numpy() if n else np.array([], dtype=object),
        "Thinning behaviour": top["thinning_verdict"].astype(str).to_numpy() if n else np.array([], dtype=object),
        "Thinning state": top["thinning_state"].astype(str).to_numpy() if n else np.array([], dtype=object),
        "Direct up to (layers)": _column(top, "direct_through_layers"),
        "Exciton energy (eV)": _column(top, "target_optical_gap_ev", digits=3),
        "Exciton energy 16 % (eV)": _column(top, "target_optical_gap_ev_p16", digits=3),
        "Exciton energy 84 % (eV)": _column(top, "target_optical_gap_ev_p84", digits=3),
        "Emission wavelength (nm)": _column(top, "target_emission_nm", digits=1),
        "Emission wavelength 16 % (nm)": _column(top, "target_emission_nm_p16", digits=1),
        "Emission wavelength 84 % (nm)": _column(top, "target_emission_nm_p84", digits=1),
        "Emission if the gap compensates (nm)": _column(top, "target_emission_compensated_nm", digits=1),
        "Emission at": np.where(np.isfinite(_column(top, "gap_temperature_k")),
                                f"{float(settings['survival']['temperature_k']):g} K (thermal gap shift applied)",
                                "the calculation's temperature (no thermal gap data)").astype(object),
        "Spectral band": top["target_emission_band"].fillna("").astype(str).to_numpy() if n
        else np.array([], dtype=object),
        "Binding energy (meV)": _column(top, "target_binding_ev", MEV_PER_EV, 1),
        "Binding energy 16 % (meV)": _column(top, "target_binding_ev_p16", MEV_PER_EV, 1),
        "Binding energy 84 % (meV)": _column(top, "target_binding_ev_p84", MEV_PER_EV, 1),
        "Binding / kT": _column(top, "target_binding_over_kt", digits=2),
        "Lowest exciton": top["target_brightness"].fillna("").astype(str).to_numpy() if n
        else np.array([], dtype=object),
        "Dark - bright exciton (meV)": _column(top, "target_exciton_margin_ev", MEV_PER_EV, 1),
        "Bright fraction": _column(top, "target_bright_fraction", digits=2),
        "Direct-indirect band-gap margin (meV)": _column(top, "target_direct_margin_ev", MEV_PER_EV, 1),
        "Score (0-1)": _column(top, "score", digits=3),
        "Probability all criteria met": _column(top, "p_meets_all", digits=2),
    }
    frame = pd.DataFrame(data)
    assert list(frame.columns) == list(tables.SHORTLIST_COLUMNS), "shortlist columns out of step with tables.py"
    return frame.astype({c: tables.pandas_dtype(c) for c in frame.columns})


def _number(value) -> str:
    value = float(value)
    return f"{value:g}" if math.isfinite(value) else ""


def settings_table(settings: Mapping, stamps: Mapping[str, str]) -> pd.DataFrame:
    """The settings sheet of a shortlist: setting, value, unit, meaning (one row each).

    Parameters
    ----------
    settings : the whole workflow config.
    stamps : ``config_hash``, ``code_version``, ``git``, ``written_utc``, ``campaign``
        and the counts ``screened`` and ``candidates`` of the run.
    """
    r, s = settings["ranking"], settings["survival"]
    env = str(r["environment"])
    surroundings = settings["environments"][env]
    lo, hi = sorted(float(v) for v in r["window_nm"])
    rows = [
        ("caution", CAUTION, "", "how to read every number of the shortlist"),
        ("campaign", stamps.get("campaign", ""), "", "campaign folder the records were read from"),
        ("written", stamps.get("written_utc", ""), "UTC", "date and time the run finished its tables"),
        ("compounds screened", str(stamps.get("screened", "")), "1",
         "compounds whose records passed every check and were screened (rejected records not counted)"),
        ("candidates", str(stamps.get("candidates", "")), "1", "compounds that meet every criterion"),
        ("shortlist size", str(int(r["shortlist_size"])), "1",
         "rows of the shortlist: the ranked list's first rows, candidates first"),
        ("layers", str(int(r["target_layers"])), "1", "layer count every value of the shortlist is for"),
        ("thickest stack computed", str(int(settings.get("layers", {}).get("max_layers", 0)) or ""), "1",
         "layer counts 1 to this, then bulk, are what the thinning columns scan ('direct at every thickness': "
         "at each of them)"),
        ("surroundings", env, "", "surroundings every value of the shortlist is for"),
        ("dielectric constant above", _number(surroundings["top"]), "1", "relative permittivity above the flake"),
        ("dielectric constant below", _number(surroundings["bottom"]), "1",
         "relative permittivity below the flake"),
        ("temperature", _number(s["temperature_k"]), "K", "operating temperature (binding / kT, bright fraction)"),
        ("emission window shortest", _number(lo), "nm", "criterion: emission at least this wavelength"),
        ("emission window longest", _number(hi), "nm", "criterion: emission at most this wavelength"),
        ("require bright", "yes" if r["require_direct"] else "no", "",
         "criterion: the lowest exciton must be bright ('no': it need only be known to be bright or dark)"),
        ("minimum dark - bright exciton", _number(float(r["min_direct_margin_ev"]) * MEV_PER_EV), "meV",
         "criterion: the lowest dark exciton lies at least this far above the lowest bright one"),
        ("planned pair density", _number(s["pair_density_per_cm2"]), "cm^-2",
         "photo-excited pair density the bound fraction and the bound criterion are evaluated at"),
        ("minimum bound fraction", _number(r.get("min_bound_fraction", 0.0)), "1",
         "criterion: 2D Saha bound fraction at the planned pair density at least this (0: not applied)"),
        ("minimum binding / kT", _number(r.get("min_binding_over_kt", 0.0)), "1",
         "criterion: binding energy at least this many kT at the temperature (0: not applied)"),
        ("minimum bright fraction", _number(r.get("min_bright_fraction", 0.0)), "1",
         "criterion: thermal bright fraction at least this (0: not applied)"),
        ("score definition", ranking.score_definition(settings), "1", "how the Score (0-1) column is computed"),
        ("ordered by", str(r.get("order_by", "score")), "",
         "candidates first, then by score (or by the probability all criteria met)"),
        ("Monte Carlo samples", str(int(settings.get("uncertainty", {}).get("samples", 0))), "1",
         "samples per compound behind the 16 % / 84 % columns and the probability, given the input "
         "uncertainties (0: none)"),
        ("config hash", stamps.get("config_hash", ""), "", "hash of the whole config (also in every table row)"),
        ("code version", stamps.get("code_version", ""), "", "content hash of the library that computed the run"),
        ("git", stamps.get("git", ""), "", "git describe of the workflow checkout ('unknown' outside git)"),
    ]
    frame = pd.DataFrame(rows, columns=list(tables.SHORTLIST_SETTINGS_COLUMNS))
    return frame.astype({c: tables.pandas_dtype(c) for c in frame.columns})
