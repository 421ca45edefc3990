"""Benchmark the whole screen: Snakemake runs against the bare in-process lower bound.

Run from the repository root (a script, never a test; nothing here asserts):

    .venv/bin/python benchmarks/bench_screen.py                      # 1k and 10k, 4 shards
    .venv/bin/python benchmarks/bench_screen.py --sizes 1000 10000 100000 --shards 8

For each campaign size N it

1. generates N synthetic records (inputs/make_campaign.py --no-broken --cif-fraction 0);
2. times a full screen through the Snakemake CLI (``--cores 2``; targets
   results/tables/screen_wide.parquet, screen_long.parquet and results/shortlist.csv) in a fresh working
   directory, including the keldysh_table job (a copy of the shipped table, or a build when
   the shipped one does not match the code);
3. times a no-op re-run, then a re-run after revising one record (one mass changed);
4. times the bare lower bound: one Python process that takes the Keldysh table (the
   shipped one when it matches the code, else it builds it),
   calls ``lamellume.pipeline.run_shard`` on all records at once, propagates the
   uncertainties (when rule rank_candidates takes them as input) and then calls
   ``pipeline.run_rank`` (no Snakemake, no sharding);
5. records peak memory two ways: the largest single process (``/usr/bin/time -v``,
   i.e. ``ru_maxrss`` of the waited process tree; install with ``apt-get install
   time``) and the sum of RSS over the process tree sampled every 0.1 s
   (``psutil``; may miss peaks shorter than that).

Results are printed as a Markdown table and written to ``<out>/bench_screen.json``;
working folders live under ``--out`` (default benchmarks/out/, ignored by git) and
are removed unless ``--keep``.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import shutil
import subprocess
import sys
import threading
import time
from pathlib import Path

import psutil
import yaml

ROOT = Path(__file__).resolve().parents[1]
PYTHON = sys.executable
TARGETS = ("results/tables/screen_wide.parquet", "results/tables/screen_long.parquet", "results/shortlist.csv")

BARE = r"""
import sys, time, json
from pathlib import Path
sys.path.insert(0, sys.argv[1])
from lamellume import io, keldysh, pipeline, provenance
cfg = json.loads(Path(sys.argv[2]).read_text())
work = Path(sys.argv[3])
entries = sorted(str(p) for p in (Path(cfg["campaign"]) / "entries").glob("*.json"))
t0 = time.perf_counter()
shipped = Path(sys.argv[1]) / "data"  # the shipped table when it matches this code, as the workflow does
if io.read_json(shipped / "keldysh_table.json")["key"] == provenance.keldysh_table_build()["key"]:
    io.copy_file(shipped / "keldysh_table.npz", work / "keldysh_table.npz")
else:
    io.save_arrays(keldysh.build_table().to_arrays(), work / "keldysh_table.npz")
t1 = time.perf_counter()
# the sections of physics_settings() and uncertainty_settings() in workflow/rules/common.smk
keys = ("layers", "structure", "environments", "monolayer", "excitons", "emission_bands")
ukeys = ("uncertainty", "survival", "ranking", "layers", "monolayer", "excitons", "environments")
shard = {n: str(work / "shard" / f"{n}.parquet") for n in pipeline.SHARD_TABLES + ("uncertainty",)}
counts = pipeline.run_shard_job(entries, cfg["campaign"], {k: cfg[k] for k in keys}, {k: cfg[k] for k in ukeys},
                                str(work / "keldysh_table.npz"), str(work / "cache"), shard)
t2 = time.perf_counter()
inputs = {name: [shard[name]] for name in shard}
t_unc = 0.0  # the propagation runs inside the shard job (counted in shard_s)
t2b = time.perf_counter()
outputs = {n: str(work / "tables" / f"{n}.parquet") for n in ("rejects", "wide")}
outputs.update(rejects_csv=str(work / "tables" / "rejects.csv"), shortlist=str(work / "shortlist.csv"))
pipeline.run_rank(inputs, outputs, {k: cfg[k] for k in ("survival", "ranking", "environments")},
                  io.canonical_json_hash(cfg)[:16])
from lamellume import assemble
assemble.run_join(inputs, {n: str(work / "tables" / f"{n}.parquet") for n in ("long", "entries", "valleys")},
                  io.canonical_json_hash(cfg)[:16])
t3 = time.perf_counter()
print(json.dumps({"table_s": t1 - t0, "shard_s": t2 - t1, "uncertainty_s": t_unc, "rank_s": t3 - t2b}))
"""


class TreeSampler:
    """Peak of the summed RSS of a process and all its descendants, sampled periodically."""

    def __init__(self, pid: int, interval: float = 0.1):
        self.pid, self.interval, self.peak = pid, interval, 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            root = psutil.Process(self.pid)
        except psutil.NoSuchProcess:
            return
        while not self._stop.is_set():
            total = 0
            try:
                procs = [root] + root.children(recursive=True)
            except psutil.NoSuchProcess:
                break
            for p in procs:
                try:
                    total += p.memory_info().rss
                except (psutil.NoSuchProcess, psutil.AccessDenied):
                    pass
            self.peak = max(self.peak, total)
            self._stop.wait(self.interval)

    def stop(self) -> int:
        self._stop.set()
        self._thread.join()
        return self.peak


def timed(cmd: list[str], cwd: Path, log: Path, sample_memory: bool = True) -> dict:
    """Wall time, summed-RSS peak and largest-process peak of one command (raises on failure).

    The largest single process comes from GNU time (``/usr/bin/time -v``: the
    ``ru_maxrss`` of wait4, the maximum over the waited process tree), when installed.
    ``sample_memory=False`` skips the psutil sampler (summed RSS is then None): it walks
    the process tree every 0.1 s, CPU a 2-core machine would otherwise take from a
    seconds-long re-run whose wall time is the measurement.
    """
    gnu_time = shutil.which("time", path="/usr/bin:/bin")
    rusage = log.with_suffix(".time")
    full = [gnu_time, "-v", "-o", str(rusage), *cmd] if gnu_time else cmd
    t0 = time.perf_counter()
    with open(log, "w") as fh:
        proc = subprocess.Popen(full, cwd=cwd, stdout=fh, stderr=subprocess.STDOUT)
        sampler = TreeSampler(proc.pid) if sample_memory else None
        rc = proc.wait()
        peak_sum = sampler.stop() if sampler else None
    wall = time.perf_counter() - t0
    if rc != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed with exit {rc}; see {log}")
    single, cpu = None, None
    if gnu_time and rusage.exists():
        cpu = 0.0
        for line in rusage.read_text().splitlines():
            if "Maximum resident set size" in line:
                single = int(line.rsplit(":", 1)[1]) / 1024  # kB -> MiB
            elif line.strip().startswith(("User time", "System time")):
                cpu += float(line.rsplit(":", 1)[1])
    return {"wall_s": wall, "cpu_s": cpu, "peak_sum_mib": peak_sum / 2**20 if peak_sum is not None else None,
            "peak_single_mib": single,
            "stdout": log.read_text()}


def snakemake_cmd(work: Path) -> list[str]:
    return [PYTHON, "-m", "snakemake", "-s", str(ROOT / "Snakefile"), "--directory", str(work),
            "--configfile", str(work / "config.yaml"), "--cores", "2", *TARGETS]


def revise_one(campaign: Path) -> str:
    """Rewrite one record with a changed mass; return its stem."""
    files = sorted((campaign / "entries").glob("*.json"))
    path = files[len(files) // 2]
    record = json.loads(path.read_text())
    mass = record["valleys"][0]["mass"]
    mass["isotropic_me"] = round(mass["isotropic_me"] * 1.1, 4)
    path.write_text(json.dumps(record, indent=1) + "\n")
    return path.stem


def job_seconds(work: Path, since: float = 0.0) -> dict:
    """Sum per rule of the job wall times in Snakemake's benchmark files written after ``since``."""
    out: dict[str, float] = {}
    for tsv in (work / "results" / "benchmarks").rglob("*.tsv"):
        if tsv.stat().st_mtime < since:
            continue
        lines = tsv.read_text().splitlines()
        if len(lines) >= 2:
            out[tsv.parent.name] = out.get(tsv.parent.name, 0.0) + float(lines[-1].split("\t")[0])
    return out


def job_cpu_seconds(work: Path, since: float = 0.0) -> dict:
    """Sum per rule of the CPU seconds the jobs logged as they ended (``io.end_job``: the
    sharded rules have no benchmark files), from the logs written after ``since``."""
    out: dict[str, float] = {}
    for log in (work / "results" / "logs").rglob("*.log"):
        if log.stat().st_mtime < since:
            continue
        found = re.findall(r"job resources: ([0-9.]+) s CPU", log.read_text(errors="replace"))
        if found:  # a log gathers every run of its job: the last line is this run's
            out[log.parent.name] = out.get(log.parent.name, 0.0) + float(found[-1])
    return out


def bench_size(n: int, shards: int, out: Path, bare: bool = True) -> dict:
    base = out / f"n{n}"
    if base.exists():
        shutil.rmtree(base)
    base.mkdir(parents=True)
    campaign = base / "campaign"
    t0 = time.perf_counter()
    subprocess.run([PYTHON, str(ROOT / "inputs" / "make_campaign.py"), "--out", str(campaign), "--count", str(n),
                    "--no-broken", "--cif-fraction", "0"], check=True)
    generate_s = time.perf_counter() - t0

    config = yaml.safe_load((ROOT / "config" / "config.yaml").read_text())
    config["campaign"] = str(campaign)
    config["sharding"]["shards"] = shards
    work = base / "work"
    work.mkdir()
    (work / "config.yaml").write_text(yaml.safe_dump(config))

    row: dict = {"n": n, "shards": shards, "generate_s": generate_s}
    print(f"[n={n}] full screen ...", flush=True)
    full = timed(snakemake_cmd(work), work, base / "full.log")
    row["full"] = {k: v for k, v in full.items() if k != "stdout"}
    row["full_jobs_s"] = job_seconds(work)
    row["full_job_cpu_s"] = job_cpu_seconds(work)
    print(f"[n={n}] no-op re-run ...", flush=True)
    noop = timed(snakemake_cmd(work), work, base / "noop.log", sample_memory=False)
    row["noop"] = {k: v for k, v in noop.items() if k != "stdout"}
    stem = revise_one(campaign)
    print(f"[n={n}] re-run after revising {stem} ...", flush=True)
    start = time.time()
    rev = timed(snakemake_cmd(work), work, base / "revise.log", sample_memory=False)
    row["revise"] = {k: v for k, v in rev.items() if k != "stdout"}
    row["revise_jobs_s"] = job_seconds(work, since=start)
    row["revise_job_cpu_s"] = job_cpu_seconds(work, since=start)

    if not bare:   # the workflow's cases only (the bare bound holds every table at once: minutes and GiB at 100k)
        row["load_avg_1min_at_end"] = os.getloadavg()[0]
        row["cpu_ratios"] = {"revise_over_full": rev["cpu_s"] / full["cpu_s"], "noop_over_full": noop["cpu_s"] / full["cpu_s"]} \
            if full["cpu_s"] else {}
        row["ratios"] = {"revise_over_full": rev["wall_s"] / full["wall_s"], "noop_over_full": noop["wall_s"] / full["wall_s"]}
        return row
    print(f"[n={n}] bare lower bound ...", flush=True)
    bare_dir = base / "bare"
    bare_dir.mkdir()
    (bare_dir / "config.json").write_text(json.dumps(config))
    (bare_dir / "bare.py").write_text(BARE)
    rank_rule = (ROOT / "workflow" / "rules" / "collect.smk").read_text()
    with_unc = bool(re.search(r"^\s*uncertainty=shard_outputs", rank_rule, re.M))
    row["uncertainty_in_rank"] = with_unc
    bare = timed([PYTHON, str(bare_dir / "bare.py"), str(ROOT / "workflow"), str(bare_dir / "config.json"),
                  str(bare_dir), "with-uncertainty" if with_unc else "without"], bare_dir, base / "bare.log")
    row["bare"] = {k: v for k, v in bare.items() if k != "stdout"}
    row["bare"].update(json.loads(bare["stdout"].strip().splitlines()[-1]))
    if full["cpu_s"] and bare["cpu_s"]:
        row["cpu_ratios"] = {"full_over_bare": full["cpu_s"] / bare["cpu_s"],
                             "revise_over_full": rev["cpu_s"] / full["cpu_s"],
                             "noop_over_full": noop["cpu_s"] / full["cpu_s"]}
    row["load_avg_1min_at_end"] = os.getloadavg()[0]  # other tenants of the machine skew wall times
    row["ratios"] = {"full_over_bare": full["wall_s"] / bare["wall_s"],
                     "revise_over_full": rev["wall_s"] / full["wall_s"],
                     "noop_over_full": noop["wall_s"] / full["wall_s"]}
    return row


def machine() -> dict:
    model = "unknown"
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    from importlib import metadata

    return {"nproc": os.cpu_count(), "cpu": model, "ram_gib": round(psutil.virtual_memory().total / 2**30, 1),
            "python": platform.python_version(), "snakemake": metadata.version("snakemake"),
            "os": platform.platform()}


def table(rows: list[dict]) -> str:
    """Markdown table; the memory columns are the full screen's (workflow), then the bare bound's."""
    head = ("| records | shards | full screen (s) | bare bound (s) | full / bare | no-op re-run (s) | no-op / full "
            "| revise-one re-run (s) | revise / full | CPU full / bare | workflow peak RSS, sum (MiB) "
            "| workflow largest process (MiB) | bare peak RSS (MiB) |")
    lines = [head, "|" + "---|" * 13]
    for r in rows:
        lines.append(f"| {r['n']:,} | {r['shards']} | {r['full']['wall_s']:.1f} | {r['bare']['wall_s']:.1f} "
                     f"| {r['ratios']['full_over_bare']:.2f} | {r['noop']['wall_s']:.1f} "
                     f"| {r['ratios']['noop_over_full']:.0%} | {r['revise']['wall_s']:.1f} "
                     f"| {r['ratios']['revise_over_full']:.0%} "
                     f"| {r.get('cpu_ratios', {}).get('full_over_bare', float('nan')):.2f} "
                     f"| {r['full']['peak_sum_mib']:.0f} | {r['full']['peak_single_mib'] or float('nan'):.0f} "
                     f"| {r['bare']['peak_sum_mib']:.0f} |")
    return "\n".join(lines)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 10000])
    parser.add_argument("--shards", type=int, default=4, help="config sharding.shards")
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "out")
    parser.add_argument("--keep", action="store_true", help="keep campaigns and working folders")
    parser.add_argument("--no-bare", action="store_true", help="skip the bare lower bound (workflow cases only)")
    args = parser.parse_args()
    args.out.mkdir(parents=True, exist_ok=True)
    rows = []
    for n in args.sizes:
        rows.append(bench_size(n, args.shards, args.out, bare=not args.no_bare))
        if not args.keep:
            shutil.rmtree(args.out / f"n{n}" / "campaign", ignore_errors=True)
            shutil.rmtree(args.out / f"n{n}" / "work", ignore_errors=True)
            shutil.rmtree(args.out / f"n{n}" / "bare", ignore_errors=True)
    result = {"machine": machine(), "rows": rows}
    (args.out / "bench_screen.json").write_text(json.dumps(result, indent=2))
    print(json.dumps(result["machine"], indent=2))
    if all("bare" in r for r in rows):
        print(table(rows))
    else:
        print(json.dumps(rows, indent=2))


if __name__ == "__main__":
    main()
