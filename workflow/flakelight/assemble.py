"""Joining the shard tables that need no ranking, with Arrow alone.

The long table (compound x layer count x environment, about 20 rows per
compound) is the largest output. Joining it needs no pandas and no physics
beyond :mod:`flakelight.survival`: each shard's rows are read as an Arrow
table, the temperature-dependent columns are appended (computed by
:func:`flakelight.survival.survival_columns`, the function the ranking uses
for its own rows), and the part is streamed to the output. Memory holds one
shard at a time; rows come in shard order, sorted by compound within each
shard (as the shards wrote them). The entries and valleys tables are plain
concatenations, sorted by compound. Rule ``join_tables`` runs this beside
``rank_candidates``; it starts in a fraction of the time a pandas job needs.
"""

from __future__ import annotations

import logging
from typing import Mapping, Sequence

import numpy as np

from flakelight import io, survival

log = logging.getLogger("flakelight")

#: Columns of the shard wide tables the survival step needs (the in-plane lattice constant).
_WIDE_COLUMNS = ["entry_id", "lattice_angstrom"]


def _float_column(table, name: str) -> np.ndarray:
    """One column of an Arrow table as float64 numpy (nulls become NaN)."""
    return table.column(name).to_numpy().astype(float, copy=False)


def lattice_lookup(wide_paths: Sequence[str]):
    """(entry ids, in-plane lattice constants in Angstrom) of every screened compound, as Arrow arrays."""
    import pyarrow as pa

    ids, lattice = [], []
    for path in wide_paths:
        part = io.read_arrow(path, columns=_WIDE_COLUMNS)
        ids.extend(part.column("entry_id").cast(pa.large_string()).chunks)
        lattice.extend(part.column("lattice_angstrom").cast(pa.float64()).chunks)
    # explicit types: a shard without screened compounds contributes no chunks
    return (pa.chunked_array(ids, type=pa.large_string()).combine_chunks(),
            pa.chunked_array(lattice, type=pa.float64()).combine_chunks())


def with_survival(part, lookup, settings: Mapping):
    """A shard's long rows (Arrow table) with the survival columns appended.

    ``lookup`` is :func:`lattice_lookup`; a compound missing from it gets a NaN
    lattice constant (and so ``wannier_ok`` False).
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    ids, lattice = lookup
    rows = pc.index_in(part.column("entry_id").cast(pa.large_string()), value_set=ids)
    columns = survival.survival_columns(
        *(_float_column(part, c) for c in ("binding_ev", "mu_inplane_me", "radius_angstrom")),
        pc.take(lattice, rows).to_numpy(zero_copy_only=False), settings,
        part.column("layers").to_numpy(zero_copy_only=False))
    for name, values in columns.items():
        part = part.append_column(name, pa.array(values))
    return part


def run_join_long(long_paths: Sequence[str], wide_paths: Sequence[str], output: str, settings: Mapping,
                  config_hash: str, descriptions: Mapping[str, str] | None = None) -> int:
    """Write the final long table: every shard's rows plus survival columns and the config hash.

    Parameters
    ----------
    long_paths, wide_paths : the shards' ``exciton_long`` and ``exciton_wide`` tables.
    output : path of the final long table.
    settings : config sections with ``survival``.
    config_hash : stamped on every row and in the table metadata.
    descriptions : column descriptions to (re)state in the field metadata.

    Returns the number of rows written.
    """
    import pyarrow as pa

    lookup = lattice_lookup(wide_paths)
    rows = 0
    with io.ParquetSink(output, units=survival.SURVIVAL_UNITS, descriptions=descriptions or {},
                        table_metadata={"config_hash": config_hash}) as sink:
        for path in long_paths:
            part = with_survival(io.read_arrow(path), lookup, settings)
            # keep pandas' own schema entry; the shard's cache stamps do not describe this table
            part = part.replace_schema_metadata({k: v for k, v in (part.schema.metadata or {}).items()
                                                 if k == b"pandas"})
            part = part.append_column("config_hash", pa.array([config_hash] * part.num_rows, pa.large_string()))
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


def run_join(inputs: Mapping[str, Sequence[str]], outputs: Mapping[str, str], settings: Mapping,
             config_hash: str) -> dict[str, int]:
    """Write the final long, entries and valleys tables from the shard tables.

    ``inputs`` holds the shards' ``long``, ``wide``, ``entries`` and ``valleys``
    tables; ``outputs`` the paths for ``long``, ``entries`` and ``valleys``.
    Returns the rows written per table.
    """
    counts = {
        "long": run_join_long(inputs["long"], inputs["wide"], outputs["long"], settings, config_hash),
        "entries": concat_sorted(inputs["entries"], ["entry_id"], outputs["entries"], config_hash),
        "valleys": concat_sorted(inputs["valleys"], ["entry_id", "valley_index"], outputs["valleys"], config_hash),
    }
    log.info("tables joined: %s", counts)
    return counts
