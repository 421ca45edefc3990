"""Run report for experimental teams: the change report and the HTML summary.

Three parts, kept apart on purpose:

* :func:`compare_runs` -- pure: the ranked snapshot of the previous run and of
  this one in, one row per changed compound out (the change report);
* :func:`build_html` -- pure: tables and dicts in, one self-contained HTML page
  out (inline CSS, inline SVG plots drawn here, a small hand-written script; no
  network access of any kind, so it opens offline and from an e-mail attachment);
* :func:`write_summary` -- orchestration: reads the tables through
  :mod:`flakelight.io`, writes the page and the change table, and only then
  rotates the history snapshot, so a failed report never moves the baseline.

Safety of the page
------------------
Every text that comes from input data (identifiers, formulas, provenance,
warnings, reject messages, file names, config strings) goes through
:func:`html.escape` before it reaches the page; data handed to the script is
JSON inside ``<script type="application/json">`` with ``<``, ``>``, ``&``,
U+2028 and U+2029 escaped, and the script only ever reads it with
``JSON.parse`` and writes it with ``textContent``. A Content-Security-Policy
allows exactly the page's own script (by its SHA-256), so even a slip in the
escaping could not run injected code.
"""

from __future__ import annotations

import base64
import hashlib
import html
import json
import logging
import math
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import constants as _c

from flakelight import io, units

log = logging.getLogger("flakelight")

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

#: Unit conversion: meV per eV.
MEV_PER_EV = 1.0 / _c.milli

TICK, CROSS, DASH = "\u2713", "\u2717", "\u2014"

#: Number of candidates drawn as lines in the gap-versus-thickness plot.
LINES_IN_THICKNESS_PLOT = 8


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
                parts.append("record or structure file changed")
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
# Small helpers for the page
# ---------------------------------------------------------------------------

def _e(value: Any) -> str:
    """HTML-escaped text of any value (quotes too, so it is safe inside attributes)."""
    if value is None:
        return ""
    if isinstance(value, float) and not math.isfinite(value):
        return ""
    return html.escape(str(value), quote=True)


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
        return "\u2014" if math.isnan(value) else ("\u221e" if value > 0 else "\u2212\u221e")
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


def _has_band(ranked: pd.DataFrame, base: str) -> bool:
    return f"{base}_p16" in ranked.columns and f"{base}_p84" in ranked.columns


# ---------------------------------------------------------------------------
# Inline SVG plots
# ---------------------------------------------------------------------------

GAP_COLOURS = {"direct": "#c4532b", "indirect": "#3a6f9a", "unknown": "#8b8b86"}
LINE_COLOURS = ("#c4532b", "#3a6f9a", "#5f8f3e", "#8a5aa6", "#b8860b", "#2a9d8f", "#a23b72", "#555b6e")
INK = "#1e2a33"
MUTED = "#6b7280"
GRID = "#e4e1d8"


def _nice_step(span: float, target: int) -> float:
    raw = span / max(target, 1)
    mag = 10 ** math.floor(math.log10(raw))
    for mult in (1, 2, 2.5, 5, 10):
        if raw <= mult * mag:
            return mult * mag
    return 10 * mag


def _linear_ticks(lo: float, hi: float, target: int = 6) -> tuple[float, float, list[float]]:
    if not (math.isfinite(lo) and math.isfinite(hi)):
        lo, hi = 0.0, 1.0
    if hi <= lo:
        pad = abs(lo) * 0.1 or 0.5
        lo, hi = lo - pad, hi + pad
    step = _nice_step(hi - lo, target)
    start, stop = math.floor(lo / step) * step, math.ceil(hi / step) * step
    ticks = [start + i * step for i in range(int(round((stop - start) / step)) + 1)]
    return start, stop, ticks


def _log_ticks(lo: float, hi: float) -> tuple[float, float, list[float]]:
    lo = max(lo, 1e-6)
    hi = max(hi, lo * 1.5)
    start = 10 ** math.floor(math.log10(lo))
    stop = 10 ** math.ceil(math.log10(hi))
    ticks = []
    decade = start
    while decade <= stop * 1.0001:
        for m in (1, 2, 5):
            t = decade * m
            if lo / 1.3 <= t <= hi * 1.3:
                ticks.append(t)
        decade *= 10
    low = min([t for t in ticks] + [lo]) if ticks else lo
    high = max([t for t in ticks] + [hi]) if ticks else hi
    return low, high, ticks


class _Axes:
    """Maps data to SVG coordinates for one plot panel."""

    def __init__(self, width=560, height=340, left=62, right=18, top=16, bottom=48):
        self.w, self.h = width, height
        self.x0, self.x1 = left, width - right
        self.y0, self.y1 = height - bottom, top
        self.xlim = (0.0, 1.0)
        self.ylim = (0.0, 1.0)
        self.ylog = False

    def x(self, v: float) -> float:
        a, b = self.xlim
        return self.x0 + (v - a) / (b - a) * (self.x1 - self.x0)

    def y(self, v: float) -> float:
        a, b = self.ylim
        if self.ylog:
            v, a, b = math.log10(max(v, 1e-12)), math.log10(a), math.log10(b)
        return self.y0 + (v - a) / (b - a) * (self.y1 - self.y0)

    def frame(self, xticks, yticks, xlabel: str, ylabel: str, xfmt=None, yfmt=None) -> list[str]:
        xfmt = xfmt or (lambda v: f"{v:g}")
        yfmt = yfmt or (lambda v: f"{v:g}")
        out = []
        for t in yticks:
            yy = self.y(t)
            out.append(f'<line class="grid" x1="{self.x0:.1f}" x2="{self.x1:.1f}" y1="{yy:.1f}" y2="{yy:.1f}"/>')
            out.append(f'<text class="tick" x="{self.x0 - 6:.1f}" y="{yy + 4:.1f}" text-anchor="end">{_e(yfmt(t))}</text>')
        for t in xticks:
            xx = self.x(t)
            out.append(f'<line class="tickmark" x1="{xx:.1f}" x2="{xx:.1f}" y1="{self.y0:.1f}" y2="{self.y0 + 5:.1f}"/>')
            out.append(f'<text class="tick" x="{xx:.1f}" y="{self.y0 + 18:.1f}" text-anchor="middle">{_e(xfmt(t))}</text>')
        out.append(f'<line class="axis" x1="{self.x0:.1f}" x2="{self.x1:.1f}" y1="{self.y0:.1f}" y2="{self.y0:.1f}"/>')
        out.append(f'<line class="axis" x1="{self.x0:.1f}" x2="{self.x0:.1f}" y1="{self.y0:.1f}" y2="{self.y1:.1f}"/>')
        out.append(f'<text class="label" x="{(self.x0 + self.x1) / 2:.1f}" y="{self.h - 8:.1f}" '
                   f'text-anchor="middle">{_e(xlabel)}</text>')
        cy = (self.y0 + self.y1) / 2
        out.append(f'<text class="label" transform="translate(14 {cy:.1f}) rotate(-90)" '
                   f'text-anchor="middle">{_e(ylabel)}</text>')
        return out


def _svg(axes: _Axes, body: list[str], title: str, plot_id: str) -> str:
    return (f'<svg class="chart" id="{_e(plot_id)}" viewBox="0 0 {axes.w} {axes.h}" role="img" '
            f'aria-label="{_e(title)}" xmlns="http://www.w3.org/2000/svg">' + "".join(body) + "</svg>")


def _empty_plot(message: str, plot_id: str) -> str:
    return (f'<svg class="chart empty" id="{_e(plot_id)}" viewBox="0 0 560 120" role="img" aria-label="{_e(message)}" '
            f'xmlns="http://www.w3.org/2000/svg"><text x="280" y="64" text-anchor="middle" class="label">'
            f'{_e(message)}</text></svg>')


#: Probability columns shown inside the criterion cells of the compound table.
CRITERION_PROBABILITY = {"pass_direct": "p_direct_target", "pass_margin": "p_pass_margin",
                         "pass_binding": "p_pass_binding", "pass_window": "p_pass_window"}
PROBABILITY_LABELS = {"p_meets_all": "P(all met)"}

#: The compound table lists the best-ranked compounds up to this many rows, so a screen of
#: tens of thousands still gives a page that opens in seconds (plots and counts use all).
MAX_TABLE_ROWS = 3000
#: At most this many compounds are drawn in the binding-versus-gap plot (candidates first).
SCATTER_POINT_CAP = 2500
#: At most this many compounds are drawn per group of the surroundings plot (candidates first).
GROUP_POINT_CAP = 400


def _plot_subset(priority: np.ndarray, cap: int) -> np.ndarray:
    """Indices to draw: every priority point (up to ``cap``), then evenly spaced others."""
    priority = np.asarray(priority, dtype=bool)
    first = np.flatnonzero(priority)[:cap]
    rest = np.flatnonzero(~priority)
    room = cap - len(first)
    if room <= 0 or not len(rest):
        return np.sort(first)
    if len(rest) > room:
        rest = rest[np.linspace(0, len(rest) - 1, room).round().astype(int)]
    return np.sort(np.concatenate([first, rest]))


def _sample_note(ax: "_Axes", shown: int, total: int) -> str:
    if shown >= total:
        return ""
    return (f'<text class="note" x="{ax.x1:.1f}" y="{ax.y1 - 4:.1f}" text-anchor="end">'
            f'showing {shown} of {total}: every candidate, then an even sample</text>')


def _tip(*lines: str) -> str:
    return _e("\n".join(lines))


def plot_binding_vs_gap(ranked: pd.DataFrame, settings: Mapping) -> str:
    """Binding energy (meV) against optical gap (eV) at the target thickness, coloured by gap character."""
    r = settings["ranking"]
    env, n_target = r["environment"], int(r["target_layers"])
    gap = ranked["target_optical_gap_ev"].to_numpy(dtype=float) if len(ranked) else np.zeros(0)
    eb = ranked["target_binding_ev"].to_numpy(dtype=float) * MEV_PER_EV if len(ranked) else np.zeros(0)
    ok = np.isfinite(gap) & np.isfinite(eb)
    if not ok.any():
        return _empty_plot("No compound has both an optical gap and a binding energy to plot.", "plot-binding-gap")
    ax = _Axes()
    gap_band = _has_band(ranked, "target_optical_gap_ev")
    eb_band = _has_band(ranked, "target_binding_ev")
    xs, ys = list(gap[ok]), list(eb[ok])
    if gap_band:
        xs += [v for v in ranked["target_optical_gap_ev_p16"].to_numpy(dtype=float) if np.isfinite(v)]
        xs += [v for v in ranked["target_optical_gap_ev_p84"].to_numpy(dtype=float) if np.isfinite(v)]
    if eb_band:
        ys += [v * MEV_PER_EV for v in ranked["target_binding_ev_p16"].to_numpy(dtype=float) if np.isfinite(v)]
        ys += [v * MEV_PER_EV for v in ranked["target_binding_ev_p84"].to_numpy(dtype=float) if np.isfinite(v)]
    t_k = float(settings["survival"]["temperature_k"])
    need_mev = float(r["min_binding_over_kt"]) * units.thermal_energy_ev(t_k) * MEV_PER_EV
    lo_nm, hi_nm = sorted(float(v) for v in r["window_nm"])
    win_ev = (units.wavelength_nm_from_energy_ev(hi_nm), units.wavelength_nm_from_energy_ev(lo_nm))
    x_lo, x_hi, xticks = _linear_ticks(min(xs), max(xs))
    y_lo, y_hi, yticks = _linear_ticks(0.0, max(max(ys), need_mev * 1.1))
    ax.xlim, ax.ylim = (x_lo, x_hi), (y_lo, y_hi)
    body = []
    # Target window in energy terms, clipped to the panel.
    wa, wb = max(win_ev[0], x_lo), min(win_ev[1], x_hi)
    if wb > wa:
        body.append(f'<rect class="window" x="{ax.x(wa):.1f}" y="{ax.y1:.1f}" width="{ax.x(wb) - ax.x(wa):.1f}" '
                    f'height="{ax.y0 - ax.y1:.1f}"><title>target emission window {lo_nm:g}\u2013{hi_nm:g} nm</title></rect>')
    body += ax.frame(xticks, yticks, f"optical gap at {n_target} layer(s), {env} (eV)", "binding energy (meV)")
    if need_mev <= y_hi:
        yy = ax.y(need_mev)
        body.append(f'<line class="threshold" x1="{ax.x0:.1f}" x2="{ax.x1:.1f}" y1="{yy:.1f}" y2="{yy:.1f}"/>')
        body.append(f'<text class="note" x="{ax.x1 - 4:.1f}" y="{yy - 5:.1f}" text-anchor="end">'
                    f'needed: {float(r["min_binding_over_kt"]):g} kT = {need_mev:.0f} meV at {t_k:g} K</text>')
    character = ranked["target_gap_character"].astype(str).to_numpy()
    cand = ranked["meets_all_criteria"].to_numpy(dtype=bool)
    ids = ranked["entry_id"].astype(str).to_numpy()
    formula = ranked["formula"].astype(str).to_numpy() if "formula" in ranked.columns else np.full(len(ranked), "")
    drawn = np.flatnonzero(ok)[_plot_subset(cand[ok], SCATTER_POINT_CAP)]
    body.append(_sample_note(ax, len(drawn), int(ok.sum())))
    order = drawn[np.argsort(cand[drawn].astype(int), kind="stable")]  # candidates drawn last, on top
    for i in order:
        cx, cy = ax.x(gap[i]), ax.y(eb[i])
        colour = GAP_COLOURS.get(character[i], GAP_COLOURS["unknown"])
        if gap_band or eb_band:
            if gap_band:
                a, b = (_num(ranked[f"target_optical_gap_ev_{q}"].iloc[i]) for q in ("p16", "p84"))
                if math.isfinite(a) and math.isfinite(b):
                    body.append(f'<line class="errbar" data-id="{_e(ids[i])}" x1="{ax.x(a):.1f}" x2="{ax.x(b):.1f}" '
                                f'y1="{cy:.1f}" y2="{cy:.1f}" stroke="{colour}"/>')
            if eb_band:
                a, b = (_num(ranked[f"target_binding_ev_{q}"].iloc[i]) * MEV_PER_EV for q in ("p16", "p84"))
                if math.isfinite(a) and math.isfinite(b):
                    body.append(f'<line class="errbar" data-id="{_e(ids[i])}" x1="{cx:.1f}" x2="{cx:.1f}" '
                                f'y1="{ax.y(a):.1f}" y2="{ax.y(b):.1f}" stroke="{colour}"/>')
        tip = _tip(f"#{int(ranked['rank'].iloc[i])}  {ids[i]}", formula[i],
                   f"{character[i]} gap; optical gap {gap[i]:.3f} eV",
                   f"binding {eb[i]:.0f} meV" + ("  \u2014 candidate" if cand[i] else ""))
        cls = "pt cand" if cand[i] else "pt"
        body.append(f'<circle class="{cls}" data-id="{_e(ids[i])}" data-tip="{tip}" cx="{cx:.1f}" cy="{cy:.1f}" '
                    f'r="{5.5 if cand[i] else 4.2}" fill="{colour}"/>')
    return _svg(ax, body, "Binding energy against optical gap", "plot-binding-gap")


def plot_gap_vs_layers(ranked: pd.DataFrame, long: pd.DataFrame, settings: Mapping) -> str:
    """Optical gap against layer count for the leading compounds, one line each (bulk at the right)."""
    r = settings["ranking"]
    env = r["environment"]
    top = ranked[ranked["meets_all_criteria"].astype(bool)] if len(ranked) else ranked
    if not len(top):
        top = ranked
    top = top.head(LINES_IN_THICKNESS_PLOT)
    if not len(top) or not len(long):
        return _empty_plot("No compounds to draw against thickness.", "plot-gap-layers")
    max_layers = int(settings.get("layers", {}).get("max_layers", int(long["layers"].max() or 1)))
    bulk_x = max_layers + 1
    series = []
    for j, (eid, formula) in enumerate(zip(top["entry_id"].astype(str), top.get("formula", top["entry_id"]).astype(str))):
        rows = long[(long["entry_id"].astype(str) == eid)
                    & ((long["environment"] == env) | (long["layers"] == 0))]
        pts = []
        for lay, gap in zip(rows["layers"].to_numpy(dtype=int), rows["optical_gap_ev"].to_numpy(dtype=float)):
            if np.isfinite(gap):
                pts.append((bulk_x if lay == 0 else lay, gap))
        pts.sort()
        if pts:
            series.append((eid, formula, LINE_COLOURS[j % len(LINE_COLOURS)], pts))
    if not series:
        return _empty_plot("No optical gaps to draw against thickness.", "plot-gap-layers")
    ys = [p[1] for s in series for p in s[3]]
    ax = _Axes(width=560, height=340, right=120)
    y_lo, y_hi, yticks = _linear_ticks(min(ys), max(ys))
    ax.xlim, ax.ylim = (0.6, bulk_x + 0.4), (y_lo, y_hi)
    xticks = list(range(1, bulk_x + 1))
    body = ax.frame(xticks, yticks, f"layer count ({env}; bulk crystal at right)", "optical gap (eV)",
                    xfmt=lambda v: "bulk" if int(v) == bulk_x else f"{int(v)}")
    n_target = int(r["target_layers"])
    if 1 <= n_target <= max_layers:
        xx = ax.x(n_target)
        body.append(f'<line class="target" x1="{xx:.1f}" x2="{xx:.1f}" y1="{ax.y0:.1f}" y2="{ax.y1:.1f}"/>')
    for k, (eid, formula, colour, pts) in enumerate(series):
        few = [p for p in pts if p[0] != bulk_x]
        path = " ".join(f"{ax.x(x):.1f},{ax.y(y):.1f}" for x, y in few)
        body.append(f'<g class="series" data-id="{_e(eid)}">')
        if len(few) > 1:
            body.append(f'<polyline class="line" points="{path}" stroke="{colour}"/>')
        bulk = [p for p in pts if p[0] == bulk_x]
        if few and bulk:
            body.append(f'<line class="line dashed" x1="{ax.x(few[-1][0]):.1f}" y1="{ax.y(few[-1][1]):.1f}" '
                        f'x2="{ax.x(bulk_x):.1f}" y2="{ax.y(bulk[0][1]):.1f}" stroke="{colour}"/>')
        for x, y in pts:
            where = "bulk crystal" if x == bulk_x else f"{x} layer(s)"
            tip = _tip(eid, formula, f"{where}: optical gap {y:.3f} eV")
            body.append(f'<circle class="pt" data-id="{_e(eid)}" data-tip="{tip}" cx="{ax.x(x):.1f}" '
                        f'cy="{ax.y(y):.1f}" r="3.6" fill="{colour}"/>')
        body.append("</g>")
        ly = ax.y1 + 6 + k * 17
        body.append(f'<g class="legend" data-id="{_e(eid)}"><line x1="{ax.x1 + 12:.1f}" x2="{ax.x1 + 30:.1f}" '
                    f'y1="{ly:.1f}" y2="{ly:.1f}" stroke="{colour}" stroke-width="3"/>'
                    f'<text class="tick" x="{ax.x1 + 35:.1f}" y="{ly + 4:.1f}">{_e(eid)}</text></g>')
    return _svg(ax, body, "Optical gap against layer count for the leading compounds", "plot-gap-layers")


def plot_emission_histogram(ranked: pd.DataFrame, settings: Mapping) -> str:
    """Histogram of emission wavelengths at the target thickness; candidates stacked dark."""
    lam = ranked["target_emission_nm"].to_numpy(dtype=float) if len(ranked) else np.zeros(0)
    cand = ranked["meets_all_criteria"].to_numpy(dtype=bool) if len(ranked) else np.zeros(0, bool)
    ok = np.isfinite(lam)
    if not ok.any():
        return _empty_plot("No emission wavelengths to count.", "plot-emission")
    lo_nm, hi_nm = sorted(float(v) for v in settings["ranking"]["window_nm"])
    lo, hi, _ = _linear_ticks(float(lam[ok].min()), float(lam[ok].max()), 8)
    step = _nice_step(hi - lo, 18)
    lo, hi = math.floor(lo / step) * step, math.ceil(hi / step) * step
    if hi <= lo:
        hi = lo + step
    edges = np.arange(lo, hi + step * 0.5, step)
    all_counts, _ = np.histogram(lam[ok], bins=edges)
    cand_counts, _ = np.histogram(lam[ok & cand], bins=edges)
    ax = _Axes()
    _, y_hi, yticks = _linear_ticks(0, max(int(all_counts.max()), 1), 5)
    yticks = [t for t in yticks if float(t).is_integer()]
    ax.xlim, ax.ylim = (lo, hi), (0, y_hi)
    body = []
    wa, wb = max(lo_nm, lo), min(hi_nm, hi)
    if wb > wa:
        body.append(f'<rect class="window" x="{ax.x(wa):.1f}" y="{ax.y1:.1f}" width="{ax.x(wb) - ax.x(wa):.1f}" '
                    f'height="{ax.y0 - ax.y1:.1f}"/>')
        body.append(f'<text class="note" x="{ax.x(wa) + 4:.1f}" y="{ax.y1 + 12:.1f}">target window</text>')
    _, _, xticks = _linear_ticks(lo, hi, 7)
    body += ax.frame([t for t in xticks if lo <= t <= hi], yticks,
                     f"emission wavelength at {int(settings['ranking']['target_layers'])} layer(s) (nm)",
                     "compounds", xfmt=lambda v: f"{v:g}", yfmt=lambda v: f"{int(v)}")
    for a, b, n_all, n_c in zip(edges[:-1], edges[1:], all_counts, cand_counts):
        if n_all == 0:
            continue
        x, wdt = ax.x(a) + 1, ax.x(b) - ax.x(a) - 2
        tip = _tip(f"{a:g}\u2013{b:g} nm", f"{int(n_all)} compound(s), {int(n_c)} candidate(s)")
        body.append(f'<g class="bar" data-tip="{tip}"><title>{tip}</title>'
                    f'<rect class="bar-all" x="{x:.1f}" y="{ax.y(n_all):.1f}" width="{wdt:.1f}" '
                    f'height="{ax.y(0) - ax.y(n_all):.1f}"/>')
        if n_c:
            body.append(f'<rect class="bar-cand" x="{x:.1f}" y="{ax.y(n_c):.1f}" width="{wdt:.1f}" '
                        f'height="{ax.y(0) - ax.y(n_c):.1f}"/>')
        body.append("</g>")
    return _svg(ax, body, "Emission wavelength distribution", "plot-emission")


def plot_binding_by_environment(ranked: pd.DataFrame, long: pd.DataFrame, settings: Mapping) -> str:
    """Binding energy at the target thickness in every environment (and bulk), one dot per compound."""
    r = settings["ranking"]
    n_target = int(r["target_layers"])
    envs = list(settings.get("environments", {}))
    if len(long):
        seen = [e for e in pd.unique(long["environment"].astype(str)) if e not in envs and e != "bulk crystal"]
        envs += seen
    groups = envs + ["bulk crystal"]
    if not len(long) or not len(ranked):
        return _empty_plot("No binding energies to compare across surroundings.", "plot-environment")
    cand = dict(zip(ranked["entry_id"].astype(str), ranked["meets_all_criteria"].astype(bool)))
    rank_of = dict(zip(ranked["entry_id"].astype(str), ranked["rank"].astype(int)))
    sel = long[((long["layers"] == n_target) & (long["environment"].isin(envs))) | (long["layers"] == 0)]
    data = []
    for g in groups:
        rows = sel[sel["environment"].astype(str) == g]
        vals = rows["binding_ev"].to_numpy(dtype=float) * MEV_PER_EV
        ids = rows["entry_id"].astype(str).to_numpy()
        keep = np.isfinite(vals) & (vals > 0)
        data.append((g, ids[keep], vals[keep]))
    allv = np.concatenate([d[2] for d in data]) if data else np.zeros(0)
    if not len(allv):
        return _empty_plot("No binding energies to compare across surroundings.", "plot-environment")
    ax = _Axes(width=560, height=340)
    y_lo, y_hi, yticks = _log_ticks(float(allv.min()), float(allv.max()))
    ax.ylog, ax.ylim, ax.xlim = True, (y_lo, y_hi), (-0.5, len(groups) - 0.5)
    body = ax.frame([], yticks, "", "binding energy (meV, log scale)", yfmt=lambda v: f"{v:g}")
    env_ranked = r["environment"]
    for k, (g, ids, vals) in enumerate(data):
        cx = ax.x(k)
        label = f"{g}" if g == "bulk crystal" else f"{g} ({n_target} L)"
        cls = "tick strong" if g == env_ranked else "tick"
        body.append(f'<text class="{cls}" x="{cx:.1f}" y="{ax.y0 + 18:.1f}" text-anchor="middle">{_e(label)}</text>')
        if not len(vals):
            continue
        is_cand = np.array([cand.get(x, False) for x in ids], dtype=bool)
        keep = _plot_subset(is_cand, GROUP_POINT_CAP)
        if len(keep) < len(vals):
            body.append(f'<text class="note" x="{cx:.1f}" y="{ax.y1 + 2:.1f}" text-anchor="middle">'
                        f'{len(keep)} of {len(vals)} drawn</text>')
        order = keep[np.argsort(vals[keep], kind="stable")]
        span = (ax.x(1) - ax.x(0)) * 0.34
        for j, i in enumerate(order):
            jitter = ((j * 0.618034) % 1.0 - 0.5) * 2 * span
            is_c = cand.get(ids[i], False)
            tip = _tip(f"#{rank_of.get(ids[i], 0)}  {ids[i]}", f"{g}: binding {vals[i]:.0f} meV")
            body.append(f'<circle class="pt{" cand" if is_c else " other"}" data-id="{_e(ids[i])}" data-tip="{tip}" '
                        f'cx="{cx + jitter:.1f}" cy="{ax.y(vals[i]):.1f}" r="{4.2 if is_c else 3.2}"/>')
        med = float(np.median(vals))
        my = ax.y(med)
        body.append(f'<line class="median" x1="{cx - span - 6:.1f}" x2="{cx + span + 6:.1f}" y1="{my:.1f}" y2="{my:.1f}">'
                    f'<title>median {med:.0f} meV</title></line>')
    return _svg(ax, body, "Binding energy per surroundings", "plot-environment")


# ---------------------------------------------------------------------------
# Page sections
# ---------------------------------------------------------------------------

def _criteria_words(settings: Mapping) -> list[tuple[str, str, str]]:
    """(key, short header, sentence) for each ranking criterion."""
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    n = int(r["target_layers"])
    need = float(r["min_binding_over_kt"])
    need_mev = need * units.thermal_energy_ev(t_k) * MEV_PER_EV
    lo, hi = sorted(float(v) for v in r["window_nm"])
    direct = (f"the gap is direct (bright) at {n} layer(s)" if r["require_direct"]
              else f"the gap character at {n} layer(s) is known (direct not required)")
    return [
        ("pass_direct", "Bright", direct),
        ("pass_margin", "Margin", f"the lowest direct transition lies at least "
                                  f"{float(r['min_direct_margin_ev']) * MEV_PER_EV:g} meV below the indirect one"),
        ("pass_binding", "Bound", f"the binding energy is at least {need:g} kT "
                                  f"({need_mev:.0f} meV at {t_k:g} K)"),
        ("pass_window", "Window", f"the emission lies inside {lo:g}\u2013{hi:g} nm"),
    ]


def _reasons(row: Mapping, settings: Mapping) -> list[str]:
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    n = int(r["target_layers"])
    lo, hi = sorted(float(v) for v in r["window_nm"])
    out = []
    margin = _num(row.get("target_direct_margin_ev"))
    if row.get("target_gap_character") == "direct":
        if math.isinf(margin):
            out.append(f"Bright at {n} layer(s): direct gap, no indirect transition competes.")
        else:
            out.append(f"Bright at {n} layer(s): the direct transition sits {_fmt(margin, 0, MEV_PER_EV)} meV "
                       "below the indirect one.")
    else:
        out.append(f"Gap at {n} layer(s) is {_text(row.get('target_gap_character')) or 'unknown'}.")
    out.append(f"Bound: {_fmt(row.get('target_binding_ev'), 0, MEV_PER_EV)} meV, "
               f"{_fmt(row.get('target_binding_over_kt'), 1)} kT at {t_k:g} K"
               + (f"; {_fmt(_num(row.get('target_bound_fraction')) * 100, 0)} % of pairs bound."
                  if math.isfinite(_num(row.get("target_bound_fraction"))) else "."))
    lam = _num(row.get("target_emission_nm"))
    where = "inside" if lo <= lam <= hi else "outside"
    out.append(f"Emits at {_fmt(lam, 0)} nm ({_text(row.get('target_emission_band')) or 'no band'}), "
               f"{where} the {lo:g}\u2013{hi:g} nm window.")
    verdict = _text(row.get("thinning_verdict"))
    if verdict:
        out.append(f"Thinning: {verdict}.")
    if "p_meets_all" in row and math.isfinite(_num(row.get("p_meets_all"))):
        out.append(f"Chance that every criterion holds within the input uncertainties: "
                   f"{_fmt(_num(row['p_meets_all']) * 100, 0)} %.")
    return out


def _section_make_first(ranked: pd.DataFrame, settings: Mapping) -> str:
    r = settings["ranking"]
    cands = ranked[ranked["meets_all_criteria"].astype(bool)] if len(ranked) else ranked
    env = _e(r["environment"])
    n = int(r["target_layers"])
    if not len(ranked):
        return ('<section id="make-first" class="lead"><h2>What to make first</h2>'
                '<p class="empty-note">No compound was screened in this run, so there is nothing to recommend. '
                'Check the rejected records below.</p></section>')
    if len(cands):
        intro = (f"<p>{len(cands)} compound(s) meet every criterion as {n}-layer flakes, {env}. "
                 "The first three, in ranked order:</p>")
        pick = cands.head(3)
    else:
        intro = ("<p><strong>No compound meets every criterion with these settings.</strong> "
                 "The closest three are shown with the criteria they miss:</p>")
        pick = ranked.head(3)
    words = _criteria_words(settings)
    cards = []
    for _, row in pick.iterrows():
        rowd = row.to_dict()
        missed = [short for key, short, _ in words if key in rowd and not bool(rowd[key])]
        miss = (f'<p class="miss">Misses: {_e(", ".join(missed))}</p>' if missed else "")
        reasons = "".join(f"<li>{_e(t)}</li>" for t in _reasons(rowd, settings))
        formula = _e(_text(rowd.get("formula")))
        cards.append(
            f'<article class="card"><div class="card-rank">#{int(rowd["rank"])}</div>'
            f'<h3><a href="#row-{_e(rowd["entry_id"])}" class="jump" data-id="{_e(rowd["entry_id"])}">'
            f'{_e(rowd["entry_id"])}</a></h3>'
            f'<p class="formula">{formula}</p>'
            f'<p class="big">{_fmt(rowd.get("target_emission_nm"), 0)} nm \u00b7 '
            f'{_fmt(rowd.get("target_binding_ev"), 0, MEV_PER_EV)} meV \u00b7 score {_fmt(rowd.get("score"), 2)}</p>'
            f"<ul>{reasons}</ul>{miss}</article>")
    return (f'<section id="make-first" class="lead"><h2>What to make first</h2>{intro}'
            f'<div class="cards">{"".join(cards)}</div></section>')


def _changes_digest(changes: pd.DataFrame, baseline: Mapping | None) -> str:
    if baseline is None:
        return ('<p class="digest">First recorded run: no earlier ranking to compare with. '
                'The next run will report what changed since this one.</p>')
    when = _e(baseline.get("run_utc") or "an earlier run")
    if not len(changes):
        return f'<p class="digest">Nothing changed since the run of {when}.</p>'
    counts = changes["change"].value_counts()
    parts = [f'<span class="chip k-{_e(k.replace(" ", "-"))}">{int(counts[k])} {_e(k)}</span>'
             for k in CHANGE_KINDS if k in counts.index]
    return (f'<p class="digest">Since the run of {when}: {" ".join(parts)} '
            f'<a href="#changes">see the change report</a></p>')


def _section_overview(ranked, rejects, manifest, settings) -> str:
    r = settings["ranking"]
    surv = settings["survival"]
    n_screened = len(ranked)
    n_cand = int(ranked["meets_all_criteria"].astype(bool).sum()) if n_screened else 0
    n_rej = int(rejects["entry_id"].nunique()) if len(rejects) else 0
    inputs = manifest.get("inputs", {}) if isinstance(manifest, Mapping) else {}
    n_records = len(inputs.get("entries", {}) or {})
    n_cifs = len(inputs.get("structures", {}) or {})
    tiles = [("records read", n_records or n_screened + n_rej), ("screened", n_screened),
             ("candidates", n_cand), ("rejected", n_rej)]
    tiles_html = "".join(f'<div class="tile"><span class="num">{v}</span><span class="what">{_e(k)}</span></div>'
                         for k, v in tiles)
    lo, hi = sorted(float(v) for v in r["window_nm"])
    env_list = settings.get("environments", {})
    env_txt = ", ".join(f"{name} (above {_fmt(e.get('top'), 1)}, below {_fmt(e.get('bottom'), 1)})"
                        for name, e in env_list.items())
    crit = "".join(f"<li>{_e(s)}</li>" for _, _, s in _criteria_words(settings))
    settings_rows = [
        ("Temperature", f"{float(surv['temperature_k']):g} K"),
        ("Ranked in", f"{r['environment']}, {int(r['target_layers'])} layer(s)"),
        ("Emission window", f"{lo:g}\u2013{hi:g} nm"),
        ("Score weights", ", ".join(f"{k} {float(v):g}" for k, v in r.get("weights", {}).items())),
        ("Order", "by " + str(r.get("order_by", "score"))),
        ("Pair density for bound fraction", f"{_num(surv.get('pair_density_per_cm2')):.3g} cm\u207b\u00b2 (layers), "
                                            f"{_num(surv.get('pair_density_per_cm3')):.3g} cm\u207b\u00b3 (bulk)"),
        ("Surroundings screened", env_txt),
    ]
    packages = manifest.get("packages", {}) or {}
    pk = ", ".join(f"{k} {v}" for k, v in sorted(packages.items()))
    man_rows = [
        ("Config hash", manifest.get("config_hash", "")),
        ("Code version", manifest.get("code_version", "")),
        ("Git", manifest.get("git", "")),
        ("Manifest written (UTC)", manifest.get("written_utc", "")),
        ("Campaign", (manifest.get("config", {}) or {}).get("campaign", settings.get("campaign", ""))),
        ("Input files", f"{n_records} record(s), {n_cifs} structure file(s)"),
        ("Packages", pk),
    ]

    def dl(rows):
        return "<dl>" + "".join(f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in rows) + "</dl>"

    return (f'<section id="overview"><h2>Run overview</h2><div class="tiles">{tiles_html}</div>'
            f'<div class="two-col"><div><h3>Settings</h3>{dl(settings_rows)}'
            f'<h3>A compound is a candidate when</h3><ol class="crit">{crit}</ol></div>'
            f'<div><h3>Provenance of this run</h3>{dl(man_rows)}</div></div></section>')


def _score_bar(row: Mapping, weights: Mapping) -> str:
    wb, wm, ww = (float(weights.get(k, 0)) for k in ("binding", "margin", "window"))
    total = (wb + wm + ww) or 1.0
    parts = [("binding", wb * _num(row.get("score_binding")) / total, "sb"),
             ("margin", wm * _num(row.get("score_margin")) / total, "sm"),
             ("window", ww * _num(row.get("score_window")) / total, "sw")]
    segs = "".join(f'<i class="{cls}" style="width:{(value if math.isfinite(value) else 0.0) * 48:.0f}px"></i>'
                   for _, value, cls in parts)
    title = " + ".join(f"{name} {_fmt(row.get('score_' + name), 2)}" for name in ("binding", "margin", "window"))
    return f'<span class="scorebar" title="parts: {_e(title)}" aria-hidden="true">{segs}</span>'


def _band_text(row: Mapping, base: str, digits: int, scale: float = 1.0) -> str:
    a, b = _num(row.get(f"{base}_p16")), _num(row.get(f"{base}_p84"))
    if math.isfinite(a) and math.isfinite(b):
        return f'<span class="band">{_fmt(a, digits, scale)}\u2013{_fmt(b, digits, scale)}</span>'
    return ""


def _listed_rows(ranked: pd.DataFrame, max_rows: int | None) -> tuple[pd.DataFrame, int]:
    """The best-ranked rows for the compound table, and the candidates and others left out."""
    if max_rows is None or len(ranked) <= max_rows:
        return ranked, (0, 0)
    rest = ranked.iloc[max_rows:]
    n_cand = int(rest["meets_all_criteria"].astype(bool).sum())
    return ranked.head(max_rows), (n_cand, len(rest) - n_cand)


def _section_table(ranked: pd.DataFrame, settings: Mapping, entries: pd.DataFrame | None,
                   left_out: tuple[int, int] = (0, 0)) -> str:
    r = settings["ranking"]
    t_k = float(settings["survival"]["temperature_k"])
    n = int(r["target_layers"])
    unc = uncertainty_columns(ranked.columns)
    probs = unc["probabilities"]
    words = _criteria_words(settings)
    prov = {}
    if entries is not None and len(entries) and "provenance" in entries.columns:
        prov = dict(zip(entries["entry_id"].astype(str), entries["provenance"].map(_text)))
    heads = [("rank", "Rank", "num"), ("id", "Compound", "text"), ("status", "Status", "text")]
    heads += [(key, short, "text") for key, short, _ in words]
    heads += [("score", "Score", "num"), ("gap", "Optical gap|eV", "num"), ("nm", "Emission|nm, band", "num"),
              ("eb", "Binding|meV", "num"), ("ebkt", f"E_b/kT|at {t_k:g} K", "num"),
              ("thin", "Thinning", "text")]
    in_cells = {key: col for key, col in CRITERION_PROBABILITY.items() if col in probs}
    extra_probs = sorted((p for p in probs if p not in in_cells.values()), key=lambda p: p != "p_meets_all")
    heads += [(p, PROBABILITY_LABELS.get(p, "P(" + p[2:].replace("_", " ") + ")") + "|%", "num")
              for p in extra_probs]
    sentences = {k: w for k, _, w in words}

    def header(key: str, label: str, kind: str) -> str:
        name, _, unit = label.partition("|")
        title = f' title="{_e(sentences[key])}"' if key in sentences else ""
        unit_html = f'<span class="unit">{_e(unit)}</span>' if unit else ""
        return (f'<th scope="col" data-type="{kind}" tabindex="0" aria-sort="none"{title}>'
                f'{_e(name)}<span class="arrow"></span>{unit_html}</th>')

    th = "".join(header(key, label, kind) for key, label, kind in heads)
    body = []
    weights = r.get("weights", {})
    for _, row in ranked.iterrows():
        d = row.to_dict()
        eid = _text(d["entry_id"])
        cand = bool(d.get("meets_all_criteria"))
        n_missed = sum(1 for key, _, _ in words if not bool(d.get(key)))
        search = " ".join(_text(d.get(c)) for c in ("entry_id", "formula", "target_emission_band",
                                                     "thinning_verdict", "target_gap_character")).lower()
        warn = _text(d.get("warnings"))
        extra = []
        if prov.get(eid):
            extra.append(f'<span class="prov" title="{_e(prov[eid])}">{_e(prov[eid])}</span>')
        if warn:
            extra.append(f'<span class="warn" title="{_e(warn)}">\u26a0 note</span>')
            search += " " + warn.lower()
        cells = [
            f'<td class="num" data-v="{_sort_value(d.get("rank"))}">{int(d["rank"])}</td>',
            f'<td class="idcell" data-v="{_e(eid.lower())}"><span class="eid">{_e(eid)}</span>'
            f'<span class="formula" title="{_e(_text(d.get("formula")))}">{_e(_text(d.get("formula")))}</span>'
            f'{"".join(extra)}</td>',
            f'<td data-v="{0 if cand else n_missed}">' + ('<span class="badge yes">candidate</span>' if cand
                                                          else f'<span class="badge no">misses {n_missed}</span>')
            + "</td>",
        ]
        details = {
            "pass_direct": f"{_text(d.get('target_gap_character')) or 'unknown'} at {n} layer(s)",
            "pass_margin": f"margin {_fmt(d.get('target_direct_margin_ev'), 0, MEV_PER_EV)} meV",
            "pass_binding": f"{_fmt(d.get('target_binding_over_kt'), 1)} kT",
            "pass_window": f"{_fmt(d.get('target_emission_nm'), 0)} nm",
        }
        for key, _, _ in words:
            ok = bool(d.get(key))
            chance = _num(d.get(in_cells[key])) if key in in_cells else math.nan
            prob = (f'<span class="pc" title="chance this criterion holds">{chance * 100:.0f}%</span>'
                    if math.isfinite(chance) else "")
            cells.append(f'<td class="crit {"ok" if ok else "bad"}" data-v="{1 if ok else 0}" '
                         f'title="{_e(details[key])}">{TICK if ok else CROSS}'
                         f'<span class="sr"> {"pass" if ok else "fail"}</span>{prob}</td>')
        cells += [
            f'<td class="num" data-v="{_sort_value(d.get("score"))}">{_score_bar(d, weights)} {_fmt(d.get("score"), 3)}</td>',
            f'<td class="num" data-v="{_sort_value(d.get("target_optical_gap_ev"))}">{_fmt(d.get("target_optical_gap_ev"), 3)}'
            f'{_band_text(d, "target_optical_gap_ev", 3)}</td>',
            f'<td class="num" data-v="{_sort_value(d.get("target_emission_nm"))}">{_fmt(d.get("target_emission_nm"), 0)}'
            f'{_band_text(d, "target_emission_nm", 0)}'
            f'<span class="bandname">{_e(_text(d.get("target_emission_band")))}</span></td>',
            f'<td class="num" data-v="{_sort_value(d.get("target_binding_ev"), MEV_PER_EV)}">'
            f'{_fmt(d.get("target_binding_ev"), 0, MEV_PER_EV)}{_band_text(d, "target_binding_ev", 0, MEV_PER_EV)}</td>',
            f'<td class="num" data-v="{_sort_value(d.get("target_binding_over_kt"))}">{_fmt(d.get("target_binding_over_kt"), 1)}</td>',
            f'<td class="verdict">{_e(_text(d.get("thinning_verdict")))}</td>',
        ]
        for p in extra_probs:
            v = _num(d.get(p))
            cells.append(f'<td class="num" data-v="{_sort_value(v)}">{_fmt(v * 100, 0)}{"%" if math.isfinite(v) else ""}</td>')
        body.append(f'<tr id="row-{_e(eid)}" data-id="{_e(eid)}" data-candidate="{1 if cand else 0}" '
                    f'data-search="{_e(search)}" class="{"is-cand" if cand else ""}">{"".join(cells)}</tr>')
    empty = ('<p class="empty-note">No compound was screened in this run.</p>' if not len(ranked) else "")
    if sum(left_out):
        empty += (f'<p class="note-text" id="left-out">Only the {len(ranked)} best-ranked compounds are listed, to '
                  f'keep the page quick to open: {left_out[0]} further candidate(s) and {left_out[1]} other '
                  'compound(s) are left out here but counted and plotted; every compound is in '
                  'results/tables/screen_wide.parquet and the candidates in results/shortlist.csv.</p>')
    prob_note = ""
    if probs:
        prob_note = ("<p class=\"note-text\">With input uncertainties: the percentages under the \u2713/\u2717 and "
                     "in the P(\u2026) columns are Monte Carlo chances that a criterion (or all of them) holds; "
                     "the small grey ranges under values are 16th\u201384th percentiles.</p>")
    return (
        f'<section id="table"><h2>All screened compounds</h2>'
        f'<p class="note-text">Values at {n} layer(s), {_e(r["environment"])}. Click a column header to sort; '
        f'hover a \u2713/\u2717 for the number behind it. Candidates first, then everything else by score. '
        f'Score bar: <span class="sw-key sb"></span>binding <span class="sw-key sm"></span>margin '
        f'<span class="sw-key sw"></span>window, each weighted.</p>'
        f'{prob_note}'
        f'<div class="controls" role="search"><label>Filter <input id="filter" type="search" '
        f'placeholder="compound, formula, band, thinning\u2026" autocomplete="off"></label>'
        f'<label class="toggle"><input id="only-cand" type="checkbox"> candidates only</label>'
        f'<span id="shown" aria-live="polite">{len(ranked)} of {len(ranked)} shown</span>'
        f'<button type="button" id="csv">Download shown rows (CSV)</button></div>'
        f'<div class="scroll"><table id="screen-table" class="grid"><thead><tr>{th}</tr></thead>'
        f'<tbody>{"".join(body)}</tbody></table></div>{empty}</section>')


def _section_plots(ranked, long, settings) -> str:
    r = settings["ranking"]
    legend = "".join(f'<span class="key"><i style="background:{c}"></i>{_e(k)} gap</span>'
                     for k, c in GAP_COLOURS.items())
    figs = [
        ("Is it bound, and where does it emit?", plot_binding_vs_gap(ranked, settings),
         f"One dot per compound at {int(r['target_layers'])} layer(s), {r['environment']}. Large dots meet every "
         "criterion; the shaded strip is the target window in photon energy; the dashed line is the binding "
         "needed to survive the operating temperature.", legend),
        ("How the gap moves with thickness", plot_gap_vs_layers(ranked, long, settings),
         "Optical gap per layer count for the leading compounds; the dashed segment joins the thickest stack "
         "screened to the bulk crystal, the vertical line marks the thickness ranked.", ""),
        ("Where the emission falls", plot_emission_histogram(ranked, settings),
         "Emission wavelengths of all screened compounds; the darker part of each bar counts candidates.", ""),
        ("What the surroundings do to binding", plot_binding_by_environment(ranked, long, settings),
         "Binding at the ranked thickness in each surroundings, plus the bulk crystal. Filled dots are candidates, "
         "bars are medians. A more strongly screening environment lowers the binding.", ""),
    ]
    html_figs = "".join(f'<figure class="plot"><figcaption><strong>{_e(t)}</strong> {_e(c)}'
                        f'{"<span class=keys>" + k + "</span>" if k else ""}</figcaption>{svg}</figure>'
                        for t, svg, c, k in figs)
    return (f'<section id="plots"><h2>Plots</h2><p class="note-text noprint">Hover a dot for the compound; click it to '
            f'jump to its row. The table filter also dims the plots.</p><div class="plots">{html_figs}</div></section>')


def _section_changes(changes: pd.DataFrame, baseline: Mapping | None) -> str:
    head = '<section id="changes"><h2>What changed since the last run</h2>'
    if baseline is None:
        return head + ('<p class="empty-note">This is the first run recorded in the history folder, so there is '
                       'nothing to compare with yet.</p></section>')
    note = ""
    if baseline.get("config_changed"):
        note = ('<p class="note-text"><strong>The settings differ from the compared run</strong> '
                f'(config {_e(baseline.get("config_hash", ""))} then, {_e(baseline.get("config_hash_now", ""))} now); '
                'ranks may move for that reason alone.</p>')
    if not len(changes):
        return head + note + (f'<p class="empty-note">No compound was added, removed, revised or moved since the run '
                              f'of {_e(baseline.get("run_utc") or "an earlier run")}.</p></section>')
    rows = []
    for _, c in changes.iterrows():
        kind = _text(c["change"])
        old_r = "" if pd.isna(c["old_rank"]) else str(int(c["old_rank"]))
        new_r = "" if pd.isna(c["new_rank"]) else str(int(c["new_rank"]))
        move = "" if pd.isna(c["rank_change"]) else int(c["rank_change"])
        arrow = "" if move == "" or move == 0 else ("\u25b2" if move > 0 else "\u25bc")
        rows.append(f'<tr class="ch"><td><span class="chip k-{_e(kind.replace(" ", "-"))}">{_e(kind)}</span></td>'
                    f'<td><a href="#row-{_e(c["entry_id"])}" class="jump" data-id="{_e(c["entry_id"])}">'
                    f'{_e(c["entry_id"])}</a></td>'
                    f'<td class="num">{_e(old_r) or DASH}</td><td class="num">{_e(new_r) or DASH}</td>'
                    f'<td class="num">{arrow} {"" if move == "" else abs(move)}</td>'
                    f'<td class="num">{_fmt(c["old_score"], 3)}</td><td class="num">{_fmt(c["new_score"], 3)}</td>'
                    f'<td>{_e(_text(c["detail"]))}</td></tr>')
    when = _e(baseline.get("run_utc") or "an earlier run")
    return (head + note + f'<p class="note-text">Compared with the ranking of {when}. Inputs count as revised when '
            'the record file or its structure file changed (by content hash).</p>'
            '<div class="scroll"><table class="grid plain"><thead><tr><th>Change</th><th>Compound</th>'
            '<th>Old rank</th><th>New rank</th><th>Moved</th><th>Old score</th><th>New score</th><th>Details</th>'
            f'</tr></thead><tbody>{"".join(rows)}</tbody></table></div></section>')


def _section_rejects(rejects: pd.DataFrame) -> str:
    head = '<section id="rejects"><h2>Rejected records</h2>'
    if not len(rejects):
        return head + '<p class="empty-note">Every record passed the input checks.</p></section>'
    rows = "".join(
        f'<tr><td>{_e(_text(x.get("entry_id")))}</td><td>{_e(_text(x.get("source_file")))}</td>'
        f'<td><code>{_e(_text(x.get("field")))}</code></td><td>{_e(_text(x.get("stage")))}</td>'
        f'<td>{_e(_text(x.get("reason")))}</td></tr>'
        for x in rejects.to_dict("records"))
    return (head + f'<p class="note-text">{rejects["entry_id"].nunique()} record(s) were not screened. '
            'Fix the field named and re-run; only the changed records are recomputed.</p>'
            '<div class="scroll"><table class="grid plain"><thead><tr><th>Compound</th><th>File</th><th>Field</th>'
            f'<th>Check</th><th>Message</th></tr></thead><tbody>{rows}</tbody></table></div></section>')


def _section_methods(settings: Mapping) -> str:
    from flakelight import ranking

    r = settings["ranking"]
    w = r.get("weights", {})
    need = float(r["min_binding_over_kt"])
    lo, hi = sorted(float(v) for v in r["window_nm"])
    eq = [
        ("Bulk crystal (3D hydrogenic)",
         "E<sub>b</sub> = Ry \u03bc / \u03b5<sup>2</sup>, &nbsp; \u03b5 = \u221a(\u03b5<sub>\u2225</sub> "
         "\u03b5<sub>\u22a5</sub>), &nbsp; a = a<sub>0</sub> \u03b5 / \u03bc",
         "Ry is the Rydberg energy, a<sub>0</sub> the Bohr radius, \u03bc the in-plane reduced mass in units of the "
         "free-electron mass (effective-mass approximation). With an out-of-plane mass the anisotropic "
         "variational binding is used instead."),
        ("Quasi-2D crystal (2D hydrogenic)",
         "E<sub>n</sub> = Ry \u03bc / (\u03b5<sup>2</sup> (n \u2212 \u00bd)<sup>2</sup>) &nbsp; "
         "(n = 1: four times the 3D value)", "The strict two-dimensional limit with the bulk constant."),
        ("Few-layer flake in its surroundings (Rytova\u2013Keldysh)",
         "V(r) = \u2212(\u03c0 e<sup>2</sup> / (2 r<sub>0</sub>)) [H<sub>0</sub>(\u03ba r / r<sub>0</sub>) "
         "\u2212 Y<sub>0</sub>(\u03ba r / r<sub>0</sub>)], &nbsp; "
         "E<sub>b</sub> = (Ry \u03bc / \u03ba<sup>2</sup>) f(r<sub>0</sub> \u03bc / (\u03ba<sup>2</sup> a<sub>0</sub>))",
         "H<sub>0</sub> and Y<sub>0</sub> are the Struve and Neumann functions, \u03ba = (\u03b5<sub>above</sub> + "
         "\u03b5<sub>below</sub>)/2 the mean constant of the surroundings, f a tabulated dimensionless 1s (and 2s) "
         "binding computed once per run."),
        ("Screening length",
         "r<sub>0</sub>(1) \u2248 d (\u03b5<sub>\u2225</sub> \u2212 1) / 2, &nbsp; r<sub>0</sub>(N) = N r<sub>0</sub>(1)",
         "d is the interlayer spacing; a value given in the record takes precedence. The 2D hydrogenic, "
         "quick-estimate and fractional-dimension bindings are kept as cross-checks in the tables."),
        ("Band edges against layer count (coupled-layer chain)",
         "E(N) = E<sub>bulk</sub> + (E<sub>1</sub> \u2212 E<sub>bulk</sub>) (1 \u2212 cos(\u03c0 / (N + 1)))",
         "Fills layer counts the record does not give; the gap character at each N follows from the valley edges."),
        ("Optical gap and emission",
         "E<sub>opt</sub> = E<sub>direct</sub> \u2212 E<sub>b</sub>, &nbsp; \u03bb = h c / E<sub>opt</sub>", ""),
        ("Survival at temperature (2D Saha balance)",
         "n<sub>e</sub> n<sub>h</sub> / n<sub>X</sub> = (\u03bc k T / (2\u03c0 \u0127<sup>2</sup>)) "
         "e<sup>\u2212E<sub>b</sub>/kT</sup>, &nbsp; n (1 \u2212 x)<sup>2</sup> = S x",
         "x is the bound fraction at the configured pair density; the binding criterion compares E<sub>b</sub> "
         "with kT directly."),
        ("Score",
         "S = (w<sub>b</sub> s<sub>b</sub> + w<sub>m</sub> s<sub>m</sub> + w<sub>w</sub> s<sub>w</sub>) / "
         "(w<sub>b</sub> + w<sub>m</sub> + w<sub>w</sub>)",
         f"s<sub>b</sub> = clip((E<sub>b</sub>/kT) / (2 \u00d7 {need:g}), 0, 1) \u2014 full marks at twice the required "
         f"binding; s<sub>m</sub> = clip(\u0394 / {ranking.MARGIN_FULL_EV * MEV_PER_EV:g} meV, 0, 1) with \u0394 the "
         "indirect minus direct gap (full marks when nothing indirect competes); s<sub>w</sub> = 1 \u2212 "
         f"|\u03bb \u2212 \u03bb<sub>c</sub>| / ({hi:g} \u2212 {lo:g} nm) inside the window (1 at its centre "
         "\u03bb<sub>c</sub>, \u00bd at its edges), 0 outside. Weights this run: "
         f"w<sub>b</sub> = {float(w.get('binding', 0)):g}, w<sub>m</sub> = {float(w.get('margin', 0)):g}, "
         f"w<sub>w</sub> = {float(w.get('window', 0)):g}. Compounds meeting every criterion are ranked first, by "
         "score (or by their probability of meeting all criteria when so configured), then all others by score; "
         "ties go by identifier, so the order is reproducible."),
    ]
    items = "".join(f'<div class="eq-block"><h3>{t}</h3><p class="eq">{e}</p>'
                    f'{"<p>" + n + "</p>" if n else ""}</div>' for t, e, n in eq)
    refs = [
        "N. S. Rytova, Proc. Moscow State Univ. Phys. Astron. 3, 30 (1967).",
        "L. V. Keldysh, JETP Lett. 29, 658 (1979).",
        "P. Cudazzo, I. V. Tokatly, A. Rubio, Phys. Rev. B 84, 085406 (2011).",
        "X. L. Yang, S. H. Guo, F. T. Chan, K. W. Wong, W. Y. Ching, Phys. Rev. A 43, 1186 (1991).",
        "X.-F. He, Phys. Rev. B 43, 2063 (1991).",
        "T. Olsen, S. Latini, F. Rasmussen, K. S. Thygesen, Phys. Rev. Lett. 116, 056401 (2016).",
        "W. Kohn, J. M. Luttinger, Phys. Rev. 98, 915 (1955).",
        "S. P. Ong et al., Comput. Mater. Sci. 68, 314 (2013) (pymatgen, used to read structure files).",
        "P. M. Larsen, M. Pandey, M. Strange, K. W. Jacobsen, Phys. Rev. Materials 3, 034003 (2019) "
        "(finding the 2D-bonded layers of a structure).",
    ]
    # The strings above are fixed text written here; only numbers from settings are interpolated.
    return ('<section id="methods"><h2>Methods</h2><p class="note-text">Energies in eV unless stated, lengths in '
            '\u00c5, masses in free-electron masses; all constants are CODATA values.</p>'
            f'<div class="eqs">{items}</div><h3>References</h3><ol class="refs">'
            + "".join(f"<li>{_e(x)}</li>" for x in refs) + "</ol></section>")


def _section_cautions(manifest: Mapping) -> str:
    items = list(CAUTIONS)
    for c in manifest.get("cautions", []) or []:
        text = str(c)
        covered = "not measurements" in text or "laboratory safety" in text  # said above in our words
        if text not in items and not covered:
            items.append(text)
    items.append("A high rank means the model inputs look promising, not that a sample will emit. "
                 "Confirm with measurements before committing growth or device time.")
    return ('<section id="cautions"><h2>Cautions</h2><ul class="cautions">'
            + "".join(f"<li>{_e(c)}</li>" for c in items) + "</ul></section>")


# ---------------------------------------------------------------------------
# Styles and script (fixed text, no input data)
# ---------------------------------------------------------------------------

CSS = """
:root{--ink:#1e2a33;--muted:#6b7280;--paper:#fbfaf6;--card:#ffffff;--line:#e4e1d8;--accent:#b3471f;
--good:#2f7a4b;--goodbg:#e8f3ec;--bad:#a8322a;--badbg:#f8e9e7;--warn:#8a5a00;--warnbg:#fff4d6;
--direct:#c4532b;--indirect:#3a6f9a}
*{box-sizing:border-box}
html{font-size:15px}
body{margin:0;background:var(--paper);color:var(--ink);font:1rem/1.5 system-ui,-apple-system,"Segoe UI",
"Helvetica Neue",Arial,sans-serif;-webkit-print-color-adjust:exact;print-color-adjust:exact}
header.top{background:var(--ink);color:#f6f3ea;padding:22px 0 18px}
.wrap{max-width:1360px;margin:0 auto;padding:0 24px}
header.top h1{margin:0;font-size:1.7rem;letter-spacing:.01em;font-weight:650}
header.top h1 .brand{color:#f0b48f}
header.top p{margin:4px 0 0;color:#cfd6dc;font-size:.93rem}
nav.toc{position:sticky;top:0;z-index:5;background:rgba(251,250,246,.96);border-bottom:1px solid var(--line)}
nav.toc a{display:inline-block;padding:8px 10px;color:var(--ink);text-decoration:none;font-size:.9rem}
nav.toc a:hover{color:var(--accent)}
.caution-top{margin:16px 0 0;border-left:5px solid #d79a1e;background:var(--warnbg);padding:10px 14px;
border-radius:4px;font-size:.95rem}
section{margin:28px 0;padding-top:4px}
h2{font-size:1.3rem;margin:0 0 10px;padding-bottom:4px;border-bottom:2px solid var(--ink)}
h3{font-size:1.02rem;margin:14px 0 6px}
.note-text{color:var(--muted);font-size:.9rem;margin:4px 0 10px}
.empty-note{background:var(--card);border:1px dashed var(--line);padding:12px 14px;border-radius:6px}
.digest{margin:12px 0 0;font-size:.95rem}
.lead .cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(300px,1fr));gap:14px}
.card{position:relative;background:var(--card);border:1px solid var(--line);border-top:4px solid var(--accent);
border-radius:6px;padding:12px 16px 10px}
.card h3{margin:0;font-size:1.15rem}.card h3 a{color:var(--ink)}
.card-rank{position:absolute;right:14px;top:8px;font-size:1.6rem;font-weight:700;color:#d9d3c4}
.card .formula{margin:0;color:var(--muted)}
.card .big{margin:6px 0;font-weight:600;font-variant-numeric:tabular-nums}
.card ul{margin:6px 0;padding-left:18px;font-size:.9rem}.card li{margin:2px 0}
.card .miss{color:var(--bad);font-size:.9rem;margin:4px 0 0}
.tiles{display:flex;gap:12px;flex-wrap:wrap;margin-bottom:8px}
.tile{background:var(--card);border:1px solid var(--line);border-radius:6px;padding:8px 16px;min-width:130px}
.tile .num{display:block;font-size:1.6rem;font-weight:700;font-variant-numeric:tabular-nums}
.tile .what{color:var(--muted);font-size:.85rem}
.two-col{display:grid;grid-template-columns:1fr 1fr;gap:28px}
dl{display:grid;grid-template-columns:max-content 1fr;gap:3px 14px;margin:0;font-size:.92rem}
dt{color:var(--muted)}dd{margin:0;overflow-wrap:anywhere}
ol.crit{margin:0;padding-left:20px;font-size:.92rem}
.controls{display:flex;gap:16px;align-items:center;flex-wrap:wrap;margin:8px 0}
.controls input[type=search]{font:inherit;padding:5px 8px;border:1px solid #c9c4b6;border-radius:4px;width:300px;
background:#fff}
.controls button{font:inherit;font-size:.88rem;padding:5px 10px;border:1px solid #c9c4b6;background:#fff;
border-radius:4px;cursor:pointer}
#shown{color:var(--muted);font-size:.9rem}
.scroll{overflow-x:auto;border:1px solid var(--line);border-radius:6px;background:var(--card)}
table.grid{border-collapse:collapse;width:100%;font-size:.84rem}
table.grid th{position:sticky;top:0;background:#f2efe6;text-align:left;padding:6px 7px;border-bottom:1px solid #d6d1c3;
white-space:nowrap;font-weight:600;vertical-align:bottom}
#screen-table th{cursor:pointer;user-select:none}
#screen-table th:hover{background:#e9e4d6}
th .arrow{display:inline-block;width:1em;color:var(--accent)}th .unit{display:block;font-weight:400;color:var(--muted);font-size:.75rem}
th[aria-sort=ascending] .arrow::after{content:" \\25B2"}th[aria-sort=descending] .arrow::after{content:" \\25BC"}
table.grid td{padding:4px 7px;border-bottom:1px solid #efece4;vertical-align:top}
table.grid tr.is-cand td:first-child{box-shadow:inset 4px 0 0 var(--good)}
table.grid tr.hl td{background:#fff1d0}
table.grid tr.flash td{animation:flash 1.6s ease-out}
@keyframes flash{from{background:#ffd98a}to{background:transparent}}
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
td.crit{text-align:center;font-weight:700}td.crit.ok{color:var(--good)}td.crit.bad{color:var(--bad);background:var(--badbg)}
.idcell .eid{font-weight:600;display:block;white-space:nowrap}
.idcell .formula{color:var(--muted);display:block;font-size:.8rem;max-width:15em;white-space:nowrap;overflow:hidden;
text-overflow:ellipsis}
.idcell .prov{display:block;font-size:.75rem;color:var(--muted);max-width:15em;overflow:hidden;text-overflow:ellipsis;white-space:nowrap}
.idcell .warn{display:inline-block;font-size:.72rem;color:var(--warn);background:var(--warnbg);padding:0 5px;
border-radius:3px;cursor:help}
td.verdict{font-size:.8rem;min-width:9.5em;max-width:15em}
.bandname{display:block;color:var(--muted);font-size:.75rem}
.sw-key{display:inline-block;width:10px;height:8px;margin:0 3px 0 6px}.sw-key.sb{background:#c4532b}
.sw-key.sm{background:#3a6f9a}.sw-key.sw{background:#5f8f3e}
.band{display:block;color:var(--muted);font-size:.75rem}
td.crit .pc{display:block;font-weight:400;font-size:.72rem;color:var(--muted)}
.badge{display:inline-block;padding:1px 8px;border-radius:10px;font-size:.78rem;white-space:nowrap}
.badge.yes{background:var(--goodbg);color:var(--good);font-weight:600}.badge.no{background:#f0eee8;color:var(--muted)}
.sr{position:absolute;left:-9999px}
.scorebar{display:inline-flex;width:48px;height:8px;background:#ece8dd;vertical-align:middle;margin-right:4px}
.scorebar i{display:block;height:8px}.scorebar .sb{background:#c4532b}.scorebar .sm{background:#3a6f9a}
.scorebar .sw{background:#5f8f3e}
.plots{display:grid;grid-template-columns:1fr 1fr;gap:18px}
figure.plot{margin:0;background:var(--card);border:1px solid var(--line);border-radius:6px;padding:10px 12px}
figure.plot figcaption{font-size:.85rem;color:var(--muted);margin-bottom:4px}
figure.plot figcaption strong{display:block;color:var(--ink);font-size:.98rem}
.keys{display:block;margin-top:4px}.key{margin-right:12px;white-space:nowrap}
.key i{display:inline-block;width:10px;height:10px;border-radius:50%;margin-right:4px;vertical-align:middle}
svg.chart{width:100%;height:auto;display:block;font-family:inherit}
svg.chart .grid{stroke:#ece9e1;stroke-width:1}svg.chart .axis{stroke:#8b877c;stroke-width:1}
svg.chart .tickmark{stroke:#8b877c}
svg.chart .tick{font-size:11px;fill:#555}svg.chart .tick.strong{font-weight:700;fill:var(--ink)}
svg.chart .label{font-size:12px;fill:var(--ink)}svg.chart .note{font-size:10.5px;fill:#7a5a12}
svg.chart .window{fill:#f5e7c4;opacity:.55}
svg.chart .threshold{stroke:#7a5a12;stroke-dasharray:5 4;stroke-width:1.2}
svg.chart .target{stroke:#b9b3a3;stroke-dasharray:3 3}
svg.chart .pt{stroke:#fff;stroke-width:1;cursor:pointer;opacity:.9}
svg.chart .pt.cand{stroke:var(--ink);stroke-width:1.4;opacity:1}
svg.chart .pt.other{fill:#b8b4aa}svg.chart circle.pt.cand:not([fill]){fill:var(--accent)}
svg.chart .pt.dim,svg.chart .errbar.dim,svg.chart .series.dim{opacity:.12}
svg.chart .pt.hl{stroke:#111;stroke-width:2.5;opacity:1}
svg.chart .errbar{stroke-width:1.2;opacity:.55}
svg.chart .line{fill:none;stroke-width:2}svg.chart .line.dashed{stroke-dasharray:4 4}
svg.chart .bar-all{fill:#c9c3b3}svg.chart .bar-cand{fill:var(--accent)}
svg.chart .bar:hover rect{opacity:.8}
svg.chart .median{stroke:var(--ink);stroke-width:2}
.chip{display:inline-block;padding:1px 8px;border-radius:10px;font-size:.8rem;background:#eee;white-space:nowrap}
.k-added{background:#e3eef8;color:#23527c}.k-removed{background:#eeeae2;color:#5c564a}
.k-became-candidate{background:var(--goodbg);color:var(--good)}.k-dropped-from-candidates{background:var(--badbg);color:var(--bad)}
.k-input-revised{background:var(--warnbg);color:var(--warn)}.k-rank-moved{background:#f1eef7;color:#5d4a86}
.eqs{display:grid;grid-template-columns:1fr 1fr;gap:4px 28px}
.eq-block p{margin:4px 0;font-size:.9rem}
p.eq{font-family:"Cambria Math","STIX Two Math","Latin Modern Math",Georgia,serif;font-size:1.05rem;
background:var(--card);border:1px solid var(--line);border-radius:4px;padding:6px 10px}
ol.refs{font-size:.88rem}
ul.cautions li{margin:4px 0}
footer{color:var(--muted);font-size:.85rem;border-top:1px solid var(--line);padding:14px 0 30px}
#tip{position:fixed;pointer-events:none;background:var(--ink);color:#fff;padding:6px 9px;border-radius:4px;
font-size:.82rem;white-space:pre-line;max-width:320px;z-index:20;display:none;box-shadow:0 2px 8px rgba(0,0,0,.25)}
a{color:#2c5d86}a.jump{white-space:nowrap}
@media (max-width:900px){.plots,.two-col,.eqs{grid-template-columns:1fr}}
@media print{
 html{font-size:11px}nav.toc,.controls,#tip,.noprint{display:none!important}
 header.top{background:none;color:var(--ink);padding:0}header.top p{color:var(--muted)}
 header.top h1 .brand{color:var(--accent)}
 .scroll{overflow:visible;border:none}table.grid th{position:static}
 table.grid{font-size:9px}table.grid td,table.grid th{padding:2px 4px}.scorebar{display:none}
 td.verdict{min-width:9em;max-width:12em}.idcell .formula,.idcell .prov{max-width:10em}
 .badge{padding:0 4px}.bandname,.band{font-size:8px}
 .plots{grid-template-columns:1fr 1fr}figure.plot,.card,tr{break-inside:avoid}
 section{break-inside:auto}h2{break-after:avoid}a{color:inherit;text-decoration:none}
}
"""

SCRIPT = r"""
(function () {
  "use strict";
  var data = JSON.parse(document.getElementById("flakelight-data").textContent);
  var table = document.getElementById("screen-table");
  var tbody = table ? table.tBodies[0] : null;
  var rows = tbody ? Array.prototype.slice.call(tbody.rows) : [];
  var rowById = new Map();
  rows.forEach(function (tr) { rowById.set(tr.getAttribute("data-id"), tr); });
  var filter = document.getElementById("filter");
  var only = document.getElementById("only-cand");
  var shown = document.getElementById("shown");
  var marks = Array.prototype.slice.call(document.querySelectorAll("svg.chart [data-id]"));

  function apply() {
    var q = (filter && filter.value || "").trim().toLowerCase();
    var terms = q ? q.split(/\s+/) : [];
    var candOnly = only && only.checked;
    var visible = new Set();
    rows.forEach(function (tr) {
      var text = tr.getAttribute("data-search") || "";
      var ok = (!candOnly || tr.getAttribute("data-candidate") === "1") &&
        terms.every(function (t) { return text.indexOf(t) !== -1; });
      tr.hidden = !ok;
      if (ok) { visible.add(tr.getAttribute("data-id")); }
    });
    var active = candOnly || terms.length > 0;
    marks.forEach(function (m) {
      m.classList.toggle("dim", active && !visible.has(m.getAttribute("data-id")));
    });
    if (shown) { shown.textContent = visible.size + " of " + rows.length + " shown"; }
  }
  if (filter) { filter.addEventListener("input", apply); }
  if (only) { only.addEventListener("change", apply); }

  function sortBy(th) {
    var idx = Array.prototype.indexOf.call(th.parentNode.children, th);
    var numeric = th.getAttribute("data-type") === "num";
    var dir = th.getAttribute("aria-sort") === "ascending" ? -1 : 1;
    Array.prototype.forEach.call(th.parentNode.children, function (h) { h.setAttribute("aria-sort", "none"); });
    th.setAttribute("aria-sort", dir === 1 ? "ascending" : "descending");
    var keyed = rows.map(function (tr, i) {
      var cell = tr.cells[idx];
      var v = !cell ? "" : (cell.hasAttribute("data-v") ? cell.getAttribute("data-v") : cell.textContent);
      return { tr: tr, i: i, v: v, n: v === "" || v === null ? NaN : Number(v) };
    });
    keyed.sort(function (a, b) {
      var c;
      if (numeric) {
        var an = isNaN(a.n), bn = isNaN(b.n);
        if (an || bn) { return an && bn ? a.i - b.i : (an ? 1 : -1); }
        c = a.n - b.n;
      } else {
        c = String(a.v).localeCompare(String(b.v), undefined, { numeric: true });
      }
      return c !== 0 ? dir * c : a.i - b.i;
    });
    var frag = document.createDocumentFragment();
    keyed.forEach(function (k) { frag.appendChild(k.tr); });
    tbody.appendChild(frag);
  }
  if (table) {
    Array.prototype.forEach.call(table.tHead.rows[0].cells, function (th) {
      th.addEventListener("click", function () { sortBy(th); });
      th.addEventListener("keydown", function (ev) {
        if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); sortBy(th); }
      });
    });
  }

  var tip = document.getElementById("tip");
  function highlight(id, on) {
    var tr = rowById.get(id);
    if (tr) { tr.classList.toggle("hl", on); }
    marks.forEach(function (m) { if (m.getAttribute("data-id") === id) { m.classList.toggle("hl", on); } });
  }
  Array.prototype.forEach.call(document.querySelectorAll("svg.chart [data-tip]"), function (el) {
    var t = el.querySelector("title");
    if (t) { t.parentNode.removeChild(t); }
    el.addEventListener("mouseenter", function () {
      tip.textContent = el.getAttribute("data-tip");
      tip.style.display = "block";
      var id = el.getAttribute("data-id");
      if (id !== null) { highlight(id, true); }
    });
    el.addEventListener("mousemove", function (ev) {
      var x = ev.clientX + 14, y = ev.clientY + 14;
      if (x + tip.offsetWidth > window.innerWidth - 8) { x = ev.clientX - tip.offsetWidth - 14; }
      if (y + tip.offsetHeight > window.innerHeight - 8) { y = ev.clientY - tip.offsetHeight - 14; }
      tip.style.left = x + "px"; tip.style.top = y + "px";
    });
    el.addEventListener("mouseleave", function () {
      tip.style.display = "none";
      var id = el.getAttribute("data-id");
      if (id !== null) { highlight(id, false); }
    });
    el.addEventListener("click", function () { jump(el.getAttribute("data-id")); });
  });

  function jump(id) {
    var tr = rowById.get(id);
    if (!tr) { return; }
    if (tr.hidden) { if (filter) { filter.value = ""; } if (only) { only.checked = false; } apply(); }
    tr.scrollIntoView({ block: "center" });
    tr.classList.remove("flash"); void tr.offsetWidth; tr.classList.add("flash");
  }
  Array.prototype.forEach.call(document.querySelectorAll("a.jump"), function (a) {
    a.addEventListener("click", function (ev) { ev.preventDefault(); jump(a.getAttribute("data-id")); });
  });

  function csvCell(v) {
    if (v === null || v === undefined) { return ""; }
    var s = String(v);
    if (typeof v === "string" && /^[=+\-@\t\r]/.test(s)) { s = "'" + s; }  // numbers stay numbers
    return /[",\n\r]/.test(s) ? '"' + s.replace(/"/g, '""') + '"' : s;
  }
  var button = document.getElementById("csv");
  if (button) {
    button.addEventListener("click", function () {
      var lines = [data.columns.map(csvCell).join(",")];
      var order = Array.prototype.slice.call(tbody.rows).filter(function (tr) { return !tr.hidden; });
      order.forEach(function (tr) {
        var rec = data.rows[tr.getAttribute("data-id")];
        if (rec) { lines.push(rec.map(csvCell).join(",")); }
      });
      var blob = new Blob([lines.join("\r\n") + "\r\n"], { type: "text/csv" });
      var a = document.createElement("a");
      a.href = URL.createObjectURL(blob);
      a.download = "flakelight-shortlist-" + data.config_hash + ".csv";
      document.body.appendChild(a); a.click(); a.remove();
      setTimeout(function () { URL.revokeObjectURL(a.href); }, 1000);
    });
  }
  apply();
  document.documentElement.setAttribute("data-ready", "1");
})();
"""

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


def _csp(script: str) -> str:
    digest = base64.b64encode(hashlib.sha256(script.encode("utf-8")).digest()).decode("ascii")
    return ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
            f"script-src 'sha256-{digest}'; base-uri 'none'; form-action 'none'")


def build_html(ranked: pd.DataFrame, long: pd.DataFrame, rejects: pd.DataFrame, manifest: Mapping,
               changes: pd.DataFrame, settings: Mapping, baseline: Mapping | None = None,
               entries: pd.DataFrame | None = None, max_table_rows: int | None = MAX_TABLE_ROWS) -> str:
    """The self-contained HTML summary of one run (pure: no file access).

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
    written = manifest.get("written_utc", "")
    n_cand = int(ranked["meets_all_criteria"].astype(bool).sum()) if len(ranked) else 0
    subtitle = (f"{len(ranked)} compounds screened \u00b7 {n_cand} candidate(s) \u00b7 ranked as "
                f"{int(r['target_layers'])}-layer flakes, {r['environment']}, at "
                f"{float(settings['survival']['temperature_k']):g} K \u00b7 config {manifest.get('config_hash', '')}"
                f" \u00b7 written {written}")
    listed, left_out = _listed_rows(ranked, max_table_rows)
    data_json = script_json(_page_data(listed, manifest))
    nav = "".join(f'<a href="#{k}">{_e(v)}</a>' for k, v in (
        ("make-first", "Make first"), ("overview", "Overview"), ("table", "All compounds"), ("plots", "Plots"),
        ("changes", "Changes"), ("rejects", "Rejects"), ("methods", "Methods"), ("cautions", "Cautions")))
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{_e(_csp(SCRIPT))}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<meta name="referrer" content="no-referrer">',
        '<link rel="icon" href="data:,">',
        f"<title>flakelight summary \u2014 {_e(manifest.get('config_hash', ''))}</title>",
        f"<style>{CSS}</style></head><body>",
        '<header class="top"><div class="wrap"><h1><span class="brand">flakelight</span> \u00b7 emitter shortlist</h1>'
        f"<p>{_e(subtitle)}</p></div></header>",
        f'<nav class="toc"><div class="wrap">{nav}</div></nav>',
        '<main class="wrap">',
        f'<p class="caution-top" role="note"><strong>Model estimates, not measurements.</strong> {_e(CAUTIONS[1])}</p>',
        _changes_digest(changes, baseline),
        _section_make_first(ranked, settings),
        _section_overview(ranked, rejects, manifest, settings),
        _section_table(listed, settings, entries, left_out),
        _section_plots(ranked, long, settings),
        _section_changes(changes, baseline),
        _section_rejects(rejects),
        _section_methods(settings),
        _section_cautions(manifest),
        "</main>",
        f'<footer><div class="wrap">Written by flakelight from the tables in results/tables. Code version '
        f'{_e(manifest.get("code_version", ""))}, config {_e(manifest.get("config_hash", ""))}. '
        "This page loads nothing from the network.</div></footer>",
        '<div id="tip" role="tooltip"></div>',
        f'<script type="application/json" id="flakelight-data">{data_json}</script>',
        f"<script>{SCRIPT}</script>",
        "</body></html>",
    ]
    return "\n".join(parts)


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
# Orchestration (the only part that touches files, through flakelight.io)
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
                     "optical_gap_ev", "binding_ev"]


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
        entries = entries[[c for c in ("entry_id", "provenance") if c in entries.columns]]
    config_hash = str(manifest.get("config_hash", ""))
    current = snapshot(ranked, run_utc=str(manifest.get("written_utc", "")), config_hash=config_hash)

    folder = Path(history)
    last = _read_snapshot(folder / LAST_SNAPSHOT)
    previous = _read_snapshot(folder / PREVIOUS_SNAPSHOT)
    rotate = True
    baseline_frame = last
    if last is not None and _same_ranking(last, current):
        rotate = False
        baseline_frame = previous if previous is not None else last
    changes = compare_runs(baseline_frame, current)
    baseline = None if baseline_frame is None else _baseline_info(baseline_frame, config_hash)

    page = build_html(ranked, long, rejects, manifest, changes, settings, baseline=baseline, entries=entries)
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
