"""The Arrow-only join of the final long table (flakelight.assemble)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from scipy import constants as sc

from flakelight import assemble, io, ranking

SETTINGS = {"survival": {"temperature_k": 77.0, "pair_density_per_cm2": 1e12, "pair_density_per_cm3": 1e17, "wannier_ratio": 2.0}}
REPO = Path(__file__).resolve().parents[2]


def shard_tables(ids, lattice, seed):
    rng = np.random.default_rng(seed)
    long = pd.DataFrame([{"entry_id": e, "layers": n, "environment": env,
                          "binding_ev": float(rng.uniform(0.01, 0.6)),
                          "mu_inplane_me": float(rng.uniform(0.1, 0.5)),
                          "radius_angstrom": float(rng.uniform(3.0, 40.0))}
                         for e in ids for n in (0, 1, 2) for env in ("suspended", "encapsulated")])
    long.loc[1, "binding_ev"] = np.nan  # an unbound or missing row stays NaN, never a crash
    wide = pd.DataFrame({"entry_id": ids, "lattice_angstrom": lattice})
    return long, wide


@pytest.fixture
def shards(tmp_path):
    parts = [shard_tables(["a", "c"], [3.2, 3.6], 1), shard_tables(["b"], [4.0], 2)]
    empty_long = parts[0][0].iloc[:0]
    empty_wide = parts[0][1].iloc[:0]
    parts.append((empty_long, empty_wide))  # a shard whose every record was rejected
    paths = []
    for i, (long, wide) in enumerate(parts):
        lp, wp = tmp_path / f"{i}_long.parquet", tmp_path / f"{i}_wide.parquet"
        io.write_parquet(long, lp, units={"binding_ev": "eV"}, table_metadata={"generation": f"g{i}"})
        io.write_parquet(wide, wp)
        paths.append((str(lp), str(wp)))
    return parts, paths


def test_join_equals_the_pandas_survival_step(shards, tmp_path):
    # source: derived here -- the Arrow join must give exactly the rows and values of
    # ranking.add_survival (the pandas route, checked against CODATA in test_ranking)
    parts, paths = shards
    out = tmp_path / "long.parquet"
    rows = assemble.run_join_long([p[0] for p in paths], [p[1] for p in paths], str(out), SETTINGS, "cfg123")
    got = pd.read_parquet(out)
    wide = pd.concat([w for _, w in parts[:2]], ignore_index=True)
    want = ranking.add_survival(pd.concat([lg for lg, _ in parts[:2]], ignore_index=True), wide, SETTINGS)
    want["config_hash"] = "cfg123"
    assert rows == len(want) == 18
    pd.testing.assert_frame_equal(got, want, check_exact=True, check_dtype=False)
    assert got["binding_over_kt"].iloc[0] == pytest.approx(got["binding_ev"].iloc[0] / (sc.k * 77.0 / sc.e),
                                                         rel=1e-12)
    assert np.isnan(got["binding_over_kt"].iloc[1]) and not got["survives_kt"].iloc[1]


def test_join_keeps_units_and_drops_shard_stamps(shards, tmp_path):
    # source: common practice (units travel in the Arrow field metadata; a joined table
    # does not carry one shard's cache generation)
    _, paths = shards
    out = tmp_path / "long.parquet"
    assemble.run_join_long([p[0] for p in paths], [p[1] for p in paths], str(out), SETTINGS, "cfg123")
    units = io.parquet_units(out)
    assert units["binding_ev"] == "eV" and units["temperature_k"] == "K"
    meta = io.parquet_metadata(out)
    assert meta == {"config_hash": "cfg123"}


def test_unknown_compound_gets_no_lattice(tmp_path):
    # source: common practice (a missing lattice constant fails the Wannier check, never passes it)
    long, wide = shard_tables(["a"], [3.2], 3)
    part = assemble.with_survival(pa.Table.from_pandas(long, preserve_index=False),
                                  assemble.lattice_lookup([]), SETTINGS)
    assert not any(part.column("wannier_ok").to_pylist())


def test_join_module_imports_no_pandas():
    # source: common practice -- the join job starts fast because it never loads pandas
    code = ("import sys; sys.path.insert(0, 'workflow'); import flakelight.assemble; "
            "print('pandas' in sys.modules)")
    res = subprocess.run([sys.executable, "-c", code], cwd=REPO, capture_output=True, text=True, check=True)
    assert res.stdout.strip() == "False"


def test_concat_sorted_equals_pandas_stable_sort(tmp_path):
    # source: pandas (reference library): concat then sort_values(kind="stable")
    parts = [pd.DataFrame({"entry_id": ["m", "b", "b"], "valley_index": [0, 1, 0], "x": [1.0, 2.0, 3.0]}),
             pd.DataFrame({"entry_id": ["a", "z"], "valley_index": [2, 0], "x": [4.0, np.nan]}),
             pd.DataFrame({"entry_id": pd.Series([], dtype=str), "valley_index": pd.Series([], dtype="int64"),
                           "x": pd.Series([], dtype=float)})]
    paths = []
    for i, frame in enumerate(parts):
        paths.append(str(tmp_path / f"{i}.parquet"))
        io.write_parquet(frame, paths[-1], table_metadata={"generation": "g"})
    out = tmp_path / "out.parquet"
    assert assemble.concat_sorted(paths, ["entry_id", "valley_index"], str(out), "cfg") == 5
    want = pd.concat(parts[:2], ignore_index=True).sort_values(["entry_id", "valley_index"], kind="stable")
    pd.testing.assert_frame_equal(pd.read_parquet(out), want.reset_index(drop=True), check_dtype=False)
    assert io.parquet_metadata(out) == {"config_hash": "cfg"}
    # every shard empty: an empty table with the shard's columns
    empty = tmp_path / "empty.parquet"
    assert assemble.concat_sorted(paths[2:], ["entry_id"], str(empty), "cfg") == 0
    assert list(pd.read_parquet(empty).columns) == ["entry_id", "valley_index", "x"]
