"""Adapter of rule propagate_shard: Monte Carlo uncertainty propagation for one shard."""
import sys
from pathlib import Path

sys.path.insert(0, str(Path(snakemake.scriptdir).parent))  # noqa: F821
from flakelight import io, keldysh, pipeline, uncertainty  # noqa: E402

pipeline.start_log(snakemake.log[0])  # noqa: F821
settings = snakemake.params.settings  # noqa: F821
table = keldysh.KeldyshTable.from_arrays(io.load_arrays(snakemake.input.table))  # noqa: F821
frame = uncertainty.propagate_uncertainty(io.read_parquet(snakemake.input.entries),  # noqa: F821
                                          io.read_parquet(snakemake.input.valleys), settings, table)  # noqa: F821
io.write_parquet(frame, snakemake.output[0], units=uncertainty.UNITS,  # noqa: F821
                 descriptions=uncertainty.DESCRIPTIONS,
                 table_metadata={"settings_hash": io.canonical_json_hash(dict(settings))[:16],
                                 "code_version": io.library_digest()})
