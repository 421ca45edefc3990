"""Generative differential test: an incremental run always equals a clean run of the same state.

A campaign of a few synthetic records lives in one working folder that is never
cleaned. Hypothesis draws a sequence of operations a user or a developer might
apply between two runs: add, delete, rename, copy or case-variant copy a record,
edit one of its numbers, corrupt it and later fix it, touch it without a change,
edit, touch, delete or restore a CIF, change a config value, or change the code of
any library module (a comment that only changes the file's hash, or a 1 % change
of a module-level constant that changes results). After every operation the
workflow runs there through Snakemake's command line (the incremental run: per-record
caches, listing snapshots, rule code inputs and the history all in play) and again
in a fresh folder holding the same campaign, config and history (the clean run).
Both must agree on the exit status and, when they succeed, on every final table
(Arrow data, schema, field and table metadata), the CSV files, the change report
and the manifest (except its time stamp).

Both runs use the same copy of the workflow (``Snakefile``, ``workflow/``, ``config/``,
``envs/``) in a temporary folder, so a code operation never touches the checkout.
The clean run of a state already seen is taken from a memo keyed by the state's
content (campaign names and bytes, config, workflow sources, history), and the clean
run's Keldysh table is built once per digest of the sources its job imports (the import
graph, which tests/integration/test_code_keys.py checks against the modules it loads).

Steps: ``LAMELLUME_DIFF_STEPS``; by default 50 (each step runs the workflow twice, 4-30 s on
a 2-core machine: about 13 minutes in all); CI runs the same derandomised 50-step walk that
was verified before landing. A longer run, e.g. ``LAMELLUME_DIFF_STEPS=400``,
explores more. The sequence is the same on every run
(derandomised) unless ``LAMELLUME_DIFF_SEED`` is set to a number.
"""

from __future__ import annotations

import ast
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest
import yaml
from hypothesis import HealthCheck, Phase, assume, given, seed, settings
from hypothesis import strategies as st

from lamellume import provenance

REPO = Path(__file__).resolve().parents[2]
#: 50 steps by default, in CI too (derandomised: the same walk on every run).
STEPS = int(os.environ.get("LAMELLUME_DIFF_STEPS", "50"))
SEED = os.environ.get("LAMELLUME_DIFF_SEED")
POOL_SIZE = 12
START_RECORDS = 7
SHARDS = 1  # one shard job per run: every process costs a second on 2 cores
TABLES = ("entries", "valleys", "rejects", "screen_long", "screen_wide", "changes", "attribution", "refinement")
TEXT_OUTPUTS = ("shortlist.csv", "tables/rejects.csv", "refinement.csv")

#: Config values the operations switch between (section, key, choices).
CONFIG_CHOICES = [
    ("survival", "temperature_k", [300.0, 77.0, 150.0]),
    ("ranking", "target_layers", [1, 2]),
    ("ranking", "environment", ["encapsulated", "suspended"]),
    ("layers", "max_layers", [6, 4]),
    ("uncertainty", "samples", [16, 12]),
    ("uncertainty", "default_mass_rel", [0.15, 0.3]),
    ("structure", "non_layered", ["warn", "reject"]),
    ("monolayer", "few_layer_r0_scaling", [True, False]),
]

pytestmark = pytest.mark.slow


def _digest_tree(folder: Path) -> str:
    h = hashlib.sha256()
    for p in sorted(folder.rglob("*")):
        if p.is_file() and "__pycache__" not in p.parts:
            h.update(str(p.relative_to(folder)).encode() + b"\0" + p.read_bytes() + b"\0")
    return h.hexdigest()


def _constant_names(source: str) -> list[str]:
    """Module-level upper-case names bound to a float (annotated ``float`` or a float literal)."""
    names = []
    for node in ast.parse(source).body:
        if isinstance(node, ast.AnnAssign) and isinstance(node.target, ast.Name) and node.value is not None:
            is_float = (isinstance(node.annotation, ast.Name) and node.annotation.id == "float") or (
                isinstance(node.value, ast.Constant) and isinstance(node.value.value, float))
            name = node.target.id
        elif isinstance(node, ast.Assign) and len(node.targets) == 1 and isinstance(node.targets[0], ast.Name):
            is_float = isinstance(node.value, ast.Constant) and isinstance(node.value.value, float)
            name = node.targets[0].id
        else:
            continue
        if is_float and name.lstrip("_").isupper():
            names.append(name)
    return names


class Campaign:
    """The working state: campaign files, config and the workflow copy, with the operations."""

    def __init__(self, root: Path, pool: Path):
        self.root = root
        self.pool = pool
        self.checkout = root / "checkout"
        self.inc = root / "incremental"
        self.entries = self.inc / "campaign" / "entries"
        self.structures = self.inc / "campaign" / "structures"
        self.spare = root / "spare"  # originals of corrupted files and deleted CIFs
        self.spare.mkdir()
        self.checkout.mkdir()
        for part in ("Snakefile", "workflow", "config", "envs"):
            src = REPO / part
            (shutil.copytree if src.is_dir() else shutil.copy2)(src, self.checkout / part,
                                                                  **({"ignore": shutil.ignore_patterns("__pycache__")}
                                                                     if src.is_dir() else {}))
        self.entries.mkdir(parents=True)
        shutil.copytree(pool / "structures", self.structures)
        for path in sorted((pool / "entries").glob("*.json"))[:START_RECORDS]:
            shutil.copy2(path, self.entries / path.name)
        self.config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
        self.config["campaign"] = "campaign"
        self.config["sharding"]["shards"] = SHARDS
        self.config["refinement"]["samples"] = 16
        for section, key, choices in CONFIG_CHOICES:
            self.config[section][key] = choices[0]
        self.write_config(self.inc)
        self.code_edits = 0
        self.clean_memo: dict[str, dict] = {}
        self.tables_memo: dict[str, Path] = {}

    # -- state ---------------------------------------------------------------
    def write_config(self, work: Path) -> None:
        (work / "config.yaml").write_text(yaml.safe_dump(self.config, sort_keys=True))

    def names(self, folder: Path, suffix: str) -> list[str]:
        return sorted(p.name for p in folder.iterdir() if p.name.endswith(suffix))

    # -- operations (each returns a short description) -------------------------
    def apply(self, op: str, pick: int, value: int) -> str:
        records = self.names(self.entries, ".json")
        pool = self.names(self.pool / "entries", ".json")
        cifs = self.names(self.structures, ".cif")

        def choose(items: list[str]) -> str:
            return items[pick % len(items)]

        if op == "add":
            missing = [n for n in pool if n not in records]
            if not missing:
                return "add: pool exhausted"
            name = choose(missing)
            shutil.copy2(self.pool / "entries" / name, self.entries / name)
            return f"add {name}"
        if not records and op in ("delete", "rename", "copy", "case_copy", "edit", "corrupt", "touch"):
            return f"{op}: no record"
        if op == "delete":
            name = choose(records)
            (self.entries / name).unlink()
            return f"delete {name}"
        if op == "rename":
            name = choose(records)
            stem = name[:-5]
            # to another name, or back to the name its identifier asks for
            target = pool[value % len(pool)] if value % 3 == 0 else f"{stem}{'xyz'[value % 3]}.json"
            if target in records:
                return f"rename {name}: {target} exists"
            (self.entries / name).rename(self.entries / target)
            return f"rename {name} -> {target}"
        if op == "copy":
            name = choose(records)
            target = pool[value % len(pool)] if value % 2 else f"{name[:-5]}-copy.json"
            if target in records:
                return f"copy {name}: {target} exists"
            shutil.copy2(self.entries / name, self.entries / target)
            return f"copy {name} -> {target}"
        if op == "case_copy":
            name = choose(records)
            stem = name[:-5]
            target = (stem.upper() if value % 2 else stem[:1].upper() + stem[1:]) + ".json"
            if target in records or target == name:
                return f"case_copy {name}: {target} exists"
            shutil.copy2(self.entries / name, self.entries / target)
            return f"case_copy {name} -> {target}"
        if op == "edit":
            name = choose(records)
            path = self.entries / name
            try:
                record = json.loads(path.read_text())
                valley = record["valleys"][value % len(record["valleys"])]
                if value % 2:
                    key = sorted(valley["edge_ev"])[value % len(valley["edge_ev"])]
                    valley["edge_ev"][key] = round(float(valley["edge_ev"][key]) + 0.01 * (1 + value % 7), 4)
                    what = f"edge {key} of valley {valley['label']}"
                else:
                    valley["mass"]["isotropic_me"] = round(float(valley["mass"]["isotropic_me"]) * 1.2, 4)
                    what = f"mass of valley {valley['label']}"
            except (ValueError, KeyError, TypeError, IndexError, ZeroDivisionError):
                return f"edit {name}: not an editable record"
            path.write_text(json.dumps(record, indent=1) + "\n")
            return f"edit {name}: {what}"
        if op == "corrupt":
            name = choose(records)
            path = self.entries / name
            if not (self.spare / name).exists():
                shutil.copy2(path, self.spare / name)
            data = path.read_bytes()
            path.write_bytes(data[: max(1, len(data) // (2 + value % 3))])
            return f"corrupt {name}"
        if op == "fix":
            spares = self.names(self.spare, ".json")
            if not spares:
                return "fix: nothing corrupted"
            name = choose(spares)
            shutil.move(self.spare / name, self.entries / name)
            return f"fix {name}"
        if op == "touch":
            name = choose(records)
            now = time.time_ns()
            os.utime(self.entries / name, ns=(now, now))
            return f"touch {name}"
        if op == "cif":
            if value % 4 == 3 or not cifs:  # restore a deleted CIF
                spares = self.names(self.spare, ".cif")
                if not spares:
                    return "cif: nothing to restore"
                name = choose(spares)
                shutil.move(self.spare / name, self.structures / name)
                return f"restore {name}"
            name = choose(cifs)
            path = self.structures / name
            if value % 4 == 0:
                now = time.time_ns()
                os.utime(path, ns=(now, now))
                return f"touch {name}"
            if value % 4 == 1:
                path.write_text(path.read_text() + f"# revised {value}\n")
                return f"edit {name}"
            shutil.move(path, self.spare / name)
            return f"delete {name}"
        if op == "config":
            section, key, choices = CONFIG_CHOICES[pick % len(CONFIG_CHOICES)]
            self.config[section][key] = choices[value % len(choices)]
            self.write_config(self.inc)
            return f"config {section}.{key} = {self.config[section][key]!r}"
        if op == "code":
            library = self.checkout / "workflow" / "lamellume"
            modules = sorted(p.name for p in library.glob("*.py"))
            name = choose(modules)
            path = library / name
            source = path.read_text()
            self.code_edits += 1
            constants = _constant_names(source)
            if constants and value % 2:
                constant = constants[value % len(constants)]
                path.write_text(source + f"\n{constant} = {constant} * 1.01  # differential test edit "
                                         f"{self.code_edits}\n")
                return f"code {name}: {constant} x 1.01"
            path.write_text(source + f"\n# differential test edit {self.code_edits}\n")
            return f"code {name}: comment"
        raise ValueError(op)

    # -- runs --------------------------------------------------------------------
    def start(self, work: Path) -> subprocess.Popen:
        cmd = [sys.executable, "-m", "snakemake", "-s", str(self.checkout / "Snakefile"), "--directory", str(work),
               "--configfile", str(work / "config.yaml"), "--cores", "2"]
        return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, cwd=work,
                                start_new_session=True)

    def table_key(self) -> str:
        """Digest of the sources the Keldysh table job depends on. Taken from the import graph
        (test_code_keys.py checks it against the modules the job really loads)."""
        library = self.checkout / "workflow" / "lamellume"
        provenance._sources.cache_clear()  # the library copy changes between steps
        files = provenance.adapter_files(self.checkout / "workflow" / "scripts" / "keldysh_table.py", library)
        return hashlib.sha256(b"".join(Path(f).read_bytes() + b"\0" for f in files)).hexdigest()

    def state_key(self, history: Path) -> str:
        h = hashlib.sha256()
        for part in (self.inc / "campaign", self.checkout, history):
            h.update(_digest_tree(part).encode() if part.exists() else b"-")
        h.update(yaml.safe_dump(self.config, sort_keys=True).encode())
        return h.hexdigest()

    def step(self, history: Path, step: int) -> tuple[dict, dict]:
        """Run the incremental and (unless memoised) the clean run side by side."""
        incremental = self.start(self.inc)
        key = self.state_key(history)
        clean = work = library = None
        if key not in self.clean_memo:
            work = self.root / f"clean-{step}"
            shutil.copytree(self.inc / "campaign", work / "campaign")
            self.write_config(work)
            if history.exists():
                shutil.copytree(history, work / "results" / "history")
            library = self.table_key()
            if library in self.tables_memo:
                target = work / "results" / "cache" / "keldysh_table.npz"
                target.parent.mkdir(parents=True, exist_ok=True)
                shutil.copy(self.tables_memo[library], target)  # newer than every source: not rebuilt
            clean = self.start(work)
        try:
            got = outputs(self.inc, incremental)
            outcome = outputs(work, clean) if clean is not None else None
        finally:  # never leave a run behind (a failed comparison, an interrupted test)
            for run in (incremental, clean):
                if run is not None and run.poll() is None:
                    os.killpg(run.pid, signal.SIGKILL)
                    run.wait()
        if clean is not None:
            if outcome["exit"] == 0 and library not in self.tables_memo:
                kept = self.root / f"keldysh-{len(self.tables_memo)}.npz"
                shutil.copy(work / "results" / "cache" / "keldysh_table.npz", kept)
                self.tables_memo[library] = kept
            shutil.rmtree(work)
            self.clean_memo[key] = outcome
        return got, self.clean_memo[key]


def _arrow_view(path: Path) -> dict:
    table = pq.read_table(path)
    schema = table.schema
    return {
        "schema": [(f.name, str(f.type), dict(f.metadata or {})) for f in schema],
        "metadata": dict(schema.metadata or {}),
        "data": table.to_pylist(),
    }


def outputs(work: Path, run: subprocess.Popen) -> dict:
    """What the two runs must agree on (waits for the run to end)."""
    log, _ = run.communicate(timeout=900)
    out: dict = {"exit": run.returncode}
    if run.returncode != 0:
        out["stderr"] = log[-3000:]
        return out
    results = work / "results"
    for name in TABLES:
        out[name] = _arrow_view(results / "tables" / f"{name}.parquet")
    for name in TEXT_OUTPUTS:
        out[name] = (results / name).read_text()
    manifest = json.loads((results / "manifest.json").read_text())
    manifest.pop("written_utc")
    out["manifest"] = manifest
    return out


def _differences(got: dict, want: dict) -> list[str]:
    problems = []
    if got["exit"] != want["exit"]:
        return [f"exit status {got['exit']} (incremental) vs {want['exit']} (clean):\n"
                f"incremental: {got.get('stderr', '')[-1500:]}\nclean: {want.get('stderr', '')[-1500:]}"]
    for name in want:
        if name in ("exit", "stderr"):
            continue
        if got[name] == want[name]:
            continue
        if isinstance(want[name], dict) and "data" in want[name]:
            for part in ("schema", "metadata", "data"):
                if got[name][part] != want[name][part]:
                    g, w = got[name][part], want[name][part]
                    if part == "data":
                        rows = [f"  row {i}: {a} != {b}" for i, (a, b) in enumerate(zip(g, w)) if a != b][:3]
                        problems.append(f"{name}: {len(g)} vs {len(w)} rows\n" + "\n".join(rows))
                    else:
                        problems.append(f"{name} {part} differs:\n  incremental {g}\n  clean       {w}")
        elif isinstance(want[name], dict) and isinstance(got[name], dict):  # the manifest: name the keys
            keys = sorted(k for k in set(got[name]) | set(want[name]) if got[name].get(k) != want[name].get(k))
            problems.append(f"{name} differs in {keys}:\n" + "\n".join(
                f"  {k}: incremental {str(got[name].get(k))[:300]}\n  {k}: clean       {str(want[name].get(k))[:300]}"
                for k in keys))
        else:
            problems.append(f"{name} differs:\n  incremental {str(got[name])[:800]}\n  clean       {str(want[name])[:800]}")
    return problems


OPERATIONS = ("add", "delete", "rename", "copy", "case_copy", "edit", "corrupt", "fix", "touch", "cif",
              "config", "code")
#: Drawing weights: campaign operations most often, code changes (each rebuilds a Keldysh
#: table when they touch what it depends on) least.
WEIGHTS = {"add": 3, "delete": 2, "rename": 3, "copy": 2, "case_copy": 2, "edit": 4, "corrupt": 2, "fix": 2,
           "touch": 2, "cif": 2, "config": 3, "code": 2}
OP_STRATEGY = st.sampled_from([op for op in OPERATIONS for _ in range(WEIGHTS[op])])


@pytest.fixture(scope="module")
def pool(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("pool") / "pool"
    subprocess.run([sys.executable, str(REPO / "inputs" / "make_campaign.py"), "--out", str(out),
                    "--count", str(POOL_SIZE), "--no-broken", "--cif-fraction", "0.3", "--seed", "23"],
                   check=True, capture_output=True)
    return out


#: An operation: its kind and two numbers that pick the file, the target name or the value.
STEP = st.tuples(OP_STRATEGY, st.integers(0, 50), st.integers(0, 50))


def _differential(plan: list[tuple[str, int, int]], pool: Path, tmp: Path) -> None:
    root = Path(tempfile.mkdtemp(dir=tmp))  # hypothesis replays a failing example: start afresh
    state = Campaign(root, pool)
    journal: list[str] = []
    history = root / "history-before"
    for step in range(len(plan) + 1):
        if step:
            journal.append(state.apply(*plan[step - 1]))
        if history.exists():
            shutil.rmtree(history)
        if (state.inc / "results" / "history").exists():
            shutil.copytree(state.inc / "results" / "history", history)
        started = time.monotonic()
        got, want = state.step(history, step)
        print(f"step {step}: {journal[-1] if step else 'first run'} ({time.monotonic() - started:.1f} s)", flush=True)
        problems = _differences(got, want)
        assert not problems, (f"step {step}: incremental != clean after\n  " + "\n  ".join(journal[-8:]) + "\n"
                              + "\n".join(problems))
    # The walk must have ended in a successful run or after a code edit that broke it.
    assert got["exit"] == 0 or any(j.startswith("code") for j in journal), got


_settings = settings(max_examples=1, deadline=None, phases=[Phase.generate], database=None,
                     derandomize=SEED is None, suppress_health_check=list(HealthCheck), print_blob=True)


@_settings
@given(plan=st.lists(STEP, min_size=STEPS, max_size=STEPS))
def _walk(plan, pool, root):
    # Hypothesis tries the simplest plan first (one operation kind throughout): not a walk.
    assume(len({op for op, _, _ in plan}) >= min(8, STEPS))
    _differential(plan, pool, root)


if SEED is not None:
    _walk = seed(int(SEED))(_walk)


def test_incremental_run_equals_clean_run(pool, tmp_path):
    _walk(pool, tmp_path)
