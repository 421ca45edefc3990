"""The workflow through Snakemake's command line: lint, an end-to-end run, a no-op re-run."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml

from lamellume import io

REPO = Path(__file__).resolve().parents[2]
SNAKEMAKE = [sys.executable, "-m", "snakemake"]


def snakemake(workdir: Path, *args: str, check: bool = True) -> subprocess.CompletedProcess:
    cmd = SNAKEMAKE + ["-s", str(REPO / "Snakefile"), "--directory", str(workdir),
                       "--configfile", str(workdir / "config.yaml"), "--cores", "2", *args]
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=workdir, timeout=900)
    if check and res.returncode != 0:
        raise AssertionError(f"snakemake failed ({res.returncode}):\n{res.stdout[-4000:]}\n{res.stderr[-4000:]}")
    return res


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    """A 12-record synthetic campaign plus the generator's broken records, screened once."""
    work = tmp_path_factory.mktemp("screen")
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(work / "campaign"),
                    "--count", "12", "--seed", "5"], check=True)
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = str(work / "campaign")
    config["sharding"]["shards"] = 2
    config["uncertainty"]["samples"] = 50
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    first = snakemake(work)
    return work, first


def test_lint_is_clean():
    res = subprocess.run(SNAKEMAKE + ["--lint"], capture_output=True, text=True, cwd=REPO, timeout=300)
    assert res.returncode == 0, res.stdout + res.stderr
    assert "Congratulations" in res.stdout + res.stderr


def test_outputs_exist_with_units(small_run):
    work, _ = small_run
    results = work / "results"
    for rel in ("tables/entries.parquet", "tables/rejects.parquet", "tables/screen_long.parquet",
                "tables/screen_wide.parquet", "shortlist.csv", "manifest.json"):
        assert (results / rel).is_file(), rel
    units = io.parquet_units(results / "tables" / "screen_long.parquet")
    assert units["binding_ev"] == "eV" and units["emission_nm"] == "nm"
    assert units["binding_over_kt"] == "1" and units["temperature_k"] == "K"


def test_screen_counts_and_rejects(small_run):
    work, _ = small_run
    wide = pd.read_parquet(work / "results" / "tables" / "screen_wide.parquet")
    rejects = pd.read_parquet(work / "results" / "tables" / "rejects.parquet")
    assert len(wide) == 12
    assert set(rejects["entry_id"]) == {s for s in rejects["entry_id"] if s.startswith("broken-")}
    assert rejects["entry_id"].nunique() == 7
    assert (rejects["field"].str.len() > 0).all() and (rejects["reason"].str.len() > 0).all()


def test_rows_are_traceable(small_run):
    work, _ = small_run
    long = pd.read_parquet(work / "results" / "tables" / "screen_long.parquet")
    manifest = json.loads((work / "results" / "manifest.json").read_text())
    for col in ("input_hash", "physics_hash", "code_version", "config_hash"):
        assert long[col].notna().all() and (long[col].str.len() > 0).all(), col
    assert (long["config_hash"] == manifest["config_hash"]).all()
    assert (long["code_version"] == manifest["screen_code_version"]).all()
    assert len(manifest["inputs"]["entries"]) == 19
    assert manifest["packages"]["snakemake"]


def test_second_run_does_nothing(small_run):
    work, _ = small_run
    res = snakemake(work, "-n")
    assert "Nothing to be done" in res.stdout + res.stderr


def test_ci_runs_the_readme_test_command():
    """CI must call the test command exactly as the README gives it."""
    readme = (REPO / "README.md").read_text()
    blocks = [b.split("```")[0].strip() for b in readme.split("```bash\n")[1:3]]
    test_command = blocks[1]
    assert "pytest" in test_command
    ci = (REPO / ".ci" / "run").read_text().splitlines()
    assert test_command in ci


def test_page_templates_are_code_inputs_of_the_summary(small_run):
    # Editing a template must re-run the page: the files report.py reads (its DATA_FILES) are
    # declared inputs of write_summary, as Snakemake's own dry run lists them.
    from lamellume import report

    work, _ = small_run
    res = snakemake(work, "-n", "--forcerun", "write_summary", "results/summary.html")
    block = res.stdout.split("rule write_summary:")[1]
    declared = block.split("input:")[1].split("\n")[0]
    library = REPO / "workflow" / "lamellume"
    for name in report.DATA_FILES:
        assert str(library / name) in declared, name


def test_shortlist_settings_sheet_matches_the_manifest(small_run):
    import csv

    work, _ = small_run
    manifest = json.loads((work / "results" / "manifest.json").read_text())
    with open(work / "results" / "shortlist_settings.csv", newline="") as fh:
        sheet = {row["Setting"]: row["Value"] for row in csv.DictReader(fh)}
    assert sheet["config hash"] == manifest["config_hash"]
    assert sheet["code version"] == manifest["code_version"]
    assert sheet["written"] == manifest["written_utc"]
    assert sheet["campaign"] == str(work / "campaign")
    assert sheet["temperature"] == "300" and sheet["surroundings"] == "encapsulated"


def test_change_report_compares_a_campaign_only_with_its_own_runs(small_run):
    """Switching to another campaign and back never mixes their results in the change report."""
    work, _ = small_run
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(work / "other"),
                    "--count", "5", "--seed", "9"], check=True)
    config = yaml.safe_load((work / "config.yaml").read_text())
    config["campaign"] = str(work / "other")
    (work / "other.yaml").write_text(yaml.safe_dump(config))
    changes = work / "results" / "tables" / "changes.parquet"

    snakemake(work, "--configfile", str(work / "other.yaml"))
    assert len(pd.read_parquet(changes)) == 0  # the other campaign's first run: nothing to compare with
    assert "First recorded run" in (work / "results" / "summary.html").read_text()

    snakemake(work)  # back to the first campaign, unchanged: compared with its own last run
    assert len(pd.read_parquet(changes)) == 0
    assert len(list((work / "results" / "history").iterdir())) == 2


def test_an_overlay_file_changes_one_nested_setting_for_one_run(small_run):
    """README / config/README.md: --configfile config.yaml my-overlay.yaml changes only the overlay's keys."""
    work, _ = small_run
    before = json.loads((work / "results" / "manifest.json").read_text())["config"]
    (work / "overlay.yaml").write_text("survival:\n  temperature_k: 77\n")
    snakemake(work, "--configfile", str(work / "config.yaml"), str(work / "overlay.yaml"))
    after = json.loads((work / "results" / "manifest.json").read_text())["config"]
    assert after["survival"]["temperature_k"] == 77
    after["survival"]["temperature_k"] = before["survival"]["temperature_k"]
    assert after == before  # every other setting, nested ones included, as in config.yaml
    long = pd.read_parquet(work / "results" / "tables" / "screen_long.parquet", columns=["temperature_k"])
    assert (long["temperature_k"] == 77.0).all()
    snakemake(work)  # back to config.yaml alone (the state the module's other tests expect)


def test_nested_config_on_the_command_line_gets_a_clear_message(small_run):
    work, _ = small_run
    res = snakemake(work, "-n", "--config", 'survival={"temperature_k": 10}', check=False)
    text = res.stdout + res.stderr
    assert res.returncode != 0
    assert "survival.temperature_k: the text '10' where a number is expected" in text
    assert "my-overlay.yaml" in text and "not of type" not in text


def test_validate_campaign_prints_the_rejects_without_screening(tmp_path):
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(tmp_path / "campaign"),
                    "--count", "3", "--seed", "5"], check=True)
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = str(tmp_path / "campaign")
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(config))
    res = snakemake(tmp_path, "validate_campaign")
    assert "checked 10 record files" in res.stdout and "7 would be rejected (nothing was screened)" in res.stdout
    assert "[record breaks the input contract (schema or physical checks)]" in res.stdout
    assert len(pd.read_csv(tmp_path / "results" / "validation" / "rejects.csv")["entry_id"].unique()) == 7
    assert not (tmp_path / "results" / "shards").exists()  # nothing screened
    assert not (tmp_path / "results" / "cache" / "keldysh_table.npz").exists()


def test_placeholder_partition_or_account_stops_before_any_submission(tmp_path):
    """The SLURM profile's EDIT_ME placeholders stop even a dry run, with the remedy (README, SLURM)."""
    profile = yaml.safe_load((REPO / "workflow" / "profiles" / "slurm" / "config.yaml").read_text())
    kept = {k: profile[k] for k in ("default-resources", "set-resources")}  # not the executor: no cluster here
    (tmp_path / "prof").mkdir()
    (tmp_path / "prof" / "config.yaml").write_text(yaml.safe_dump(kept))
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = str(REPO / "inputs" / "demo")
    (tmp_path / "config.yaml").write_text(yaml.safe_dump(config))
    res = snakemake(tmp_path, "-n", "--profile", str(tmp_path / "prof"), check=False)
    text = res.stdout + res.stderr
    assert res.returncode != 0
    assert "the cluster profile still holds placeholders" in text and "slurm_partition=EDIT_ME_partition" in text
    assert "Nothing was submitted" in text and "rule screen_shard" not in text
    kept["default-resources"].update(slurm_partition="short", slurm_account="mygroup")
    (tmp_path / "prof" / "config.yaml").write_text(yaml.safe_dump(kept))
    assert snakemake(tmp_path, "-n", "--profile", str(tmp_path / "prof"), check=False).returncode == 0
