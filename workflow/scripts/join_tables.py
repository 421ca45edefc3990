"""Adapter of rule join_tables: final long, entries and valleys tables (Arrow only, no pandas)."""
import adapter_args

from lamellume import assemble, io

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
assemble.run_join(
    inputs={k: v for k, v in job.input.items() if k not in ("code", "settings")},
    outputs={name: job.one("output", name) for name in job.output},
    config_hash=settings["config_hash"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
