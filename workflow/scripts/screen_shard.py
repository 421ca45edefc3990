"""Adapter of rule screen_shard: validate, normalise, screen and propagate one shard."""
from pathlib import Path

import adapter_args

from flakelight import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
records = io.read_json(job.one("input", "records"))
cache = str(Path(settings["cache_root"]) / job.wildcards["shard"])
outputs = {name: job.one("output", name) for name in job.output}
pipeline.run_shard_job(
    entry_paths=pipeline.listed_paths(settings["campaign"], records, "entries"),
    campaign=settings["campaign"],
    physics=settings["physics"],
    propagation=settings["uncertainty"],
    table_path=job.one("input", "table"),
    cache_dir=cache,
    outputs=outputs,
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
