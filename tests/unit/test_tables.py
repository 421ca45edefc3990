"""The table schema: every column declared once with dtype, unit and description; docs current."""

from __future__ import annotations

from pathlib import Path

import pyarrow.parquet as pq
import pytest

from lamellume import tables

REPO = Path(__file__).resolve().parents[2]
GOLDEN = REPO / "tests" / "data" / "golden"


def test_every_declaration_is_complete():
    for col in tables.COLUMNS.values():
        assert col.dtype in {"string", "float64", "int16", "Int16", "int32", "int64", "bool"}, col
        assert col.unit and col.description, col


@pytest.mark.parametrize("name, unit, needle", [
    ("edge_3l_ev", "eV", "3 layer"),
    ("binding_1l_ev__encapsulated", "eV", "encapsulated"),
    ("target_emission_nm_p84", "nm", "84th percentile"),
    ("bulk_binding_ev_p16", "eV", "16th percentile"),
])
def test_families_resolve(name, unit, needle):
    col = tables.lookup(name)
    assert col is not None and col.unit == unit and needle in col.description


def test_undeclared_column_is_unknown():
    assert tables.lookup("no_such_column") is None
    with pytest.raises(KeyError):
        tables.pandas_dtype("no_such_column")


#: Columns of the reference run that the outputs no longer have (named in test_golden's EXPECTED_CHANGES too).
REMOVED_SINCE_REFERENCE = {"binding_fractional_ev", "p_direct_target",  # p_direct_target: now p_gap_direct
                           "character_switch_layers"}  # now switch_layers (empty, not a code) and thinning_state


@pytest.mark.parametrize("path", sorted((GOLDEN / "demo").glob("tables__*.parquet")), ids=lambda p: p.name)
def test_every_output_column_is_declared_with_its_type(path):
    # The tables written by the reference run (tests/data/golden) hold every column of the outputs.
    for field in pq.read_schema(path):
        if field.name in REMOVED_SINCE_REFERENCE:
            assert tables.lookup(field.name) is None, field.name
            continue
        col = tables.lookup(field.name)
        assert col is not None, f"{path.name}: {field.name} not declared in lamellume.tables"
        expected = "string" if str(field.type) == "large_string" else "bool" if str(field.type) == "bool" \
            else "float64" if str(field.type) == "double" else str(field.type)
        assert col.dtype.lower() == expected, field.name  # Int16: an int16 that may be empty


def test_column_docs_are_current():
    assert (REPO / "docs" / "columns.md").read_text() == tables.column_docs(), \
        "regenerate: PYTHONPATH=workflow python -m lamellume.tables > docs/columns.md"
