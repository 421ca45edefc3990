"""Shared fixtures: paths, a valid hand-written record, a checker."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from lamellume import contract, io

REPO = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "unit" / "data"


@pytest.fixture(scope="session")
def repo() -> Path:
    return REPO


@pytest.fixture(scope="session")
def checker() -> contract.RecordChecker:
    return contract.RecordChecker(io.load_schema("entry.schema.json"))


@pytest.fixture()
def record() -> dict:
    """A valid record (fresh copy for each test)."""
    return copy.deepcopy(json.loads((DATA / "record_valid.json").read_text()))
