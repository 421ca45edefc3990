"""Adapter of rule screen_shard: validate, normalise, screen and propagate one shard."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
job = io.read_json(snakemake.input.settings)  # noqa: F821
records = io.read_json(snakemake.input.records)  # noqa: F821
cache = str(Path(job["cache_root"]) / snakemake.wildcards.shard)  # noqa: F821
outputs = dict(snakemake.output.items())  # noqa: F821
pipeline.run_shard(
    entry_paths=pipeline.listed_paths(job["campaign"], records, "entries"),
    campaign=job["campaign"],
    settings=job["physics"],
    table_path=snakemake.input.table,  # noqa: F821
    cache_dir=cache,
    outputs={k: v for k, v in outputs.items() if k != "uncertainty"},
)
pipeline.run_propagation(
    entries_path=outputs["entries"],
    valleys_path=outputs["valleys"],
    table_path=snakemake.input.table,  # noqa: F821
    settings=job["uncertainty"],
    cache_dir=cache,
    output=outputs["uncertainty"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
