"""Adapter of rule attribute_shard: which input decides each borderline verdict of one shard."""
from pathlib import Path

import adapter_args

from lamellume import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
pipeline.run_attribution(
    entries_path=job.one("input", "entries"),
    valleys_path=job.one("input", "valleys"),
    uncertainty_path=job.one("input", "uncertainty"),
    ranked_path=job.one("input", "ranked"),
    table_path=job.one("input", "table"),
    settings=settings["settings"],
    cache_dir=str(Path(settings["cache_root"]) / job.wildcards["shard"]),
    output=job.one("output", "attribution"),
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
