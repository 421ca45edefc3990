"""Adapter of rule write_summary: the HTML summary and the run-to-run change report."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline, report  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
job = io.read_json(snakemake.input.settings)  # noqa: F821
report.write_summary(
    inputs={k: str(v) for k, v in snakemake.input.items() if k not in ("code", "settings")},  # noqa: F821
    outputs=dict(snakemake.output.items()),  # noqa: F821
    settings=job["settings"],
    history=job["history"],
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
