"""Adapter of rule screen_shard: validate, normalise, screen and propagate one shard."""
from pathlib import Path

import adapter_args

from lamellume import io, pipeline

job = adapter_args.parse()
io.start_log(job.log)
settings = io.read_json(job.one("input", "settings"))
records = io.read_json(job.one("input", "records"))
cache = str(Path(settings["cache_root"]) / job.wildcards["shard"])
outputs = {name: job.one("output", name) for name in job.output}
# records the import stage wrote for this shard (rule import_calculations), beside the campaign's own
imported = [str(Path(folder) / row[0]) for folder in job.input.get("imported", [])
            for row in io.campaign_listing(Path(folder).parent, "entries")]
counts = pipeline.run_shard_job(
    entry_paths=pipeline.listed_paths(settings["campaign"], records, "entries") + imported,
    campaign=settings["campaign"],
    physics=settings["physics"],
    propagation=settings["uncertainty"],
    table_path=job.one("input", "table"),
    cache_dir=cache,
    outputs={k: v for k, v in outputs.items() if k != "counts"},
)
io.write_json(counts, outputs["counts"])
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
