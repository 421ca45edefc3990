"""Adapter of rule rank_candidates: combine shards, add survival, rank, shortlist."""
import adapter_args

from lamellume import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
pipeline.run_rank(
    inputs={k: v for k, v in job.input.items() if k not in ("code", "settings")},
    outputs={name: job.one("output", name) for name in job.output},
    settings=settings["settings"],
    config_hash=settings["config_hash"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
