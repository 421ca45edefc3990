"""Published monolayer binding energies reproduced end to end through the workflow.

A small campaign is built here: one record per row of the published tables of
tests/unit/test_published_monolayers.py (K-valley electron and hole masses 2 mu each, so the
reduced mass is mu; the published r0 given as the record's screening length), one configured
surroundings per published kappa. Snakemake runs the whole workflow and the monolayer binding
is read from the long output table. Sources, values (from memory) and tolerances are those of
the unit test, which states them.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO / "tests" / "unit"))
from test_published_monolayers import PUBLISHED, TOLERANCE  # noqa: E402


def _environment(kappa: float) -> str:
    return "kappa_" + f"{kappa:.2f}".replace(".", "_")


def _record(ident: str, mu: float, r0: float) -> dict:
    """A minimal valid record: direct K gap, isotropic masses 2 mu, the published r0 (invented edges)."""
    mass = {"isotropic_me": 2.0 * mu, "perpendicular_me": 8.0 * mu}
    return {
        "record_format": "lamellume-record/1",
        "id": ident,
        "formula": "test row from a published table",
        "provenance": "test input built from published model parameters; band edges invented",
        "energy_reference": "vacuum level",
        "layer_spacing_angstrom": 6.5,
        "inplane_lattice_angstrom": 3.2,
        "dielectric": {"frame": "layer", "electronic": [[14.0, 0.0, 0.0], [0.0, 14.0, 0.0], [0.0, 0.0, 7.0]]},
        "monolayer_screening": {"screening_length_angstrom": r0},
        "valleys": [
            {"label": "K", "band": "valence", "edge_ev": {"1": -5.9, "bulk": -5.8}, "mass": mass},
            {"label": "K", "band": "conduction", "edge_ev": {"1": -3.6, "bulk": -4.2}, "mass": mass},
        ],
    }


@pytest.fixture(scope="module")
def long_table(tmp_path_factory):
    work = tmp_path_factory.mktemp("published")
    entries = work / "campaign" / "entries"
    entries.mkdir(parents=True)
    expected = []
    for source, rows in PUBLISHED.items():
        for name, mu, r0, kappa, eb in rows:
            ident = f"{source}-{name.lower()}"
            (entries / f"{ident}.json").write_text(json.dumps(_record(ident, mu, r0)))
            expected.append((source, ident, _environment(kappa), eb))
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = str(work / "campaign")
    config["environments"].update({_environment(k): {"top": k, "bottom": k}
                                   for k in sorted({r[3] for rows in PUBLISHED.values() for r in rows})})
    config["uncertainty"]["samples"] = 0
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    cmd = [sys.executable, "-m", "snakemake", "-s", str(REPO / "Snakefile"), "--directory", str(work),
           "--configfile", str(work / "config.yaml"), "--cores", "2", "results/tables/screen_long.parquet"]
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=work, timeout=900)
    assert res.returncode == 0, res.stdout[-3000:] + res.stderr[-3000:]
    return pd.read_parquet(work / "results" / "tables" / "screen_long.parquet"), expected


def test_published_bindings_end_to_end(long_table):
    long, expected = long_table
    problems = []
    for source, ident, env, eb in expected:
        row = long[(long["entry_id"] == ident) & (long["layers"] == 1) & (long["environment"] == env)]
        assert len(row) == 1, (ident, env)
        got = float(row["binding_ev"].iloc[0])
        if abs(got / eb - 1.0) > TOLERANCE[source]:
            problems.append(f"{ident} in {env}: {got:.4f} eV, published {eb} eV (tolerance {TOLERANCE[source]:.0%})")
    assert not problems, "\n".join(problems)
