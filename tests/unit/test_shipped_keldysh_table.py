"""The shipped Rytova-Keldysh table (workflow/data/) is what a fresh build writes, and is taken
only when its build key matches the code and libraries at hand.

Not a physics check (tests/unit/test_keldysh.py checks the table against independent solvers):
a consistency check of a cached artefact, so a stale table fails CI instead of reaching a screen.
Refresh the pair with the command in DEVELOPERS.md ("Tests and benchmarks").
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from lamellume import io, provenance

ROOT = Path(__file__).resolve().parents[2]
DATA = ROOT / "workflow" / "data"
ADAPTER = ROOT / "workflow" / "scripts" / "keldysh_table.py"
REFRESH = "see DEVELOPERS.md, 'Tests and benchmarks': the shipped Keldysh table is stale, refresh it"


def _altered(arrays: dict) -> dict:
    """The shipped arrays with the 1s binding ratios doubled: a table no build writes."""
    return {**arrays, "f_1s": 2.0 * arrays["f_1s"]}


def _run_adapter(tmp: Path, arrays: dict, build: dict) -> tuple[dict, str]:
    """Run the rule's adapter with ``arrays``/``build`` as the shipped pair; the table it writes and its log."""
    io.save_arrays(arrays, tmp / "shipped.npz")
    io.write_json(build, tmp / "shipped.json")
    out, log = tmp / "table.npz", tmp / "job.log"
    subprocess.run([sys.executable, str(ADAPTER), "--log", str(log), "--threads", "2",
                    "--input", "shipped", str(tmp / "shipped.npz"), "--input", "shipped_build", str(tmp / "shipped.json"),
                    "--output", "table", str(out)], check=True, cwd=tmp)
    return io.load_arrays(out), log.read_text()


def _same_bytes(a: dict, b: dict) -> list[str]:
    """Names of the arrays that differ in name set, dtype, shape or any byte."""
    names = sorted(set(a) | set(b))
    return [k for k in names if k not in a or k not in b or a[k].dtype != b[k].dtype or a[k].shape != b[k].shape
            or a[k].tobytes() != b[k].tobytes()]


@pytest.fixture(scope="module")
def shipped() -> dict:
    return io.load_arrays(DATA / "keldysh_table.npz")


@pytest.fixture(scope="module")
def stale_run(tmp_path_factory, shipped):
    """The adapter given an altered table under a key no code has: it must build afresh."""
    tmp = tmp_path_factory.mktemp("stale")
    build = {**provenance.keldysh_table_build(), "key": "0" * 64}
    return _run_adapter(tmp, _altered(shipped), build)


def test_shipped_build_key_is_the_current_one():
    assert io.read_json(DATA / "keldysh_table.json") == provenance.keldysh_table_build(), REFRESH


def test_fresh_build_equals_the_shipped_table_array_for_array(stale_run, shipped):
    built, _ = stale_run
    assert _same_bytes(built, shipped) == [], REFRESH


def test_a_changed_key_builds_instead_of_taking_the_shipped_table(stale_run, shipped):
    built, log = stale_run
    assert not np.array_equal(built["f_1s"], _altered(shipped)["f_1s"])
    assert "not taken" in log


def test_the_current_key_takes_the_shipped_table(tmp_path, shipped):
    # the altered table under the current key: taken as it is (so no build ran)
    taken, log = _run_adapter(tmp_path, _altered(shipped), provenance.keldysh_table_build())
    assert _same_bytes(taken, _altered(shipped)) == []
    assert "shipped Keldysh table taken" in log


def test_the_key_follows_the_modules_the_build_imports(tmp_path):
    library = tmp_path / "lamellume"
    shutil.copytree(io.LIBRARY_DIR, library, ignore=shutil.ignore_patterns("__pycache__"))
    before = provenance.keldysh_table_build(library)["key"]
    assert before == provenance.keldysh_table_build()["key"]
    with open(library / "report.py", "a") as fh:  # not imported by keldysh: same key
        fh.write("\n# edit\n")
    provenance._sources.cache_clear()
    assert provenance.keldysh_table_build(library)["key"] == before
    with open(library / "units.py", "a") as fh:  # imported by keldysh: a new key
        fh.write("\n# edit\n")
    provenance._sources.cache_clear()
    assert provenance.keldysh_table_build(library)["key"] != before
    provenance._sources.cache_clear()
