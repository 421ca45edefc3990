"""Adapter of rule join_long: the final long table (Arrow only, no pandas)."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import assemble, io  # noqa: E402

io.start_log(snakemake.log[0])  # noqa: F821
job = io.read_json(snakemake.input.settings)  # noqa: F821
assemble.run_join_long(
    long_paths=list(snakemake.input.long),  # noqa: F821
    wide_paths=list(snakemake.input.wide),  # noqa: F821
    output=snakemake.output[0],  # noqa: F821
    settings=job["settings"],
    config_hash=job["config_hash"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
