"""No module can change a result without changing the key that guards it.

Cache keys and rule code inputs are derived from the import graph
(:mod:`lamellume.provenance`). Two checks that do not trust that derivation:

* every job of a real workflow run is traced: a ``sitecustomize`` module on the
  jobs' ``PYTHONPATH`` writes down, as the job leaves, every ``lamellume`` module
  and adapter helper the process actually loaded. Each of those files must be
  among the code inputs Snakemake holds for the job's rule;
* for every library module a job with a per-record cache loaded (the shard, the
  attribution and the import jobs), a copy of the library where that module
  differs by one comment gives a different code version (the ``code_version``
  stamp that keys those caches), and a module outside the stage's import graph
  leaves it alone.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import yaml

from lamellume import provenance

REPO = Path(__file__).resolve().parents[2]
ADAPTERS = REPO / "workflow" / "scripts"
LIBRARY = REPO / "workflow" / "lamellume"

pytestmark = pytest.mark.slow

TRACER = textwrap.dedent('''
    """Test helper: record which workflow modules a job process loaded (see test_code_keys.py)."""
    import atexit, json, os, sys

    _exit = os._exit

    def _dump():
        folder = os.environ.get("LAMELLUME_TRACE_DIR")
        if not folder or not sys.argv or not sys.argv[0].endswith(".py"):
            return
        files = sorted({getattr(m, "__file__", None) or "" for name, m in list(sys.modules.items())
                        if name == "lamellume" or name.startswith("lamellume.") or name == "adapter_args"} - {""})
        path = os.path.join(folder, f"{os.getpid()}.json")
        with open(path + ".part", "w") as fh:  # written whole, then renamed: never read half-written
            json.dump({"script": os.path.abspath(sys.argv[0]), "files": files}, fh)
        os.replace(path + ".part", path)

    def _traced_exit(code):
        _dump()
        _exit(code)

    os._exit = _traced_exit
    atexit.register(_dump)
''')


@pytest.fixture(scope="module")
def traces(tmp_path_factory) -> list[dict]:
    """One workflow run on a small campaign with CIFs; the modules every job loaded."""
    work = tmp_path_factory.mktemp("traced")
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(work / "campaign"),
                    "--count", "5", "--cif-fraction", "0.6", "--seed", "4"], check=True, capture_output=True)
    # the demo's calculations too, so that the import stage runs as well
    shutil.copytree(REPO / "inputs" / "demo" / "calculations", work / "campaign" / "calculations")
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = "campaign"
    config["sharding"]["shards"] = 1
    config["uncertainty"]["samples"] = 8
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    site = work / "site"
    site.mkdir()
    (site / "sitecustomize.py").write_text(TRACER)
    trace_dir = work / "trace"
    trace_dir.mkdir()
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(site), os.environ.get("PYTHONPATH", "")]),
           "LAMELLUME_TRACE_DIR": str(trace_dir)}
    # the screen (rule all), then the validate-only target, which rule all does not ask for
    for targets in ((), ("validate_campaign",)):
        res = subprocess.run([sys.executable, "-m", "snakemake", "-s", str(REPO / "Snakefile"), "--directory",
                              str(work), "--configfile", str(work / "config.yaml"), "--cores", "2", *targets],
                             capture_output=True, text=True, cwd=work, env=env, timeout=900, check=False)
        assert res.returncode == 0, res.stdout[-3000:] + res.stderr[-3000:]
    found = [json.loads(p.read_text()) for p in sorted(trace_dir.glob("*.json"))]
    return [t for t in found if Path(t["script"]).parent == ADAPTERS]


def test_every_job_was_traced(traces):
    # every adapter of the workflow ran (and was traced) in the run
    adapters = {p.stem for p in ADAPTERS.glob("*.py")} - {"adapter_args"}
    assert {Path(t["script"]).stem for t in traces} == adapters


def test_every_module_a_job_loads_is_a_code_input_of_its_rule(traces):
    for trace in traces:
        declared = {str(Path(p).resolve()) for p in provenance.adapter_files(trace["script"])}
        loaded = {str(Path(p).resolve()) for p in trace["files"]}
        assert loaded, trace
        missing = loaded - declared
        assert not missing, f"{Path(trace['script']).name} loaded modules its rule does not declare: {missing}"


def test_structure_analysis_was_exercised(traces):
    # the shard job must have analysed a CIF, or the trace misses the structure module
    shard = next(t for t in traces if Path(t["script"]).stem == "screen_shard")
    assert any(p.endswith("structure.py") for p in shard["files"])


#: Jobs with per-record caches and the library module whose import graph keys them: the shard
#: job's screen and propagation caches and the attribution job's cache (pipeline.stage_code_version),
#: the import job's per-compound cache (importer.run_import).
CACHED_JOBS = [("screen_shard", "pipeline"), ("attribute_shard", "pipeline"), ("import_calculations", "importer")]


@pytest.mark.parametrize("adapter, entry", CACHED_JOBS)
def test_any_change_to_a_module_a_cached_job_loads_changes_its_cache_key(traces, tmp_path, adapter, entry):
    job = next(t for t in traces if Path(t["script"]).stem == adapter)
    loaded = {Path(p).stem for p in job["files"] if Path(p).parent.resolve() == LIBRARY.resolve()}
    assert entry in loaded
    base = tmp_path / "base" / "lamellume"
    shutil.copytree(LIBRARY, base, ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copytree(REPO / "workflow" / "schemas", base.parent / "schemas")
    reference = provenance.code_version(entry, base)
    assert reference == provenance.code_version(entry, LIBRARY)
    unchanged = []
    for module in sorted(p.stem for p in LIBRARY.glob("*.py")):
        copy = tmp_path / module / "lamellume"
        shutil.copytree(base, copy)
        shutil.copytree(base.parent / "schemas", copy.parent / "schemas")
        path = copy / f"{module}.py"
        path.write_text(path.read_text() + "\n# one more comment\n")
        if provenance.code_version(entry, copy) == reference:
            unchanged.append(module)
    assert not loaded & set(unchanged), f"modules the {adapter} job loads but its key ignores: {loaded & set(unchanged)}"
    # The key is not the whole library: the page and the shard listing are outside the shard stage.
    assert {"report"} <= set(unchanged), unchanged


def test_a_schema_change_changes_every_key(tmp_path):
    library = tmp_path / "workflow" / "lamellume"
    shutil.copytree(LIBRARY, library, ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copytree(REPO / "workflow" / "schemas", library.parent / "schemas")
    before = provenance.code_version("pipeline", library)
    schema = library.parent / "schemas" / "entry.schema.json"
    schema.write_text(schema.read_text().replace("{", '{"$comment": "x", ', 1))
    provenance._sources.cache_clear()
    assert provenance.code_version("pipeline", library) != before


def test_no_hand_kept_module_lists_remain():
    """The old tuples of module names (SHARD_MODULES, PROPAGATION_MODULES) are gone for good."""
    import lamellume

    assert not [name for name in dir(lamellume) if name.endswith("_MODULES")]
    for path in list((REPO / "workflow" / "rules").glob("*.smk")) + [REPO / "workflow" / "lamellume" / "pipeline.py"]:
        assert "_MODULES" not in path.read_text(), path
