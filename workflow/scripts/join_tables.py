"""Adapter of rule join_tables: final long, entries and valleys tables (Arrow only, no pandas)."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import assemble, io  # noqa: E402

io.start_log(snakemake.log[0])  # noqa: F821
job = io.read_json(snakemake.input.settings)  # noqa: F821
assemble.run_join(
    inputs={k: list(v) for k, v in snakemake.input.items() if k not in ("code", "settings")},  # noqa: F821
    outputs=dict(snakemake.output.items()),  # noqa: F821
    settings=job["settings"],
    config_hash=job["config_hash"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
