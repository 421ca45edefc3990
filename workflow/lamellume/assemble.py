"""Joining the shard tables that need no ranking, with Arrow alone.

The long table (compound x layer count x environment, about 20 rows per
compound) is the largest output. Joining it needs no pandas and no physics:
each shard's rows (with their survival columns, computed in the shard job) are
read as an Arrow table, stamped with the config hash and streamed to the
output. Memory holds one shard at a time; rows come in shard order, sorted by
compound within each shard (as the shards wrote them). The entries and valleys
tables are plain concatenations, sorted by compound. Rule ``join_tables`` runs
this beside ``rank_candidates``; it starts in a fraction of the time a pandas
job needs.
"""

from __future__ import annotations

import logging
from typing import Mapping, Sequence

import numpy as np

from lamellume import io

log = logging.getLogger("lamellume")


def repeated_text(text: str, n: int):
    """Arrow ``large_string`` array of ``n`` copies of ``text``, assembled from its buffers:
    ``pa.array`` of Python strings makes pyarrow import pandas (0.5 s CPU in a job that
    needs none of it)."""
    import pyarrow as pa

    data = text.encode("utf-8")
    offsets = np.arange(n + 1, dtype=np.int64) * len(data)
    return pa.Array.from_buffers(pa.large_string(), n, [None, pa.py_buffer(offsets), pa.py_buffer(data * n)])


def run_join_long(long_paths: Sequence[str], output: str, config_hash: str) -> int:
    """Write the final long table: every shard's rows (survival columns included) plus the config hash.

    Parameters
    ----------
    long_paths : the shards' ``exciton_long`` tables.
    output : path of the final long table.
    config_hash : stamped on every row and in the table metadata.

    Returns the number of rows written.
    """
    import pyarrow as pa

    rows = 0
    with io.ParquetSink(output, table_metadata={"config_hash": config_hash}) as sink:
        for path in long_paths:
            part = io.read_arrow(path)
            # keep pandas' own schema entry; the shard's cache stamps do not describe this table
            part = part.replace_schema_metadata({k: v for k, v in (part.schema.metadata or {}).items()
                                                 if k == b"pandas"})
            part = part.append_column("config_hash", repeated_text(config_hash, part.num_rows))
            rows += part.num_rows
            sink.write(part)
            del part
    log.info("long table joined: %d rows", rows)
    return rows


def concat_sorted(paths: Sequence[str], keys: Sequence[str], output: str, config_hash: str) -> int:
    """Stack shard tables, sort by ``keys`` (stable, ascending) and write them with the config hash.

    Returns the number of rows written.
    """
    import pyarrow as pa

    tables = [io.read_arrow(p) for p in paths]
    nonempty = [t for t in tables if t.num_rows]
    if not nonempty:
        table = tables[0] if tables else pa.table({})
    else:
        table = pa.concat_tables(nonempty, promote_options="permissive") if len(nonempty) > 1 else nonempty[0]
        table = table.sort_by([(k, "ascending") for k in keys])
    table = table.replace_schema_metadata({k: v for k, v in (table.schema.metadata or {}).items() if k == b"pandas"})
    io.write_parquet(table, output, table_metadata={"config_hash": config_hash})
    return table.num_rows


def run_join(inputs: Mapping[str, Sequence[str]], outputs: Mapping[str, str], config_hash: str) -> dict[str, int]:
    """Write the final long, entries and valleys tables from the shard tables.

    ``inputs`` holds the shards' ``long``, ``entries`` and ``valleys`` tables;
    ``outputs`` the paths for ``long``, ``entries`` and ``valleys``.
    Returns the rows written per table.
    """
    counts = {
        "long": run_join_long(inputs["long"], outputs["long"], config_hash),
        "entries": concat_sorted(inputs["entries"], ["entry_id"], outputs["entries"], config_hash),
        "valleys": concat_sorted(inputs["valleys"], ["entry_id", "valley_index"], outputs["valleys"], config_hash),
    }
    log.info("tables joined: %s", counts)
    return counts
