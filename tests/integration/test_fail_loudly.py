"""Fail loudly: a run that cannot screen anything stops with a reason and leaves results/ alone.

Through Snakemake's command line, in a working folder that holds a finished run:

* a missing campaign folder, one without ``entries/`` and one without record files
  stop at start-up (non-zero exit, one line naming the folder), before any job;
* a config whose keys contradict each other stops at start-up with the key paths;
* a campaign whose every record is rejected stops after the shard jobs, before any
  job that writes the final tables, the shortlist, the page or the history: those
  stay byte for byte as the previous run left them;
* a successful run ends with the console summary (records read, screened,
  rejected with the rejects CSV and the first reasons, candidates, the page), a run
  with nothing to do too (after Snakemake's "Nothing to be done"), a dry run never.
"""

from __future__ import annotations

import hashlib
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.slow

#: What a failed run must leave exactly as it was.
KEPT = ("results/tables/screen_wide.parquet", "results/tables/screen_long.parquet", "results/tables/rejects.csv",
        "results/tables/changes.parquet", "results/shortlist.csv", "results/summary.html", "results/manifest.json",
        "results/history/campaign/last_ranked.parquet")


def snakemake(work: Path, *args: str) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "snakemake", "-s", str(REPO / "Snakefile"), "--directory", str(work),
           "--configfile", str(work / "config.yaml"), "--cores", "2", *args]
    return subprocess.run(cmd, capture_output=True, text=True, cwd=work, timeout=900, check=False)


def digests(work: Path) -> dict[str, str]:
    return {rel: hashlib.sha256((work / rel).read_bytes()).hexdigest() for rel in KEPT}


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> tuple[Path, subprocess.CompletedProcess]:
    work = tmp_path_factory.mktemp("loud")
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(work / "campaign"),
                    "--count", "4", "--cif-fraction", "0", "--seed", "9"], check=True, capture_output=True)
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = "campaign"
    config["sharding"]["shards"] = 1
    config["uncertainty"]["samples"] = 8
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    res = snakemake(work)
    assert res.returncode == 0, res.stdout[-2000:] + res.stderr[-3000:]
    return work, res


def test_a_successful_run_ends_with_the_console_summary(finished):
    work, res = finished
    text = res.stdout + res.stderr
    # 4 valid records plus the generator's 7 deliberately broken ones
    assert "lamellume: 11 record files read, 4 screened, 7 rejected" in text, text[-3000:]
    assert re.search(r"rejected, \d+ candidates?\.", text), text[-3000:]
    assert "rejects: results/tables/rejects.csv; first reasons:" in text
    assert "    broken-" in text  # a reason names its file
    assert "summary page: results/summary.html" in text
    assert f"results/ is {work.resolve() / 'results'}" in text  # where they are, whatever --directory said


def test_a_run_with_nothing_to_do_ends_with_the_summary_too(finished):
    # Snakemake skips its onsuccess hook when everything is up to date; the summary still ends the run
    work, first = finished
    res = snakemake(work)
    text = res.stdout + res.stderr
    assert res.returncode == 0 and "Nothing to be done" in text, text[-3000:]
    # the run ends with the same summary lines as the run that made the results (Snakemake's own
    # messages go to stderr, the summary to stdout)
    summary = first.stdout[first.stdout.index("lamellume: 11 record files read"):]
    assert res.stdout.rstrip().endswith(summary.rstrip()), (summary, res.stdout[-3000:])
    dry = snakemake(work, "-n")
    assert dry.returncode == 0 and "record files read" not in dry.stdout + dry.stderr  # a dry run: no summary


def test_validating_another_campaign_does_not_repeat_the_last_screens_counts(finished):
    # results/ holds a complete screen; checking another campaign must not end with that screen's counts
    work, _ = finished
    other = work / "other" / "entries"
    other.mkdir(parents=True, exist_ok=True)
    shutil.copy(next((work / "campaign" / "entries").glob("lumen-*.json")), other)
    before = digests(work)
    res = snakemake(work, "validate_campaign", "--config", "campaign=other")
    text = res.stdout + res.stderr
    assert res.returncode == 0, text[-3000:]
    assert "checked 1 record file of" in text and "no screen was asked for" in text, text[-3000:]
    assert "record files read" not in text and "summary page:" not in text
    assert digests(work) == before


@pytest.mark.parametrize("setup, reason", [
    (lambda work: None, "does not exist"),
    (lambda work: (work / "elsewhere").mkdir(), "has no entries/ folder"),
    (lambda work: (work / "elsewhere" / "entries").mkdir(parents=True), "holds no record files"),
])
def test_a_missing_or_empty_campaign_stops_before_any_job(finished, setup, reason):
    work, _ = finished
    shutil.rmtree(work / "elsewhere", ignore_errors=True)
    setup(work)
    before = digests(work)
    res = snakemake(work, "--config", "campaign=elsewhere")
    assert res.returncode != 0
    lines = [line for line in (res.stdout + res.stderr).splitlines() if line.startswith("lamellume:")]
    assert len(lines) == 1 and reason in lines[0] and "'elsewhere'" in lines[0], res.stdout + res.stderr
    assert "Execute" not in res.stdout + res.stderr  # no job ran
    assert digests(work) == before


def test_contradicting_config_stops_before_any_job_with_key_paths(finished):
    work, _ = finished
    config = yaml.safe_load((work / "config.yaml").read_text())
    config["ranking"]["environment"] = "vacuum"
    config["ranking"]["target_layers"] = config["layers"]["max_layers"] + 1
    (work / "bad.yaml").write_text(yaml.safe_dump(config))
    before = digests(work)
    res = snakemake(work, "--configfile", str(work / "bad.yaml"))
    text = res.stdout + res.stderr
    assert res.returncode != 0
    assert "ranking.environment: 'vacuum' is not one of the environments" in text, text[-2000:]
    assert "ranking.target_layers:" in text
    assert "Execute" not in text
    assert digests(work) == before


def test_a_run_that_screens_nothing_fails_and_keeps_the_previous_results(finished):
    work, _ = finished
    bad = work / "all-bad" / "entries"
    bad.mkdir(parents=True)
    (bad / "one.json").write_text("{")
    (bad / "two.json").write_text("[]")
    before = digests(work)
    res = snakemake(work, "--config", "campaign=all-bad")
    text = res.stdout + res.stderr
    assert res.returncode != 0
    lines = [line for line in text.splitlines() if line.startswith("lamellume: nothing was screened")]
    assert len(lines) == 1, text[-3000:]
    assert "all 2 record files were rejected" in lines[0] and "one.json" in lines[0]
    assert digests(work) == before
    # and the next real run compares with the last good run, not with an empty one
    res = snakemake(work)
    assert res.returncode == 0
    last = "results/history/campaign/last_ranked.parquet"
    assert digests(work)[last] == before[last]
