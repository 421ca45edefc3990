"""Adapter of rule keldysh_table: build the Rytova-Keldysh table once."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, pipeline  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
pipeline.build_keldysh_table(snakemake.output[0])  # noqa: F821
io.end_job()  # last statement: skips the interpreter teardown (see io.end_job)
