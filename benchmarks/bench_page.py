"""Benchmark: rendering the HTML summary for a large synthetic screen.

Run with ``.venv/bin/python benchmarks/bench_page.py [N] [--against REV]`` from the
repository root. Builds an invented ranked table of N compounds (default 10,000; a
quarter candidates, with uncertainty columns) and its long table (5 layer counts x 3
surroundings + bulk), then times ``report.build_html`` three times and prints the
best time and the page size. With ``--against REV`` it also times the ``report.py``
of that git revision on the same tables (e.g. ``--against ba2d14c``, the last page
written with f-strings before the template), side by side.
"""

import argparse
import importlib.util
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT / "workflow"), str(ROOT / "tests" / "unit")]

import page_text  # noqa: E402  (the fixed settings and manifest of the page tests)
from lamellume import report  # noqa: E402

REPEATS = 3


def tables(n: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """An invented screen of ``n`` compounds (synthetic numbers, no physics)."""
    rng = np.random.default_rng(0)
    cand = rng.uniform(size=n) < 0.25
    ranked = pd.DataFrame({
        "entry_id": [f"c{i:07d}" for i in range(n)], "formula": "Ab2Cd (invented)", "input_hash": "h",
        "target_gap_character": np.where(rng.uniform(size=n) < 0.6, "direct", "indirect"),
        "target_optical_gap_ev": rng.uniform(1, 3, n), "target_emission_nm": rng.uniform(450, 1300, n),
        "target_emission_band": "visible", "target_binding_ev": rng.uniform(0.1, 0.5, n),
        "target_binding_over_kt": rng.uniform(2, 15, n), "target_direct_margin_ev": rng.uniform(-0.1, 0.3, n),
        "target_bound_fraction": rng.uniform(0.5, 1, n), "pass_direct": cand, "pass_margin": cand,
        "pass_binding": True, "pass_window": cand, "meets_all_criteria": cand, "score_binding": 1.0,
        "score_margin": 0.5, "score_window": 0.5, "score": rng.uniform(size=n),
        "thinning_verdict": "direct only as a monolayer", "warnings": "",
        "p_meets_all": rng.uniform(size=n), "p_pass_direct": rng.uniform(size=n),
    })
    for base in ("target_optical_gap_ev", "target_binding_ev", "target_emission_nm"):
        for q, f in (("p16", 0.95), ("p50", 1.0), ("p84", 1.05)):
            ranked[f"{base}_{q}"] = ranked[base] * f
    ranked = ranked.sort_values(["meets_all_criteria", "score"], ascending=[False, False])
    ranked["rank"] = np.arange(1, n + 1)
    envs = list(page_text.SETTINGS["environments"])
    per = [(layers, env) for layers in range(1, 6) for env in envs] + [(0, "bulk crystal")]
    ids = np.repeat(ranked["entry_id"].to_numpy(), len(per))
    long = pd.DataFrame({"entry_id": ids, "layers": np.tile([p[0] for p in per], n),
                         "environment": np.tile([p[1] for p in per], n), "gap_character": "direct",
                         "optical_gap_ev": rng.uniform(1, 3, len(ids)),
                         "binding_ev": rng.uniform(0.05, 0.5, len(ids))})
    return ranked, long


def time_build(module, ranked, long) -> tuple[float, int]:
    rejects = pd.DataFrame(columns=["entry_id", "source_file", "field", "reason", "stage"])
    best, size = float("inf"), 0
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        page = module.build_html(ranked, long, rejects, page_text.MANIFEST, module.empty_changes(),
                                 page_text.SETTINGS)
        best = min(best, time.perf_counter() - t0)
        size = len(page.encode("utf-8"))
    return best, size


def module_at(rev: str):
    """report.py of a git revision, importable beside today's library."""
    text = subprocess.run(["git", "-C", str(ROOT), "show", f"{rev}:workflow/lamellume/report.py"],
                          check=True, capture_output=True, text=True).stdout
    path = Path(tempfile.mkdtemp()) / f"report_{rev}.py"
    path.write_text(text, encoding="utf-8")
    spec = importlib.util.spec_from_file_location(f"report_{rev}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("n", nargs="?", type=int, default=10_000)
    parser.add_argument("--against", help="git revision whose report.py is timed as well")
    args = parser.parse_args()
    ranked, long = tables(args.n)
    rows = [("this tree", report)]
    if args.against:
        rows.append((args.against, module_at(args.against)))
    for name, module in rows:
        seconds, size = time_build(module, ranked, long)
        print(f"{name:>12}: {args.n} compounds, best of {REPEATS}: {seconds:.2f} s, {size / 1e6:.2f} MB")


if __name__ == "__main__":
    main()
