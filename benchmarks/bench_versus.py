"""Full screens of this checkout and of a baseline commit, side by side in one run.

Run from the repository root (a script, never a test; nothing here asserts):

    .venv/bin/python benchmarks/bench_versus.py                         # 10k records vs ba2d14c
    .venv/bin/python benchmarks/bench_versus.py --size 1000 --runs 5 --baseline <rev>

The baseline is exported with ``git archive`` into the output folder. One synthetic
campaign (inputs/make_campaign.py --no-broken --cif-fraction 0) is screened by both
checkouts in turn (baseline, current, baseline, current, ...), each run a full screen
through the Snakemake CLI (``--cores 2``, targets of benchmarks/bench_screen.py) in a
fresh working directory, Keldysh table included. Alternating runs keep the comparison
fair on a shared machine whose speed drifts: quote the median ratio. Results are
printed as a Markdown table and written to ``<out>/bench_versus.json``.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_screen import TARGETS, machine  # noqa: E402


def export(rev: str, target: Path) -> Path:
    """The tree of commit ``rev`` in ``target`` (replaced)."""
    shutil.rmtree(target, ignore_errors=True)
    target.mkdir(parents=True)
    archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev], check=True, capture_output=True).stdout
    subprocess.run(["tar", "-x", "-C", str(target)], input=archive, check=True)
    return target


def full_screen(code: Path, campaign: Path, work: Path, shards: int) -> float:
    """Wall seconds of one full screen of ``campaign`` by the workflow in ``code``."""
    shutil.rmtree(work, ignore_errors=True)
    work.mkdir(parents=True)
    config = yaml.safe_load((code / "config" / "config.yaml").read_text())
    config["campaign"] = str(campaign)
    config["sharding"]["shards"] = shards
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    cmd = [sys.executable, "-m", "snakemake", "-s", str(code / "Snakefile"), "--directory", str(work),
           "--configfile", str(work / "config.yaml"), "--cores", "2", *TARGETS]
    start = time.perf_counter()
    res = subprocess.run(cmd, cwd=work, capture_output=True, text=True)
    wall = time.perf_counter() - start
    if res.returncode != 0:
        raise RuntimeError(f"{code}: snakemake failed\n{res.stderr[-3000:]}")
    return wall


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--baseline", default="ba2d14c", help="commit to compare against")
    parser.add_argument("--size", type=int, default=10000, help="records in the campaign")
    parser.add_argument("--shards", type=int, default=4, help="config sharding.shards")
    parser.add_argument("--runs", type=int, default=3, help="full screens of each checkout")
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "out" / "versus")
    args = parser.parse_args()
    out = args.out.resolve()
    out.mkdir(parents=True, exist_ok=True)
    base = export(args.baseline, out / "baseline")
    campaign = out / f"campaign-{args.size}"
    if not campaign.exists():
        subprocess.run([sys.executable, str(ROOT / "inputs" / "make_campaign.py"), "--out", str(campaign),
                        "--count", str(args.size), "--no-broken", "--cif-fraction", "0"], check=True,
                       capture_output=True)
    walls: dict[str, list[float]] = {"baseline": [], "current": []}
    for run in range(args.runs):
        for label, code in (("baseline", base), ("current", ROOT)):
            walls[label].append(full_screen(code, campaign, out / f"work-{label}", args.shards))
            print(f"run {run + 1}: {label} {walls[label][-1]:.2f} s", flush=True)
    ratios = [b / c for b, c in zip(walls["baseline"], walls["current"])]
    result = {"machine": machine(), "baseline": args.baseline, "size": args.size, "shards": args.shards,
              "walls_s": walls, "median_s": {k: statistics.median(v) for k, v in walls.items()},
              "speedup_pairwise": ratios, "median_speedup": statistics.median(ratios)}
    (out / "bench_versus.json").write_text(json.dumps(result, indent=2))
    print(f"\n| records | {args.baseline} full (s) | current full (s) | speed-up (median of pairs) |")
    print("|---|---|---|---|")
    print(f"| {args.size} | {result['median_s']['baseline']:.1f} | {result['median_s']['current']:.1f} | "
          f"{result['median_speedup']:.2f}x |")


if __name__ == "__main__":
    main()
