"""The pure check-and-normalise step of a shard job (lamellume.intake)."""

from __future__ import annotations

import pytest

from lamellume import intake, io

SETTINGS = {"layers": {"max_layers": 6, "fit_exponent": False},
            "structure": {"non_layered": "warn", "reconcile_rel_tol": 0.05}}


def _outcome(raw, checker):
    return intake.check_and_normalise(raw, stem=raw.data["id"] if isinstance(raw.data, dict) else "x",
                                      source="x.json", input_hash="h", cif_bytes=None, cif_hash="",
                                      cif_problem="file not found", checker=checker, settings=SETTINGS,
                                      geometry_of=lambda b, h: pytest.fail("no CIF to analyse"))


def test_valid_record_gives_rows(record, checker):
    # common practice: a contract-valid record becomes one entry row and one row per valley
    out = _outcome(io.RawRecord(path="x.json", sha256="s", data=record), checker)
    assert out.stage == "" and not out.problems
    assert out.entry["entry_id"] == record["id"] and len(out.valleys) == len(record["valleys"])


def test_read_error_is_a_read_reject(checker):
    out = _outcome(io.RawRecord(path="x.json", sha256="s", error="not JSON"), checker)
    assert out.stage == "read" and out.entry is None and out.problems[0].reason == "not JSON"


def test_contract_problem_is_a_contract_reject(record, checker):
    del record["valleys"]
    out = _outcome(io.RawRecord(path="x.json", sha256="s", data=record), checker)
    assert out.stage == "contract" and out.problems
