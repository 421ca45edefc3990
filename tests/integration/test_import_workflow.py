"""End to end: compounds given as calculations screen like the equivalent hand-written records.

A small invented campaign holds two compounds as calculations (model band
structures of inputs/make_calculations.py written through pymatgen), one broken
compound, and the two equivalent hand-written records: edges from the model
formulas, masses from the analytic curvature (sympy, tests/model_reference.py),
the same dielectric tensor, spacing and lattice. The workflow runs once through
Snakemake's command line; then one calculation is revised and the run repeated.
"""

from __future__ import annotations

import importlib.util
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]


def _load(name, path):
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


mc = _load("make_calculations", REPO / "inputs" / "make_calculations.py")
ref = _load("model_reference", REPO / "tests" / "model_reference.py")

HEX = {"1": {"ev": -5.9, "av": 0.10, "sv": 1.2, "ec": -3.2, "bc": 0.28},
       "2": {"ev": -5.6, "av": 0.10, "sv": 0.9, "ec": -3.35, "bc": 0.27},
       "bulk": {"ev": -5.35, "av": 0.10, "sv": 0.4, "ec": -3.55, "bc": 0.26, "tz": 0.04}}
RECT = {"1": {"ev": -4.9, "tx": 0.55, "ty": 0.22, "ec": -3.3, "ux": 0.60, "uy": 0.25},
        "bulk": {"ev": -4.6, "tx": 0.55, "ty": 0.22, "ec": -3.7, "ux": 0.60, "uy": 0.25}}
A_HEX, C_HEX = 3.19, 6.2
EPS_HEX = [[15.0, 0, 0], [0, 15.0, 0], [0, 0, 6.0]]
EPS_RECT = [[13.0, 0, 0], [0, 11.0, 0], [0, 0, 8.0]]


def _write(folder: Path, name: str, obj) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / name).write_text(json.dumps(obj))


def _calculations(campaign: Path) -> None:
    k, labels = mc.path_kpoints(mc.HEX_PATH, 181)
    calcs = []
    folder = campaign / "calculations" / "calc-hexa"
    for key, p in HEX.items():
        s = mc.hex_structure(key, a=A_HEX, c_bulk=C_HEX)
        _write(folder, f"bands_{key}.json", mc.band_structure_dict(s, k, labels, mc.hex_bands, p, shift_ev=-2.1))
        calcs.append({"layers": key, "bands": f"bands_{key}.json", "vacuum_level_ev": -2.1})
    _write(folder, "eps.json", {"dielectric_format": "lamellume-dielectric/1", "frame": "layer",
                                "electronic": EPS_HEX})
    _write(folder, "calcset.json", {"calcset_format": "lamellume-calcset/1", "provenance": mc.SYNTHETIC,
                                    "calculations": calcs, "dielectric": {"file": "eps.json"},
                                    "fit_radius_per_angstrom": 0.03})
    folder = campaign / "calculations" / "calc-rect"
    calcs = []
    for key, p in RECT.items():
        s = mc.rect_structure(key, tilt=(0.9, 0.6))
        d = mc.band_structure_dict(s, mc.grid_kpoints((60, 60, 1) if key == "1" else (30, 30, 2)),
                                   {"\\Gamma": [0, 0, 0]}, mc.rect_bands, p, line=False)
        _write(folder, f"bands_{key}.json", d)
        calcs.append({"layers": key, "bands": f"bands_{key}.json", "vacuum_level_ev": 0.0})
    _write(folder, "eps.json", {"dielectric_format": "lamellume-dielectric/1", "frame": "layer",
                                "electronic": EPS_RECT})
    _write(folder, "calcset.json", {"calcset_format": "lamellume-calcset/1", "provenance": mc.SYNTHETIC,
                                    "calculations": calcs, "dielectric": {"file": "eps.json"},
                                    "fit_radius_per_angstrom": 0.06})
    broken = campaign / "calculations" / "calc-broken"
    for name in ("calcset.json", "eps.json", "bands_bulk.json"):
        _write(broken, name, json.loads((campaign / "calculations" / "calc-rect" / name).read_text()))
    (broken / "bands_1.json").write_text((campaign / "calculations" / "calc-rect" / "bands_1.json").read_text()[:5000])


def _hand_records(campaign: Path) -> None:
    """The same compounds written by hand: model edges (formulas) and analytic masses (sympy)."""
    valleys = []
    e, kx, ky, gamma, kpt = ref.hex_energy("valence", HEX["1"], A_HEX)
    m_gv = ref.sympy_masses(e, kx, ky, gamma, -1.0)[0]
    m_kv = ref.sympy_masses(e, kx, ky, kpt, -1.0)[0]
    e, kx, ky, gamma, kpt = ref.hex_energy("conduction", HEX["1"], A_HEX)
    m_kc = ref.sympy_masses(e, kx, ky, kpt, 1.0)[0]
    edges = {"Gamma": {}, "Kv": {}, "Kc": {}}
    for key, p in HEX.items():
        tz = p.get("tz", 0.0)
        edges["Gamma"][key] = p["ev"] + tz
        edges["Kv"][key] = p["ev"] + p["av"] * ((-1.5 - p["sv"]) ** 2 - (3 - p["sv"]) ** 2) + tz
        edges["Kc"][key] = p["ec"] - 1.5 * p["bc"]
    valleys = [{"label": "Gamma", "band": "valence", "edge_ev": edges["Gamma"], "mass": {"isotropic_me": m_gv}},
               {"label": "K", "band": "valence", "edge_ev": edges["Kv"], "mass": {"isotropic_me": m_kv}},
               {"label": "K", "band": "conduction", "edge_ev": edges["Kc"], "mass": {"isotropic_me": m_kc}}]
    _write(campaign / "entries", "hand-hexa.json", {
        "record_format": "lamellume-record/1", "id": "hand-hexa", "energy_reference": "vacuum level",
        "layer_spacing_angstrom": C_HEX, "inplane_lattice_angstrom": A_HEX,
        "dielectric": {"frame": "layer", "electronic": EPS_HEX}, "valleys": valleys})
    rect = []
    for band, sign in (("valence", -1.0), ("conduction", 1.0)):
        e, kx, ky = ref.rect_energy(band, RECT["1"])
        m = ref.sympy_masses(e, kx, ky, (0, 0), sign)
        key = "ev" if band == "valence" else "ec"
        rect.append({"label": "Gamma", "band": band, "edge_ev": {k: p[key] for k, p in RECT.items()},
                     "mass": {"principal_me": [float(m[0]), float(m[1])], "angle_deg": 0.0}})
    _write(campaign / "entries", "hand-rect.json", {
        "record_format": "lamellume-record/1", "id": "hand-rect", "energy_reference": "vacuum level",
        "layer_spacing_angstrom": 5.5, "inplane_lattice_angstrom": 3.0,
        "dielectric": {"frame": "layer", "electronic": EPS_RECT}, "valleys": rect})


def _snakemake(work: Path) -> None:
    cmd = [sys.executable, "-m", "snakemake", "-s", str(REPO / "Snakefile"), "--directory", str(work),
           "--configfile", str(work / "config.yaml"), "--cores", "2"]
    res = subprocess.run(cmd, capture_output=True, text=True, cwd=work, timeout=1200)
    assert res.returncode == 0, res.stdout[-3000:] + res.stderr[-3000:]


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    work = tmp_path_factory.mktemp("import-e2e")
    campaign = work / "campaign"
    _calculations(campaign)
    _hand_records(campaign)
    config = yaml.safe_load((REPO / "config" / "config.yaml").read_text())
    config["campaign"] = str(campaign)
    config["sharding"]["shards"] = 2
    config["uncertainty"]["samples"] = 0
    (work / "config.yaml").write_text(yaml.safe_dump(config))
    _snakemake(work)
    return work


def _long(work):
    return pd.read_parquet(work / "results" / "tables" / "screen_long.parquet")


@pytest.mark.parametrize("pair", [("calc-hexa", "hand-hexa"), ("calc-rect", "hand-rect")])
def test_calculations_screen_like_hand_written_records(run, pair):
    long = _long(run)
    calc = long[long["entry_id"] == pair[0]].sort_values(["layers", "environment"]).reset_index(drop=True)
    hand = long[long["entry_id"] == pair[1]].sort_values(["layers", "environment"]).reset_index(drop=True)
    assert len(calc) == len(hand) > 0
    # edges are imported exactly: every gap agrees to round-off
    for col in ("fundamental_gap_ev", "direct_gap_ev", "indirect_gap_ev", "vbm_ev", "cbm_ev", "direct_margin_ev"):
        np.testing.assert_allclose(calc[col], hand[col], rtol=1e-9, atol=1e-9, err_msg=col)
    for col in ("gap_character", "vbm_label", "cbm_label", "direct_label"):
        assert calc[col].tolist() == hand[col].tolist(), col
    # masses agree with the analytic ones within 1 %, so do reduced masses and binding energies
    for col in ("mu_inplane_me", "binding_ev", "binding_2d_hydrogenic_ev"):
        np.testing.assert_allclose(calc[col], hand[col], rtol=0.01, err_msg=col)
    np.testing.assert_allclose(calc["optical_gap_ev"], hand["optical_gap_ev"], rtol=2e-3)


def test_broken_calculation_is_a_reject_and_the_rest_carries_on(run):
    rejects = pd.read_parquet(run / "results" / "tables" / "rejects.parquet")
    row = rejects[rejects["entry_id"] == "calc-broken"]
    assert len(row) == 1
    assert row["source_file"].iloc[0] == "calculations/calc-broken/bands_1.json"
    assert row["stage"].iloc[0] == "import"
    assert "truncated JSON" in row["reason"].iloc[0]
    wide = pd.read_parquet(run / "results" / "tables" / "screen_wide.parquet")
    assert {"calc-hexa", "calc-rect", "hand-hexa", "hand-rect"} <= set(wide["entry_id"])


def test_revised_calculation_reimports_its_compound_alone(run):
    path = run / "campaign" / "calculations" / "calc-rect" / "bands_bulk.json"
    d = json.loads(path.read_text())
    d["efermi"] += 1e-3  # a revision that leaves the physics unchanged
    path.write_text(json.dumps(d))
    _snakemake(run)
    from lamellume.sharding import shard_name, shard_of_file

    shard = shard_name(shard_of_file("calc-rect.json", 2))
    log = (run / "results" / "logs" / "import_calculations" / f"{shard}.log").read_text()
    last = [line for line in log.splitlines() if "import done" in line][-1]
    assert "'imported': 1" in last and "'rejected': 0" in last
    changes = pd.read_parquet(run / "results" / "tables" / "changes.parquet")
    row = changes[changes["entry_id"] == "calc-rect"]
    assert len(row) == 1 and bool(row["input_revised"].iloc[0])
    assert "calculations/calc-rect/bands_bulk.json" in row["detail"].iloc[0]
