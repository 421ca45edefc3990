"""Adapter of rule rank_candidates: combine shards, add survival, rank, shortlist."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
job = io.read_json(snakemake.input.settings)  # noqa: F821
pipeline.run_rank(
    inputs={k: list(v) for k, v in snakemake.input.items() if k not in ("code", "settings")},  # noqa: F821
    outputs=dict(snakemake.output.items()),  # noqa: F821
    settings=job["settings"],
    config_hash=job["config_hash"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
