"""Adapter of rule screen_shard: validate, normalise, screen and propagate one shard."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
outputs = dict(snakemake.output.items())  # noqa: F821
pipeline.run_shard(
    entry_paths=pipeline.shard_record_paths(
        snakemake.params.campaign, snakemake.params.shards, int(snakemake.wildcards.shard)),  # noqa: F821
    campaign=snakemake.params.campaign,  # noqa: F821
    settings=snakemake.params.settings,  # noqa: F821
    table_path=snakemake.input.table,  # noqa: F821
    cache_dir=snakemake.params.cache,  # noqa: F821
    outputs={k: v for k, v in outputs.items() if k != "uncertainty"},
)
pipeline.run_propagation(
    entries_path=outputs["entries"],
    valleys_path=outputs["valleys"],
    table_path=snakemake.input.table,  # noqa: F821
    settings=snakemake.params.uncertainty,  # noqa: F821
    cache_dir=snakemake.params.cache,  # noqa: F821
    output=outputs["uncertainty"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
