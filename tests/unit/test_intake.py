"""The pure check-and-normalise step of a shard job (lamellume.intake)."""

from __future__ import annotations

import functools
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from lamellume import intake, io, pipeline

REPO = Path(__file__).resolve().parents[2]

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


@pytest.fixture(scope="module")
def campaigns(tmp_path_factory) -> dict[str, Path]:
    """The bad-input corpus, a small synthetic campaign with broken records and CIFs, the demo."""
    bad, synthetic = tmp_path_factory.mktemp("bad"), tmp_path_factory.mktemp("synthetic")
    for command in ([REPO / "tests" / "data" / "bad_inputs" / "make_corpus.py", "--out", bad, "--no-huge"],
                    [REPO / "inputs" / "make_campaign.py", "--out", synthetic, "--count", "80", "--seed", "7",
                     "--cif-fraction", "0.3"]):
        subprocess.run([sys.executable, *map(str, command)], check=True, capture_output=True)
    return {"bad inputs": bad, "synthetic": synthetic, "demo": REPO / "inputs" / "demo"}


def _one_by_one(items, *, checker, settings, geometry_of):
    return [intake.check_and_normalise(item.raw, stem=item.stem, source=item.source, input_hash=item.input_hash,
                                       cif_bytes=item.cif_bytes, cif_hash=item.cif_hash,
                                       cif_problem=item.cif_problem, checker=checker, settings=settings,
                                       geometry_of=geometry_of) for item in items]


@pytest.mark.parametrize("name", ["bad inputs", "synthetic", "demo"])
def test_records_checked_together_as_one_by_one(campaigns, name, checker, monkeypatch):
    # common practice: the shard's shared prefilter and stacked computations are an optimisation
    # only; rows, reject rows and messages (and their order) are those of the one-record path,
    # compared through repr (exact floats, NaN included)
    campaign = campaigns[name]
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    settings = {k: config[k] for k in ("layers", "structure")}
    paths = sorted(str(p) for p in (campaign / "entries").iterdir())
    geometry_of = functools.lru_cache(maxsize=None)(pipeline._analyse_structure)  # each CIF analysed once

    def rows():
        return pipeline.check_records(paths, campaign / "structures", settings, {}, checker, geometry_of)

    together = rows()
    monkeypatch.setattr(pipeline, "RECORDS_TOGETHER", 7)  # many groups, boundaries anywhere
    in_groups = rows()
    monkeypatch.setattr(intake, "check_and_normalise_many", _one_by_one)
    alone = rows()
    assert repr(together) == repr(alone)
    assert repr(in_groups) == repr(alone)
    assert together[0] and together[2]  # some records screened, some rejected
