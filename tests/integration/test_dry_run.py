"""Dry runs (``snakemake -n``) are read-only for everything a real run reads.

The job settings and campaign listings are content-addressed files under
results/cache/inputs, written while Snakemake plans, also in a dry run. A dry
run may add such a file (a name never used for other content) but never removes
or rewrites anything; old snapshots are removed only by a real run, from
Snakemake's ``onstart`` hook, which runs holding the lock. Checked through the
command line: a dry run with a changed config leaves every existing file under
results/ as it was, and a dry run in the middle of a real run does not make
that run fail.
"""

from __future__ import annotations

import hashlib
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]

pytestmark = pytest.mark.slow


def command(work: Path, configfile: str, *args: str) -> list[str]:
    return [sys.executable, "-m", "snakemake", "-s", str(REPO / "Snakefile"), "--directory", str(work),
            "--configfile", str(work / configfile), "--cores", "2", *args]


def snakemake(work: Path, configfile: str = "config.yaml", *args: str) -> subprocess.CompletedProcess:
    return subprocess.run(command(work, configfile, *args), capture_output=True, text=True, cwd=work, timeout=900,
                          check=False)


def state(results: Path) -> dict[str, tuple[int, str]]:
    return {str(p.relative_to(results)): (p.stat().st_mtime_ns, hashlib.sha256(p.read_bytes()).hexdigest())
            for p in sorted(results.rglob("*")) if p.is_file()}


def write_config(work: Path, name: str, temperature_k: float) -> None:
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = "campaign"
    config["sharding"]["shards"] = 2
    config["uncertainty"]["samples"] = 8
    config["survival"]["temperature_k"] = temperature_k
    (work / name).write_text(yaml.safe_dump(config))


@pytest.fixture(scope="module")
def finished(tmp_path_factory) -> Path:
    work = tmp_path_factory.mktemp("dry")
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(work / "campaign"),
                    "--count", "6", "--no-broken", "--cif-fraction", "0", "--seed", "2"],
                   check=True, capture_output=True)
    for name, temperature in (("config.yaml", 300.0), ("warm.yaml", 350.0), ("cold.yaml", 77.0)):
        write_config(work, name, temperature)
    res = snakemake(work)
    assert res.returncode == 0, res.stderr[-3000:]
    return work


def test_a_dry_run_changes_no_file_a_real_run_reads(finished):
    results = finished / "results"
    before = state(results)
    res = snakemake(finished, "warm.yaml", "-n")
    assert res.returncode == 0 and "screen_shard" in res.stdout + res.stderr
    after = state(results)
    assert {k: v for k, v in after.items() if k in before} == before  # nothing removed or rewritten
    added = set(after) - set(before)
    assert added and all(k.startswith("cache/inputs/") for k in added), added
    # and the real run that follows finds its outputs up to date
    res = snakemake(finished, "config.yaml", "-n")
    assert "Nothing to be done" in res.stdout + res.stderr, res.stdout[-2000:]


def dry_run_beside_a_real_run(work: Path, configfile: str, attempts: int = 3) -> subprocess.CompletedProcess:
    """A dry run while another run holds the lock, retried on Snakemake's own check-then-act race.

    Snakemake 9 (``IOFile.protected``: exists, then ``os.access(W_OK)``) reports a
    ``ProtectedOutputException`` when the running run removes an output between the two
    calls (it removes a job's outputs before running the job). That is Snakemake's planning
    race, not ours, and the dry run writes nothing it could leave half-done, so it is
    retried; any other failure, or the race three times running, fails the test.
    README.md, "Troubleshooting", says the same.
    """
    for _ in range(attempts):
        dry = snakemake(work, configfile, "-n")
        if dry.returncode == 0 or "ProtectedOutputException" not in dry.stdout + dry.stderr:
            return dry
        time.sleep(0.2)
    return dry


def test_a_dry_run_during_a_real_run_does_not_break_it(finished):
    logs = finished / "results" / "logs" / "screen_shard"
    inputs = finished / "results" / "cache" / "inputs"
    old = {p.name for p in inputs.glob("rank-*.json")}
    started = {p: p.stat().st_mtime_ns for p in logs.glob("*.log")}
    run = subprocess.Popen(command(finished, "warm.yaml"), cwd=finished, stdout=subprocess.PIPE,
                           stderr=subprocess.STDOUT, text=True)
    try:
        end = time.monotonic() + 120
        while time.monotonic() < end and run.poll() is None:  # wait until a shard job has started
            if any(started.get(p) != p.stat().st_mtime_ns for p in logs.glob("*.log")):
                break
            time.sleep(0.05)
        assert run.poll() is None, "the real run ended before the dry run could start"
        dry = dry_run_beside_a_real_run(finished, "cold.yaml")
        assert dry.returncode == 0, (dry.stdout[-3000:], dry.stderr[-2000:])
        out, _ = run.communicate(timeout=900)
    finally:
        if run.poll() is None:
            run.kill()
    assert run.returncode == 0, out[-4000:]
    res = snakemake(finished, "warm.yaml", "-n")
    assert "Nothing to be done" in res.stdout + res.stderr
    # the real run, holding the lock, removed the snapshot it does not use (the earlier 300 K
    # run's) and kept its own (written by the first test's dry run); the cold dry run, which
    # came after the real run had started, added one
    now = {p.name for p in inputs.glob("rank-*.json")}
    assert len(old) == 2 and len(old - now) == 1 and len(now - old) == 1, (old, now)
