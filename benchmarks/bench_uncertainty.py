"""Benchmark: Monte Carlo uncertainty propagation for 10,000 synthetic entries.

Run with ``.venv/bin/python benchmarks/bench_uncertainty.py`` from the repository
root. Steps:

1. generate 10,000 invented records with ``inputs/make_campaign.py --count 10000
   --no-broken --cif-fraction 0`` into a temporary folder;
2. normalise them with ``lamellume.pipeline.run_shard`` (one shard; timed
   separately, not part of the propagation);
3. in a fresh child process (so the peak resident memory belongs to the
   propagation, not to step 2), read the normalised entries/valleys tables and
   run ``lamellume.uncertainty.propagate_uncertainty`` with 1,000 samples;
   report wall time, the resident-memory high-water mark of the child
   (``VmHWM`` of /proc/self/status, reset after loading the inputs by writing
   5 to /proc/self/clear_refs; ``resource.getrusage().ru_maxrss`` where /proc
   is unavailable -- note that ru_maxrss survives fork+exec and may show the
   parent's peak) and the peak of numpy/Python allocations during the call
   (``tracemalloc``, in a second, untimed call);
4. repeat step 3 with 250 samples to show that memory does not grow with the
   sample count (it is bounded by ``uncertainty.BLOCK_CELLS``).

Options: ``--count``, ``--samples``, ``--keep DIR`` (reuse/keep the normalised
campaign in DIR).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "workflow"))


def _config():
    import yaml

    with open(ROOT / "config" / "config.yaml", encoding="utf-8") as fh:
        return yaml.safe_load(fh)


def _table_path(work: Path) -> Path:
    cached = ROOT / "results" / "cache" / "keldysh_table.npz"
    if cached.exists():
        return cached
    from lamellume import io, keldysh

    path = work / "keldysh_table.npz"
    if not path.exists():
        io.save_arrays(keldysh.build_table().to_arrays(), path)
    return path


def prepare(work: Path, count: int) -> tuple[Path, Path]:
    """Generate and normalise the campaign; return (entries.parquet, valleys.parquet)."""
    from lamellume import pipeline

    entries, valleys = work / "norm" / "entries.parquet", work / "norm" / "valleys.parquet"
    if entries.exists() and valleys.exists():
        print(f"reusing normalised campaign in {work}")
        return entries, valleys
    campaign = work / "campaign"
    t0 = time.perf_counter()
    subprocess.run([sys.executable, str(ROOT / "inputs" / "make_campaign.py"), "--out", str(campaign),
                    "--count", str(count), "--no-broken", "--cif-fraction", "0"], check=True,
                   stdout=subprocess.DEVNULL)
    t_gen = time.perf_counter() - t0
    cfg = _config()
    settings = {k: cfg[k] for k in ("layers", "structure", "environments", "monolayer", "excitons", "emission_bands")}
    paths = sorted(str(p) for p in (campaign / "entries").glob("*.json"))
    outputs = {name: str(work / "norm" / f"{name}.parquet") for name in pipeline.SHARD_TABLES}
    t0 = time.perf_counter()
    counts = pipeline.run_shard(paths, str(campaign), settings, str(_table_path(work)),
                                str(work / "cache"), outputs)
    t_norm = time.perf_counter() - t0
    print(f"generated {len(paths)} records in {t_gen:.1f} s; normalised+screened in {t_norm:.1f} s: {counts}")
    return entries, valleys


def _high_water_kib(reset: bool = False) -> int:
    """Resident-memory high-water mark of this process in KiB (optionally reset afterwards)."""
    try:
        status = Path("/proc/self/status").read_text()
        value = int(next(l for l in status.splitlines() if l.startswith("VmHWM")).split()[1])
        if reset:
            current = int(next(l for l in status.splitlines() if l.startswith("VmRSS")).split()[1])
            Path("/proc/self/clear_refs").write_text("5")
            return current
        return value
    except (OSError, StopIteration, ValueError):
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def child(entries_path: str, valleys_path: str, table_path: str, samples: int) -> None:
    """Run one propagation and print a JSON line with the measurements."""
    import tracemalloc

    from lamellume import io, keldysh, uncertainty

    cfg = _config()
    settings = {k: cfg[k] for k in ("uncertainty", "survival", "ranking", "layers", "monolayer", "environments")}
    entries, valleys = io.read_parquet(entries_path), io.read_parquet(valleys_path)
    table = keldysh.KeldyshTable.from_arrays(io.load_arrays(table_path))
    rss_before = _high_water_kib(reset=True)
    t0 = time.perf_counter()
    out = uncertainty.propagate_uncertainty(entries, valleys, settings, table, samples=samples)
    wall = time.perf_counter() - t0
    rss_after = _high_water_kib()
    tracemalloc.start()
    uncertainty.propagate_uncertainty(entries, valleys, settings, table, samples=samples)
    _, traced_peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(json.dumps({
        "entries": len(entries), "valleys": len(valleys), "samples": samples, "wall_s": wall,
        "cells_per_s": len(entries) * samples / wall,
        "rss_before_mib": rss_before / 1024, "rss_peak_mib": rss_after / 1024,
        "traced_peak_mib": traced_peak / 2**20, "block_cells": uncertainty.BLOCK_CELLS,
        "p_meets_all_mean": float(out["p_meets_all"].mean()),
        "finite_p50": int(out["target_binding_ev_p50"].notna().sum()),
    }))


def machine() -> str:
    cpu = "unknown CPU"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
        mem_kib = int(next(l for l in Path("/proc/meminfo").read_text().splitlines()
                           if l.startswith("MemTotal")).split()[1])
        ram = f"{mem_kib / 2**20:.1f} GiB RAM"
    except (OSError, StopIteration, ValueError):
        ram = "unknown RAM"
    return f"{os.cpu_count()} logical CPUs (nproc {len(os.sched_getaffinity(0))}), {cpu}, {ram}, " \
           f"Python {platform.python_version()}"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=10_000)
    parser.add_argument("--samples", type=int, default=1000)
    parser.add_argument("--keep", type=Path, default=None, help="folder to keep/reuse the normalised campaign")
    parser.add_argument("--child", nargs=4, metavar=("ENTRIES", "VALLEYS", "TABLE", "SAMPLES"),
                        help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(*args.child[:3], int(args.child[3]))
        return
    print("machine:", machine())
    with tempfile.TemporaryDirectory(prefix="bench_unc_") as tmp:
        work = args.keep or Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        entries, valleys = prepare(work, args.count)
        table = _table_path(work)
        for samples in (args.samples, max(1, args.samples // 4)):
            res = subprocess.run([sys.executable, __file__, "--child", str(entries), str(valleys), str(table),
                                  str(samples)], check=True, capture_output=True, text=True)
            r = json.loads(res.stdout.strip().splitlines()[-1])
            print(f"{r['entries']} entries ({r['valleys']} valleys) x {r['samples']} samples: "
                  f"{r['wall_s']:.1f} s wall ({r['cells_per_s'] / 1e3:.0f} k entry-samples/s); "
                  f"peak RSS {r['rss_peak_mib']:.0f} MiB (RSS after loading inputs {r['rss_before_mib']:.0f} MiB); "
                  f"tracemalloc peak {r['traced_peak_mib']:.0f} MiB; block {r['block_cells']} cells; "
                  f"mean p_meets_all {r['p_meets_all_mean']:.3f}")


if __name__ == "__main__":
    main()
