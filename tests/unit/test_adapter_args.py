"""The command line the rules hand to their adapters (workflow/scripts/adapter_args.py)."""

from __future__ import annotations

import shlex
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "workflow" / "scripts"))
import adapter_args  # noqa: E402


def test_named_lists_wildcards_and_log():
    # source: common practice (the shape `adapter()` in common.smk writes, after shell quoting)
    argv = shlex.split("--log 'logs/a b.log' --input table t.npz --input long 'x 1.parquet' y.parquet "
                       "--output wide w.parquet --wildcard shard 007")
    job = adapter_args.parse(argv)
    assert job.input == {"table": ["t.npz"], "long": ["x 1.parquet", "y.parquet"]}
    assert job.output == {"wide": ["w.parquet"]}
    assert job.wildcards == {"shard": "007"} and job.log == "logs/a b.log"
    assert job.one("input", "table") == "t.npz"
    with pytest.raises(SystemExit, match="expected one path"):
        job.one("input", "long")


def test_log_is_required():
    # source: common practice (every job writes a log Snakemake points to)
    with pytest.raises(SystemExit):
        adapter_args.parse(["--input", "table", "t.npz"])
