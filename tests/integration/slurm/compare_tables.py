"""Check that two runs of the screen wrote identical result tables.

    python compare_tables.py RUN_A RUN_B TABLE [TABLE ...]

TABLE is a path relative to each run's working directory, e.g.
results/tables/screen_wide.parquet. Compares the data exactly (values, dtypes, index,
column order) and the Parquet schema with its metadata (units, descriptions, config
hash). The tables carry no timestamps, so nothing is dropped. Exits non-zero on the
first difference.
"""
import sys
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq


def compare(run_a: Path, run_b: Path, table: str) -> None:
    """Raise AssertionError if `table` differs between the two runs."""
    a, b = run_a / table, run_b / table
    frame_a, frame_b = pd.read_parquet(a), pd.read_parquet(b)
    pd.testing.assert_frame_equal(frame_a, frame_b, check_exact=True)
    schema_a, schema_b = pq.read_schema(a), pq.read_schema(b)
    assert schema_a.equals(schema_b, check_metadata=True), (
        f"{table}: Parquet schema or metadata differ\n{schema_a}\n---\n{schema_b}")
    print(f"identical: {table} ({len(frame_a)} rows x {frame_a.shape[1]} columns)")


def main(argv: list[str]) -> int:
    if len(argv) < 3:
        print(__doc__, file=sys.stderr)
        return 2
    run_a, run_b, *tables = argv
    for table in tables:
        compare(Path(run_a), Path(run_b), table)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
