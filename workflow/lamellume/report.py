"""Run report for experimental teams: the change report and the HTML summary.

Three parts, kept apart on purpose:

* :func:`compare_runs` -- pure: the ranked snapshot of the previous run and of
  this one in, one row per changed compound out (the change report);
* :func:`build_html` -- tables and dicts in, one self-contained HTML page out.
  This module only prepares the page's data (a *view model* of plain dicts,
  strings and numbers; the figures' geometry comes from :mod:`lamellume.figures`);
  the markup is the Jinja2 template ``templates/summary.html.j2`` and the style
  sheet and script are ``templates/summary.css`` and ``templates/summary.js``,
  inlined at render time, so the page still opens offline and from an e-mail
  attachment;
* :func:`write_summary` -- orchestration: reads the tables through
  :mod:`lamellume.io`, writes the page and the change table, and only then
  rotates the history snapshot, so a failed report never moves the baseline.

Safety of the page
------------------
The template is rendered with autoescaping: every text that comes from input data
(identifiers, formulas, provenance, warnings, reject messages, file names, config
strings) is escaped wherever it lands, in text or in attributes; nothing here
builds markup. Data handed to the script is JSON inside
``<script type="application/json">`` with ``<``, ``>``, ``&``, U+2028 and U+2029
escaped, and the script only ever reads it with ``JSON.parse`` and writes it with
``textContent``. A Content-Security-Policy allows exactly the page's own script
(by its SHA-256, computed from the inlined file at render time), so even a slip in
the escaping could not run injected code.
"""

from __future__ import annotations

import base64
import functools
import hashlib
import json
import logging
import math
from pathlib import Path
from typing import Any, Mapping, Sequence

import jinja2
import numpy as np
import pandas as pd
from markupsafe import Markup

from lamellume import figures, io, tables, units
from lamellume.figures import MEV_PER_EV, environment_label

log = logging.getLogger("lamellume")

#: Files of the page read at render time (paths inside the library folder). Rules that
#: write the page declare them as code inputs, so editing one re-runs the page; a test
#: checks that the list matches the templates folder.
DATA_FILES = ("templates/summary.html.j2", "templates/figure.html.j2", "templates/summary.css",
              "templates/summary.js")

#: Columns of the ranked snapshot kept between runs (results/history).
SNAPSHOT_COLUMNS = ("entry_id", "input_hash", "rank", "meets_all_criteria", "score", "target_optical_gap_ev")

#: Kinds of change, most important first (a compound gets the first that applies).
CHANGE_KINDS = ("added", "removed", "became candidate", "dropped from candidates", "input revised", "rank moved")

#: Columns and dtypes of the change table (results/tables/changes.parquet).
CHANGE_DTYPES = {
    "entry_id": "string",
    "change": "string",
    "detail": "string",
    "old_rank": "Int32",
    "new_rank": "Int32",
    "rank_change": "Int32",
    "old_score": "float64",
    "new_score": "float64",
    "was_candidate": "boolean",
    "is_candidate": "boolean",
    "input_revised": "boolean",
    "old_input_hash": "string",
    "new_input_hash": "string",
}

CHANGE_DESCRIPTIONS = {
    "change": "most important change of the compound since the previous run: " + ", ".join(CHANGE_KINDS),
    "detail": "every change of the compound in plain words",
    "rank_change": "old rank - new rank: > 0 moved up the list",
    "input_revised": "the record or its CIF changed (input_hash differs)",
}

LAST_SNAPSHOT = "last_ranked.parquet"
PREVIOUS_SNAPSHOT = "previous_ranked.parquet"

#: Cautions printed near the top and in full at the end of every summary.
CAUTIONS = (
    "Every number on this page is a model estimate computed from first-principles inputs. "
    "None of it is a measurement.",
    "Follow your local laboratory safety rules when preparing samples, handling chemicals and "
    "using lasers. This summary is not a safety assessment; defer to licensed safety practice "
    "and your safety officer.",
)

#: What the model leaves out, stated beside every result (issue 18).
MODEL_LIMITS = (
    "Not in the model: strain (it shifts band edges and can reorder valleys), charged excitons (trions) in doped "
    "or gated samples, defect- and substrate-bound states, and spin or parity selection rules the record does not "
    "give. Each can move or dim the emission.",
    "The brightness proxy is a radiative rate of an ideal flake (a model estimate); real yields are usually set by "
    "non-radiative decay, which the model does not include.",
    "Probabilities and 16\u201384 % ranges are given the input uncertainties and the binding models' stated error; "
    "they are not the chance that a sample will emit. Thresholds (bound fraction, margin, window) are configured "
    "choices stated above, not laws.",
)

DASH = "\u2014"

#: The compound table lists the best-ranked compounds up to this many rows, so a screen of
#: tens of thousands still gives a page that opens in seconds (plots and counts use all).
MAX_TABLE_ROWS = 3000


# ---------------------------------------------------------------------------
# Change report
# ---------------------------------------------------------------------------

def empty_changes() -> pd.DataFrame:
    """The change table with no rows and its final column types."""
    return pd.DataFrame({name: pd.Series(dtype=dtype) for name, dtype in CHANGE_DTYPES.items()})


def snapshot(ranked: pd.DataFrame, run_utc: str = "", config_hash: str = "") -> pd.DataFrame:
    """The part of the ranked table the next run compares with (one row per compound)."""
    frame = pd.DataFrame({c: ranked[c].to_numpy() if c in ranked.columns else np.full(len(ranked), np.nan)
                          for c in SNAPSHOT_COLUMNS})
    frame["entry_id"] = frame["entry_id"].astype("string")
    frame["input_hash"] = frame["input_hash"].astype("string")
    frame["rank"] = pd.array(frame["rank"], dtype="Int32")
    frame["meets_all_criteria"] = frame["meets_all_criteria"].astype(bool)
    frame["score"] = frame["score"].astype(float)
    frame["target_optical_gap_ev"] = frame["target_optical_gap_ev"].astype(float)
    frame["run_utc"] = pd.array([run_utc] * len(frame), dtype="string")
    frame["config_hash"] = pd.array([config_hash] * len(frame), dtype="string")
    return frame


def _same_ranking(a: pd.DataFrame, b: pd.DataFrame) -> bool:
    """True when two snapshots hold the same compounds, inputs, ranks and candidates."""
    cols = ["entry_id", "input_hash", "rank", "meets_all_criteria"]
    if len(a) != len(b):
        return False
    left = a[cols].sort_values("entry_id").reset_index(drop=True).astype(str)
    right = b[cols].sort_values("entry_id").reset_index(drop=True).astype(str)
    return bool(left.equals(right))


def _fmt_score(x: float) -> str:
    return "n/a" if x is None or not np.isfinite(x) else f"{x:.3f}"


def revised_sources(old: str, new: str) -> list[str]:
    """Source files (of an imported record) whose hash differs between two ``source_hashes`` texts
    ("path=sha256 path=sha256 ..."), plus files added or removed; empty when either side has none."""
    if not old or not new:
        return []
    a = dict(item.split("=", 1) for item in old.split())
    b = dict(item.split("=", 1) for item in new.split())
    return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))


def compare_runs(previous: pd.DataFrame | None, current: pd.DataFrame) -> pd.DataFrame:
    """Compare the ranked snapshot of the previous run with this run's.

    Parameters
    ----------
    previous : snapshot of the previous run (columns of :data:`SNAPSHOT_COLUMNS`),
        or None on a first run.
    current : this run's ranked table (or its snapshot).

    Returns
    -------
    pandas.DataFrame
        One row per compound that changed, typed as :data:`CHANGE_DTYPES`:
        ``change`` is the most important kind of :data:`CHANGE_KINDS` that applies,
        ``detail`` lists every change in words. Unchanged compounds are left out;
        on a first run (``previous`` None) the table is empty.

    Notes
    -----
    "rank moved" means the compound changed place among the compounds present in
    both runs; a rank shift caused only by compounds added or removed above it is
    not reported as a move (its old and new ranks still appear when it changed
    otherwise).
    """
    if previous is None:
        return empty_changes()
    cols = ["entry_id", "input_hash", "rank", "meets_all_criteria", "score"]
    old = previous[cols].copy()
    new = current[cols].copy()
    for frame in (old, new):
        frame["entry_id"] = frame["entry_id"].astype(str)
        frame["input_hash"] = frame["input_hash"].astype(str)
        frame["rank"] = pd.to_numeric(frame["rank"], errors="coerce").astype(float)
        frame["score"] = pd.to_numeric(frame["score"], errors="coerce").astype(float)
        frame["meets_all_criteria"] = frame["meets_all_criteria"].fillna(False).astype(bool)
    both = old.merge(new, on="entry_id", how="outer", suffixes=("_old", "_new"), indicator="side")
    # Rank among the compounds present in both runs: an addition or removal shifts every
    # rank below it by one, which is not a move of the compounds themselves.
    common = both["side"] == "both"
    both["rel_old"] = both["rank_old"].where(common).rank(method="first")
    both["rel_new"] = both["rank_new"].where(common).rank(method="first")

    source_old, source_new = (dict(zip(f["entry_id"].astype(str), f["source_hashes"].fillna("").astype(str)))
                              if "source_hashes" in f.columns else {} for f in (previous, current))
    rows = []
    for rec in both.itertuples(index=False):
        side = rec.side
        in_old, in_new = side in ("left_only", "both"), side in ("right_only", "both")
        old_rank = rec.rank_old if in_old else np.nan
        new_rank = rec.rank_new if in_new else np.nan
        was = bool(rec.meets_all_criteria_old) if in_old else False
        now = bool(rec.meets_all_criteria_new) if in_new else False
        revised = bool(in_old and in_new and rec.input_hash_old != rec.input_hash_new)
        moved = bool(in_old and in_new and np.isfinite(rec.rel_old) and np.isfinite(rec.rel_new)
                     and rec.rel_old != rec.rel_new)
        parts: list[str] = []
        if not in_old:
            kinds = ["added"]
            parts.append(f"new in this run at rank {int(new_rank)}"
                         + (", meets all criteria" if now else ""))
        elif not in_new:
            kinds = ["removed"]
            parts.append(f"no longer screened (was rank {int(old_rank)}"
                         + (", a candidate)" if was else ")"))
        else:
            kinds = []
            if now and not was:
                kinds.append("became candidate")
                parts.append("now meets all criteria")
            if was and not now:
                kinds.append("dropped from candidates")
                parts.append("no longer meets all criteria")
            if revised:
                kinds.append("input revised")
                files = revised_sources(source_old.get(rec.entry_id, ""), source_new.get(rec.entry_id, ""))
                parts.append(f"revised {', '.join(files)}" if files else "record or structure file changed")
            if moved:
                kinds.append("rank moved")
                step = int(old_rank - new_rank)
                parts.append(f"rank {int(old_rank)} \u2192 {int(new_rank)} ({'up' if step > 0 else 'down'} {abs(step)})")
            if not kinds:
                continue
            if revised or kinds[0] != "rank moved":
                so, sn = rec.score_old, rec.score_new
                if not (np.isclose(so, sn, equal_nan=True)):
                    parts.append(f"score {_fmt_score(so)} \u2192 {_fmt_score(sn)}")
        kinds.sort(key=CHANGE_KINDS.index)
        rows.append({
            "entry_id": rec.entry_id,
            "change": kinds[0],
            "detail": "; ".join(parts),
            "old_rank": old_rank,
            "new_rank": new_rank,
            "rank_change": old_rank - new_rank if in_old and in_new else np.nan,
            "old_score": rec.score_old if in_old else np.nan,
            "new_score": rec.score_new if in_new else np.nan,
            "was_candidate": was if in_old else None,
            "is_candidate": now if in_new else None,
            "input_revised": revised,
            "old_input_hash": rec.input_hash_old if in_old else None,
            "new_input_hash": rec.input_hash_new if in_new else None,
        })
    if not rows:
        return empty_changes()
    out = pd.DataFrame(rows)
    out["_kind"] = out["change"].map(CHANGE_KINDS.index)
    out["_order"] = out["new_rank"].fillna(out["old_rank"])
    out = out.sort_values(["_kind", "_order", "entry_id"], kind="stable").drop(columns=["_kind", "_order"])
    for name, dtype in CHANGE_DTYPES.items():
        if dtype == "Int32":
            out[name] = pd.array([None if not np.isfinite(v) else int(v) for v in out[name].astype(float)],
                                 dtype="Int32")
        else:
            out[name] = out[name].astype(dtype)
    return out.reset_index(drop=True)


# ---------------------------------------------------------------------------
# Formatting helpers (text only; markup lives in the template)
# ---------------------------------------------------------------------------

def script_json(obj: Any) -> str:
    """JSON safe to place inside ``<script type="application/json">``.

    ``<``, ``>``, ``&``, U+2028 and U+2029 become ``\\uXXXX`` escapes, so no
    ``</script>`` or comment opener can appear; non-finite numbers become null.
    """
    text = json.dumps(_finite(obj), ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    for char, escape in (("&", "\\u0026"), ("<", "\\u003c"), (">", "\\u003e"),
                         ("\u2028", "\\u2028"), ("\u2029", "\\u2029")):
        text = text.replace(char, escape)
    return text


def _finite(obj: Any) -> Any:
    if isinstance(obj, dict):
        return {str(k): _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(float(obj)) else None
    if obj is None or obj is pd.NA:
        return None
    return str(obj)


def _num(x: Any) -> float:
    try:
        value = float(x)
    except (TypeError, ValueError):
        return math.nan
    return value


def _fmt(x: Any, digits: int = 2, scale: float = 1.0) -> str:
    value = _num(x)
    if not math.isfinite(value):
        return DASH if math.isnan(value) else ("\u221e" if value > 0 else "\u2212\u221e")
    return f"{value * scale:,.{digits}f}".replace("-", "\u2212")


def _sort_value(x: Any, scale: float = 1.0) -> str:
    value = _num(x)
    if math.isnan(value):
        return ""
    if math.isinf(value):
        return "1e300" if value > 0 else "-1e300"
    return f"{value * scale:.7g}"


def _text(x: Any) -> str:
    if x is None or x is pd.NA or (isinstance(x, float) and math.isnan(x)):
        return ""
    return str(x)


def uncertainty_columns(columns: Sequence[str]) -> dict[str, list[str]]:
    """Uncertainty columns of a ranked table: probabilities and p16/p50/p84 quantiles."""
    cols = [str(c) for c in columns]
    probs = [c for c in cols if c.startswith("p_")]
    bands = sorted({c[: -len("_p16")] for c in cols if c.endswith("_p16")
                    if f"{c[:-4]}_p84" in cols})
    return {"probabilities": probs, "quantiles": bands}


def _env_with_constants(name: str, settings: Mapping) -> str:
    """'on silica (above 1.0, below 3.9)': display name and dielectric constants of the surroundings."""
    return environment_label(name, settings)


# ---------------------------------------------------------------------------
# View model of the page sections
# ---------------------------------------------------------------------------

#: Probability columns shown inside the criterion cells of the compound table.
CRITERION_PROBABILITY = {"pass_direct": "p_pass_direct", "pass_margin": "p_pass_margin",
                         "pass_binding": "p_pass_binding", "pass_window": "p_pass_window"}
PROBABILITY_LABELS = {"p_meets_all": "P(all met)"}


def _criteria_words(settings: Mapping) -> list[tuple[str, str, str]]:
    """(key, short header, sentence) for each ranking criterion."""
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    n = int(r["target_layers"])
    need = float(r.get("min_binding_over_kt", 0.0))
    need_mev = need * units.thermal_energy_ev(t_k) * MEV_PER_EV
    need_bound = float(r.get("min_bound_fraction", 0.0))
    density = float(settings["survival"]["pair_density_per_cm2"])
    lo, hi = sorted(float(v) for v in r["window_nm"])
    direct = (f"the lowest exciton at {n} layer(s) is bright (a same-valley, spin-allowed pair; 'unknown' when "
              "no competing valley is given never passes)" if r["require_direct"]
              else f"the brightness of the lowest exciton at {n} layer(s) is known (bright not required)")
    words = [
        ("pass_direct", "Bright", direct),
        ("pass_margin", "Margin", f"the lowest dark exciton lies at least "
                                  f"{float(r['min_direct_margin_ev']) * MEV_PER_EV:g} meV above the lowest bright one"),
        ("pass_binding", "Bound", f"at the planned pair density of {density:.3g} cm\u207b\u00b2 and {t_k:g} K, at "
                                  f"least {need_bound * 100:g} % of the photo-excited pairs are bound as excitons "
                                  "(2D Saha balance)"
                                  + (f", and the binding is at least {need:g} kT ({need_mev:.0f} meV)" if need > 0 else "")),
        ("pass_window", "Window", f"the emission bracket (no gap shift to full compensation) lies inside "
                                  f"{lo:g}\u2013{hi:g} nm"),
    ]
    if float(r.get("min_bright_fraction", 0.0)) > 0:
        words.append(("pass_bright_fraction", "Bright share",
                      f"at least {float(r['min_bright_fraction']) * 100:g} % of the excitons occupy the bright state "
                      f"at {t_k:g} K (Boltzmann)"))
    return words


#: Green laser line (frequency-doubled Nd:YAG), nm: the usual excitation for visible emitters (common practice).
GREEN_LASER_NM = 532.0
#: Silicon's indirect band gap at 300 K, eV (Sze, Physics of Semiconductor Devices, handbook value 1.12 eV):
#: a silicon detector sees nothing beyond hc / E_g (about 1100 nm).
SILICON_GAP_EV = 1.12


def _criteria_reasons(settings: Mapping) -> dict[str, str]:
    """Why each configured threshold matters to the experiment, from its configured value (one line each)."""
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    kt_ev = float(units.thermal_energy_ev(t_k))
    margin_kt = float(r["min_direct_margin_ev"]) / kt_ev
    need_bound = float(r.get("min_bound_fraction", 0.0))
    lo, hi = sorted(float(v) for v in r["window_nm"])
    silicon_nm = round(float(units.wavelength_nm_from_energy_ev(SILICON_GAP_EV)), -2)
    window = [f"starts above green ({GREEN_LASER_NM:g} nm) laser excitation, which a long-pass filter then blocks"
              if lo > GREEN_LASER_NM else
              f"starts at or below green ({GREEN_LASER_NM:g} nm) excitation: excite at a shorter wavelength"]
    window.append(f"ends within a silicon detector's range (silicon absorbs up to about {silicon_nm:.0f} nm)"
                  if hi <= silicon_nm else
                  f"reaches beyond a silicon detector's range (about {silicon_nm:.0f} nm): an infrared "
                  "(e.g. InGaAs) detector is needed")
    return {
        "pass_direct": ("a dark lowest exciton collects the excitons and quenches the emission" if r["require_direct"]
                        else "a verdict the record cannot support is not planned for"),
        "pass_margin": (f"about {margin_kt:.1f} kT at {t_k:g} K: the lowest dark exciton then holds at most about "
                        f"{math.exp(-margin_kt) * 100:.0f} % as many excitons as the bright one, times their weight "
                        "ratio (Boltzmann)" if margin_kt > 0 else
                        "0: any order with the bright exciton lowest passes"),
        "pass_binding": ("no bound fraction is required (a binding floor in kT, if set, is a configured choice)"
                         if need_bound <= 0 else
                         (f"{need_bound * 100:g} % bound is the exciton-plasma (Saha) crossover: above it most "
                          "photo-excited pairs are excitons" if abs(need_bound - 0.5) < 1e-12 else
                          f"{need_bound * 100:g} % is a configured choice (50 % is the exciton-plasma (Saha) "
                          "crossover)")
                         + "; continuous-wave excitation gives lower densities, where fewer pairs are bound"),
        "pass_window": "the window " + ", and ".join(window),
        "pass_bright_fraction": "only excitons in the bright state emit",
    }


def _pair_kind(pair: str) -> str:
    """'spin-dark' when both sides of a pair text ('K(up)->K(down)') sit at one label, else 'momentum-dark'."""
    if "->" not in pair:
        return "dark"
    v, c = (side.split("(")[0] for side in pair.split("->", 1))
    return "spin-dark" if v == c else "momentum-dark"


def brightness_words(row: Mapping, settings: Mapping) -> str:
    """The exciton-level brightness verdict of one ranked row, in plain words."""
    n = int(settings["ranking"]["target_layers"])
    env = settings["ranking"]["environment"]
    t_k = float(settings["survival"]["temperature_k"])
    verdict = _text(row.get("target_brightness"))
    bright, dark = _text(row.get("target_bright_pair")), _text(row.get("target_dark_pair"))
    margin = _num(row.get("target_exciton_margin_ev"))
    fraction = _num(row.get("target_bright_fraction"))
    where = f"at {n} layer(s) in {environment_label(env, settings)}"
    if verdict == "bright":
        out = (f"Bright {where}: the lowest exciton is the {bright} pair's, "
               f"{_fmt(row.get('target_bright_exciton_ev'), 3)} eV; the lowest dark one ({dark}, "
               f"{_pair_kind(dark)}) lies {_fmt(margin, 0, MEV_PER_EV)} meV higher.")
    elif verdict == "dark" and not bright:
        out = f"Dark {where}: no same-valley, spin-allowed pair is given; the lowest exciton is {dark}'s."
    elif verdict == "dark":
        gap_note = (" although the band gap is direct (its heavier pair binds more strongly)"
                    if _text(row.get("target_gap_character")) == "direct" and _pair_kind(dark) == "momentum-dark"
                    else "")
        out = (f"Dark {where}: the {_pair_kind(dark)} {dark} exciton lies {_fmt(-margin, 0, MEV_PER_EV)} meV "
               f"below the bright {bright} one{gap_note}.")
    else:
        out = (f"Brightness unknown {where}: the record gives no competing valley (another label or a spin "
               "sub-band), so a lower dark exciton cannot be excluded; it is not counted as bright.")
    if math.isfinite(fraction):
        out += f" {_about(fraction)} of the excitons are in the bright state at {t_k:g} K (Boltzmann)."
    if not bool(row.get("target_spin_given")):
        out += " Spin was not given: every same-valley pair is taken as spin-allowed."
    if bool(row.get("target_binding_beyond_validity")):
        out += (f" The binding exceeds {float(settings['excitons']['max_binding_fraction']) * 100:g} % of the "
                "direct gap: outside the effective-mass model's validity.")
    return out


def _bound_words(fraction: float) -> str:
    """A bound fraction rounded for people: '75 %', 'over 99 %' (never '100 %')."""
    if fraction >= 0.99:
        return "over 99 %"
    if fraction <= 0.01:
        return "under 1 %"
    return f"{fraction * 100:.0f} %"


def _about(fraction: float) -> str:
    """'About 75 %', 'Over 99 %', 'Under 1 %': a rounded fraction that starts a sentence."""
    words = _bound_words(fraction)
    return f"About {words}" if words[0].isdigit() else words[0].upper() + words[1:]


def _reasons(row: Mapping, settings: Mapping) -> list[str]:
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    n = int(r["target_layers"])
    lo, hi = sorted(float(v) for v in r["window_nm"])
    out = []
    out.append(brightness_words(row, settings))
    density = float(settings["survival"]["pair_density_per_cm2"])
    bound = _num(row.get("target_bound_fraction"))
    out.append(f"Bound: {_fmt(row.get('target_binding_ev'), 0, MEV_PER_EV)} meV, "
               f"{_fmt(row.get('target_binding_over_kt'), 1)} kT at {t_k:g} K"
               + (f"; {_about(bound).lower()} of the pairs bound at {density:.3g} cm\u207b\u00b2 (Saha estimate)."
                  if math.isfinite(bound) else "."))
    proxy = _num(row.get("target_brightness_proxy_per_s"))
    gamma0 = _num(row.get("target_radiative_rate_0_per_s"))
    if math.isfinite(proxy) and proxy > 0:
        out.append(f"Brightness proxy: about {proxy:.2g} s\u207b\u00b9 (radiative rate averaged over the excitons at "
                   f"{t_k:g} K, times the bright fraction"
                   + (f"; intrinsic radiative lifetime {1e12 / gamma0:.2g} ps at zero momentum"
                      if math.isfinite(gamma0) and gamma0 > 0 else "")
                   + "): a model estimate for comparing compounds, not a measured lifetime.")
    lam = _num(row.get("target_emission_nm"))
    lam_full = _num(row.get("target_emission_compensated_nm"))
    inside = lo <= lam <= hi and (not math.isfinite(lam_full) or lo <= lam_full <= hi)
    where = "inside" if inside else "not wholly inside"
    band = _band_text(row, "target_emission_nm", 0)
    out.append(f"Expected emission about {_fmt(lam, 0)} nm (model estimate; "
               + (f"16\u201384 % range {band} nm given the input uncertainties; " if band else "")
               + f"{_text(row.get('target_emission_band')) or 'no band'}; "
               f"{_fmt(lam_full, 0)} nm if the gap fully compensates the change of screening), "
               f"{where} the {lo:g}\u2013{hi:g} nm window, at the calculation's temperature.")
    verdict = _text(row.get("thinning_verdict"))
    if verdict:
        out.append(f"Thinning: {verdict}.")
    if "p_meets_all" in row and math.isfinite(_num(row.get("p_meets_all"))):
        out.append(f"Chance that every criterion holds, given the input uncertainties (a model estimate): "
                   f"{_fmt(_num(row['p_meets_all']) * 100, 0)} %.")
    return out


def _emission_ranges(row: Mapping, long: pd.DataFrame | None, settings: Mapping) -> list[str]:
    """Expected emission at the target layer count in every surroundings, with its dielectric constants."""
    n = int(settings["ranking"]["target_layers"])
    here = pd.DataFrame()
    if long is not None and len(long):
        here = long[(long["entry_id"] == row.get("entry_id")) & (long["layers"] == n)].set_index("environment")
    out = []
    for env, entry in (settings.get("environments", {}) or {}).items():
        kappa = (float(entry["top"]) + float(entry["bottom"])) / 2
        where = (f"{figures.environment_name(env, settings)} (dielectric constant {_fmt(entry['top'], 1)} above, "
                 f"{_fmt(entry['bottom'], 1)} below; mean {_fmt(kappa, 2)})")
        lo, hi = _num(row.get(f"emission_nm_p16__{env}")), _num(row.get(f"emission_nm_p84__{env}"))
        lam = _num(here["emission_nm"].get(env)) if "emission_nm" in here else math.nan
        full = _num(here["emission_compensated_nm"].get(env)) if "emission_compensated_nm" in here else math.nan
        text = where + ": "
        if math.isfinite(lo) and math.isfinite(hi):
            text += f"{_fmt(lo, 0)}\u2013{_fmt(hi, 0)} nm (16\u201384 % given the input uncertainties)"
        else:
            text += "no Monte Carlo range"
        if math.isfinite(lam):
            text += f"; nominal {_fmt(lam, 0)} nm"
            if math.isfinite(full) and abs(full - lam) >= 0.5:
                text += f", {_fmt(full, 0)} nm if the gap fully compensates the screening"
        out.append(text)
    return out


def _quick_tests(row: Mapping, settings: Mapping) -> list[str]:
    """Fast ways to falsify the prediction, chosen from what the model says about the compound."""
    n = int(settings["ranking"]["target_layers"])
    out = []
    if _text(row.get("thinning_state")) == tables.DIRECT_WHEN_THIN and _num(row.get("switch_layers")) == 2:
        out.append("Thinning makes it bright: compare monolayer and bilayer emission under the same excitation. "
                   "The model expects the monolayer far brighter (the bilayer gap is indirect); similar "
                   "intensities would falsify the prediction.")
    margin = _num(row.get("target_exciton_margin_ev"))
    verdict = _text(row.get("target_brightness"))
    if verdict == "bright":
        out.append(f"Cool the sample: with a bright lowest exciton (the dark one about "
                   f"{_fmt(margin, 0, MEV_PER_EV)} meV higher) emission should brighten on cooling; "
                   "dimming on cooling points to a dark exciton below the bright one.")
    elif verdict == "dark":
        out.append(f"Cool the sample: with a dark lowest exciton (about {_fmt(-margin, 0, MEV_PER_EV)} meV below "
                   "the bright one) emission should dim on cooling; brightening would falsify the dark verdict.")
    else:
        out.append("Cool the sample: brightening on cooling suggests a bright lowest exciton, dimming a dark one "
                   "(the record gives no competing valley, so the model cannot say which).")
    ex = _num(row.get("target_bright_exciton_ev"))
    if math.isfinite(ex):
        out.append(f"Measure reflectance (or absorption) beside the emission of the {n}-layer flake: the bright "
                   f"exciton should show near {_fmt(ex, 2)} eV ({_fmt(units.wavelength_nm_from_energy_ev(ex), 0)} nm "
                   "in the ranked surroundings); emission well below that feature points to a dark, charged or "
                   "defect state.")
    return out


def _temperatures(row: Mapping, settings: Mapping) -> str:
    t_k = float(settings["survival"]["temperature_k"])
    temps = sorted({4.0, 77.0, t_k})
    text = (", ".join(f"{t:g} K" for t in temps)
            + " (liquid-helium and liquid-nitrogen stages and the operating temperature)")
    margin = _num(row.get("target_exciton_margin_ev"))
    if math.isfinite(margin) and margin > 0:
        t_star = margin / units.BOLTZMANN_EV_PER_K
        if t_star <= 2 * t_k:
            text += (f"; kT equals the {_fmt(margin, 0, MEV_PER_EV)} meV dark-bright splitting at about "
                     f"{t_star:.0f} K, so the dark share changes most between 4 K and {t_k:g} K: a temperature "
                     "series there tests the verdict")
        else:
            text += (f"; the dark exciton lies {_fmt(margin, 0, MEV_PER_EV)} meV above the bright one, far above "
                     f"kT at {t_k:g} K, so the model expects little change from it on cooling")
    return text + "."


def _pump_limit(row: Mapping, settings: Mapping) -> str:
    mott = _num(row.get("target_mott_density_per_cm2"))
    density = float(settings["survival"]["pair_density_per_cm2"])
    if not math.isfinite(mott):
        return "No Mott estimate (the exciton radius is not known)."
    return (f"Keep the photo-excited pair density well below the Mott estimate of about {mott:.1g} cm\u207b\u00b2 "
            f"(1/(\u03c0 r\u00b2) with the exciton radius {_fmt(row.get('target_radius_angstrom'), 0)} \u00c5), "
            f"where excitons dissolve into a plasma; the bound fraction above assumes {density:.2g} cm\u207b\u00b2.")


def _plan(row: Mapping, long: pd.DataFrame | None, settings: Mapping) -> list[tuple[str, Any]]:
    """The first experiment for one card: (label, text or list of texts), all model estimates."""
    r = settings["ranking"]
    n = int(r["target_layers"])
    make = (f"{n}-layer flake(s), {environment_label(r['environment'], settings)} (the surroundings ranked)")
    if _text(row.get("thinning_verdict")):
        make += f"; thinning: {_text(row.get('thinning_verdict'))}"
    return [("Make", make + "."),
            ("Expected emission", _emission_ranges(row, long, settings)),
            ("Quick test", _quick_tests(row, settings)),
            ("Measure at", _temperatures(row, settings)),
            ("Pump below", _pump_limit(row, settings))]


def _make_first(ranked: pd.DataFrame, settings: Mapping, long: pd.DataFrame | None = None) -> dict:
    r = settings["ranking"]
    cands = ranked[ranked["meets_all_criteria"].astype(bool)] if len(ranked) else ranked
    pick = cands.head(3) if len(cands) else ranked.head(3)
    words = _criteria_words(settings)
    cards = []
    for rowd in pick.to_dict("records"):
        cards.append({
            "rank": int(rowd["rank"]), "id": _text(rowd["entry_id"]), "formula": _text(rowd.get("formula")),
            "headline": (f"about {_fmt(rowd.get('target_emission_nm'), 0)} nm (model estimate) \u00b7 "
                         f"{_fmt(rowd.get('target_binding_ev'), 0, MEV_PER_EV)} meV \u00b7 "
                         f"score {_fmt(rowd.get('score'), 2)}"),
            "reasons": _reasons(rowd, settings),
            "missed": [short for key, short, _ in words if key in rowd and not bool(rowd[key])],
            "plan": [{"label": label, "items": value if isinstance(value, list) else [value]}
                     for label, value in _plan(rowd, long, settings)],
        })
    return {"screened": len(ranked), "candidates": len(cands), "layers": int(r["target_layers"]),
            "environment": environment_label(r["environment"], settings), "cards": cards}


def _since(baseline: Mapping) -> str:
    """'the run of <time>', or 'an earlier run' when the time is not known."""
    when = _text(baseline.get("run_utc"))
    return f"the run of {when}" if when else "an earlier run"


def _digest(changes: pd.DataFrame, baseline: Mapping | None) -> dict:
    if baseline is None:
        return {"first": True}
    counts = changes["change"].value_counts() if len(changes) else pd.Series(dtype=int)
    return {"first": False, "since": _since(baseline),
            "chips": [{"kind": k, "count": int(counts[k])} for k in CHANGE_KINDS if k in counts.index]}


def _overview(ranked, rejects, manifest, settings) -> dict:
    r = settings["ranking"]
    surv = settings["survival"]
    n_screened = len(ranked)
    n_cand = int(ranked["meets_all_criteria"].astype(bool).sum()) if n_screened else 0
    n_rej = int(rejects["entry_id"].nunique()) if len(rejects) else 0
    inputs = manifest.get("inputs", {}) if isinstance(manifest, Mapping) else {}
    n_records = len(inputs.get("entries", {}) or {})
    n_cifs = len(inputs.get("structures", {}) or {})
    lo, hi = sorted(float(v) for v in r["window_nm"])
    packages = manifest.get("packages", {}) or {}
    return {
        "tiles": [("record read" if (n_records or n_screened + n_rej) == 1 else "records read",
                   n_records or n_screened + n_rej), ("screened", n_screened),
                  ("candidate" if n_cand == 1 else "candidates", n_cand), ("rejected", n_rej)],
        "settings": [
            ("Temperature", f"{float(surv['temperature_k']):g} K"),
            ("Ranked in", f"{environment_label(r['environment'], settings)}, {int(r['target_layers'])} layer(s)"),
            ("Emission window", f"{lo:g}\u2013{hi:g} nm"),
            ("Score weights", ", ".join(f"{k} {float(v):g}" for k, v in r.get("weights", {}).items())),
            ("Order", "by " + str(r.get("order_by", "score"))),
            ("Pair density for bound fraction",
             f"{_num(surv.get('pair_density_per_cm2')):.3g} cm\u207b\u00b2 (layers), "
             f"{_num(surv.get('pair_density_per_cm3')):.3g} cm\u207b\u00b3 (bulk)"),
            ("Surroundings screened", ", ".join(_env_with_constants(name, settings)
                                                for name in settings.get("environments", {}))),
        ],
        "criteria": [f"{sentence} \u2014 why: {_criteria_reasons(settings)[key]}"
                     for key, _, sentence in _criteria_words(settings)],
        "provenance": [
            ("Config hash", _text(manifest.get("config_hash", ""))),
            ("Code version", _text(manifest.get("code_version", ""))),
            ("Git", _text(manifest.get("git", ""))),
            ("Manifest written (UTC)", _text(manifest.get("written_utc", ""))),
            ("Campaign", _text((manifest.get("config", {}) or {}).get("campaign", settings.get("campaign", "")))),
            ("Input files", f"{n_records} record(s), {n_cifs} structure file(s)"),
            ("Packages", ", ".join(f"{k} {v}" for k, v in sorted(packages.items()))),
        ],
    }


#: Score parts on the page: (ranked column suffix, weight key, bar class).
SCORE_PARTS = (("binding", "binding", "sb"), ("margin", "margin", "sm"), ("window", "window", "sw"),
               ("brightness", "brightness", "sr"))


def _score_bar(row: Mapping, weights: Mapping) -> dict:
    w = {name: float(weights.get(key, 0)) for name, key, _ in SCORE_PARTS}
    total = sum(w.values()) or 1.0
    parts = [(cls, w[name] * _num(row.get(f"score_{name}")) / total) for name, _, cls in SCORE_PARTS]
    return {"parts": [{"cls": cls, "width": f"{(value if math.isfinite(value) else 0.0) * 48:.0f}px"}
                      for cls, value in parts],
            "title": "parts: " + " + ".join(f"{'bound' if name == 'binding' else name} "
                                            f"{_fmt(row.get('score_' + name), 2)}" for name, _, _ in SCORE_PARTS)}


def _band_text(row: Mapping, base: str, digits: int, scale: float = 1.0) -> str:
    a, b = _num(row.get(f"{base}_p16")), _num(row.get(f"{base}_p84"))
    if math.isfinite(a) and math.isfinite(b):
        return f"{_fmt(a, digits, scale)}\u2013{_fmt(b, digits, scale)}"
    return ""


def _listed_rows(ranked: pd.DataFrame, max_rows: int | None) -> tuple[pd.DataFrame, tuple[int, int]]:
    """The best-ranked rows for the compound table, and the candidates and others left out."""
    if max_rows is None or len(ranked) <= max_rows:
        return ranked, (0, 0)
    rest = ranked.iloc[max_rows:]
    n_cand = int(rest["meets_all_criteria"].astype(bool).sum())
    return ranked.head(max_rows), (n_cand, len(rest) - n_cand)


def _table(ranked: pd.DataFrame, settings: Mapping, entries: pd.DataFrame | None,
           left_out: tuple[int, int] = (0, 0)) -> dict:
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    n = int(r["target_layers"])
    probs = uncertainty_columns(ranked.columns)["probabilities"]
    words = _criteria_words(settings)
    prov = {}
    if entries is not None and len(entries) and "provenance" in entries.columns:
        prov = dict(zip(entries["entry_id"].astype(str), entries["provenance"].map(_text)))
    sentences = {k: w for k, _, w in words}
    heads = [("rank", "Rank", "num"), ("id", "Compound", "text"), ("status", "Status", "text")]
    heads += [(key, short, "text") for key, short, _ in words]
    heads += [("score", "Score", "num"), ("gap", "Optical gap|eV", "num"), ("nm", "Emission|nm, band", "num"),
              ("eb", "Binding|meV", "num"), ("ebkt", f"E_b/kT|at {t_k:g} K", "num"), ("thin", "Thinning", "text")]
    in_cells = {key: col for key, col in CRITERION_PROBABILITY.items() if col in probs}
    extra_probs = sorted((p for p in probs if p not in in_cells.values()), key=lambda p: p != "p_meets_all")
    heads += [(p, PROBABILITY_LABELS.get(p, "P(" + p[2:].replace("_", " ") + ")") + "|%", "num")
              for p in extra_probs]
    columns = [{"kind": kind, "name": label.partition("|")[0], "unit": label.partition("|")[2],
                "title": sentences.get(key)} for key, label, kind in heads]
    weights = r.get("weights", {})
    rows = []
    for d in ranked.to_dict("records"):
        eid = _text(d["entry_id"])
        cand = bool(d.get("meets_all_criteria"))
        search = " ".join(_text(d.get(c)) for c in ("entry_id", "formula", "target_emission_band",
                                                     "thinning_verdict", "thinning_state", "target_gap_character")).lower()
        warn = _text(d.get("warnings"))
        if warn:
            search += " " + warn.lower()
        details = {
            "pass_direct": brightness_words(d, settings),
            "pass_margin": f"dark - bright exciton {_fmt(d.get('target_exciton_margin_ev'), 0, MEV_PER_EV)} meV",
            "pass_bright_fraction": f"bright share {_fmt(_num(d.get('target_bright_fraction')) * 100, 0)} %",
            "pass_binding": f"{_fmt(d.get('target_binding_over_kt'), 1)} kT",
            "pass_window": f"{_fmt(d.get('target_emission_nm'), 0)} nm",
        }
        crits = []
        for key, _, _ in words:
            chance = _num(d.get(in_cells[key])) if key in in_cells else math.nan
            crits.append({"ok": bool(d.get(key)), "title": details[key],
                          "chance": f"{chance * 100:.0f}%" if math.isfinite(chance) else ""})
        extra = []
        for p in extra_probs:
            v = _num(d.get(p))
            extra.append({"v": _sort_value(v), "text": _fmt(v * 100, 0) + ("%" if math.isfinite(v) else "")})
        rows.append({
            "id": eid, "rank": int(d["rank"]), "rank_v": _sort_value(d.get("rank")), "candidate": cand,
            "missed": sum(1 for key, _, _ in words if not bool(d.get(key))), "search": search,
            "formula": _text(d.get("formula")), "provenance": prov.get(eid, ""), "warning": warn,
            "criteria": crits,
            "score": {"v": _sort_value(d.get("score")), "text": _fmt(d.get("score"), 3),
                      "bar": _score_bar(d, weights)},
            "gap": {"v": _sort_value(d.get("target_optical_gap_ev")), "text": _fmt(d.get("target_optical_gap_ev"), 3),
                    "band": _band_text(d, "target_optical_gap_ev", 3)},
            "emission": {"v": _sort_value(d.get("target_emission_nm")), "text": _fmt(d.get("target_emission_nm"), 0),
                         "band": _band_text(d, "target_emission_nm", 0),
                         "name": _text(d.get("target_emission_band"))},
            "binding": {"v": _sort_value(d.get("target_binding_ev"), MEV_PER_EV),
                        "text": _fmt(d.get("target_binding_ev"), 0, MEV_PER_EV),
                        "band": _band_text(d, "target_binding_ev", 0, MEV_PER_EV)},
            "over_kt": {"v": _sort_value(d.get("target_binding_over_kt")),
                        "text": _fmt(d.get("target_binding_over_kt"), 1)},
            "verdict": _text(d.get("thinning_verdict")),
            "probabilities": extra,
        })
    return {"layers": n, "environment": environment_label(r["environment"], settings), "columns": columns,
            "rows": rows, "with_uncertainty": bool(probs), "left_out": left_out,
            "shortlist_size": int(r.get("shortlist_size", 0))}


def _figures(ranked: pd.DataFrame, long: pd.DataFrame, settings: Mapping) -> list[dict]:
    r = settings["ranking"]
    where = f"{int(r['target_layers'])} layer(s), {environment_label(r['environment'], settings)}"
    return [
        {"heading": "Is it bound, and where does it emit?", "figure": figures.figure_binding_vs_gap(ranked, settings),
         "caption": f"One dot per compound at {where}. Large ringed dots meet every criterion; the shaded strip is the "
                    "target window in photon energy; a dashed line, when drawn, is the configured binding floor "
                    "(ranking.min_binding_over_kt). The bound criterion itself is the Saha bound fraction at the "
                    "planned pair density, which depends on the reduced mass too, so it is no single line here."},
        {"heading": "How the gap moves with thickness",
         "figure": figures.figure_gap_vs_layers(ranked, long, settings),
         "caption": "Optical gap per layer count for the leading compounds; the dashed segment joins the thickest "
                    "stack screened to the bulk crystal, the vertical line marks the thickness ranked."},
        {"heading": "Where the emission falls", "figure": figures.figure_emission_histogram(ranked, settings),
         "caption": "Emission wavelengths of all screened compounds; the darker part of each bar counts "
                    "candidates."},
        {"heading": "What the surroundings do to binding",
         "figure": figures.figure_binding_by_environment(ranked, long, settings),
         "caption": "Binding at the ranked thickness in each surroundings (under its name, the dielectric "
                    "constants above and below the flake), plus the bulk crystal. Ringed dots are "
                    "candidates, bars are medians. A more strongly screening environment lowers the binding."},
    ]


def _changes(changes: pd.DataFrame, baseline: Mapping | None) -> dict:
    if baseline is None:
        return {"first": True}
    rows = []
    for c in changes.to_dict("records"):
        move = None if pd.isna(c["rank_change"]) else int(c["rank_change"])
        rows.append({
            "kind": _text(c["change"]), "id": _text(c["entry_id"]),
            "old_rank": DASH if pd.isna(c["old_rank"]) else str(int(c["old_rank"])),
            "new_rank": DASH if pd.isna(c["new_rank"]) else str(int(c["new_rank"])),
            "arrow": "" if not move else ("\u25b2" if move > 0 else "\u25bc"),
            "moved": "" if move is None else str(abs(move)),
            "old_score": _fmt(c["old_score"], 3), "new_score": _fmt(c["new_score"], 3),
            "detail": _text(c["detail"]),
        })
    return {"first": False, "when": baseline.get("run_utc") or "an earlier run", "since": _since(baseline),
            "config_changed": bool(baseline.get("config_changed")),
            "config_then": _text(baseline.get("config_hash", "")),
            "config_now": _text(baseline.get("config_hash_now", "")), "rows": rows}


def _rejects(rejects: pd.DataFrame) -> dict:
    rows = [{**{k: _text(x.get(k)) for k in ("entry_id", "source_file", "field", "reason")},
             "stage": tables.stage_words(_text(x.get("stage")))} for x in rejects.to_dict("records")]
    return {"records": int(rejects["entry_id"].nunique()) if len(rejects) else 0, "rows": rows}


def _recompute(refinement: pd.DataFrame | None, settings: Mapping, max_compounds: int = 30) -> dict:
    """View model of "What to recompute next": per borderline compound, the input whose
    recomputation most likely settles its verdict (rows of
    :func:`lamellume.refinement.refinement_list`), in plain words."""
    ref = settings.get("refinement", {})
    lo, hi = sorted(float(x) for x in ref.get("band", (0.1, 0.9)))
    out = {"enabled": bool(ref.get("enabled", False)), "computed": refinement is not None,
           "low": f"{100 * lo:.0f}", "high": f"{100 * hi:.0f}", "compounds": 0, "rows": [], "more": 0,
           "per_compound": int(ref.get("per_compound", 1)),
           "shortlist": (int(settings.get("ranking", {}).get("shortlist_size", 0))
                         if "on_shortlist" in ref.get("verdicts", ())
                         and settings.get("ranking", {}).get("order_by", "score") == "score" else 0)}
    if refinement is None or not len(refinement):
        return out
    firsts = refinement.drop_duplicates("entry_id")
    shown = firsts.head(max_compounds)
    out.update(compounds=len(firsts), more=len(firsts) - len(shown),
               rows=[{"id": _text(x["entry_id"]), "advice": _text(x["advice"])} for x in shown.to_dict("records")])
    return out


def _methods(settings: Mapping) -> dict:
    from lamellume import ranking

    r = settings["ranking"]
    w = r.get("weights", {})
    lo, hi = sorted(float(v) for v in r["window_nm"])
    return {"need_kt": f"{float(r.get('min_binding_over_kt', 0)):g}" if float(r.get('min_binding_over_kt', 0)) > 0
            else "",
            "min_bound": f"{float(r.get('min_bound_fraction', 0)):g}",
            "density": f"{float(settings['survival']['pair_density_per_cm2']):.3g}",
            "bound_decades": f"{ranking.BOUND_DECADES:g}",
            "margin_full": f"{ranking.MARGIN_FULL_EV * MEV_PER_EV:g}",
            "bright_floor_exp": f"{math.log10(ranking.BRIGHTNESS_FLOOR_PER_S):g}",
            "bright_decades": f"{ranking.BRIGHTNESS_DECADES:g}",
            "window_lo": f"{lo:g}", "window_hi": f"{hi:g}",
            "w_binding": f"{float(w.get('binding', 0)):g}", "w_margin": f"{float(w.get('margin', 0)):g}",
            "w_window": f"{float(w.get('window', 0)):g}", "w_brightness": f"{float(w.get('brightness', 0)):g}",
            "model_unc_layers": f"{float(settings['excitons']['model_rel_unc_layers']) * 100:g}",
            "model_unc_bulk": f"{float(settings['excitons']['model_rel_unc_bulk']) * 100:g}",
            "max_binding_fraction": f"{float(settings['excitons']['max_binding_fraction']) * 100:g}"}


#: Literature behind the methods section (fixed text).
REFERENCES = (
    "N. S. Rytova, Proc. Moscow State Univ. Phys. Astron. 3, 30 (1967).",
    "L. V. Keldysh, JETP Lett. 29, 658 (1979).",
    "L. C. Andreani, F. Tassone, F. Bassani, Solid State Commun. 77, 641 (1991) (radiative rate of 2D excitons).",
    "E. O. Kane, J. Phys. Chem. Solids 1, 249 (1957) (two-band k\u00b7p).",
    "P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).",
    "X. L. Yang, S. H. Guo, F. T. Chan, K. W. Wong, W. Y. Ching, Phys. Rev. A 43, 1186 (1991).",
    "T. Olsen, S. Latini, F. Rasmussen, K. S. Thygesen, Phys. Rev. Lett. 116, 056401 (2016).",
    "W. Kohn, J. M. Luttinger, Phys. Rev. 98, 915 (1955).",
    "P. P. Edwards, M. J. Sienko, Phys. Rev. B 17, 2575 (1978) (Mott criterion n^(1/3) a = 0.26).",
    "Y. P. Varshni, Physica 34, 149 (1967); K. P. O'Donnell, X. Chen, Appl. Phys. Lett. 58, 2924 (1991) "
    "(temperature dependence of the gap).",
    "T. C. Berkelbach, M. S. Hybertsen, D. R. Reichman, Phys. Rev. B 88, 045318 (2013) (Rytova-Keldysh "
    "against many-body calculations: the default model error).",
    "S. P. Ong et al., Comput. Mater. Sci. 68, 314 (2013) (pymatgen, used to read structure files).",
    "P. M. Larsen, M. Pandey, M. Strange, K. W. Jacobsen, Phys. Rev. Materials 3, 034003 (2019) "
    "(finding the 2D-bonded layers of a structure).",
)


def _cautions(manifest: Mapping) -> list[str]:
    items = list(CAUTIONS)
    for c in manifest.get("cautions", []) or []:
        text = str(c)
        covered = "not measurements" in text or "laboratory safety" in text  # said above in our words
        if text not in items and not covered:
            items.append(text)
    items.extend(MODEL_LIMITS)
    items.append("A high rank means the model inputs look promising, not that a sample will emit. "
                 "Confirm with measurements before committing growth or device time.")
    return items


CSV_COLUMNS = [("rank", "rank", None), ("entry_id", "compound", None), ("formula", "formula", None),
               ("meets_all_criteria", "meets all criteria", None), ("score", "score", None),
               ("target_gap_character", "gap character", None),
               ("target_optical_gap_ev", "optical gap (eV)", None), ("target_emission_nm", "emission (nm)", None),
               ("target_emission_band", "band", None), ("target_binding_ev", "binding (meV)", MEV_PER_EV),
               ("target_binding_over_kt", "binding/kT", None), ("thinning_verdict", "thinning", None)]


def _page_data(ranked: pd.DataFrame, manifest: Mapping) -> dict:
    cols = [c for c in CSV_COLUMNS if c[0] in ranked.columns]
    probs = uncertainty_columns(ranked.columns)["probabilities"]
    rows = {}
    for rec in ranked.to_dict("records"):
        values = []
        for name, _, scale in cols:
            v = rec.get(name)
            if scale is not None:
                v = _num(v) * scale
            if isinstance(v, (float, np.floating)) and math.isfinite(float(v)):
                v = round(float(v), 4)
            values.append(v)
        values += [_num(rec.get(p)) for p in probs]
        rows[str(rec["entry_id"])] = values
    return {"columns": [c[1] for c in cols] + probs, "rows": rows,
            "config_hash": str(manifest.get("config_hash", ""))[:16] or "run"}


# ---------------------------------------------------------------------------
# Rendering
# ---------------------------------------------------------------------------

class _ViewModelEnvironment(jinja2.Environment):
    """Jinja2 environment for a view model of plain dicts: ``row.name`` looks up the key first.

    Jinja2 tries an attribute before an item, which for a dict costs a failed attribute lookup
    on each access (about a fifth of the render time of a 10,000-compound page). Here a dict's
    keys win over its methods; the templates call no dict methods.
    """

    def getattr(self, obj: Any, attribute: str) -> Any:
        if type(obj) is dict:
            try:
                return obj[attribute]
            except KeyError:
                pass
        return super().getattr(obj, attribute)


@functools.lru_cache(maxsize=None)
def _environment() -> jinja2.Environment:
    """The template environment: autoescaping on, undefined names are errors."""
    env = _ViewModelEnvironment(loader=jinja2.FunctionLoader(lambda name: io.read_library_text(f"templates/{name}")),
                             autoescape=True, undefined=jinja2.StrictUndefined, trim_blocks=True,
                             lstrip_blocks=True)
    env.filters["kind_class"] = lambda kind: "k-" + str(kind).replace(" ", "-")
    return env


def page_script() -> str:
    """The page's script, exactly as inlined (its hash goes into the Content-Security-Policy)."""
    return io.read_library_text("templates/summary.js")


def content_security_policy(script: str) -> str:
    """The page's policy: nothing from the network, only the given script runs."""
    digest = base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")
    return ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
            f"script-src 'sha256-{digest}'; base-uri 'none'; form-action 'none'")


def build_html(ranked: pd.DataFrame, long: pd.DataFrame, rejects: pd.DataFrame, manifest: Mapping,
               changes: pd.DataFrame, settings: Mapping, baseline: Mapping | None = None,
               entries: pd.DataFrame | None = None, max_table_rows: int | None = MAX_TABLE_ROWS,
               refinement: pd.DataFrame | None = None) -> str:
    """The self-contained HTML summary of one run (reads nothing but its own template files).

    Parameters
    ----------
    ranked : the ranked wide table (one row per screened compound, ordered by rank).
    long : the long table (compound x layer count x environment) with survival columns.
    rejects : rejected records (entry_id, source_file, field, reason, stage).
    manifest : the run manifest (config hash, code version, git, packages, inputs, cautions).
    changes : the change table of :func:`compare_runs`.
    settings : the full workflow config.
    baseline : facts about the run compared with ('run_utc', 'config_hash', ...), None on a first run.
    entries : optional entries table; when given, provenance text is shown under each compound.
    max_table_rows : the compound table lists the best-ranked compounds up to this many rows
        (None: all). Plots and counts always use every compound.
    refinement : optional ranked refinement list (:mod:`lamellume.refinement`) for the
        section "What to recompute next"; None when the rule did not provide one.

    Returns
    -------
    str
        The page. Everything from the inputs is escaped (see the module docstring).
    """
    ranked = ranked.sort_values("rank", kind="stable").reset_index(drop=True) if len(ranked) else ranked
    if not len(ranked):
        ranked = _ensure_columns(ranked)
    manifest = manifest or {}
    r = settings["ranking"]
    n_cand = int(ranked["meets_all_criteria"].astype(bool).sum()) if len(ranked) else 0
    config_hash = _text(manifest.get("config_hash", ""))
    listed, left_out = _listed_rows(ranked, max_table_rows)
    script = page_script()
    context = {
        "csp": content_security_policy(script),
        "css": Markup(io.read_library_text("templates/summary.css")),
        "script": Markup(script),
        "data_json": Markup(script_json(_page_data(listed, manifest))),
        "config_hash": config_hash,
        "code_version": _text(manifest.get("code_version", "")),
        "subtitle": (f"{len(ranked)} compounds screened \u00b7 {n_cand} candidate(s) \u00b7 ranked as "
                     f"{int(r['target_layers'])}-layer flakes, {environment_label(r['environment'], settings)}, at "
                     f"{float(settings['survival']['temperature_k']):g} K \u00b7 config {config_hash}"
                     f" \u00b7 written {_text(manifest.get('written_utc', ''))}"),
        "caution_top": CAUTIONS[1],
        "digest": _digest(changes, baseline),
        "make_first": _make_first(ranked, settings, long),
        "overview": _overview(ranked, rejects, manifest, settings),
        "recompute": _recompute(refinement, settings),
        "table": _table(listed, settings, entries, left_out),
        "figures": _figures(ranked, long, settings),
        "changes": _changes(changes, baseline),
        "rejects": _rejects(rejects),
        "methods": _methods(settings),
        "references": REFERENCES,
        "cautions": _cautions(manifest),
    }
    return _environment().get_template("summary.html.j2").render(context)


_RANKED_DEFAULTS = {
    "entry_id": "string", "formula": "string", "input_hash": "string", "rank": "int32",
    "meets_all_criteria": bool, "score": float, "score_binding": float, "score_margin": float, "score_window": float,
    "pass_direct": bool, "pass_margin": bool, "pass_binding": bool, "pass_window": bool,
    "target_gap_character": "string", "target_optical_gap_ev": float, "target_emission_nm": float,
    "target_emission_band": "string", "target_binding_ev": float, "target_binding_over_kt": float,
    "target_direct_margin_ev": float, "target_bound_fraction": float, "thinning_verdict": "string",
    "warnings": "string",
}


def _ensure_columns(ranked: pd.DataFrame) -> pd.DataFrame:
    """An empty ranked table may lack columns (no compounds screened); add them, typed."""
    out = ranked.copy()
    for name, dtype in _RANKED_DEFAULTS.items():
        if name not in out.columns:
            out[name] = pd.Series(dtype=dtype)
    return out


# ---------------------------------------------------------------------------
# Orchestration (the only part that touches files, through lamellume.io)
# ---------------------------------------------------------------------------

def _read_snapshot(path: Path) -> pd.DataFrame | None:
    if not path.exists():
        return None
    try:
        frame = io.read_parquet(path)
    except Exception as exc:  # a damaged history is reported and ignored, never trusted
        log.warning("ignoring unreadable history snapshot %s: %s", path, exc)
        return None
    missing = [c for c in ("entry_id", "input_hash", "rank", "meets_all_criteria", "score") if c not in frame.columns]
    if missing:
        log.warning("ignoring history snapshot %s without columns %s", path, missing)
        return None
    return frame


def _baseline_info(frame: pd.DataFrame, config_hash: str) -> dict:
    def first(col):
        if col in frame.columns and len(frame):
            value = frame[col].iloc[0]
            return "" if pd.isna(value) else str(value)
        return ""

    then = first("config_hash")
    return {"run_utc": first("run_utc"), "config_hash": then, "config_hash_now": config_hash,
            "config_changed": bool(then and config_hash and then != config_hash)}


#: Columns of the long table the page uses (the file can be large: read only these).
LONG_COLUMNS_USED = ["entry_id", "layers", "environment", "gap_character", "direct_gap_ev",
                     "optical_gap_ev", "binding_ev", "emission_nm", "emission_compensated_nm"]


def write_summary(inputs: Mapping[str, str], outputs: Mapping[str, str], settings: Mapping,
                  history: str) -> dict[str, int]:
    """Read the run's tables, write the HTML summary and the change table, then rotate the history.

    Parameters
    ----------
    inputs : paths 'long', 'wide' (ranked), 'rejects', 'manifest'; optional 'entries' (for provenance).
    outputs : paths 'html' and 'changes'.
    settings : the full workflow config.
    history : folder keeping the ranked snapshots of earlier runs.

    The snapshot of this run replaces ``last_ranked.parquet`` only after the page and
    the change table are written; the replaced one is kept as ``previous_ranked.parquet``.
    A re-run that ranks exactly as the last one compares with the run before it, so
    repeating a run does not wipe out the change report.
    """
    ranked = io.read_parquet(inputs["wide"])
    present = set(io.parquet_column_names(inputs["long"]))
    long = io.read_parquet(inputs["long"], columns=[c for c in LONG_COLUMNS_USED if c in present])
    rejects = io.read_parquet(inputs["rejects"])
    manifest = io.read_json(inputs["manifest"])
    entries = io.read_parquet(inputs["entries"]) if inputs.get("entries") else None
    if entries is not None:
        entries = entries[[c for c in ("entry_id", "provenance", "source_hashes") if c in entries.columns]]
    config_hash = str(manifest.get("config_hash", ""))
    current = snapshot(ranked, run_utc=str(manifest.get("written_utc", "")), config_hash=config_hash)
    if entries is not None and "source_hashes" in entries.columns:
        sources = dict(zip(entries["entry_id"].astype(str), entries["source_hashes"].astype(str)))
        current["source_hashes"] = pd.array([sources.get(str(e), "") for e in current["entry_id"]], dtype="string")

    folder = Path(history)
    last = _read_snapshot(folder / LAST_SNAPSHOT)
    previous = _read_snapshot(folder / PREVIOUS_SNAPSHOT)
    rotate = True
    baseline_frame = last
    if last is not None and _same_ranking(last, current):
        # A repeat of the last run: report what that run reported (against the run
        # before it, or as a first run), so a re-run equals the run it repeats.
        rotate = False
        baseline_frame = previous
    if not len(current):  # an empty screen never becomes the baseline of the next run
        rotate = False
    changes = compare_runs(baseline_frame, current)
    baseline = None if baseline_frame is None else _baseline_info(baseline_frame, config_hash)

    refinement = io.read_parquet(inputs["refinement"]) if inputs.get("refinement") else None
    page = build_html(ranked, long, rejects, manifest, changes, settings, baseline=baseline, entries=entries,
                      refinement=refinement)
    io.write_parquet(changes, outputs["changes"], descriptions=CHANGE_DESCRIPTIONS,
                     table_metadata={"config_hash": config_hash,
                                     "compared_with_run": baseline["run_utc"] if baseline else ""})
    io.write_text(page, outputs["html"])
    if rotate:
        if last is not None:
            io.write_parquet(last, folder / PREVIOUS_SNAPSHOT)
        io.write_parquet(current, folder / LAST_SNAPSHOT)
    counts = {"screened": len(ranked), "changes": len(changes), "html_bytes": len(page.encode("utf-8"))}
    log.info("summary written: %s", counts)
    return counts
