"""Adapter of rule write_summary: the HTML summary and the run-to-run change report."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline, report  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
report.write_summary(
    inputs={k: str(v) for k, v in snakemake.input.items() if k != "code"},  # noqa: F821
    outputs=dict(snakemake.output.items()),  # noqa: F821
    settings=snakemake.params.settings,  # noqa: F821
    history=snakemake.params.history,  # noqa: F821
)
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
