"""Tests for lamellume.report: the change report, the HTML summary and its safety."""

import base64
import hashlib
import html
import json
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import markupsafe
import pandas as pd
from scipy import constants as sc
import pytest
import yaml

import page_text
from lamellume import io, report

ROOT = Path(__file__).resolve().parents[2]
HOSTILE = ['<script>alert(1)</script>', '"><img src=x onerror=alert(1)>', "</script><script>alert(2)</script>",
           "<!-- \u2028 \u2029 & ' \""]
SECTIONS = ("make-first", "overview", "recompute", "table", "plots", "changes", "rejects", "methods", "cautions")


@pytest.fixture(scope="module")
def settings():
    with open(ROOT / "config" / "config.yaml", encoding="utf-8") as fh:
        return yaml.safe_load(fh)


def _ranked(ids, settings, formulas=None, warnings=None, extra=None):
    """A small ranked table with the columns the report reads (invented numbers)."""
    n = len(ids)
    rng = np.random.default_rng(3)
    cand = np.arange(n) % 3 != 2
    frame = pd.DataFrame({
        "entry_id": ids,
        "formula": formulas if formulas is not None else [f"Ab{i}Cd2 (invented)" for i in range(n)],
        "input_hash": [f"h{i:04d}" for i in range(n)],
        "rank_environment": settings["ranking"]["environment"],
        "rank_layers": settings["ranking"]["target_layers"],
        "target_gap_character": np.where(cand, "direct", "indirect"),
        "target_optical_gap_ev": rng.uniform(1.2, 2.4, n),
        "target_emission_nm": rng.uniform(520, 1100, n),
        "target_emission_band": "visible",
        "target_binding_ev": rng.uniform(0.1, 0.4, n),
        "target_binding_over_kt": rng.uniform(2, 12, n),
        "target_direct_margin_ev": np.where(cand, 0.2, -0.1),
        "target_bound_fraction": rng.uniform(0.5, 1, n),
        "pass_direct": cand, "pass_margin": cand, "pass_binding": True, "pass_window": cand,
        "meets_all_criteria": cand,
        "score_binding": 1.0, "score_margin": np.where(cand, 1.0, 0.0), "score_window": 0.8,
        "thinning_verdict": "direct only as a monolayer, indirect from 2 layers",
        "warnings": warnings if warnings is not None else [""] * n,
    })
    frame["score"] = (0.4 * frame["score_binding"] + 0.3 * frame["score_margin"] + 0.3 * frame["score_window"])
    frame = frame.sort_values(["meets_all_criteria", "score", "entry_id"], ascending=[False, False, True])
    frame["rank"] = np.arange(1, n + 1, dtype="int32")
    for name, values in (extra or {}).items():
        frame[name] = values
    return frame.reset_index(drop=True)


def _long(ranked, settings):
    rows = []
    envs = list(settings["environments"])
    for eid, gap, eb in zip(ranked["entry_id"], ranked["target_optical_gap_ev"], ranked["target_binding_ev"]):
        for n in range(1, settings["layers"]["max_layers"] + 1):
            for k, env in enumerate(envs):
                rows.append({"entry_id": eid, "layers": n, "environment": env,
                             "optical_gap_ev": gap + 0.02 * n, "binding_ev": eb * (1.5 - 0.3 * k) / n})
        rows.append({"entry_id": eid, "layers": 0, "environment": "bulk crystal",
                     "optical_gap_ev": gap - 0.3, "binding_ev": eb / 5})
    return pd.DataFrame(rows, columns=["entry_id", "layers", "environment", "optical_gap_ev", "binding_ev"])


def _rejects(texts=("tensor: not symmetric",)):
    return pd.DataFrame({"entry_id": [f"bad-{i}" for i in range(len(texts))],
                         "source_file": [f"bad-{i}.json" for i in range(len(texts))],
                         "field": ["dielectric.electronic"] * len(texts), "reason": list(texts),
                         "stage": ["contract"] * len(texts)})


MANIFEST = {"config_hash": "abc123", "code_version": "c0de", "git": "v1-3-gdeadbee",
            "written_utc": "2026-01-01T00:00:00+00:00", "packages": {"numpy": "2.4.6", "python": "3.11.7"},
            "inputs": {"entries": {"a.json": "x"}, "structures": {}}, "config": {"campaign": "inputs/demo"},
            "cautions": ["All numbers are model estimates from first-principles inputs, not measurements."]}


def _snap(rows):
    """Snapshot from (entry_id, input_hash, rank, candidate, score) tuples."""
    frame = pd.DataFrame(rows, columns=["entry_id", "input_hash", "rank", "meets_all_criteria", "score"])
    frame["target_optical_gap_ev"] = 1.5
    return report.snapshot(frame)


# ---------------------------------------------------------------------------
# compare_runs
# ---------------------------------------------------------------------------

def _assert_typed(changes):
    assert list(changes.columns) == list(report.CHANGE_DTYPES)
    for name, dtype in report.CHANGE_DTYPES.items():
        assert str(changes[name].dtype) == dtype, name


def test_first_run_gives_empty_well_typed_table():
    current = _snap([("a", "h1", 1, True, 0.9)])
    changes = report.compare_runs(None, current)
    assert len(changes) == 0
    _assert_typed(changes)


def test_identical_runs_report_nothing():
    snap = _snap([("a", "h1", 1, True, 0.9), ("b", "h2", 2, False, 0.5)])
    changes = report.compare_runs(snap, snap.copy())
    assert len(changes) == 0
    _assert_typed(changes)


def test_every_kind_of_change():
    previous = _snap([
        ("keep", "h0", 1, True, 0.95),
        ("gone", "h1", 2, True, 0.90),
        ("lost", "h2", 3, True, 0.80),
        ("revised", "h3", 4, False, 0.60),
        ("gained", "h4", 5, False, 0.50),
        ("slip", "h5", 6, False, 0.45),
        ("climb", "h6", 7, False, 0.40),
    ])
    current = _snap([
        ("keep", "h0", 1, True, 0.95),
        ("gained", "h4", 2, True, 0.85),
        ("new", "h9", 3, True, 0.80),
        ("revised", "h3x", 4, False, 0.62),
        ("climb", "h6", 5, False, 0.44),
        ("lost", "h2", 6, False, 0.43),
        ("slip", "h5", 7, False, 0.30),
    ])
    changes = report.compare_runs(previous, current).set_index("entry_id")
    kinds = changes["change"].to_dict()
    assert kinds["new"] == "added"
    assert kinds["gone"] == "removed"
    assert kinds["gained"] == "became candidate"
    assert kinds["lost"] == "dropped from candidates"
    assert kinds["revised"] == "input revised"
    assert kinds["climb"] == "rank moved" and kinds["slip"] == "rank moved"
    assert "keep" not in kinds
    assert changes.loc["revised", "input_revised"]
    assert changes.loc["revised", "old_input_hash"] == "h3" and changes.loc["revised", "new_input_hash"] == "h3x"
    assert changes.loc["climb", "rank_change"] == 2 and changes.loc["slip", "rank_change"] == -1
    assert changes.loc["climb", "old_rank"] == 7 and changes.loc["climb", "new_rank"] == 5
    assert pd.isna(changes.loc["new", "old_rank"]) and changes.loc["new", "new_rank"] == 3
    assert pd.isna(changes.loc["gone", "new_rank"]) and changes.loc["gone", "old_rank"] == 2
    assert changes.loc["lost", "was_candidate"] and not changes.loc["lost", "is_candidate"]
    # Most important kinds first.
    order = [report.CHANGE_KINDS.index(k) for k in report.compare_runs(previous, current)["change"]]
    assert order == sorted(order)
    _assert_typed(report.compare_runs(previous, current))


def test_revised_input_that_also_becomes_candidate_keeps_both_facts():
    previous = _snap([("a", "h1", 2, False, 0.4), ("b", "h2", 1, True, 0.9)])
    current = _snap([("a", "h1-new", 1, True, 0.95), ("b", "h2", 2, True, 0.9)])
    row = report.compare_runs(previous, current).set_index("entry_id").loc["a"]
    assert row["change"] == "became candidate"
    assert row["input_revised"]
    assert "record or structure file changed" in row["detail"]


def test_shift_from_an_addition_alone_is_not_a_move():
    previous = _snap([("a", "h1", 1, True, 0.9), ("b", "h2", 2, True, 0.8)])
    current = _snap([("new", "h0", 1, True, 0.99), ("a", "h1", 2, True, 0.9), ("b", "h2", 3, True, 0.8)])
    changes = report.compare_runs(previous, current)
    assert changes["change"].tolist() == ["added"]


def test_previous_run_with_no_compounds_marks_all_added():
    previous = _snap([])
    current = _snap([("a", "h1", 1, True, 0.9)])
    changes = report.compare_runs(previous, current)
    assert changes["change"].tolist() == ["added"]


def test_change_table_survives_parquet(tmp_path):
    previous = _snap([("a", "h1", 1, True, 0.9)])
    current = _snap([("b", "h2", 1, True, 0.9)])
    for changes in (report.compare_runs(previous, current), report.empty_changes()):
        path = tmp_path / "changes.parquet"
        io.write_parquet(changes, path)
        back = io.read_parquet(path)
        assert list(back.columns) == list(report.CHANGE_DTYPES)
        assert len(back) == len(changes)


# ---------------------------------------------------------------------------
# HTML summary
# ---------------------------------------------------------------------------

class _Collector(HTMLParser):
    """Collects tags, attributes and script bodies of a page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.scripts, self._in_script = [], [], None

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag == "script":
            self._in_script = dict(attrs)
            self.scripts.append([dict(attrs), ""])

    def handle_endtag(self, tag):
        if tag == "script":
            self._in_script = None

    def handle_data(self, data):
        if self._in_script is not None:
            self.scripts[-1][1] += data


def _page(settings, ranked=None, long=None, rejects=None, changes=None, baseline=None, manifest=None):
    ranked = _ranked([f"cmp-{i:02d}" for i in range(9)], settings) if ranked is None else ranked
    long = _long(ranked, settings) if long is None else long
    return report.build_html(ranked, long, _rejects() if rejects is None else rejects,
                             MANIFEST if manifest is None else manifest,
                             report.empty_changes() if changes is None else changes, settings, baseline=baseline)


def test_page_has_every_section_and_the_caution_near_the_top(settings):
    page = _page(settings)
    for section in SECTIONS:
        assert f'<section id="{section}"' in page, section
    top = page.index('class="caution-top"')
    assert top < page.index('<section id="make-first"')
    assert "not measurements" in page[top:top + 400]
    assert "licensed safety practice" in page
    for ref in ("Keldysh, JETP Lett. 29, 658 (1979)", "Phys. Rev. B 84, 085406 (2011)", "Phys. Rev. A 43, 1186",
                "Phys. Rev. B 17, 2575", "Phys. Rev. Lett. 116, 056401", "Phys. Rev. 98, 915",
                "Phys. Rev. Materials 3, 034003", "Rytova", "Ong et al."):
        assert ref in page, ref
    for plot in ("plot-binding-gap", "plot-gap-layers", "plot-emission", "plot-environment"):
        assert f'id="{plot}"' in page


def test_hostile_text_is_escaped_everywhere(settings):
    n = len(HOSTILE)
    ranked = _ranked([f"x{i}" for i in range(n)], settings, formulas=HOSTILE, warnings=HOSTILE)
    # Identifiers of real records are restricted by the schema, but the page must not rely on it.
    ranked.loc[0, "entry_id"] = HOSTILE[0]
    ranked.loc[1, "entry_id"] = HOSTILE[1]
    manifest = dict(MANIFEST, git=HOSTILE[0], config_hash=HOSTILE[1], config={"campaign": HOSTILE[2]},
                    packages={HOSTILE[0]: HOSTILE[1]}, cautions=[HOSTILE[1]])
    changes = report.compare_runs(_snap([(HOSTILE[0], "old", 1, False, 0.1)]), report.snapshot(ranked))
    baseline = {"run_utc": HOSTILE[2], "config_hash": HOSTILE[0], "config_hash_now": HOSTILE[1],
                "config_changed": True}
    page = _page(settings, ranked=ranked, rejects=_rejects(HOSTILE), changes=changes, baseline=baseline,
                 manifest=manifest)
    for text in HOSTILE[:3]:
        assert text not in page
    assert str(markupsafe.escape(HOSTILE[1])) in page
    assert html.unescape(str(markupsafe.escape(HOSTILE[1]))) == HOSTILE[1]
    parsed = _Collector()
    parsed.feed(page)
    assert not [t for t, _ in parsed.tags if t == "img"]
    assert not [(t, a) for t, attrs in parsed.tags for a in attrs if a.lower().startswith("on")]
    # Exactly our two scripts: the JSON data block and the page script.
    assert len(parsed.scripts) == 2
    assert parsed.scripts[0][0] == {"type": "application/json", "id": "lamellume-data"}
    data = json.loads(parsed.scripts[0][1])
    assert HOSTILE[0] in data["rows"]          # the data round-trips exactly ...
    assert "<" not in parsed.scripts[0][1]     # ... with no raw '<' in the block
    assert parsed.scripts[1][1] == report.page_script()


def test_script_json_escapes_markup_and_line_separators():
    text = report.script_json({"a": "</script><!--&\u2028\u2029", "b": float("nan")})
    for bad in ("<", ">", "&", "\u2028", "\u2029"):
        assert bad not in text
    assert json.loads(text) == {"a": "</script><!--&\u2028\u2029", "b": None}


def test_content_security_policy_allows_only_the_page_script(settings):
    page = _page(settings)
    parsed = _Collector()
    parsed.feed(page)
    inline = parsed.scripts[1][1]  # the script as the browser sees it, hashed here with hashlib
    assert inline == report.page_script()
    digest = base64.b64encode(hashlib.sha256(inline.encode()).digest()).decode()
    meta = html.unescape(re.search(r'http-equiv="Content-Security-Policy" content="([^"]+)"', page).group(1))
    assert f"'sha256-{digest}'" in meta and "default-src 'none'" in meta
    assert "unsafe-inline" not in meta.split("script-src")[1].split(";")[0]


def test_page_loads_nothing_from_the_network(settings):
    page = _page(settings)
    parsed = _Collector()
    parsed.feed(page)
    for tag, attrs in parsed.tags:
        for name in ("src", "href", "action", "data", "poster"):
            value = (attrs.get(name) or "").strip().lower()
            assert not value.startswith(("http:", "https:", "//", "ftp:")), (tag, name, value)
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", page, re.I)
    assert "@import" not in page and not re.search(r"url\(\s*['\"]?(?:https?:)?//", page, re.I)


def test_empty_screen_renders(settings):
    ranked = _ranked(["a"], settings).iloc[0:0]
    long = _long(ranked, settings)
    rejects = _rejects(()).iloc[0:0]
    page = report.build_html(ranked, long, rejects, {}, report.empty_changes(), settings, baseline=None)
    for section in SECTIONS:
        assert f'<section id="{section}"' in page
    assert "No compound was screened" in page
    assert "0 of 0 shown" in page
    # Even a table without any columns (nothing was screened at all) renders.
    page = report.build_html(pd.DataFrame(), pd.DataFrame(), pd.DataFrame(), {}, report.empty_changes(), settings)
    assert '<section id="table"' in page


def test_candidate_rows_and_plot_points_match_the_table(settings):
    ranked = _ranked([f"cmp-{i:02d}" for i in range(9)], settings)
    page = _page(settings, ranked=ranked)
    assert page.count('data-candidate="1"') == int(ranked["meets_all_criteria"].sum())
    assert page.count("<tr id=\"row-") == len(ranked)
    scatter = page.split('id="plot-binding-gap"')[1].split("</svg>")[0]
    assert scatter.count("<circle") == len(ranked)


def test_uncertainty_columns_shown_only_when_present(settings):
    ids = [f"cmp-{i:02d}" for i in range(6)]
    plain = _page(settings, ranked=_ranked(ids, settings))
    errbar = re.compile(r'<line class="errbar[ "]')
    assert "P(all met)" not in plain and not errbar.search(plain)
    base = _ranked(ids, settings)
    extra = {"p_meets_all": np.linspace(0.2, 0.9, 6), "p_pass_direct": np.full(6, 0.7)}
    for name in ("target_binding_ev", "target_optical_gap_ev", "target_emission_nm"):
        for q, f in (("p16", 0.9), ("p50", 1.0), ("p84", 1.1)):
            extra[f"{name}_{q}"] = base[name].to_numpy() * f
    page = _page(settings, ranked=_ranked(ids, settings, extra=extra))
    assert "P(all met)" in page and "chance this criterion holds" in page
    assert errbar.search(page)
    assert report.uncertainty_columns(list(extra))["quantiles"] == [
        "target_binding_ev", "target_emission_nm", "target_optical_gap_ev"]


def test_no_candidates_says_so(settings):
    ranked = _ranked([f"cmp-{i:02d}" for i in range(4)], settings)
    ranked["meets_all_criteria"] = False
    ranked["pass_window"] = False
    page = _page(settings, ranked=ranked)
    assert "No compound meets every criterion" in page
    assert "Misses:" in page


#: Wording changed on purpose since commit ba2d14c: (old text, new text), applied to that page's text.
INTENDED_CHANGES = (
    ("on_silica", "on silica"),  # display names of the surroundings instead of config keys
    ("Large dots meet every criterion", "Large ringed dots meet every criterion"),  # candidates by outline
    ("Filled dots are candidates", "Ringed dots are candidates"),
    # bulk rows use a volume pair density (issue 17, 3D Saha bound fraction)
    ("1e+12 cm\u207b\u00b2 Surroundings", "1e+12 cm\u207b\u00b2 (layers), 1e+17 cm\u207b\u00b3 (bulk) Surroundings"),
    (" Overview All compounds", " Overview Recompute next All compounds"),  # link to the added section
    # issue 18: the bound criterion is the Saha fraction at the planned density; the kT line is an optional floor
    ("the dashed line is the binding needed to survive the operating temperature.",
     "a dashed line, when drawn, is the configured binding floor (ranking.min_binding_over_kt). The bound "
     "criterion itself is the Saha bound fraction at the planned pair density, which depends on the reduced "
     "mass too, so it is no single line here."),
    ("needed: 4 kT = 103 meV at 300 K", "floor: 4 kT = 103 meV at 300 K"),
    # issue 14 item 7: every surroundings label carries its dielectric constants (once)
    ("on silica", "on silica (above 1.0, below 3.9)"),
    ("suspended", "suspended (above 1.0, below 1.0)"),
    ("(above 1.0, below 3.9) (above 1.0, below 3.9)", "(above 1.0, below 3.9)"),
    ("(above 1.0, below 1.0) (above 1.0, below 1.0)", "(above 1.0, below 1.0)"),
    ("encapsulated", "encapsulated (above 4.5, below 4.5)"),
    ("(above 4.5, below 4.5) (above 4.5, below 4.5)", "(above 4.5, below 4.5)"),
    # issue 14: the binding-per-surroundings groups name the surroundings on one line, their constants on
    # the next (one long line per group ran into its neighbours)
    *[(f"{name} ({c}) (1 L)", f"{name} (1 L) {c.replace(',', '')}") for name, c in (
        ("suspended", "above 1.0, below 1.0"), ("on silica", "above 1.0, below 3.9"),
        ("encapsulated", "above 4.5, below 4.5"))],
    ("in each surroundings, plus the bulk crystal.",
     "in each surroundings (under its name, the dielectric constants above and below the flake), plus the bulk "
     "crystal."),
    # issue 14 item 7: the rejects' Check column names the check in words, not the stage name
    (" contract tensor:", " record breaks the input contract (schema or physical checks) tensor:"),
    (" valleys read no", " valleys file could not be read as JSON no"),
    # issue 18: what the model leaves out, stated among the cautions
    ("the run. A high rank means", "the run. " + " ".join(report.MODEL_LIMITS) + " A high rank means"),
)
#: Rewritten on purpose for the exciton-level verdict, the emission bracket and the model error
#: (issue 17); their new wording is checked by test_brightness_words_* and test_methods_*.
REWRITTEN_SECTIONS = {"make-first", "methods", "overview", "table"}
#: Sections added on purpose since commit ba2d14c.
ADDED_SECTIONS = {"recompute"}  # "What to recompute next" (lamellume.refinement)
#: Added on purpose: the gap character of each point of the thickness figure (now its colour).
ADDED_TO_TIPS = re.compile(r", (?:direct|indirect|unknown) gap(?= \||$)")


def test_page_text_matches_the_page_before_the_template_move():
    # Reference: visible text of the page written by commit ba2d14c (f-string page) for the
    # same fixed inputs; see tests/unit/page_text.py for how it was made.
    reference = json.loads(page_text.REFERENCE.read_text(encoding="utf-8"))["sections"]
    now = page_text.visible_text(page_text.reference_page(report))
    assert set(now) == set(reference) | ADDED_SECTIONS
    for section, old in reference.items():
        if section in REWRITTEN_SECTIONS:
            continue
        text, tips = old["text"], old["tips"]
        for before, after in INTENDED_CHANGES:
            text, tips = text.replace(before, after), tips.replace(before, after)
        assert now[section]["text"] == text, section
        assert ADDED_TO_TIPS.sub("", now[section]["tips"]) == tips, section


def test_template_files_are_declared():
    # DATA_FILES is what the workflow declares as code inputs of the page (common.smk reads it).
    folder = Path(report.__file__).parent
    on_disk = {str(p.relative_to(folder)) for p in (folder / "templates").iterdir() if p.is_file()}
    assert set(report.DATA_FILES) == on_disk


def test_every_figure_has_a_legend(settings):
    page = _page(settings)
    figures = re.findall(r'<figure class="plot">(.*?)</figure>', page, re.S)
    assert len(figures) == 4
    for body in figures:
        keys = re.search(r'<ul class="keys"[^>]*>(.*?)</ul>', body, re.S)
        assert keys and keys.group(1).count("<li>") >= 2, body[:200]
    assert "Colours on this page" in page


def test_one_colour_per_meaning(settings):
    css = (Path(report.__file__).parent / "templates" / "summary.css").read_text(encoding="utf-8")
    root = re.search(r":root\{(.*?)\}", css, re.S).group(1)
    meanings = dict(re.findall(r"--(c-[\w-]+):\s*(#[0-9a-fA-F]{3,6})", root))
    assert {"c-direct", "c-indirect", "c-pass", "c-fail", "c-window", "c-cand"} <= set(meanings)
    values = [v.lower() for v in meanings.values()]
    assert len(values) == len(set(values)), meanings  # no colour carries two meanings
    rest = css.replace(root, "").lower()
    for value in values:
        assert value not in rest, value  # ... and each meaning is declared once, used by name
    page = _page(settings)
    for svg in re.findall(r'<svg class="chart".*?</svg>', page, re.S):
        assert not re.search(r'\s(?:fill|stroke)="', svg)  # figures take colours from classes only


# ---------------------------------------------------------------------------
# Orchestration: history written only after the page
# ---------------------------------------------------------------------------

def _write_inputs(folder, settings, ranked):
    paths = {"wide": folder / "wide.parquet", "long": folder / "long.parquet",
             "rejects": folder / "rejects.parquet", "manifest": folder / "manifest.json"}
    io.write_parquet(ranked, paths["wide"])
    io.write_parquet(_long(ranked, settings), paths["long"])
    io.write_parquet(_rejects(), paths["rejects"])
    io.write_json(MANIFEST, paths["manifest"])
    return {k: str(v) for k, v in paths.items()}


def test_write_summary_keeps_history_and_reports_changes(tmp_path, settings):
    ids = [f"cmp-{i:02d}" for i in range(6)]
    outputs = {"html": str(tmp_path / "out" / "summary.html"), "changes": str(tmp_path / "out" / "changes.parquet")}
    history = tmp_path / "history"
    first = _write_inputs(tmp_path, settings, _ranked(ids, settings))
    report.write_summary(first, outputs, settings, str(history))
    assert len(io.read_parquet(outputs["changes"])) == 0
    assert (history / report.LAST_SNAPSHOT).exists()
    assert "first run recorded" in Path(outputs["html"]).read_text(encoding="utf-8")
    # Repeating the first run reports exactly what the first run reported (a re-run, say
    # after a lost results/ folder, must equal the run it repeats).
    report.write_summary(first, outputs, settings, str(history))
    assert len(io.read_parquet(outputs["changes"])) == 0
    assert io.parquet_metadata(outputs["changes"])["compared_with_run"] == ""
    assert "first run recorded" in Path(outputs["html"]).read_text(encoding="utf-8")
    assert not (history / report.PREVIOUS_SNAPSHOT).exists()

    revised = _ranked(ids[1:] + ["cmp-new"], settings)
    revised.loc[revised["entry_id"] == "cmp-03", "input_hash"] = "changed"
    second = _write_inputs(tmp_path, settings, revised)
    report.write_summary(second, outputs, settings, str(history))
    changes = io.read_parquet(outputs["changes"])
    assert {"added", "removed"} <= set(changes["change"])
    assert changes.set_index("entry_id").loc["cmp-03", "input_revised"]
    assert (history / report.PREVIOUS_SNAPSHOT).exists()

    # Repeating the same run compares with the run before it, so the report is not wiped.
    report.write_summary(second, outputs, settings, str(history))
    assert len(io.read_parquet(outputs["changes"])) == len(changes)


def test_failed_page_leaves_history_alone(tmp_path, settings, monkeypatch):
    inputs = _write_inputs(tmp_path, settings, _ranked(["a", "b"], settings))
    outputs = {"html": str(tmp_path / "s.html"), "changes": str(tmp_path / "c.parquet")}

    def broken(*args, **kwargs):
        raise RuntimeError("page failed")

    monkeypatch.setattr(report, "build_html", broken)
    with pytest.raises(RuntimeError):
        report.write_summary(inputs, outputs, settings, str(tmp_path / "history"))
    assert not (tmp_path / "history").exists()


def test_unreadable_history_counts_as_first_run(tmp_path, settings):
    inputs = _write_inputs(tmp_path, settings, _ranked(["a", "b"], settings))
    history = tmp_path / "history"
    history.mkdir()
    (history / report.LAST_SNAPSHOT).write_bytes(b"not parquet")
    outputs = {"html": str(tmp_path / "s.html"), "changes": str(tmp_path / "c.parquet")}
    report.write_summary(inputs, outputs, settings, str(history))
    assert len(io.read_parquet(outputs["changes"])) == 0
    assert len(io.read_parquet(history / report.LAST_SNAPSHOT)) == 2


def test_large_screen_lists_the_best_ranked_rows(settings):
    ids = [f"cmp-{i:03d}" for i in range(30)]
    ranked = _ranked(ids, settings)
    assert int(ranked["meets_all_criteria"].sum()) == 20
    page = report.build_html(ranked, _long(ranked, settings), _rejects(), MANIFEST, report.empty_changes(),
                             settings, max_table_rows=15)
    assert page.count('<tr id="row-') == 15
    assert page.count('data-candidate="1"') == 15
    assert "5 further candidate(s) and 10 other compound(s)" in page
    size = settings["ranking"]["shortlist_size"]  # the shortlist is the ranked list's head, not the candidates
    assert f"the first {size} of the ranked list (candidates first) in results/shortlist.csv" in page
    assert "cmp-" in page and '"rows"' in page
    data = json.loads(re.search(r'id="lamellume-data">(.*?)</script>', page).group(1))
    assert len(data["rows"]) == 15
    scatter = page.split('id="plot-binding-gap"')[1].split("</svg>")[0]
    assert scatter.count("<circle") == len(ranked)  # plots still show every compound


@pytest.mark.parametrize("row, words", [
    ({"target_brightness": "bright", "target_bright_pair": "K->K", "target_dark_pair": "K->Q",
      "target_exciton_margin_ev": 0.05, "target_bright_exciton_ev": 1.7, "target_bright_fraction": 0.9},
     ["Bright at 1 layer(s)", "K->K", "momentum-dark", "50 meV higher", "90 %", "Spin was not given"]),
    ({"target_brightness": "dark", "target_bright_pair": "K->K", "target_dark_pair": "G->K",
      "target_exciton_margin_ev": -0.03, "target_gap_character": "direct", "target_spin_given": False},
     ["Dark at 1 layer(s)", "momentum-dark G->K exciton lies 30 meV below", "although the band gap is direct"]),
    ({"target_brightness": "dark", "target_bright_pair": "K(up)->K(up)", "target_dark_pair": "K(up)->K(down)",
      "target_exciton_margin_ev": -0.04, "target_spin_given": True},
     ["spin-dark K(up)->K(down) exciton lies 40 meV below"]),
    ({"target_brightness": "unknown", "target_bright_pair": "K->K", "target_dark_pair": ""},
     ["Brightness unknown", "not counted as bright"]),
])
def test_brightness_words_explain_each_verdict(settings, row, words):
    settings = {**settings, "ranking": {**settings["ranking"], "target_layers": 1}}
    text = report.brightness_words(row, settings)
    for w in words:
        assert w in text, (w, text)
    assert ("Spin was not given" in text) == (not row.get("target_spin_given", False))


def test_methods_describe_the_exciton_level_verdict_and_model_error(settings):
    page = _page(settings)
    # issue 17 "Done when": the page's method section describes the exciton-level verdict, the 3D bulk
    # survival, the radius convention, the thermal shift and the model error
    for words in ("Which exciton is lowest", "Thermal bright fraction", "Model error", "full compensation",
                  "emission is at the calculation", "Exciton radius (one convention)",
                  "d = 3 with a volume density", "Edwards–Sienko", "Varshni", "O'Donnell and Chen"):
        assert words in page, words
def _refinement_rows(ids):
    from lamellume import refinement

    rows = []
    for i, ident in enumerate(ids):
        row = {"rank": i + 1, "entry_id": ident, "input_group": "band edge, valley K (conduction)",
               "input_kind": "band_edges", "valley_index": 1, "recompute": refinement.GROUP_KINDS["band_edges"][1],
               "p_meets_all": 0.5, "share_first": 0.7, "share_total": 0.8, "share_halved": 0.4,
               "expected_effect": 0.1, "mostly_through": "gap direct"}
        row["advice"] = refinement.plain_words(pd.Series(row))
        rows.append(row)
    return pd.DataFrame(rows)


def test_recompute_section_lists_each_borderline_compound_in_words(settings):
    ranked = _ranked([f"cmp-{i:02d}" for i in range(9)], settings)
    evil = '<img src=x onerror=alert(1)>'
    page = report.build_html(ranked, _long(ranked, settings), _rejects(), MANIFEST, report.empty_changes(),
                             settings, refinement=_refinement_rows(["cmp-01", "cmp-03", evil]))
    section = page[page.index('<section id="recompute"'):]
    section = section[:section.index("</section>")]
    assert section.count("<li>") == 3
    assert "Recompute the band edge, valley K (conduction) of cmp-01" in section
    assert "it decides 70 % of whether cmp-01 meets every criterion" in section
    assert evil not in page and "&lt;img src=x onerror=alert(1)&gt;" in section


def test_recompute_section_says_why_it_is_empty(settings):
    import copy

    ranked = _ranked(["cmp-00"], settings)
    empty = _refinement_rows([]).reindex(columns=["entry_id", "advice"])
    page = report.build_html(ranked, _long(ranked, settings), _rejects(), MANIFEST, report.empty_changes(),
                             settings, refinement=empty)
    assert "No compound has a chance between 10 % and 90 %" in page
    off = copy.deepcopy(settings)
    off["refinement"]["enabled"] = False
    page = report.build_html(ranked, _long(ranked, off), _rejects(), MANIFEST, report.empty_changes(), off,
                             refinement=empty)
    assert "switched off" in page


PLAN_SETTINGS = {
    "environments": {"suspended": {"top": 1.0, "bottom": 1.0}, "encapsulated": {"top": 4.5, "bottom": 4.5}},
    "survival": {"temperature_k": 300.0, "pair_density_per_cm2": 1e12},
    "ranking": {"environment": "encapsulated", "target_layers": 1},
}


def _plan_row(**extra):
    row = {"entry_id": "x", "thinning_verdict": "direct only as a monolayer, indirect from 2 layers",
           "thinning_state": "direct when thin", "switch_layers": 2, "target_brightness": "bright",
           "target_exciton_margin_ev": 0.08, "target_bright_exciton_ev": 1.9, "target_mott_density_per_cm2": 2.0e13,
           "target_radius_angstrom": 12.0, "emission_nm_p16__suspended": 640.0, "emission_nm_p84__suspended": 700.0,
           "emission_nm_p16__encapsulated": 630.0, "emission_nm_p84__encapsulated": 690.0}
    row.update(extra)
    return row


def test_card_plan_names_every_step_of_the_first_experiment():
    long = pd.DataFrame({"entry_id": ["x", "x"], "layers": [1, 1], "environment": ["suspended", "encapsulated"],
                         "emission_nm": [668.0, 655.0], "emission_compensated_nm": [668.0, 668.0]})
    plan = dict(report._plan(_plan_row(), long, PLAN_SETTINGS))
    assert list(plan) == ["Make", "Expected emission", "Quick test", "Measure at", "Pump below"]
    assert plan["Make"].startswith("1-layer flake(s), encapsulated")
    # one range per surroundings, with its dielectric constants and the Monte Carlo 16-84 % range
    susp, enc = plan["Expected emission"]
    assert "1.0 above, 1.0 below" in susp and "640\u2013700 nm" in susp and "nominal 668 nm" in susp
    assert susp.startswith("suspended (dielectric constant 1.0 above, 1.0 below; mean 1.00)")  # said once
    assert "4.5 above, 4.5 below" in enc and "630\u2013690 nm" in enc and "668 nm if the gap fully" in enc
    tests = " ".join(plan["Quick test"])
    assert "monolayer and bilayer" in tests and "brighten on cooling" in tests and "reflectance" in tests.lower()
    # 80 meV is about 3 kT at 300 K: little change from the dark state on cooling
    assert "little change" in plan["Measure at"]
    # 30 meV: kT equals it at 30 meV / k_B = 348 K (scipy.constants, independent of lamellume.units)
    close = dict(report._plan(_plan_row(target_exciton_margin_ev=0.03), long, PLAN_SETTINGS))
    assert f"about {0.03 * sc.e / sc.k:.0f} K" in close["Measure at"] and "temperature series" in close["Measure at"]
    assert "2e+13 cm\u207b\u00b2" in plan["Pump below"] and "1e+12" in plan["Pump below"]


def test_card_plan_for_a_dark_ground_state_expects_dimming_and_no_layer_test():
    plan = dict(report._plan(_plan_row(target_brightness="dark", target_exciton_margin_ev=-0.03,
                                       thinning_state="direct at every thickness", switch_layers=pd.NA),
                                None, PLAN_SETTINGS))
    tests = " ".join(plan["Quick test"])
    assert "dim on cooling" in tests and "monolayer and bilayer" not in tests
    assert all("no Monte Carlo range" not in t for t in plan["Expected emission"])
    no_mc = dict(report._plan(_plan_row(**{"emission_nm_p16__suspended": float("nan")}), None, PLAN_SETTINGS))
    assert "no Monte Carlo range" in no_mc["Expected emission"][0]


def test_bound_fraction_is_rounded_never_a_guarantee():
    assert report._bound_words(0.997) == "over 99 %"
    assert report._bound_words(0.754) == "75 %"
    assert report._bound_words(0.001) == "under 1 %"
    assert report._about(0.754) == "About 75 %" and report._about(0.9995) == "Over 99 %"


def test_overview_counts_say_one_candidate_in_the_singular(settings):
    # three compounds, only the first a candidate
    ranked = _ranked(["cmp-a", "cmp-b", "cmp-c"], settings)
    assert int(ranked["meets_all_criteria"].sum()) == 2
    one = ranked.assign(meets_all_criteria=[True, False, False])
    page = report.build_html(one, _long(one, settings), _rejects(), MANIFEST, report.empty_changes(), settings)
    tiles = re.findall(r'<span class="num">(\d+)</span><span class="what">([^<]+)</span>', page)
    assert ("1", "candidate") in tiles and ("3", "screened") in tiles, tiles


def test_overview_says_why_each_threshold(settings):
    # Issue 18: the page gives each criterion's reason in the experiment's terms, from the configured values.
    page = _page(settings)
    overview = page[page.index('<section id="overview"'):page.index('<section id="recompute"')]
    # 50 meV at 300 K: 0.05 eV / kT = 1.93 kT, exp(-1.93) = 14 % (Boltzmann; scipy.constants)
    x = 0.05 * sc.e / (sc.k * 300.0)
    assert f"about {x:.1f} kT at 300 K" in overview and f"about {np.exp(-x) * 100:.0f} %" in overview
    assert "exciton-plasma (Saha) crossover" in overview
    # 550-1000 nm: above the 532 nm green line (common practice), below silicon's cut-off
    # hc / 1.12 eV = 1107 nm (silicon gap 1.12 eV at 300 K, Sze's handbook; scipy.constants)
    cutoff = sc.h * sc.c / (1.12 * sc.e) * 1e9
    assert "green (532 nm)" in overview and f"about {round(cutoff, -2):.0f} nm" in overview
    assert "within a silicon detector" in overview
    telecom = {**settings, "ranking": {**settings["ranking"], "window_nm": [1200, 1600]}}
    page = _page(telecom)
    assert "beyond a silicon detector" in page[page.index('<section id="overview"'):]


def test_methods_state_the_brightness_proxy_and_cautions_what_the_model_leaves_out(settings):
    # Issue 18: the proxy's published steps and assumptions on the page; the cautions name what the
    # model does not include (strain, charged excitons, defects, spin or parity selection).
    page = _page(settings)
    methods = page[page.index('<section id="methods"'):page.index('<section id="cautions"')]
    for words in ("Brightness proxy", "Kane 1957", "Andreani, Tassone and Bassani 1991", "Assumed: in-plane dipole",
                  "no non-radiative decay", "Solid State Commun. 77, 641 (1991)"):
        assert words in methods, words
    # the brightness part as README "How compounds are ranked" defines it: log10(proxy / 1e8 s^-1) / 2
    assert "(proxy / 10<sup>8</sup> s<sup>\u22121</sup>) / 2, 0, 1)" in methods
    cautions = page[page.index('<section id="cautions"'):]
    for words in ("strain", "charged excitons (trions)", "defect", "spin or parity selection", "non-radiative"):
        assert words in cautions, words


def test_card_states_the_brightness_proxy_as_a_model_estimate(settings):
    # Issue 18: the card gives the compound's radiative-rate proxy (thermal rate x bright fraction) and the
    # intrinsic lifetime 1 / Gamma_0: 1 / 5e12 s^-1 = 0.2 ps (by hand), as an estimate, not a lifetime.
    row = {"entry_id": "x", "target_brightness_proxy_per_s": 2.06e9, "target_radiative_rate_0_per_s": 5.0e12}
    text = " ".join(report._reasons(row, settings))
    assert "about 2.1e+09 s\u207b\u00b9" in text and "0.2 ps" in text
    assert "model estimate" in text and "not a measured lifetime" in text
    without = " ".join(report._reasons({"entry_id": "x"}, settings))
    assert "Brightness proxy" not in without
