"""Adapter of rule write_manifest: record what this run was made from."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
pipeline.write_manifest(
    entry_paths=pipeline.campaign_paths(snakemake.params.campaign, "entries"),  # noqa: F821
    structure_paths=pipeline.campaign_paths(snakemake.params.campaign, "structures"),  # noqa: F821
    wide_path=snakemake.input.tables,  # noqa: F821
    config=snakemake.params.config,  # noqa: F821
    config_hash=snakemake.params.config_hash,  # noqa: F821
    workdir=snakemake.params.workdir,  # noqa: F821
    output=snakemake.output[0],  # noqa: F821
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
