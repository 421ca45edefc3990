"""Full screens of this checkout and of a baseline commit, side by side in one run.

Run from the repository root (a script, never a test; nothing here asserts):

    .venv/bin/python benchmarks/bench_versus.py                         # 10k records vs ba2d14c
    .venv/bin/python benchmarks/bench_versus.py --size 1000 --runs 5 --baseline <rev>

The baseline is exported with ``git archive`` into the output folder. Each checkout
screens the synthetic campaign its own generator writes (inputs/make_campaign.py
--no-broken --cif-fraction 0, same count and seed): the record layout moved since
ba2d14c (format line, per-valley degeneracy), and a campaign of today's records is
rejected whole by the baseline, which then computes nothing. A run whose rejects table
is not empty stops the benchmark. The two checkouts run in turn (baseline, current,
baseline, current, ...), each run a full screen through the Snakemake CLI
(``--cores 2``, targets of benchmarks/bench_screen.py) in a fresh working directory,
Keldysh table included; wall seconds and CPU seconds (user + system of the whole
process tree) are recorded. Alternating runs keep the comparison fair on a shared
machine whose speed drifts: quote the median ratio. Results are printed as a Markdown
table and written to ``<out>/bench_versus.json``.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
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


def campaign_of(code: Path, out: Path, size: int, label: str) -> Path:
    """The campaign of ``size`` records written by the generator of checkout ``code``."""
    campaign = out / f"campaign-{label}-{size}"
    if not campaign.exists():
        subprocess.run([sys.executable, str(code / "inputs" / "make_campaign.py"), "--out", str(campaign),
                        "--count", str(size), "--no-broken", "--cif-fraction", "0"], check=True,
                       capture_output=True)
    return campaign


def full_screen(code: Path, campaign: Path, work: Path, shards: int) -> tuple[float, float]:
    """Wall and CPU seconds of one full screen of ``campaign`` by the workflow in ``code``."""
    shutil.rmtree(work, ignore_errors=True)
    work.mkdir(parents=True)
    config = yaml.safe_load((code / "config" / "config.yaml").read_text())
    config["campaign"] = str(campaign)
    config["sharding"]["shards"] = shards
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    cmd = [sys.executable, "-m", "snakemake", "-s", str(code / "Snakefile"), "--directory", str(work),
           "--configfile", str(work / "config.yaml"), "--cores", "2", *TARGETS]
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    res = subprocess.run(cmd, cwd=work, capture_output=True, text=True)
    wall = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if res.returncode != 0:
        raise RuntimeError(f"{code}: snakemake failed\n{res.stderr[-3000:]}")
    rejected = pq.read_metadata(work / "results" / "tables" / "rejects.parquet").num_rows
    if rejected:
        raise RuntimeError(f"{code}: {rejected} rejects in a campaign of valid records; not a like-for-like run")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


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
    campaigns = {"baseline": campaign_of(base, out, args.size, "baseline"),
                 "current": campaign_of(ROOT, out, args.size, "current")}
    walls: dict[str, list[float]] = {"baseline": [], "current": []}
    cpus: dict[str, list[float]] = {"baseline": [], "current": []}
    for run in range(args.runs):
        for label, code in (("baseline", base), ("current", ROOT)):
            wall, cpu = full_screen(code, campaigns[label], out / f"work-{label}", args.shards)
            walls[label].append(wall)
            cpus[label].append(cpu)
            print(f"run {run + 1}: {label} {wall:.2f} s wall, {cpu:.2f} s CPU", flush=True)
    ratios = [b / c for b, c in zip(walls["baseline"], walls["current"])]
    cpu_ratios = [b / c for b, c in zip(cpus["baseline"], cpus["current"])]
    result = {"machine": machine(), "baseline": args.baseline, "size": args.size, "shards": args.shards,
              "walls_s": walls, "median_s": {k: statistics.median(v) for k, v in walls.items()},
              "cpu_s": cpus, "median_cpu_s": {k: statistics.median(v) for k, v in cpus.items()},
              "speedup_pairwise": ratios, "median_speedup": statistics.median(ratios),
              "cpu_speedup_pairwise": cpu_ratios, "median_cpu_speedup": statistics.median(cpu_ratios)}
    (out / "bench_versus.json").write_text(json.dumps(result, indent=2))
    print(f"\n| records | {args.baseline} wall / CPU (s) | current wall / CPU (s) | speed-up wall / CPU "
          "(median of pairs) |")
    print("|---|---|---|---|")
    print(f"| {args.size} | {result['median_s']['baseline']:.1f} / {result['median_cpu_s']['baseline']:.1f} | "
          f"{result['median_s']['current']:.1f} / {result['median_cpu_s']['current']:.1f} | "
          f"{result['median_speedup']:.2f}x / {result['median_cpu_speedup']:.2f}x |")


if __name__ == "__main__":
    main()
