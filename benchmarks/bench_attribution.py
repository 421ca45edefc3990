"""Benchmark: attribution of borderline verdicts versus the propagation it builds on.

Run with ``.venv/bin/python benchmarks/bench_attribution.py`` from the
repository root. Steps:

1. generate and normalise 10,000 invented records exactly as
   ``bench_uncertainty.py`` does (``inputs/make_campaign.py --count 10000
   --no-broken --cif-fraction 0``, then ``pipeline.run_shard``; not timed here);
2. in a fresh child process: run ``uncertainty.propagate_uncertainty`` with
   400 samples (the propagation, as the shard job runs it), rank the records
   (``ranking.rank``, as rule rank_candidates; not timed), then the attribution
   job's own function ``pipeline.run_attribution`` with an empty cache, twice:
   with ``refinement.verdicts: [meets_all]`` (records whose ``p_meets_all``
   lies in the band) and with the configured verdicts (by default also shortlist
   membership: N more model runs for every other ranked record, then the records
   whose ``p_on_shortlist`` lies in the band); report the wall times, their
   ratios to the propagation (wall and process CPU time), the records
   attributed, the model evaluations,
   and the resident-memory high-water mark of each step (``VmHWM``, reset
   between steps);
3. with ``--profile``: a second, untimed attribution under ``cProfile``,
   printing where the time goes (model evaluation, drawing and design,
   estimators, table assembly).

Options: ``--count``, ``--samples`` (propagation samples), ``--base`` (override
``refinement.samples``), ``--effect`` (override ``refinement.effect``),
``--keep DIR`` (reuse/keep the normalised campaign), ``--profile``.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "workflow"))
sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_uncertainty as bu  # noqa: E402  (same campaign, same machine report)


def _settings(base: int | None, effect: str | None) -> dict:
    cfg = bu._config()
    keys = ("uncertainty", "survival", "ranking", "layers", "monolayer", "excitons", "environments", "refinement")
    settings = {k: cfg[k] for k in keys}
    if base is not None:
        settings["refinement"]["samples"] = base
    if effect is not None:
        settings["refinement"]["effect"] = effect
    return settings


def child(entries_path: str, valleys_path: str, table_path: str, samples: int, base: int | None,
          effect: str | None, profile: bool) -> None:
    """Propagation then attribution; print one JSON line (and a profile when asked)."""
    import copy

    from lamellume import attribution, io, keldysh, pipeline, ranking, refinement, uncertainty

    settings = _settings(base, effect)
    entries, valleys = io.read_parquet(entries_path), io.read_parquet(valleys_path)
    table = keldysh.KeldyshTable.from_arrays(io.load_arrays(table_path))
    bu._high_water_kib(reset=True)
    t0, c0 = time.perf_counter(), time.process_time()
    unc = uncertainty.propagate_uncertainty(entries, valleys, settings, table, samples=samples)
    t_prop, c_prop = time.perf_counter() - t0, time.process_time() - c0
    rss_prop = bu._high_water_kib(reset=True)

    # the ranking of rule rank_candidates (not timed): the cut keys of shortlist membership
    norm = Path(entries_path).parent
    wide = io.read_parquet(norm / "wide.parquet")
    long = ranking.add_survival(io.read_parquet(norm / "long.parquet"), wide, settings)
    r = settings["ranking"]
    ranked = ranking.rank(long[(long["layers"] == r["target_layers"]) & (long["environment"] == r["environment"])],
                          wide, settings, unc)
    work = Path(tempfile.mkdtemp(prefix="bench_attr_run_"))
    io.write_parquet(unc, work / "uncertainty.parquet")
    io.write_parquet(ranked[["entry_id", "rank", "meets_all_criteria", "score"]], work / "ranked.parquet")
    ref = settings["refinement"]
    per_compound = int(ref["per_compound"]) if ref["effect"] == "halved" else 0
    out = {"entries": len(entries), "samples": samples, "propagation_s": t_prop, "propagation_cpu_s": c_prop,
           "propagation_evaluations": len(entries) * samples, "rss_propagation_mib": rss_prop / 1024,
           "base": int(ref["samples"]), "effect": ref["effect"]}
    for label, verdicts in (("verdict", ["meets_all"]), ("configured", list(ref["verdicts"]))):
        s = copy.deepcopy(settings)
        s["refinement"]["verdicts"] = verdicts
        bu._high_water_kib(reset=True)
        t0, c0 = time.perf_counter(), time.process_time()
        counts = pipeline.run_attribution(str(entries_path), str(valleys_path), str(work / "uncertainty.parquet"),
                                          str(table_path), s, str(work / f"cache_{label}"),
                                          str(work / f"attribution_{label}.parquet"), str(work / "ranked.parquet"))
        t_attr, c_attr = time.perf_counter() - t0, time.process_time() - c0
        rows = io.read_parquet(work / f"attribution_{label}.parquet")
        groups = rows[rows["output"] == "meets_all"].groupby("entry_id").size()
        evaluations = sum(attribution.design_size(int(ref["samples"]), int(d), min(per_compound, int(d)))
                          for d in groups) + int(ref["samples"]) * counts.get("membership_computed", 0)
        out[label] = {"verdicts": verdicts, "attribution_s": t_attr, "ratio": t_attr / t_prop,
                      "attribution_cpu_s": c_attr, "cpu_ratio": c_attr / c_prop,
                      "attributed": int(len(groups)), "membership_computed": counts.get("membership_computed", 0),
                      "mean_groups": float(groups.mean()) if len(groups) else 0.0,
                      "attribution_evaluations": int(evaluations), "rss_attribution_mib": bu._high_water_kib() / 1024}
    print(json.dumps(out))
    chosen = entries[entries["entry_id"].isin(set(rows["entry_id"]))].merge(unc[["entry_id", "p_meets_all"]],
                                                                              on="entry_id")
    if profile:
        import cProfile
        import pstats

        prof = cProfile.Profile()
        prof.enable()
        campaign = refinement.shortlist_cuts(ranked, int(r["shortlist_size"]))
        refinement.attribute(chosen, valleys, settings, table, cuts={str(e): campaign.against(str(e))
                                                                     for e in chosen["entry_id"]})
        prof.disable()
        stats = pstats.Stats(prof, stream=sys.stderr)
        stats.sort_stats("cumulative").print_stats(25)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--count", type=int, default=10_000)
    parser.add_argument("--samples", type=int, default=400)
    parser.add_argument("--base", type=int, default=None)
    parser.add_argument("--effect", choices=("halved", "removed"), default=None)
    parser.add_argument("--keep", type=Path, default=None, help="folder to keep/reuse the normalised campaign")
    parser.add_argument("--profile", action="store_true")
    parser.add_argument("--child", nargs=4, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(*args.child[:3], int(args.child[3]), args.base, args.effect, args.profile)
        return
    print("machine:", bu.machine())
    with tempfile.TemporaryDirectory(prefix="bench_attr_") as tmp:
        work = args.keep or Path(tmp)
        work.mkdir(parents=True, exist_ok=True)
        entries, valleys = bu.prepare(work, args.count)
        table = bu._table_path(work)
        cmd = [sys.executable, __file__, "--child", str(entries), str(valleys), str(table), str(args.samples)]
        cmd += (["--base", str(args.base)] if args.base is not None else [])
        cmd += (["--effect", args.effect] if args.effect else []) + (["--profile"] if args.profile else [])
        res = subprocess.run(cmd, check=True, capture_output=True, text=True)
        r = json.loads(res.stdout.strip().splitlines()[-1])
        print(f"{r['entries']} entries: propagation x {r['samples']} samples {r['propagation_s']:.1f} s "
              f"(CPU {r['propagation_cpu_s']:.1f} s) "
              f"({r['propagation_evaluations'] / 1e6:.1f} M model evaluations, peak RSS "
              f"{r['rss_propagation_mib']:.0f} MiB)")
        for label in ("verdict", "configured"):
            a = r[label]
            print(f"attribution, verdicts {a['verdicts']}: {a['attributed']} records attributed "
                  f"({a['mean_groups']:.1f} input groups on average), membership of {a['membership_computed']} "
                  f"other records sampled, N = {r['base']}, effect {r['effect']}: {a['attribution_s']:.1f} s "
                  f"({a['attribution_evaluations'] / 1e6:.1f} M model evaluations, peak RSS "
                  f"{a['rss_attribution_mib']:.0f} MiB); ratio to the propagation {a['ratio']:.2f} "
                  f"(CPU {a['attribution_cpu_s']:.1f} s, ratio {a['cpu_ratio']:.2f})")
        if args.profile:
            print(res.stderr)


if __name__ == "__main__":
    main()
