"""Adapter of rule screen_shard: validate, normalise and screen one shard."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
pipeline.run_shard(
    entry_paths=list(snakemake.input.entries),  # noqa: F821
    campaign=snakemake.params.campaign,  # noqa: F821
    settings=snakemake.params.settings,  # noqa: F821
    table_path=snakemake.input.table,  # noqa: F821
    cache_dir=snakemake.params.cache,  # noqa: F821
    outputs=dict(snakemake.output.items()),  # noqa: F821
)
