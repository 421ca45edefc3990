"""Adapter of rule propagate_shard: Monte Carlo uncertainty propagation for one shard."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
pipeline.run_propagation(
    entries_path=snakemake.input.entries,  # noqa: F821
    valleys_path=snakemake.input.valleys,  # noqa: F821
    table_path=snakemake.input.table,  # noqa: F821
    settings=snakemake.params.settings,  # noqa: F821
    cache_dir=snakemake.params.cache,  # noqa: F821
    output=snakemake.output[0],  # noqa: F821
)
