"""Malformed inputs: every bad record is rejected with a field and a reason, the run goes on.

The corpus comes from tests/data/bad_inputs/make_corpus.py (written into a
temporary campaign at test time; the > 2 MB record, named pipes, sockets and
dangling links too). Two layers of checks:

* in process, one shard over everything: :func:`lamellume.pipeline.run_shard`
  screens a campaign of eight valid synthetic records plus the whole corpus as
  one shard. Per case: the record's file has a reject row with the expected
  field, reason and stage. And every valid record is screened with exactly the
  numbers of a run over the valid records alone (bad files beside it change
  nothing);
* end to end, one Snakemake run (``--cores 2``) on the same mix: the run exits 0,
  every bad file has a reject row naming the field, every valid record is
  screened; and one run whose only record file is rejected, which must stop with
  a reason before writing final tables, its shards' empty tables well typed (same
  columns and Arrow types as a non-empty run).
"""

from __future__ import annotations

import importlib.util
import re
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest
import yaml

from lamellume import io, keldysh, pipeline, sharding

REPO = Path(__file__).resolve().parents[2]
SNAKEMAKE = [sys.executable, "-m", "snakemake"]
TARGETS = ("results/manifest.json", "results/shortlist.csv", "results/tables/screen_long.parquet",
           "results/summary.html")
TABLES = ("entries", "valleys", "rejects", "screen_long", "screen_wide")
N_VALID = 8


def _load_corpus_module():
    path = REPO / "tests" / "data" / "bad_inputs" / "make_corpus.py"
    spec = importlib.util.spec_from_file_location("lamellume_bad_input_corpus", path)
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
    assert len(CASES) >= 100
    assert len({c.stem.casefold() for c in CASES}) == len(CASES), "case stems must be unique"
    assert len({c.source_file for c in CASES}) == len(CASES), "case files must be unique"


SETTINGS = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
PHYSICS = {k: SETTINGS[k] for k in ("layers", "structure", "environments", "monolayer", "excitons", "emission_bands")}


def _valid_campaign(folder: Path) -> list[str]:
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(folder),
                    "--count", str(N_VALID), "--no-broken"], check=True, capture_output=True)
    return sorted(p.stem for p in (folder / "entries").glob("*.json"))


def _run_one_shard(campaign: Path, table: str, out: Path) -> dict[str, pd.DataFrame]:
    """run_shard over every listed record of ``campaign`` as one shard (the workflow's listing)."""
    listing = {"entries": io.campaign_listing(campaign, "entries")}
    outputs = {k: str(out / f"{k}.parquet") for k in pipeline.SHARD_TABLES}

    def alarm(signum, frame):
        raise AssertionError("the shard blocked (a named pipe opened for reading?)")

    old = signal.signal(signal.SIGALRM, alarm)
    signal.alarm(300)
    try:
        pipeline.run_shard(pipeline.listed_paths(str(campaign), listing, "entries"), str(campaign), PHYSICS,
                           table, str(out / "cache"), outputs)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)
    return {k: io.read_parquet(v) for k, v in outputs.items()}


@pytest.fixture(scope="module")
def shard_runs(tmp_path_factory):
    """(tables of valid records alone, tables of valid records beside the corpus, valid stems)."""
    work = tmp_path_factory.mktemp("bad_inputs_shard")
    table = str(work / "keldysh.npz")
    io.save_arrays(keldysh.build_table().to_arrays(), table)
    alone = work / "alone"
    valid = _valid_campaign(alone)
    mixed = work / "mixed"
    shutil.copytree(alone, mixed, symlinks=True)
    _, extras = corpus.write_corpus(mixed, include_huge=True)
    return _run_one_shard(alone, table, work / "out-alone"), _run_one_shard(mixed, table, work / "out-mixed"), \
        valid, extras


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.stem)
def test_case_rejected_with_file_field_reason_and_stage(case, shard_runs):
    rejects = shard_runs[1]["rejects"]
    rows = rejects[rejects["source_file"] == case.source_file]
    assert len(rows), f"no reject row for {case.source_file}"
    shown = list(zip(rows["field"], rows["reason"], rows["stage"]))
    assert any(f == case.field and re.search(case.reason, r) and st == case.stage for f, r, st in shown), shown
    assert all(f and r for f, r, _ in shown)


def test_good_records_beside_bad_ones_are_screened_as_alone(shard_runs):
    alone, mixed, valid, extras = shard_runs
    assert len(alone["rejects"]) == 0
    assert sorted(mixed["wide"]["entry_id"]) == sorted(valid + extras)
    for name, keys in (("wide", ["entry_id"]), ("long", ["entry_id", "layers", "environment"]),
                       ("entries", ["entry_id"]), ("valleys", ["entry_id", "valley_index"])):
        a = alone[name].sort_values(keys).reset_index(drop=True)
        m = mixed[name][mixed[name]["entry_id"].isin(valid)].sort_values(keys).reset_index(drop=True)
        pd.testing.assert_frame_equal(a, m, check_exact=True, obj=name)


def test_every_rejected_file_is_a_case(shard_runs):
    rejects = shard_runs[1]["rejects"]
    expected = {c.source_file for c in CASES} | {"Dup-Case.json"}
    assert set(rejects["source_file"]) == expected
    assert rejects["reason"].map(lambda r: r.encode("utf-8") is not None).all()


@pytest.mark.parametrize("shards", [1, 2, 4, 7, 64, 4096])
def test_case_duplicates_share_a_shard(shards):
    assert sharding.shard_of("Dup-Case", shards) == sharding.shard_of("dup-case", shards)


# ---------------------------------------------------------------------------------------------
# End to end: one run on valid records plus the whole corpus, one that screens nothing
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
        source = case.source_file
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
    manifest = io.read_json(work / "results" / "manifest.json")
    assert "bad-fs-fifo.json" not in manifest["inputs"]["entries"]
    assert "named pipe" in manifest["not_read"]["entries/bad-fs-fifo.json"]
    assert "hidden file" in manifest["not_read"]["entries/.bad-name-hidden.json"]
    csv = pd.read_csv(work / "results" / "tables" / "rejects.csv")
    assert len(csv) == len(rejects)
    # spreadsheet-safe (OWASP CSV injection guidance): a reason starting with '-' is neutralised
    reason = csv.loc[csv["source_file"] == "bad-edge-uncertainty-negative.json", "reason"].iloc[0]
    assert reason.startswith("'-0.1 eV is outside")


@pytest.mark.slow
def test_corpus_run_rejects_are_escaped_plain_text(corpus_run):
    """Identifiers with markup or path separators never become file names or table keys."""
    work, _, _ = corpus_run
    rejects = pd.read_parquet(work / "results" / "tables" / "rejects.parquet")
    # entry_id comes from the (valid) file name, never from the record's id field; files skipped
    # for their names keep them, as storable text (non-UTF-8 bytes shown as \xNN)
    read = rejects["stage"] != "skipped"
    assert rejects.loc[read, "entry_id"].str.fullmatch(r"[A-Za-z0-9_-]+").all()
    assert rejects.loc[~read, "entry_id"].map(lambda t: t.encode("utf-8") and t.isprintable()).all()
    assert not list((work / "results").rglob("x")), "an id like '../x' must not name a file"


@pytest.fixture(scope="module")
def empty_run(tmp_path_factory):
    """A campaign whose only record file is rejected: the shard jobs run and write empty
    tables, then the run stops (nothing screened) before the final tables are written."""
    work = tmp_path_factory.mktemp("empty_run")
    campaign = work / "campaign"
    (campaign / "entries").mkdir(parents=True)
    (campaign / "structures").mkdir()
    (campaign / "entries" / "only.json").write_text("{")
    write_config(work, campaign)
    res = snakemake(work, *TARGETS)
    return work, res


@pytest.mark.slow
def test_a_screen_of_nothing_stops_with_a_reason(empty_run):
    work, res = empty_run
    assert res.returncode != 0
    assert "lamellume: nothing was screened: all 1 record files were rejected" in res.stderr, res.stderr[-3000:]
    assert not (work / "results" / "tables").exists()
    assert not (work / "results" / "shortlist.csv").exists()


#: Final table name -> name of the shard table it is joined from.
SHARD_TABLE = {"entries": "entries", "valleys": "valleys", "rejects": "rejects", "screen_long": "exciton_long",
               "screen_wide": "exciton_wide"}


@pytest.mark.slow
@pytest.mark.parametrize("name", TABLES)
def test_empty_tables_are_well_typed(empty_run, corpus_run, name):
    """Shard tables without rows have the same columns and Arrow types as those with rows (no
    null-typed columns), so a shard without a screened record joins with the others."""
    work, _ = empty_run
    paths = sorted((work / "results" / "shards").glob(f"*/{SHARD_TABLE[name]}.parquet"))
    empty = next(pq.read_schema(p) for p in paths if pq.read_metadata(p).num_rows == 0)
    full = pq.read_schema(next((corpus_run[0] / "results" / "shards").glob(f"*/{SHARD_TABLE[name]}.parquet")))
    assert empty.names == full.names
    mismatched = {f.name: (str(f.type), str(full.field(f.name).type)) for f in empty
                  if f.type != full.field(f.name).type}
    assert not mismatched, f"column types differ (empty, non-empty): {mismatched}"
