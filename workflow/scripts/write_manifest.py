"""Adapter of rule write_manifest: record what this run was made from."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
job = io.read_json(snakemake.input.settings)  # noqa: F821
records = io.read_json(snakemake.input.records)  # noqa: F821
pipeline.write_manifest(
    entry_paths=pipeline.listed_paths(job["campaign"], records, "entries"),
    structure_paths=pipeline.listed_paths(job["campaign"], records, "structures"),
    wide_path=snakemake.input.tables,  # noqa: F821
    config=job["config"],
    config_hash=job["config_hash"],
    workdir=job["workdir"],
    output=snakemake.output[0],  # noqa: F821
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
