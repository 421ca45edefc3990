"""Geometry of the summary page's four figures (no markup: the template draws them).

Each ``figure_*`` function turns the run's tables into a *figure*: a plain dict
with the panel size, the axis frame (grid lines, ticks, labels), the marks in
drawing order and the legend entries. Marks are ``{"tag", "attrs", "text",
"title", "children"}`` dicts of SVG elements; ``templates/figure.html.j2`` writes
them with autoescaping, so no text from the data reaches the page unescaped.

Colours are never set here: a mark carries classes (``g-direct``, ``cand``,
``window`` ...) and the page's style sheet maps each class to the one colour of
the page palette that carries that meaning.

Why a small axis engine of our own rather than a plotting library: see the
contributor guide (DEVELOPERS.md, "The summary page").
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np
import pandas as pd
from scipy import constants as _c

from lamellume import units

#: Unit conversion: meV per eV.
MEV_PER_EV = 1.0 / _c.milli

#: Number of candidates drawn as lines in the gap-versus-thickness figure.
LINES_IN_THICKNESS_PLOT = 8
#: At most this many compounds are drawn in the binding-versus-gap figure (candidates first).
SCATTER_POINT_CAP = 2500
#: At most this many compounds are drawn per group of the surroundings figure (candidates first).
GROUP_POINT_CAP = 400
#: Dash patterns telling the compounds of the thickness figure apart (colour means gap character there).
SERIES_DASHES = ("", "7 3", "2 3", "9 3 2 3", "4 4", "12 3", "2 2 6 2", "1 5")
#: Gap characters with a colour of their own (anything else is drawn as "unknown").
GAP_CHARACTERS = ("direct", "indirect", "unknown")


def _num(x: Any) -> float:
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan


def _c1(v: float) -> str:
    """A coordinate as SVG text (0.1 user unit is below a screen pixel)."""
    return f"{v:.1f}"


def el(tag: str, attrs: Mapping[str, Any] | None = None, children: list | None = None,
       text: str | None = None, title: str | None = None) -> dict:
    """One SVG element of a figure (attributes with value None are left out)."""
    return {"tag": tag, "attrs": {k: v for k, v in (attrs or {}).items() if v is not None},
            "children": children or [], "text": text, "title": title}


def gap_class(character: Any) -> str:
    """CSS class of a gap character: its one colour on the page."""
    text = str(character) if character is not None else ""
    return f"g-{text}" if text in GAP_CHARACTERS else "g-unknown"


def environment_name(name: str, settings: Mapping) -> str:
    """Display name of a surroundings entry of the config, without its constants ('on silica')."""
    entry = (settings.get("environments", {}) or {}).get(name, {}) or {}
    label = entry.get("label") if isinstance(entry, Mapping) else None
    return str(label) if label else str(name).replace("_", " ")


def environment_label(name: str, settings: Mapping) -> str:
    """Display label of a surroundings entry of the config, with its dielectric constants.

    'on_silica' with top 1.0 and bottom 3.9 -> 'on silica (above 1.0, below 3.9)': the
    one label of the surroundings on the page and in the plots (never the config key).
    """
    entry = (settings.get("environments", {}) or {}).get(name, {}) or {}
    text = environment_name(name, settings)
    if isinstance(entry, Mapping) and "top" in entry and "bottom" in entry:
        text += f" (above {float(entry['top']):.1f}, below {float(entry['bottom']):.1f})"
    return text


# ---------------------------------------------------------------------------
# Axis engine
# ---------------------------------------------------------------------------

def nice_step(span: float, target: int) -> float:
    """A round tick step (1, 2, 2.5 or 5 times a power of ten) giving about ``target`` steps."""
    raw = span / max(target, 1)
    mag = 10 ** math.floor(math.log10(raw))
    for mult in (1, 2, 2.5, 5, 10):
        if raw <= mult * mag:
            return mult * mag
    return 10 * mag


def linear_ticks(lo: float, hi: float, target: int = 6) -> tuple[float, float, list[float]]:
    """Axis limits widened to round ticks, and the ticks."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        lo, hi = 0.0, 1.0
    if hi <= lo:
        pad = abs(lo) * 0.1 or 0.5
        lo, hi = lo - pad, hi + pad
    step = nice_step(hi - lo, target)
    start, stop = math.floor(lo / step) * step, math.ceil(hi / step) * step
    ticks = [start + i * step for i in range(int(round((stop - start) / step)) + 1)]
    return start, stop, ticks


def log_ticks(lo: float, hi: float) -> tuple[float, float, list[float]]:
    """Limits and 1-2-5 ticks of a logarithmic axis."""
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
    low = min(ticks + [lo]) if ticks else lo
    high = max(ticks + [hi]) if ticks else hi
    return low, high, ticks


class Axes:
    """Maps data to SVG coordinates for one figure panel."""

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

    def frame(self, xticks, yticks, xlabel: str, ylabel: str, xfmt=None, yfmt=None) -> list[dict]:
        """Grid lines, ticks, axis lines and axis labels."""
        xfmt = xfmt or (lambda v: f"{v:g}")
        yfmt = yfmt or (lambda v: f"{v:g}")
        out = []
        for t in yticks:
            yy = _c1(self.y(t))
            out.append(el("line", {"class": "grid", "x1": _c1(self.x0), "x2": _c1(self.x1), "y1": yy, "y2": yy}))
            out.append(el("text", {"class": "tick", "x": _c1(self.x0 - 6), "y": _c1(self.y(t) + 4),
                                   "text-anchor": "end"}, text=yfmt(t)))
        for t in xticks:
            xx = _c1(self.x(t))
            out.append(el("line", {"class": "tickmark", "x1": xx, "x2": xx, "y1": _c1(self.y0),
                                   "y2": _c1(self.y0 + 5)}))
            out.append(el("text", {"class": "tick", "x": xx, "y": _c1(self.y0 + 18), "text-anchor": "middle"},
                          text=xfmt(t)))
        out.append(el("line", {"class": "axis", "x1": _c1(self.x0), "x2": _c1(self.x1), "y1": _c1(self.y0),
                               "y2": _c1(self.y0)}))
        out.append(el("line", {"class": "axis", "x1": _c1(self.x0), "x2": _c1(self.x0), "y1": _c1(self.y0),
                               "y2": _c1(self.y1)}))
        if xlabel:
            out.append(el("text", {"class": "label", "x": _c1((self.x0 + self.x1) / 2), "y": _c1(self.h - 8),
                                   "text-anchor": "middle"}, text=xlabel))
        cy = (self.y0 + self.y1) / 2
        out.append(el("text", {"class": "label", "transform": f"translate(14 {cy:.1f}) rotate(-90)",
                               "text-anchor": "middle"}, text=ylabel))
        return out

    def band(self, lo: float, hi: float, cls: str, title: str | None = None) -> dict | None:
        """A vertical strip between two x values, clipped to the panel (None when outside)."""
        a, b = max(lo, self.xlim[0]), min(hi, self.xlim[1])
        if b <= a:
            return None
        return el("rect", {"class": cls, "x": _c1(self.x(a)), "y": _c1(self.y1), "width": _c1(self.x(b) - self.x(a)),
                           "height": _c1(self.y0 - self.y1)}, title=title)


def figure(axes: Axes, fig_id: str, title: str, marks: list, legend: list[dict]) -> dict:
    """A figure ready for the template."""
    return {"id": fig_id, "title": title, "width": axes.w, "height": axes.h, "marks": [m for m in marks if m],
            "legend": legend, "empty": None}


def empty_figure(fig_id: str, message: str, legend: list[dict] | None = None) -> dict:
    """A figure with nothing to draw: the panel says why."""
    return {"id": fig_id, "title": message, "width": 560, "height": 120, "marks": [], "legend": legend or [],
            "empty": message}


def key(label: str, swatch: str, cls: str = "") -> dict:
    """One legend entry: ``swatch`` is 'dot', 'ring', 'line', 'dash', 'bar' or 'band'."""
    return {"label": label, "swatch": swatch, "cls": cls}


def plot_subset(priority: np.ndarray, cap: int) -> np.ndarray:
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


def _sample_note(ax: Axes, shown: int, total: int) -> dict | None:
    if shown >= total:
        return None
    return el("text", {"class": "note", "x": _c1(ax.x1), "y": _c1(ax.y1 - 4), "text-anchor": "end"},
              text=f"showing {shown} of {total}: every candidate, then an even sample")


def _tip(*lines: str) -> str:
    return "\n".join(lines)


def _has_band(ranked: pd.DataFrame, base: str) -> bool:
    return f"{base}_p16" in ranked.columns and f"{base}_p84" in ranked.columns


def _gap_keys(characters) -> list[dict]:
    present = {gap_class(c) for c in characters}
    return [key(f"{c} gap", "dot", f"g-{c}") for c in GAP_CHARACTERS if f"g-{c}" in present or c != "unknown"]


# ---------------------------------------------------------------------------
# The four figures
# ---------------------------------------------------------------------------

def figure_binding_vs_gap(ranked: pd.DataFrame, settings: Mapping) -> dict:
    """Binding energy (meV) against optical gap (eV) at the target thickness, coloured by gap character."""
    r = settings["ranking"]
    env, n_target = environment_label(r["environment"], settings), int(r["target_layers"])
    fig_id = "plot-binding-gap"
    gap = ranked["target_optical_gap_ev"].to_numpy(dtype=float) if len(ranked) else np.zeros(0)
    eb = ranked["target_binding_ev"].to_numpy(dtype=float) * MEV_PER_EV if len(ranked) else np.zeros(0)
    ok = np.isfinite(gap) & np.isfinite(eb)
    if not ok.any():
        return empty_figure(fig_id, "No compound has both an optical gap and a binding energy to plot.")
    ax = Axes()
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
    need_mev = float(r.get("min_binding_over_kt", 0.0)) * units.thermal_energy_ev(t_k) * MEV_PER_EV
    lo_nm, hi_nm = sorted(float(v) for v in r["window_nm"])
    win_ev = (units.wavelength_nm_from_energy_ev(hi_nm), units.wavelength_nm_from_energy_ev(lo_nm))
    x_lo, x_hi, xticks = linear_ticks(min(xs), max(xs))
    y_lo, y_hi, yticks = linear_ticks(0.0, max(max(ys), need_mev * 1.1))
    ax.xlim, ax.ylim = (x_lo, x_hi), (y_lo, y_hi)
    marks = [ax.band(*win_ev, "window", f"target emission window {lo_nm:g}\u2013{hi_nm:g} nm")]
    marks += ax.frame(xticks, yticks, f"optical gap at {n_target} layer(s), {env} (eV)", "binding energy (meV)")
    if 0 < need_mev <= y_hi:
        yy = _c1(ax.y(need_mev))
        marks.append(el("line", {"class": "threshold", "x1": _c1(ax.x0), "x2": _c1(ax.x1), "y1": yy, "y2": yy}))
        marks.append(el("text", {"class": "note", "x": _c1(ax.x1 - 4), "y": _c1(ax.y(need_mev) - 5),
                                 "text-anchor": "end"},
                        text=f"floor: {float(r['min_binding_over_kt']):g} kT = {need_mev:.0f} meV at {t_k:g} K"))
    character = ranked["target_gap_character"].astype(str).to_numpy()
    cand = ranked["meets_all_criteria"].to_numpy(dtype=bool)
    ids = ranked["entry_id"].astype(str).to_numpy()
    formula = ranked["formula"].astype(str).to_numpy() if "formula" in ranked.columns else np.full(len(ranked), "")
    drawn = np.flatnonzero(ok)[plot_subset(cand[ok], SCATTER_POINT_CAP)]
    marks.append(_sample_note(ax, len(drawn), int(ok.sum())))
    order = drawn[np.argsort(cand[drawn].astype(int), kind="stable")]  # candidates drawn last, on top
    bands = {base: (ranked[f"{base}_p16"].to_numpy(dtype=float), ranked[f"{base}_p84"].to_numpy(dtype=float))
             for base, has in (("target_optical_gap_ev", gap_band), ("target_binding_ev", eb_band)) if has}
    for i in order:
        cx, cy = ax.x(gap[i]), ax.y(eb[i])
        colour = gap_class(character[i])
        if "target_optical_gap_ev" in bands:
            a, b = (v[i] for v in bands["target_optical_gap_ev"])
            if math.isfinite(a) and math.isfinite(b):
                marks.append(el("line", {"class": f"errbar {colour}", "data-id": ids[i], "x1": _c1(ax.x(a)),
                                         "x2": _c1(ax.x(b)), "y1": _c1(cy), "y2": _c1(cy)}))
        if "target_binding_ev" in bands:
            a, b = (v[i] * MEV_PER_EV for v in bands["target_binding_ev"])
            if math.isfinite(a) and math.isfinite(b):
                marks.append(el("line", {"class": f"errbar {colour}", "data-id": ids[i], "x1": _c1(cx),
                                         "x2": _c1(cx), "y1": _c1(ax.y(a)), "y2": _c1(ax.y(b))}))
        tip = _tip(f"#{int(ranked['rank'].iloc[i])}  {ids[i]}", formula[i],
                   f"{character[i]} gap; optical gap {gap[i]:.3f} eV",
                   f"binding {eb[i]:.0f} meV" + ("  \u2014 candidate" if cand[i] else ""))
        marks.append(el("circle", {"class": f"pt {colour}" + (" cand" if cand[i] else ""), "data-id": ids[i],
                                   "data-tip": tip, "cx": _c1(cx), "cy": _c1(cy),
                                   "r": "5.5" if cand[i] else "4.2"}))
    legend = _gap_keys(character[ok]) + [key("candidate (ringed, larger)", "ring", "cand"),
                                         key(f"target window {lo_nm:g}\u2013{hi_nm:g} nm", "band", "window"),
                                         key("binding needed", "dash", "threshold")]
    if bands:
        legend.append(key("16\u201384 % range", "line", "errbar"))
    return figure(ax, fig_id, "Binding energy against optical gap", marks, legend)


def figure_gap_vs_layers(ranked: pd.DataFrame, long: pd.DataFrame, settings: Mapping) -> dict:
    """Optical gap against layer count for the leading compounds, one line each (bulk at the right).

    Line style tells the compounds apart; the colour of each dot is the gap character at
    that layer count, so the figure shows where thinning makes the gap direct.
    """
    r = settings["ranking"]
    env = r["environment"]
    fig_id = "plot-gap-layers"
    top = ranked[ranked["meets_all_criteria"].astype(bool)] if len(ranked) else ranked
    if not len(top):
        top = ranked
    top = top.head(LINES_IN_THICKNESS_PLOT)
    if not len(top) or not len(long):
        return empty_figure(fig_id, "No compounds to draw against thickness.")
    max_layers = int(settings.get("layers", {}).get("max_layers", int(long["layers"].max() or 1)))
    bulk_x = max_layers + 1
    has_character = "gap_character" in long.columns
    series = []
    formulas = top["formula"] if "formula" in top.columns else top["entry_id"]
    for j, (eid, formula) in enumerate(zip(top["entry_id"].astype(str), formulas.astype(str))):
        rows = long[(long["entry_id"].astype(str) == eid) & ((long["environment"] == env) | (long["layers"] == 0))]
        chars = rows["gap_character"].astype(str).to_numpy() if has_character else np.full(len(rows), "unknown")
        pts = []
        for lay, gap, ch in zip(rows["layers"].to_numpy(dtype=int), rows["optical_gap_ev"].to_numpy(dtype=float),
                                chars):
            if np.isfinite(gap):
                pts.append((bulk_x if lay == 0 else int(lay), float(gap), str(ch)))
        pts.sort()
        if pts:
            series.append((eid, formula, SERIES_DASHES[j % len(SERIES_DASHES)], pts))
    if not series:
        return empty_figure(fig_id, "No optical gaps to draw against thickness.")
    ys = [p[1] for s in series for p in s[3]]
    ax = Axes(width=560, height=340, right=120)
    y_lo, y_hi, yticks = linear_ticks(min(ys), max(ys))
    ax.xlim, ax.ylim = (0.6, bulk_x + 0.4), (y_lo, y_hi)
    xticks = list(range(1, bulk_x + 1))
    marks = ax.frame(xticks, yticks, f"layer count ({environment_label(env, settings)}; bulk crystal at right)",
                     "optical gap (eV)", xfmt=lambda v: "bulk" if int(v) == bulk_x else f"{int(v)}")
    n_target = int(r["target_layers"])
    if 1 <= n_target <= max_layers:
        xx = _c1(ax.x(n_target))
        marks.append(el("line", {"class": "target", "x1": xx, "x2": xx, "y1": _c1(ax.y0), "y2": _c1(ax.y1)}))
    seen_chars = set()
    for k, (eid, formula, dash, pts) in enumerate(series):
        few = [p for p in pts if p[0] != bulk_x]
        bulk = [p for p in pts if p[0] == bulk_x]
        kids = []
        if len(few) > 1:
            kids.append(el("polyline", {"class": "line", "points": " ".join(f"{ax.x(x):.1f},{ax.y(y):.1f}"
                                                                           for x, y, _ in few),
                                        "stroke-dasharray": dash or None}))
        if few and bulk:
            kids.append(el("line", {"class": "line bulk-link", "x1": _c1(ax.x(few[-1][0])), "y1": _c1(ax.y(few[-1][1])),
                                    "x2": _c1(ax.x(bulk_x)), "y2": _c1(ax.y(bulk[0][1]))}))
        for x, y, ch in pts:
            where = "bulk crystal" if x == bulk_x else f"{x} layer(s)"
            seen_chars.add(gap_class(ch))
            kids.append(el("circle", {"class": f"pt {gap_class(ch)}", "data-id": eid,
                                      "data-tip": _tip(eid, formula, f"{where}: optical gap {y:.3f} eV, {ch} gap"),
                                      "cx": _c1(ax.x(x)), "cy": _c1(ax.y(y)), "r": "3.6"}))
        marks.append(el("g", {"class": "series", "data-id": eid}, children=kids))
        ly = ax.y1 + 6 + k * 17
        marks.append(el("g", {"class": "legend", "data-id": eid}, children=[
            el("line", {"class": "line", "x1": _c1(ax.x1 + 12), "x2": _c1(ax.x1 + 30), "y1": _c1(ly), "y2": _c1(ly),
                        "stroke-dasharray": dash or None}),
            el("text", {"class": "tick", "x": _c1(ax.x1 + 35), "y": _c1(ly + 4)}, text=eid)]))
    legend = [key(f"{c} gap at that layer count", "dot", f"g-{c}") for c in GAP_CHARACTERS
              if f"g-{c}" in seen_chars]
    legend += [key("line style: compound (named at right)", "line", "series-key"),
               key("thin grey dashes: thickest stack to bulk crystal", "dash", "bulk-link"),
               key(f"ranked thickness ({n_target} layer(s))", "dash", "target")]
    return figure(ax, fig_id, "Optical gap against layer count for the leading compounds", marks, legend)


def figure_emission_histogram(ranked: pd.DataFrame, settings: Mapping) -> dict:
    """Histogram of emission wavelengths at the target thickness; candidates stacked dark."""
    fig_id = "plot-emission"
    lam = ranked["target_emission_nm"].to_numpy(dtype=float) if len(ranked) else np.zeros(0)
    cand = ranked["meets_all_criteria"].to_numpy(dtype=bool) if len(ranked) else np.zeros(0, bool)
    ok = np.isfinite(lam)
    if not ok.any():
        return empty_figure(fig_id, "No emission wavelengths to count.")
    lo_nm, hi_nm = sorted(float(v) for v in settings["ranking"]["window_nm"])
    lo, hi, _ = linear_ticks(float(lam[ok].min()), float(lam[ok].max()), 8)
    step = nice_step(hi - lo, 18)
    lo, hi = math.floor(lo / step) * step, math.ceil(hi / step) * step
    if hi <= lo:
        hi = lo + step
    edges = np.arange(lo, hi + step * 0.5, step)
    all_counts, _ = np.histogram(lam[ok], bins=edges)
    cand_counts, _ = np.histogram(lam[ok & cand], bins=edges)
    ax = Axes()
    _, y_hi, yticks = linear_ticks(0, max(int(all_counts.max()), 1), 5)
    yticks = [t for t in yticks if float(t).is_integer()]
    ax.xlim, ax.ylim = (lo, hi), (0, y_hi)
    marks = [ax.band(lo_nm, hi_nm, "window")]
    if marks[0]:
        marks.append(el("text", {"class": "note", "x": _c1(ax.x(max(lo_nm, lo)) + 4), "y": _c1(ax.y1 + 12)},
                        text="target window"))
    _, _, xticks = linear_ticks(lo, hi, 7)
    marks += ax.frame([t for t in xticks if lo <= t <= hi], yticks,
                      f"emission wavelength at {int(settings['ranking']['target_layers'])} layer(s) (nm)",
                      "compounds", xfmt=lambda v: f"{v:g}", yfmt=lambda v: f"{int(v)}")
    for a, b, n_all, n_c in zip(edges[:-1], edges[1:], all_counts, cand_counts):
        if n_all == 0:
            continue
        x, wdt = ax.x(a) + 1, ax.x(b) - ax.x(a) - 2
        tip = _tip(f"{a:g}\u2013{b:g} nm", f"{int(n_all)} compound(s), {int(n_c)} candidate(s)")
        kids = [el("rect", {"class": "bar-all", "x": _c1(x), "y": _c1(ax.y(n_all)), "width": _c1(wdt),
                            "height": _c1(ax.y(0) - ax.y(n_all))})]
        if n_c:
            kids.append(el("rect", {"class": "bar-cand", "x": _c1(x), "y": _c1(ax.y(n_c)), "width": _c1(wdt),
                                    "height": _c1(ax.y(0) - ax.y(n_c))}))
        marks.append(el("g", {"class": "bar", "data-tip": tip}, children=kids, title=tip))
    legend = [key("all compounds", "bar", "bar-all"), key("of which candidates", "bar", "bar-cand"),
              key(f"target window {lo_nm:g}\u2013{hi_nm:g} nm", "band", "window")]
    return figure(ax, fig_id, "Emission wavelength distribution", marks, legend)


def figure_binding_by_environment(ranked: pd.DataFrame, long: pd.DataFrame, settings: Mapping) -> dict:
    """Binding energy at the target thickness in every environment (and bulk), one dot per compound."""
    r = settings["ranking"]
    fig_id = "plot-environment"
    n_target = int(r["target_layers"])
    envs = list(settings.get("environments", {}))
    if len(long):
        envs += [e for e in pd.unique(long["environment"].astype(str)) if e not in envs and e != "bulk crystal"]
    groups = envs + ["bulk crystal"]
    if not len(long) or not len(ranked):
        return empty_figure(fig_id, "No binding energies to compare across surroundings.")
    cand = dict(zip(ranked["entry_id"].astype(str), ranked["meets_all_criteria"].astype(bool)))
    rank_of = dict(zip(ranked["entry_id"].astype(str), ranked["rank"].astype(int)))
    sel = long[((long["layers"] == n_target) & (long["environment"].isin(envs))) | (long["layers"] == 0)]
    data = []
    for g in groups:
        rows = sel[sel["environment"].astype(str) == g]
        vals = rows["binding_ev"].to_numpy(dtype=float) * MEV_PER_EV
        ids = rows["entry_id"].astype(str).to_numpy()
        chars = (rows["gap_character"].astype(str).to_numpy() if "gap_character" in rows.columns
                 else np.full(len(rows), "unknown"))
        keep = np.isfinite(vals) & (vals > 0)
        data.append((g, ids[keep], vals[keep], chars[keep]))
    allv = np.concatenate([d[2] for d in data]) if data else np.zeros(0)
    if not len(allv):
        return empty_figure(fig_id, "No binding energies to compare across surroundings.")
    ax = Axes(width=560, height=340)
    y_lo, y_hi, yticks = log_ticks(float(allv.min()), float(allv.max()))
    ax.ylog, ax.ylim, ax.xlim = True, (y_lo, y_hi), (-0.5, len(groups) - 0.5)
    marks = ax.frame([], yticks, "", "binding energy (meV, log scale)", yfmt=lambda v: f"{v:g}")
    env_ranked = r["environment"]
    seen_chars = set()
    for k, (g, ids, vals, chars) in enumerate(data):
        cx = ax.x(k)
        name = g if g == "bulk crystal" else environment_label(g, settings)
        # short lines under the group, so neighbouring labels do not run into each other:
        # the surroundings' name and layer count, then their dielectric constants above and below
        entry = settings.get("environments", {}).get(g, {}) if g != "bulk crystal" else {}
        lines = ([g] if g == "bulk crystal" else [f"{environment_name(g, settings)} ({n_target} L)"]
                 + ([f"above {float(entry['top']):.1f}", f"below {float(entry['bottom']):.1f}"]
                    if "top" in entry and "bottom" in entry else []))
        for j, line in enumerate(lines):
            marks.append(el("text", {"class": ("tick strong" if g == env_ranked else "tick") + " group-label",
                                     "x": _c1(cx), "y": _c1(ax.y0 + 18 + 13 * j), "text-anchor": "middle"},
                            text=line))
        if not len(vals):
            continue
        is_cand = np.array([cand.get(x, False) for x in ids], dtype=bool)
        keep = plot_subset(is_cand, GROUP_POINT_CAP)
        if len(keep) < len(vals):
            marks.append(el("text", {"class": "note", "x": _c1(cx), "y": _c1(ax.y1 + 2), "text-anchor": "middle"},
                            text=f"{len(keep)} of {len(vals)} drawn"))
        order = keep[np.argsort(vals[keep], kind="stable")]
        span = (ax.x(1) - ax.x(0)) * 0.34
        for j, i in enumerate(order):
            jitter = ((j * 0.618034) % 1.0 - 0.5) * 2 * span
            is_c = cand.get(ids[i], False)
            seen_chars.add(gap_class(chars[i]))
            marks.append(el("circle", {"class": f"pt {gap_class(chars[i])}" + (" cand" if is_c else ""),
                                       "data-id": ids[i],
                                       "data-tip": _tip(f"#{rank_of.get(ids[i], 0)}  {ids[i]}",
                                                        f"{name}: binding {vals[i]:.0f} meV"),
                                       "cx": _c1(cx + jitter), "cy": _c1(ax.y(vals[i])),
                                       "r": "4.2" if is_c else "3.2"}))
        med = float(np.median(vals))
        my = _c1(ax.y(med))
        marks.append(el("line", {"class": "median", "x1": _c1(cx - span - 6), "x2": _c1(cx + span + 6), "y1": my,
                                 "y2": my}, title=f"median {med:.0f} meV"))
    legend = [key(f"{c} gap", "dot", f"g-{c}") for c in GAP_CHARACTERS if f"g-{c}" in seen_chars]
    legend += [key("candidate (ringed, larger)", "ring", "cand"), key("median of the group", "line", "median")]
    return figure(ax, fig_id, "Binding energy per surroundings", marks, legend)
