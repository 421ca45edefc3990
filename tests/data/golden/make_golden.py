#!/usr/bin/env python3
"""Regenerate the golden tables of tests/integration/test_golden.py.

The golden tables are the outputs of the workflow at a reference commit (default
ba2d14c, the design before issue 13) on two committed campaigns:

* ``demo``: the synthetic demo campaign (inputs/demo at the reference commit,
  including its deliberately broken records), packed in ``inputs-demo.tar.gz``;
* ``c1k``: 1,000 synthetic records of ``inputs/make_campaign.py --count 1000
  --seed 1313`` (at the reference commit), packed in ``inputs-c1k.tar.gz``.

Both campaigns are invented (SYNTHETIC) numbers. The workflow runs with the
reference commit's config/config.yaml and the overrides of
:data:`OVERRIDES` (two shards, few Monte Carlo samples to keep the test quick).
The compared outputs (:data:`OUTPUTS`) are written as zstd Parquet (CSV files
are read with pandas first) under ``<campaign>/``.

Usage (from the repository root)::

    python tests/data/golden/make_golden.py                 # reference ba2d14c
    python tests/data/golden/make_golden.py --commit <rev>  # another reference

Regenerate only when the reference itself should move (e.g. after a landed
physics fix, together with emptying the matching EXPECTED_CHANGES entries of
the test); never to make a failing comparison pass.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tarfile
import tempfile
from pathlib import Path

import pandas as pd
import yaml

HERE = Path(__file__).resolve().parent
REPO = HERE.parents[2]
CAMPAIGNS = ("demo", "c1k")
#: Config overrides of the golden runs (applied to the config/config.yaml of the code that runs).
OVERRIDES = {"sharding": {"shards": 2}, "uncertainty": {"samples": 64}}
#: Outputs compared by the test, relative to results/.
OUTPUTS = ("tables/entries.parquet", "tables/valleys.parquet", "tables/rejects.parquet",
           "tables/screen_long.parquet", "tables/screen_wide.parquet", "tables/rejects.csv",
           "shortlist.csv")
#: Snakemake targets of a golden run (the compared outputs; no page, no manifest).
TARGETS = tuple(f"results/{rel}" for rel in OUTPUTS)


def golden_config(repo: Path, campaign: Path) -> dict:
    """The config of a golden run: ``repo``'s config.yaml with :data:`OVERRIDES`."""
    config = yaml.safe_load((repo / "config" / "config.yaml").read_text())
    config["campaign"] = str(campaign)
    for section, values in OVERRIDES.items():
        config[section].update(values)
    return config


def unpack_inputs(name: str, target: Path) -> Path:
    """Unpack campaign ``name`` into ``target``/``name`` and return that folder."""
    folder = target / name
    folder.mkdir(parents=True, exist_ok=True)
    with tarfile.open(HERE / f"inputs-{name}.tar.gz") as tar:
        tar.extractall(folder, filter="data")
    return folder


#: The project's former name in record format lines (the golden inputs predate the rename).
FORMER_FORMATS = {b'"flakelight-record/1"': b'"lamellume-record/1"'}


def migrate_records(folder: Path) -> int:
    """Rewrite records in the project's former format to the current one, as README's
    migration note says (a byte replacement of the format line); return the files changed."""
    changed = 0
    for path in sorted((folder / "entries").glob("*.json")):
        if not path.is_file() or path.is_symlink():
            continue
        data = new = path.read_bytes()
        for old, current in FORMER_FORMATS.items():
            new = new.replace(old, current)
        if new != data:
            path.write_bytes(new)
            changed += 1
    return changed


def run_workflow(repo: Path, campaign: Path, work: Path, targets: tuple[str, ...] = ()) -> Path:
    """Run ``repo``'s workflow on ``campaign`` in ``work``; return its results/ folder."""
    work.mkdir(parents=True, exist_ok=True)
    (work / "config.yaml").write_text(yaml.safe_dump(golden_config(repo, campaign)))
    cmd = [sys.executable, "-m", "snakemake", "-s", str(repo / "Snakefile"), "--directory", str(work),
           "--configfile", str(work / "config.yaml"), "--cores", "2", *targets]
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=work, timeout=1800)
    if res.returncode != 0:
        raise RuntimeError(f"snakemake failed ({res.returncode}):\n{res.stdout[-4000:]}\n{res.stderr[-4000:]}")
    return work / "results"


#: The c1k long table is kept for every LONG_EVERY-th compound only (sorted identifiers): its
#: floats do not compress, and the other compounds' rows are covered by the same code paths.
LONG_EVERY = 4


def golden_rows(campaign: str, rel: str, frame: pd.DataFrame) -> pd.DataFrame:
    """The rows of an output that are stored and compared (all but the c1k long table's subset)."""
    if campaign != "c1k" or rel != "tables/screen_long.parquet" or not len(frame):
        return frame
    keep = set(sorted(set(frame["entry_id"]))[::LONG_EVERY])
    return frame[frame["entry_id"].isin(keep)].reset_index(drop=True)


def read_output(path: Path) -> pd.DataFrame:
    """An output as a frame (Parquet as written; CSV parsed by pandas)."""
    if path.suffix == ".csv":
        return pd.read_csv(path, keep_default_na=False, na_values=[""])
    return pd.read_parquet(path)


def golden_name(rel: str) -> str:
    """File name of a stored golden output."""
    return rel.replace("/", "__").rsplit(".", 1)[0] + ".parquet"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--commit", default="ba2d14c", help="reference commit whose workflow writes the tables")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        code = tmp / "code"
        code.mkdir()
        archive = subprocess.run(["git", "-C", str(REPO), "archive", args.commit], check=True,
                                 capture_output=True).stdout
        subprocess.run(["tar", "-x", "-C", str(code)], input=archive, check=True)
        for name in CAMPAIGNS:
            results = run_workflow(code, unpack_inputs(name, tmp / "inputs"), tmp / "work" / name, TARGETS)
            out = HERE / name
            out.mkdir(exist_ok=True)
            for rel in OUTPUTS:
                golden_rows(name, rel, read_output(results / rel)).to_parquet(out / golden_name(rel), compression="zstd",
                                                      compression_level=19, index=False)
            print(f"{name}: wrote {len(OUTPUTS)} golden tables to {out}")
        (HERE / "REFERENCE").write_text(args.commit + "\n")


if __name__ == "__main__":
    main()
