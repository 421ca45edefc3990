"""Malformed inputs: every bad record is rejected with a field and a reason, the run goes on.

The corpus comes from tests/data/bad_inputs/make_corpus.py (written into a
temporary campaign at test time; the > 2 MB record too). Two layers of checks:

* per case, fast: :func:`flakelight.io.read_record` plus
  :class:`flakelight.contract.RecordChecker` give a problem with the expected
  field and reason (CIF cases: the structure analysis raises StructureError);
* end to end, one Snakemake run (``--cores 2``) on a campaign that mixes eight
  valid synthetic records with the whole corpus: the run exits 0, every bad
  file has a reject row naming the field, every valid record is screened; and
  one run on an empty entries/ folder, which must give empty but well-typed
  tables (same columns and Arrow types as a non-empty run).
"""

from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest
import yaml

from flakelight import contract, io, sharding, structure

REPO = Path(__file__).resolve().parents[2]
SNAKEMAKE = [sys.executable, "-m", "snakemake"]
TARGETS = ("results/manifest.json", "results/shortlist.csv", "results/tables/screen_long.parquet")
TABLES = ("entries", "valleys", "rejects", "screen_long", "screen_wide")
N_VALID = 8


def _load_corpus_module():
    path = REPO / "tests" / "data" / "bad_inputs" / "make_corpus.py"
    spec = importlib.util.spec_from_file_location("flakelight_bad_input_corpus", path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look the module up while the class is built
    spec.loader.exec_module(module)
    return module


corpus = _load_corpus_module()
CASES = corpus.cases(include_huge=True)


def snakemake(workdir: Path, *args: str) -> subprocess.CompletedProcess:
    """One Snakemake CLI run in ``workdir`` with its config.yaml; never raises on failure."""
    cmd = SNAKEMAKE + ["-s", str(REPO / "Snakefile"), "--directory", str(workdir),
                       "--configfile", str(workdir / "config.yaml"), "--cores", "2", *args]
    return subprocess.run(cmd, capture_output=True, text=True, cwd=workdir, timeout=900, check=False)


def write_config(workdir: Path, campaign: Path, **sections) -> None:
    """The repository config with ``campaign`` replaced (and sections updated)."""
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = str(campaign)
    config["uncertainty"]["samples"] = 50
    for key, value in sections.items():
        config[key].update(value)
    workdir.mkdir(parents=True, exist_ok=True)
    (workdir / "config.yaml").write_text(yaml.safe_dump(config))


def failure_text(res: subprocess.CompletedProcess, workdir: Path) -> str:
    """Snakemake's output tail and every rule log that shows a traceback."""
    logs = [f"--- {p.relative_to(workdir)}\n{p.read_text(errors='replace')[-3000:]}"
            for p in sorted((workdir / "results" / "logs").rglob("*.log"))
            if "Traceback" in p.read_text(errors="replace")]
    return f"exit {res.returncode}\n{res.stdout[-3000:]}\n{res.stderr[-5000:]}\n" + "\n".join(logs)


# ---------------------------------------------------------------------------------------------
# Per case, in process
# ---------------------------------------------------------------------------------------------

def test_corpus_is_large_enough():
    assert len(CASES) >= 40
    assert len({c.stem.casefold() for c in CASES}) == len(CASES), "case stems must be unique"


@pytest.fixture(scope="module")
def checker():
    return contract.RecordChecker(io.load_schema("entry.schema.json"))


@pytest.fixture(scope="module")
def corpus_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("corpus")
    corpus.write_corpus(folder, include_huge=True)
    return folder


@pytest.mark.parametrize("case", [c for c in CASES if c.stage in ("read", "contract")], ids=lambda c: c.stem)
def test_case_rejected_with_field_and_reason(case, checker, corpus_dir):
    structures = corpus_dir / "structures"
    raw = io.read_record(corpus_dir / "entries" / f"{case.stem}.json")
    if raw.error is not None:
        problems = [contract.Problem(raw.error_field, raw.error)]
    else:
        problems = checker.check(raw.data, stem=case.stem, structure_problem=lambda n: io.file_kind_problem(structures / n))
    assert (raw.error is not None) == (case.stage == "read"), problems
    assert problems, "a malformed record passed the contract"
    assert all(p.field and p.reason for p in problems)
    assert any(p.field == case.field and re.search(case.reason, p.reason) for p in problems), \
        [(p.field, p.reason) for p in problems]


@pytest.mark.parametrize("case", [c for c in CASES if c.stage == "structure"], ids=lambda c: c.stem)
def test_corrupt_structure_raises_structure_error(case, corpus_dir):
    data, reason = io.read_text_limited(corpus_dir / "structures" / f"{case.stem}.cif")
    assert reason is None  # present and small: the analysis, not the reader, must refuse it
    with pytest.raises(structure.StructureError):
        structure.analyse_cif_text(data)


@pytest.mark.parametrize("shards", [1, 2, 4, 7, 64, 4096])
def test_case_duplicates_share_a_shard(shards):
    assert sharding.shard_of("Dup-Case", shards) == sharding.shard_of("dup-case", shards)


def test_valid_extras_pass_the_contract(checker, corpus_dir):
    for stem in [Path(p).stem for p in corpus.valid_extras()]:
        raw = io.read_record(corpus_dir / "entries" / f"{stem}.json")
        assert raw.error is None, (stem, raw.error)
        assert checker.check(raw.data, stem=stem, structure_problem=lambda n: "file not found") == [], stem


# ---------------------------------------------------------------------------------------------
# End to end: one run on valid records plus the whole corpus, one on an empty folder
# ---------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def corpus_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("bad_inputs_run")
    campaign = work / "campaign"
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(campaign),
                    "--count", str(N_VALID), "--no-broken"], check=True, capture_output=True)
    valid_ids = sorted(p.stem for p in (campaign / "entries").glob("*.json"))
    cases, extras = corpus.write_corpus(campaign, include_huge=True)
    write_config(work, campaign)
    res = snakemake(work, *TARGETS)
    assert res.returncode == 0, failure_text(res, work)
    return work, cases, valid_ids + extras


@pytest.mark.slow
def test_corpus_run_rejects_every_bad_file(corpus_run):
    work, cases, _ = corpus_run
    rejects = pd.read_parquet(work / "results" / "tables" / "rejects.parquet")
    assert (rejects["field"].str.len() > 0).all() and (rejects["reason"].str.len() > 0).all()
    missing, wrong = [], []
    for case in cases:
        source = "dup-case.json" if case.stage == "duplicate" else f"{case.stem}.json"
        rows = rejects[rejects["source_file"] == source]
        if rows.empty:
            missing.append(source)
        elif not any(f == case.field and re.search(case.reason, r) for f, r in zip(rows["field"], rows["reason"])):
            wrong.append((source, case.field, case.reason, list(zip(rows["field"], rows["reason"]))))
    assert not missing, f"bad files without a reject row: {missing}"
    assert not wrong, "reject rows without the expected field/reason:\n" + "\n".join(map(str, wrong))


@pytest.mark.slow
def test_corpus_run_screens_every_valid_record(corpus_run):
    work, cases, valid = corpus_run
    wide = pd.read_parquet(work / "results" / "tables" / "screen_wide.parquet")
    rejects = pd.read_parquet(work / "results" / "tables" / "rejects.parquet")
    assert sorted(wide["entry_id"]) == sorted(valid)
    assert not set(rejects["entry_id"]) & set(valid)
    assert not set(wide["entry_id"]) & {c.stem for c in cases}
    csv = pd.read_csv(work / "results" / "tables" / "rejects.csv")
    assert len(csv) == len(rejects)


@pytest.mark.slow
def test_corpus_run_rejects_are_escaped_plain_text(corpus_run):
    """Identifiers with markup or path separators never become file names or table keys."""
    work, _, _ = corpus_run
    rejects = pd.read_parquet(work / "results" / "tables" / "rejects.parquet")
    # entry_id comes from the (valid) file name, never from the record's id field
    assert rejects["entry_id"].str.fullmatch(r"[A-Za-z0-9_-]+").all()
    assert not list((work / "results").rglob("x")), "an id like '../x' must not name a file"


@pytest.fixture(scope="module")
def empty_run(tmp_path_factory):
    work = tmp_path_factory.mktemp("empty_run")
    campaign = work / "campaign"
    (campaign / "entries").mkdir(parents=True)
    (campaign / "structures").mkdir()
    write_config(work, campaign)
    res = snakemake(work, *TARGETS)
    assert res.returncode == 0, failure_text(res, work)
    return work


@pytest.mark.slow
def test_empty_folder_gives_empty_tables(empty_run):
    for name in TABLES:
        assert len(pd.read_parquet(empty_run / "results" / "tables" / f"{name}.parquet")) == 0, name
    assert len(pd.read_csv(empty_run / "results" / "shortlist.csv")) == 0




@pytest.mark.slow
@pytest.mark.parametrize("name", TABLES)
def test_empty_tables_are_well_typed(empty_run, corpus_run, name):
    """Same columns and Arrow types as the tables of a non-empty run (no null-typed columns)."""
    empty = pq.read_schema(empty_run / "results" / "tables" / f"{name}.parquet")
    full = pq.read_schema(corpus_run[0] / "results" / "tables" / f"{name}.parquet")
    assert empty.names == full.names
    mismatched = {f.name: (str(f.type), str(full.field(f.name).type)) for f in empty
                  if f.type != full.field(f.name).type}
    assert not mismatched, f"column types differ (empty, non-empty): {mismatched}"
