"""Fixtures shared by the Monte Carlo tests (test_uncertainty.py, test_refinement.py)."""

from __future__ import annotations

import pytest
from mc_setup import ROOT, config_sections

from lamellume import io, keldysh, pipeline


@pytest.fixture(scope="session")
def coarse_table():
    """A coarse Keldysh grid keeps the Monte Carlo tests fast; screen and Monte Carlo use the same table."""
    return keldysh.build_table(keldysh.default_s_grid(per_decade=4))


@pytest.fixture(scope="session")
def screened_demo(tmp_path_factory, coarse_table) -> dict:
    """The demo campaign normalised and screened by the pipeline itself (config.yaml settings).

    Returns the folder, the shard table paths, the Keldysh table file and the tables read back.
    """
    tmp = tmp_path_factory.mktemp("demo")
    table_path = tmp / "table.npz"
    io.save_arrays(coarse_table.to_arrays(), table_path)
    campaign = ROOT / "inputs" / "demo"
    paths = sorted(str(p) for p in (campaign / "entries").glob("*.json"))
    outputs = {name: str(tmp / f"{name}.parquet") for name in pipeline.SHARD_TABLES}
    pipeline.run_shard(paths, str(campaign), config_sections(), str(table_path), str(tmp / "cache"), outputs)
    frames = {name: io.read_parquet(path) for name, path in outputs.items()}
    assert len(frames["entries"]) > 20
    return {"tmp": tmp, "outputs": outputs, "table_path": str(table_path), "frames": frames}
