"""Visible text of the HTML summary, and the fixed inputs of the page-regression test.

The page moved from Python f-strings to a template (after commit ba2d14c). To show
that the move kept what a reader sees, ``tests/unit/data/page_text_ba2d14c.json``
holds the visible text of the page that commit's ``report.build_html`` wrote for
:func:`reference_inputs`; ``test_report.py`` renders the same inputs with today's
code and compares section by section. Written once by::

    git show ba2d14c:workflow/lamellume/report.py > /tmp/report_ba2d14c.py
    .venv/bin/python tests/unit/page_text.py /tmp/report_ba2d14c.py

Do not regenerate it with the current code: it is the page of that commit. A
deliberate change of wording goes into ``INTENDED_CHANGES`` of the test instead.
"""

from __future__ import annotations

import copy
import importlib.util
import json
import sys
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
REFERENCE = HERE / "data" / "page_text_ba2d14c.json"

#: Settings the reference page was written with (a frozen copy of config/config.yaml of ba2d14c).
SETTINGS = {
    "excitons": {"max_binding_fraction": 0.5, "model_rel_unc_layers": 0.1, "model_rel_unc_bulk": 0.2},
    "campaign": "inputs/demo",
    "shards": 4,
    "environments": {"suspended": {"top": 1.0, "bottom": 1.0}, "on_silica": {"top": 1.0, "bottom": 3.9},
                     "encapsulated": {"top": 4.5, "bottom": 4.5}},
    "layers": {"max_layers": 5},
    "survival": {"temperature_k": 300.0, "pair_density_per_cm2": 1.0e12, "pair_density_per_cm3": 1.0e17,
                 "wannier_ratio": 2.0},
    "ranking": {"environment": "on_silica", "target_layers": 1, "require_direct": True,
                "min_direct_margin_ev": 0.02, "min_binding_over_kt": 4.0, "window_nm": [500, 1000],
                "weights": {"binding": 0.4, "margin": 0.3, "window": 0.3}, "order_by": "score"},
}

MANIFEST = {"config_hash": "abc123", "code_version": "c0de", "git": "v1-3-gdeadbee",
            "written_utc": "2026-01-01T00:00:00+00:00", "packages": {"numpy": "2.4.6", "python": "3.11.7"},
            "inputs": {"entries": {"a.json": "x", "b.json": "y"}, "structures": {"a.cif": "z"}},
            "config": {"campaign": "inputs/demo"},
            "cautions": ["All numbers are model estimates from first-principles inputs, not measurements.",
                         "An extra caution of the run."]}

#: Elements whose text is left out of the comparison: plot legends, whose layout the
#: template move changed on purpose (colour keys became a legend per plot).
SKIPPED_CLASSES = ("keys", "legend")


class _Text(HTMLParser):
    """Text a reader sees, per top-level section (script and style bodies left out)."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.parts: dict[str, list[str]] = {}
        self.section = "top"
        self.stack: list[tuple[str, bool]] = []
        self.tips: dict[str, list[str]] = {}

    VOID = {"meta", "link", "input", "br", "img", "hr"}

    def _skipping(self) -> bool:
        return any(skip for _, skip in self.stack)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "section":
            self.section = attrs.get("id", "?")
        classes = (attrs.get("class") or "").split()
        skip = tag in ("script", "style") or any(c in SKIPPED_CLASSES for c in classes)
        if not self._skipping() and not skip:
            for name in ("data-tip", "title", "aria-label", "placeholder"):
                if attrs.get(name):
                    self.tips.setdefault(self.section, []).append(" ".join(attrs[name].split()))
        if tag not in self.VOID:
            self.stack.append((tag, skip))

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in self.VOID:
            self.handle_endtag(tag)

    def handle_endtag(self, tag):
        while self.stack:
            open_tag, _ = self.stack.pop()
            if open_tag == tag:
                break
        if tag == "section":
            self.section = "after"

    def handle_data(self, data):
        if self._skipping():
            return
        text = " ".join(data.split())
        if text:
            self.parts.setdefault(self.section, []).append(text)


def visible_text(page: str) -> dict[str, dict[str, str]]:
    """{section: {"text": visible text, "tips": tooltip and title texts}}, whitespace collapsed."""
    parser = _Text()
    parser.feed(page)
    sections = set(parser.parts) | set(parser.tips)
    return {s: {"text": " ".join(parser.parts.get(s, [])), "tips": " | ".join(parser.tips.get(s, []))}
            for s in sorted(sections)}


def reference_inputs(report) -> dict:
    """The fixed tables the reference page is built from (invented numbers, synthetic)."""
    settings = copy.deepcopy(SETTINGS)
    n = 9
    rng = np.random.default_rng(11)
    ids = [f"cmp-{i:02d}" for i in range(n)]
    cand = np.arange(n) % 3 != 2
    ranked = pd.DataFrame({
        "entry_id": ids,
        "formula": [f"Ab{i}Cd2 (invented)" for i in range(n)],
        "input_hash": [f"h{i:04d}" for i in range(n)],
        "target_gap_character": np.where(cand, "direct", np.where(np.arange(n) == 8, "unknown", "indirect")),
        "target_optical_gap_ev": rng.uniform(1.2, 2.4, n).round(4),
        "target_emission_nm": rng.uniform(520, 1100, n).round(2),
        "target_emission_band": "visible",
        "target_binding_ev": rng.uniform(0.1, 0.4, n).round(4),
        "target_binding_over_kt": rng.uniform(2, 12, n).round(3),
        "target_direct_margin_ev": np.where(cand, 0.2, -0.1),
        "target_bound_fraction": rng.uniform(0.5, 1, n).round(3),
        "pass_direct": cand, "pass_margin": cand, "pass_binding": np.arange(n) != 5, "pass_window": cand,
        "meets_all_criteria": cand,
        "score_binding": 1.0, "score_margin": np.where(cand, 1.0, 0.0), "score_window": 0.8,
        "thinning_verdict": "direct only as a monolayer, indirect from 2 layers",
        "warnings": ["", "Wannier model doubtful", "", "", "", "", "", "", ""],
        "p_meets_all": np.linspace(0.2, 0.9, n).round(3),
        "p_pass_direct": np.full(n, 0.7),
        "p_pass_binding": np.full(n, 0.55),
    })
    ranked.loc[0, "target_direct_margin_ev"] = np.inf
    for name in ("target_binding_ev", "target_optical_gap_ev", "target_emission_nm"):
        for q, f in (("p16", 0.9), ("p50", 1.0), ("p84", 1.1)):
            ranked[f"{name}_{q}"] = ranked[name] * f
    ranked["score"] = (0.4 * ranked["score_binding"] + 0.3 * ranked["score_margin"] + 0.3 * ranked["score_window"])
    ranked = ranked.sort_values(["meets_all_criteria", "score", "entry_id"], ascending=[False, False, True])
    ranked["rank"] = np.arange(1, n + 1, dtype="int32")
    ranked = ranked.reset_index(drop=True)

    rows = []
    envs = list(settings["environments"])
    for j, (eid, gap, eb) in enumerate(zip(ranked["entry_id"], ranked["target_optical_gap_ev"],
                                           ranked["target_binding_ev"])):
        for layers in range(1, settings["layers"]["max_layers"] + 1):
            for k, env in enumerate(envs):
                rows.append({"entry_id": eid, "layers": layers, "environment": env,
                             "gap_character": "direct" if layers <= 1 + j % 3 else "indirect",
                             "optical_gap_ev": round(gap + 0.02 * layers, 4),
                             "binding_ev": round(eb * (1.5 - 0.3 * k) / layers, 5)})
        rows.append({"entry_id": eid, "layers": 0, "environment": "bulk crystal", "gap_character": "indirect",
                     "optical_gap_ev": round(gap - 0.3, 4), "binding_ev": round(eb / 5, 5)})
    long = pd.DataFrame(rows)
    rejects = pd.DataFrame({"entry_id": ["bad-0", "bad-1"], "source_file": ["bad-0.json", "bad-1.json"],
                            "field": ["dielectric.electronic", "valleys"],
                            "reason": ["tensor: not symmetric", "no valley given"],
                            "stage": ["contract", "read"]})
    previous = ranked[["entry_id", "input_hash", "rank", "meets_all_criteria", "score"]].copy()
    previous = previous[previous["entry_id"] != "cmp-04"]
    previous.loc[previous["entry_id"] == "cmp-01", "input_hash"] = "old"
    previous.loc[previous["entry_id"] == "cmp-02", "meets_all_criteria"] = False
    previous = pd.concat([previous, pd.DataFrame([{"entry_id": "cmp-gone", "input_hash": "h9", "rank": 10,
                                                   "meets_all_criteria": True, "score": 0.5}])])
    previous["target_optical_gap_ev"] = 1.5
    changes = report.compare_runs(report.snapshot(previous), report.snapshot(ranked))
    baseline = {"run_utc": "2025-12-31T00:00:00+00:00", "config_hash": "old123", "config_hash_now": "abc123",
                "config_changed": True}
    entries = pd.DataFrame({"entry_id": ids, "provenance": [f"synthetic record {i}" for i in range(n)]})
    return {"ranked": ranked, "long": long, "rejects": rejects, "manifest": MANIFEST, "changes": changes,
            "settings": settings, "baseline": baseline, "entries": entries}


def reference_page(report) -> str:
    i = reference_inputs(report)
    return report.build_html(i["ranked"], i["long"], i["rejects"], i["manifest"], i["changes"], i["settings"],
                             baseline=i["baseline"], entries=i["entries"])


def _load(path: str):
    spec = importlib.util.spec_from_file_location("report_reference", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


if __name__ == "__main__":
    sys.path.insert(0, str(HERE.parents[1] / "workflow"))
    old = _load(sys.argv[1])
    REFERENCE.write_text(json.dumps({"commit": "ba2d14c", "sections": visible_text(reference_page(old))},
                                    indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
    print(f"wrote {REFERENCE}")
