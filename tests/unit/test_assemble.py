"""The Arrow-only join of the final long table (lamellume.assemble)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants as sc

from lamellume import assemble, io, ranking

SETTINGS = {"survival": {"temperature_k": 77.0, "pair_density_per_cm2": 1e12, "pair_density_per_cm3": 1e17, "wannier_ratio": 2.0}}
REPO = Path(__file__).resolve().parents[2]


def shard_tables(ids, lattice, seed):
    rng = np.random.default_rng(seed)
    long = pd.DataFrame([{"entry_id": e, "layers": n, "environment": env,
                          "binding_ev": float(rng.uniform(0.01, 0.6)),
                          "mu_inplane_me": float(rng.uniform(0.1, 0.5)),
                          "radius_angstrom": float(rng.uniform(3.0, 40.0)),
                          "bright_exciton_ev": 1.5, "dark_exciton_ev": float(rng.uniform(1.4, 1.6)),
                          "bright_weight": 2.0, "dark_weight": 6.0, "kappa": 4.5,
                          "radiative_rate_0_per_s": 2.0e12, "bright_mass_me": 1.0}
                         for e in ids for n in (0, 1, 2) for env in ("suspended", "encapsulated")])
    long.loc[1, "binding_ev"] = np.nan  # an unbound or missing row stays NaN, never a crash
    wide = pd.DataFrame({"entry_id": ids, "lattice_angstrom": lattice})
    return long, wide


@pytest.fixture
def shards(tmp_path):
    parts = [shard_tables(["a", "c"], [3.2, 3.6], 1), shard_tables(["b"], [4.0], 2)]
    parts.append((parts[0][0].iloc[:0], parts[0][1].iloc[:0]))  # a shard whose every record was rejected
    paths = []
    for i, (long, wide) in enumerate(parts):
        lp = tmp_path / f"{i}_long.parquet"
        # as the shard job writes it: survival columns included (ranking.add_survival)
        io.write_parquet(ranking.add_survival(long, wide, SETTINGS), lp, table_metadata={"generation": f"g{i}"})
        paths.append(str(lp))
    return parts, paths


def test_join_stacks_the_shard_rows(shards, tmp_path):
    # source: derived here -- the Arrow join gives exactly the shards' rows, in shard order
    parts, paths = shards
    out = tmp_path / "long.parquet"
    rows = assemble.run_join_long(paths, str(out), "cfg123")
    got = pd.read_parquet(out)
    want = pd.concat([ranking.add_survival(lg, w, SETTINGS) for lg, w in parts[:2]], ignore_index=True)
    want["config_hash"] = "cfg123"
    assert rows == len(want) == 18
    pd.testing.assert_frame_equal(got, want, check_exact=True, check_dtype=False)


def test_survival_columns_of_the_long_table():
    # source: E_b/kT with k and e from CODATA (scipy.constants); a NaN binding stays NaN
    long, wide = shard_tables(["a", "c"], [3.2, 3.6], 1)
    got = ranking.add_survival(long, wide, SETTINGS)
    assert got["binding_over_kt"].iloc[0] == pytest.approx(got["binding_ev"].iloc[0] / (sc.k * 77.0 / sc.e),
                                                         rel=1e-12)
    assert np.isnan(got["binding_over_kt"].iloc[1]) and not got["survives_kt"].iloc[1]
    # computed once: a second call replaces the columns instead of adding more
    again = ranking.add_survival(got, wide, {"survival": {**SETTINGS["survival"], "temperature_k": 300.0}})
    assert list(again.columns) == list(got.columns) and (again["temperature_k"] == 300.0).all()


def test_join_keeps_units_and_drops_shard_stamps(shards, tmp_path):
    # source: common practice (units travel in the Arrow field metadata; a joined table
    # does not carry one shard's cache generation)
    _, paths = shards
    out = tmp_path / "long.parquet"
    assemble.run_join_long(paths, str(out), "cfg123")
    units = io.parquet_units(out)
    assert units["binding_ev"] == "eV" and units["temperature_k"] == "K"
    meta = io.parquet_metadata(out)
    assert meta == {"config_hash": "cfg123"}


def test_unknown_compound_gets_no_lattice():
    # source: common practice (a missing lattice constant fails the Wannier check, never passes it)
    long, _ = shard_tables(["a"], [3.2], 3)
    part = ranking.add_survival(long, pd.DataFrame({"entry_id": [], "lattice_angstrom": []}), SETTINGS)
    assert not part["wannier_ok"].any()


def test_join_module_imports_no_pandas():
    # source: common practice -- the join job starts fast because it never loads pandas
    code = ("import sys; sys.path.insert(0, 'workflow'); import lamellume.assemble; "
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
