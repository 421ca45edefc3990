"""Crash-resume, determinism and selective re-runs of the workflow through Snakemake's CLI.

* Kill: the workflow is started with ``subprocess.Popen`` in its own process
  group on a 40-record, 4-shard campaign and the whole group is SIGKILLed at one
  of seven moments observed on disk (see ``KILL_POINTS``: planning, Keldysh
  table, shard outputs, shard cache update, check and ranking, final tables,
  summary page). Right after the kill every ``.parquet`` under results/ must be
  readable (writes are atomic); the README's plain command (no extra flags:
  ``profiles/default`` turns on ``rerun-incomplete``) must then complete, after
  the one ``--unlock`` the README's troubleshooting asks for when Snakemake
  reports its lock, with final tables equal to those of an uninterrupted run
  and no temporary ``*.part`` file left behind.
* Determinism: two runs from scratch in separate working directories (each with
  its own copy of the campaign, named relative to the working directory) give
  identical tables (the manifest is not compared: it carries a timestamp).
* Selective re-runs (dry runs, parsed from ``snakemake -n`` output): revising
  one record schedules only its shard's screen_shard job plus downstream
  aggregation; changing only ``survival.temperature_k`` re-runs the shard jobs
  (their uncertainty depends on it) but screens no record again: every screen
  row comes from the per-record cache and the shard tables stay identical.
"""

from __future__ import annotations

import ast
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
import yaml

from lamellume import pipeline, sharding
from lamellume.ranking import TEMPERATURE_COLUMNS

REPO = Path(__file__).resolve().parents[2]
SNAKEMAKE = [sys.executable, "-m", "snakemake"]
TARGETS = ("results/manifest.json", "results/shortlist.csv", "results/tables/screen_long.parquet")
TABLES = ("entries", "valleys", "rejects", "screen_long", "screen_wide")
N_RECORDS = 40
N_SHARDS = 4
#: Jobs allowed downstream of the shards (aggregation, manifest, report).
DOWNSTREAM = {"check_screen", "rank_candidates", "join_tables", "write_manifest", "write_summary"}

pytestmark = pytest.mark.slow


def command(workdir: Path, *args: str, configfile: str = "config.yaml") -> list[str]:
    return SNAKEMAKE + ["-s", str(REPO / "Snakefile"), "--directory", str(workdir),
                        "--configfile", str(workdir / configfile), "--cores", "2", *args]


def snakemake(workdir: Path, *args: str, configfile: str = "config.yaml") -> subprocess.CompletedProcess:
    res = subprocess.run(command(workdir, *args, configfile=configfile), capture_output=True, text=True,
                         cwd=workdir, timeout=900, check=False)
    if res.returncode != 0:
        logs = [f"--- {p}\n{p.read_text(errors='replace')[-3000:]}"
                for p in sorted((workdir / "results" / "logs").rglob("*.log"))
                if "Traceback" in p.read_text(errors="replace")]
        raise AssertionError(f"snakemake {' '.join(args)} failed ({res.returncode}):\n"
                             f"{res.stdout[-3000:]}\n{res.stderr[-5000:]}\n" + "\n".join(logs))
    return res


def write_config(workdir: Path, campaign: Path, name: str = "config.yaml", **changes) -> dict:
    """Config of a run in ``workdir``; the campaign is copied to ``workdir/campaign`` (once) and
    named relative to the working directory, so every run has the same config and config hash."""
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    if not (workdir / "campaign").exists():
        shutil.copytree(campaign, workdir / "campaign")
    config["campaign"] = "campaign"
    config["sharding"]["shards"] = N_SHARDS
    config["uncertainty"]["samples"] = 50
    for section, values in changes.items():
        config[section].update(values)
    workdir.mkdir(parents=True, exist_ok=True)
    (workdir / name).write_text(yaml.safe_dump(config))
    return config


def read_tables(workdir: Path) -> dict[str, pd.DataFrame]:
    return {name: pd.read_parquet(workdir / "results" / "tables" / f"{name}.parquet") for name in TABLES}


def assert_tables_equal(got: dict[str, pd.DataFrame], want: dict[str, pd.DataFrame]) -> None:
    for name in TABLES:
        pd.testing.assert_frame_equal(got[name], want[name], check_exact=True, obj=name)


def parquet_damage(results: Path) -> list[str]:
    """Unreadable .parquet files under results/ (a kill must never leave a partial table)."""
    bad = []
    for path in sorted(results.rglob("*.parquet")):
        try:
            pq.read_table(path)
        except Exception as exc:  # noqa: BLE001 - any failure to read is damage
            bad.append(f"{path.relative_to(results)}: {exc}")
    return bad


def temp_leftovers(results: Path) -> list[str]:
    return sorted(str(p.relative_to(results)) for p in results.rglob("*.part"))


def planned_jobs(output: str) -> set[tuple[str, str]]:
    """(rule, shard or '') of every job a ``snakemake -n`` run lists."""
    jobs, rule = set(), None
    for line in output.splitlines():
        m = re.match(r"^\s*(?:local)?rule (\w+):\s*$", line)
        if m:
            if rule is not None:
                jobs.add((rule, ""))
            rule = m.group(1)
            continue
        m = re.match(r"^\s*wildcards: .*\bshard=(\d+)", line)
        if m and rule is not None:
            jobs.add((rule, m.group(1)))
            rule = None
    if rule is not None:
        jobs.add((rule, ""))
    # a rule seen once with and once without a shard is the same job
    return {j for j in jobs if j[1] or not any(k[0] == j[0] and k[1] for k in jobs)}


@pytest.fixture(scope="module")
def campaign(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("campaign") / "c40"
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(out),
                    "--count", str(N_RECORDS), "--no-broken", "--cif-fraction", "0.1", "--seed", "11"],
                   check=True, capture_output=True)
    return out


@pytest.fixture(scope="module")
def reference(tmp_path_factory, campaign) -> tuple[Path, dict[str, pd.DataFrame]]:
    """An uninterrupted run; its tables are read at once (later tests must not change them)."""
    work = tmp_path_factory.mktemp("reference")
    write_config(work, campaign)
    snakemake(work, *TARGETS)
    return work, read_tables(work)


def _wait_for(condition, timeout: float) -> bool:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if condition():
            return True
        time.sleep(0.05)
    return False


def _exists(*patterns: str):
    return lambda work: any(any(work.glob(p)) for p in patterns)


#: Moments to kill the run at, each observed on disk (not timed): while Snakemake plans, while
#: the Keldysh table is built, while shards write, while a shard updates its cache, while the
#: screen is checked and ranked, once the final tables exist, while the page is written.
KILL_POINTS = {
    "planning": _exists("results/cache/inputs/*.json"),
    "keldysh-table": _exists("results/logs/keldysh_table/*.log"),
    "first-shard-output": _exists("results/shards/*/*.parquet"),
    "shard-cache-update": _exists("results/cache/shards/*/*.parquet"),
    "check-and-rank": _exists("results/logs/check_screen/*.log", "results/logs/rank_candidates/*.log"),
    "final-tables": _exists("results/tables/screen_wide.parquet"),
    "summary-page": _exists("results/logs/write_summary/*.log"),
}
#: Kill points reached before the Keldysh table exists; the others start from the reference's
#: table (the run then begins with the shards, and the kill lands within a few seconds).
FROM_SCRATCH = {"planning", "keldysh-table"}
LOCK_MESSAGE = "Directory cannot be locked"


def plain_run(work: Path) -> subprocess.CompletedProcess:
    """The README's command (rule all, no extra flags) in ``work``."""
    return subprocess.run(command(work), capture_output=True, text=True, cwd=work, timeout=900, check=False)


@pytest.mark.parametrize("point", list(KILL_POINTS))
def test_sigkill_then_plain_rerun_gives_the_same_tables(point, tmp_path, campaign, reference):
    work = tmp_path / "work"
    write_config(work, campaign)
    if point not in FROM_SCRATCH:
        table = work / "results" / "cache" / "keldysh_table.npz"
        table.parent.mkdir(parents=True)
        shutil.copy(reference[0] / "results" / "cache" / "keldysh_table.npz", table)
    proc = subprocess.Popen(command(work), cwd=work, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True)
    try:
        hit = _wait_for(lambda: KILL_POINTS[point](work) or proc.poll() is not None, 300.0)
        assert proc.poll() is None, f"the run ended (exit {proc.returncode}) before the kill point {point}"
        assert hit, f"kill point {point} never reached"
        os.killpg(proc.pid, signal.SIGKILL)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=60)
    results = work / "results"
    assert not parquet_damage(results), parquet_damage(results)

    res = plain_run(work)
    if res.returncode != 0:
        # Snakemake keeps its lock after a kill; the README's troubleshooting section says
        # to run --unlock once (when no other run works in the folder), then the plain command.
        assert LOCK_MESSAGE in res.stdout + res.stderr, res.stdout[-2000:] + res.stderr[-3000:]
        assert "--unlock" in (REPO / "README.md").read_text()
        snakemake(work, "--unlock")
        res = plain_run(work)
    assert res.returncode == 0, res.stdout[-2000:] + res.stderr[-3000:]
    assert_tables_equal(read_tables(work), reference[1])
    assert not parquet_damage(results), parquet_damage(results)
    assert not temp_leftovers(results), f"temporary files left behind: {temp_leftovers(results)}"


@pytest.fixture(scope="module")
def second_run(tmp_path_factory, campaign) -> tuple[Path, Path, dict[str, pd.DataFrame]]:
    """A second run from scratch: own working directory, own copy of the campaign."""
    work = tmp_path_factory.mktemp("second") / "work"
    write_config(work, campaign)
    snakemake(work, *TARGETS)
    return work, work / "campaign", read_tables(work)


def test_two_runs_from_scratch_give_identical_tables(reference, second_run):
    assert_tables_equal(second_run[2], reference[1])


def test_noop_rerun_schedules_nothing(second_run):
    work, _, _ = second_run
    res = snakemake(work, "-n", *TARGETS)
    assert planned_jobs(res.stdout + res.stderr) == set(), res.stdout + res.stderr


def test_revising_one_record_reruns_only_its_shard(second_run):
    work, campaign, before = second_run
    path = sorted((campaign / "entries").glob("*.json"))[N_RECORDS // 2]
    record = json.loads(path.read_text())
    record["valleys"][0]["mass"]["isotropic_me"] = round(record["valleys"][0]["mass"]["isotropic_me"] * 1.25, 4)
    path.write_text(json.dumps(record, indent=1) + "\n")
    shard = sharding.shard_name(sharding.shard_of(path.stem, N_SHARDS))

    res = snakemake(work, "-n", *TARGETS)
    jobs = planned_jobs(res.stdout + res.stderr)
    assert {j for j in jobs if j[0] == "screen_shard"} == {("screen_shard", shard)}, jobs
    assert ("rank_candidates", "") in jobs
    assert {rule for rule, _ in jobs} <= {"screen_shard"} | DOWNSTREAM, jobs
    assert all(s in ("", shard) for _, s in jobs), jobs

    # and the real re-run changes that record only
    snakemake(work, *TARGETS)
    after = read_tables(work)
    for name in ("entries", "screen_wide", "screen_long", "valleys"):
        old = before[name][before[name]["entry_id"] != path.stem].reset_index(drop=True)
        new = after[name][after[name]["entry_id"] != path.stem].reset_index(drop=True)
        pd.testing.assert_frame_equal(new, old, check_exact=True, obj=name)
    changed = after["valleys"][after["valleys"]["entry_id"] == path.stem]
    assert not changed.equals(before["valleys"][before["valleys"]["entry_id"] == path.stem])


def test_revision_is_found_under_any_rerun_trigger(second_run):
    """Records reach the shard jobs through a listing file named by its digest, so even
    ``--rerun-triggers mtime`` alone re-runs the shard of a rewritten record."""
    work, campaign, _ = second_run
    snakemake(work, *TARGETS)  # up to date first
    path = sorted((campaign / "entries").glob("*.json"))[3]
    path.write_text(path.read_text().replace("\n", "\n ", 1))  # same record, other bytes
    shard = sharding.shard_name(sharding.shard_of(path.stem, N_SHARDS))
    for triggers in (["mtime"], ["input"]):
        res = snakemake(work, "-n", *TARGETS, "--rerun-triggers", *triggers)
        jobs = planned_jobs(res.stdout + res.stderr)
        assert {j for j in jobs if j[0] == "screen_shard"} == {("screen_shard", shard)}, (triggers, jobs)


def last_counts(log: Path, marker: str) -> dict[str, int]:
    """The counts dict of the last ``<marker>: {...}`` line of a job log."""
    lines = [line for line in log.read_text().splitlines() if f"{marker}: " in line]
    assert lines, f"no '{marker}' line in {log}"
    return ast.literal_eval(lines[-1].split(f"{marker}: ", 1)[1])


def test_temperature_change_repropagates_without_rescreening(second_run):
    work, campaign, _ = second_run
    # One record gives a thermal gap form (Varshni): its gaps follow the operating temperature, so it
    # alone is screened again; every other record's screened rows do not depend on the temperature.
    warm_path = sorted((campaign / "entries").glob("*.json"))[1]
    record = json.loads(warm_path.read_text())
    record["gap_temperature"] = {"form": "varshni", "alpha_ev_per_k": 4.5e-4, "beta_k": 220.0,
                                 "calculation_temperature_k": 0.0}
    warm_path.write_text(json.dumps(record))
    warm = warm_path.stem
    snakemake(work, *TARGETS)  # up to date first, whatever ran before
    shards = sorted((work / "results" / "shards").iterdir())
    screened = {(d.name, t): pd.read_parquet(d / f"{t}.parquet")
                for d in shards for t in ("entries", "valleys", "exciton_long", "exciton_wide")}
    config = write_config(work, campaign, name="config-77k.yaml", survival={"temperature_k": 77.0})
    assert config["survival"]["temperature_k"] == 77.0
    res = snakemake(work, "-n", *TARGETS, configfile="config-77k.yaml")
    jobs = planned_jobs(res.stdout + res.stderr)
    # The shard jobs re-run (their uncertainty depends on temperature), the table does not.
    assert ("keldysh_table", "") not in jobs, jobs
    assert ("rank_candidates", "") in jobs, res.stdout + res.stderr
    assert {rule for rule, _ in jobs} <= {"screen_shard"} | DOWNSTREAM, jobs

    snakemake(work, *TARGETS, configfile="config-77k.yaml")
    recomputed = 0
    for d in shards:
        log = work / "results" / "logs" / "screen_shard" / f"{d.name}.log"
        screen = last_counts(log, "shard done")
        has_warm = (screened[(d.name, "entries")]["entry_id"] == warm).any()
        recomputed += screen["computed"]
        assert screen["computed"] == int(has_warm) and screen["reused"] > 0, screen
        propagated = last_counts(log, "propagation done")
        assert propagated["reused"] == 0 and propagated["computed"] == screen["screened"], propagated
        for t in ("entries", "valleys", "exciton_long", "exciton_wide"):
            # the long table's survival columns (computed in the shard job) follow the temperature;
            # every screened column of the records without a thermal form stays exactly as it was
            now, before = pd.read_parquet(d / f"{t}.parquet"), screened[(d.name, t)]
            hot = [c for c in TEMPERATURE_COLUMNS if c in before.columns]
            pd.testing.assert_frame_equal(
                now[now["entry_id"] != warm].drop(columns=hot).reset_index(drop=True),
                before[before["entry_id"] != warm].drop(columns=hot).reset_index(drop=True),
                check_exact=True, obj=f"{d.name}/{t}")
            if hot:
                assert (now["temperature_k"] == 77.0).all()
            if t == "exciton_long" and has_warm:
                # Varshni (Physica 34, 149 (1967)), by hand: the gap at 77 K minus the gap at 300 K
                change = 4.5e-4 * (300.0**2 / 520.0 - 77.0**2 / 297.0)
                pick = lambda f: f[f["entry_id"] == warm]["optical_gap_ev"].to_numpy(dtype=float)  # noqa: E731
                np.testing.assert_allclose(pick(now) - pick(before), change, rtol=1e-9)
    assert recomputed == 1
    long = pd.read_parquet(work / "results" / "tables" / "screen_long.parquet", columns=["temperature_k"])
    assert (long["temperature_k"] == 77.0).all()


def test_kill_during_cache_update_never_drops_rows(tmp_path, campaign, reference):
    """A shard job killed while it copies its five tables to the per-record cache leaves
    a cache of mixed generations; the re-run of the job must still screen every record.

    Reproduced in process: screen ten records, revise one, screen again, then put the
    previous generation of the cached long and wide tables back (the state a SIGKILL
    between the copies leaves, since entries is copied first) and re-run the shard.
    """
    config = yaml.safe_load((reference[0] / "config.yaml").read_text())
    settings = {k: config[k] for k in ("layers", "structure", "environments", "monolayer", "excitons", "emission_bands")}
    table = str(reference[0] / "results" / "cache" / "keldysh_table.npz")
    camp = tmp_path / "campaign"
    shutil.copytree(campaign, camp)
    entries = sorted(str(p) for p in (camp / "entries").glob("*.json"))[:10]
    cache = tmp_path / "cache"

    def run(tag: str) -> dict[str, pd.DataFrame]:
        outputs = {n: str(tmp_path / tag / f"{n}.parquet") for n in pipeline.SHARD_TABLES}
        pipeline.run_shard(entries, str(camp), settings, table, str(cache), outputs)
        return {n: pd.read_parquet(p) for n, p in outputs.items()}

    run("first")
    previous = {n: (cache / f"{n}.parquet").read_bytes() for n in pipeline.SHARD_TABLES}
    revised = Path(entries[3])
    record = json.loads(revised.read_text())
    record["valleys"][0]["mass"]["isotropic_me"] = round(record["valleys"][0]["mass"]["isotropic_me"] * 1.25, 4)
    revised.write_text(json.dumps(record, indent=1) + "\n")
    second = run("second")
    for name in ("long", "wide"):
        (cache / f"{name}.parquet").write_bytes(previous[name])
    third = run("third")
    for name in ("entries", "wide", "long"):
        assert revised.stem in set(third[name]["entry_id"]), f"{revised.stem} lost from {name}"
        pd.testing.assert_frame_equal(third[name], second[name], obj=name)
