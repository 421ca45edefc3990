"""Where a shard job spends its time: one job over N synthetic records, profiled by stage.

Run from the repository root (a script, never a test; nothing here asserts):

    .venv/bin/python benchmarks/profile_shard.py                 # 2,500 records (a 10k shard of 4)
    .venv/bin/python benchmarks/profile_shard.py --size 10000    # the bare bound's one big shard

It generates the campaign (inputs/make_campaign.py --no-broken --cif-fraction 0), builds
the Keldysh table (timed apart), then runs ``pipeline.run_shard_job`` under cProfile and
prints the cumulative time of each stage (reading, contract checks, normalisation, the
exciton model, survival, Monte Carlo, Parquet writes) as a Markdown table. cProfile adds
overhead to Python-level calls, so read the shares, not the absolute seconds.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import shutil
import subprocess
import sys
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "workflow"))

#: Stage -> (module file, function) whose cumulative time is the stage's.
STAGES = {
    "read, check, normalise (pipeline.check_records)": ("pipeline.py", "check_records"),
    "  of it: read records (io.read_record)": ("io.py", "read_record"),
    "  of it: contract checks (intake._check_many)": ("intake.py", "_check_many"),
    "  of it: normalise (intake._normalise_many)": ("intake.py", "_normalise_many"),
    "nominal screen (screen.screen_entries)": ("screen.py", "screen_entries"),
    "survival columns (ranking.add_survival)": ("ranking.py", "add_survival"),
    "Monte Carlo (uncertainty.propagate_uncertainty)": ("uncertainty.py", "propagate_uncertainty"),
    "  of it: exciton model (model.evaluate)": ("model.py", "evaluate"),
    "  of it: gap character (layers.gap_character)": ("layers.py", "gap_character"),
    "Parquet writes (io.write_parquet)": ("io.py", "write_parquet"),
}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--size", type=int, default=2500)
    parser.add_argument("--out", type=Path, default=ROOT / "benchmarks" / "out" / "profile")
    parser.add_argument("--campaign", type=Path, help="screen this campaign's records instead of a new one")
    parser.add_argument("--dump", type=Path, help="also write the raw cProfile statistics here")
    args = parser.parse_args()
    from lamellume import io, keldysh, pipeline

    out = args.out.resolve()
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir(parents=True)
    campaign = args.campaign.resolve() if args.campaign else out / "campaign"
    if not args.campaign:
        subprocess.run([sys.executable, str(ROOT / "inputs" / "make_campaign.py"), "--out", str(campaign),
                        "--count", str(args.size), "--no-broken", "--cif-fraction", "0"], check=True,
                       capture_output=True)
    cfg = yaml.safe_load((ROOT / "config" / "config.yaml").read_text())
    t = time.perf_counter()
    io.save_arrays(keldysh.build_table().to_arrays(), str(out / "keldysh_table.npz"))
    table_s = time.perf_counter() - t
    # the sections workflow/rules/common.smk hands the screen_shard job (physics_settings,
    # uncertainty_settings)
    physics = {k: cfg[k] for k in ("layers", "structure", "environments", "monolayer", "excitons", "emission_bands")}
    propagation = {k: cfg[k] for k in ("uncertainty", "survival", "ranking", "layers", "monolayer", "excitons",
                                       "environments")}
    outputs = {n: str(out / f"{n}.parquet") for n in pipeline.SHARD_TABLES + ("uncertainty",)}
    paths = sorted(str(p) for p in (campaign / "entries").glob("*.json"))[:args.size]
    profile = cProfile.Profile()
    t = time.perf_counter()
    profile.enable()
    pipeline.run_shard_job(paths, str(campaign), physics, propagation, str(out / "keldysh_table.npz"),
                           str(out / "cache"), outputs)
    profile.disable()
    total = time.perf_counter() - t
    if args.dump:
        profile.dump_stats(str(args.dump))
    stats = pstats.Stats(profile).stats
    print(f"Keldysh table build (not profiled, one core): {table_s:.2f} s\n")
    print(f"| stage of one shard job, {args.size} records | s (profiled) | share |")
    print("|---|---|---|")
    for stage, (module, function) in STAGES.items():
        cum = sum(v[3] for (path, _, name), v in stats.items()
                  if name == function and path.endswith(f"lamellume/{module}"))
        print(f"| {stage} | {cum:.2f} | {cum / total:.0%} |")
    print(f"| whole job | {total:.2f} | 100% |")


if __name__ == "__main__":
    main()
