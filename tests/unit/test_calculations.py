"""Import of first-principles band structures (lamellume.calculations, calcio, importer).

The band structures are built from model dispersions with known valleys
(inputs/make_calculations.py), written through pymatgen's own serialisation
(``BandStructureSymmLine.as_dict`` / ``BandStructure.as_dict``), imported and
compared with values derived independently: masses from the analytic Hessian of
the model at its extremum (computed with sympy), edges from the model formula,
labels from the path. Nothing expected is computed with the code under test.
"""

from __future__ import annotations

import importlib.util
import json
import math
from pathlib import Path

import numpy as np
import pytest
from monty.json import MontyEncoder

from lamellume import calculations, importer
from lamellume.calculations import ImportProblem

REPO = Path(__file__).resolve().parents[2]
_spec = importlib.util.spec_from_file_location("make_calculations", REPO / "inputs" / "make_calculations.py")
mc = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(mc)

_spec = importlib.util.spec_from_file_location("model_reference", REPO / "tests" / "model_reference.py")
ref = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(ref)
_sympy_masses, _hex_energy, _rect_energy = ref.sympy_masses, ref.hex_energy, ref.rect_energy

HEX_1 = {"ev": -5.9, "av": 0.10, "sv": 1.2, "ec": -3.2, "bc": 0.28}
HEX_2 = {"ev": -5.6, "av": 0.10, "sv": 0.9, "ec": -3.35, "bc": 0.27}
HEX_BULK = {"ev": -5.35, "av": 0.10, "sv": 0.4, "ec": -3.55, "bc": 0.26, "tz": 0.04}
A_HEX = 3.19


def _write_compound(root: Path, name: str, calcs: dict, *, dielectric=None, extra=None, shift=-1.7,
                    vacuum=None) -> Path:
    """Write a compound folder: calcs maps layer count -> band-structure dictionary."""
    folder = root / "calculations" / name
    folder.mkdir(parents=True, exist_ok=True)
    entries = []
    for key, d in calcs.items():
        (folder / f"bands_{key}.json").write_text(json.dumps(d, cls=MontyEncoder))  # pymatgen's own encoder
        entry = {"layers": key, "bands": f"bands_{key}.json"}
        v = shift if vacuum is None else vacuum.get(key, "none")
        if v != "none":
            entry["vacuum_level_ev"] = v
        entries.append(entry)
    (folder / "eps.json").write_text(json.dumps(dielectric or {
        "dielectric_format": "lamellume-dielectric/1", "frame": "crystal",
        "electronic": [[15.0, 0, 0], [0, 15.0, 0], [0, 0, 6.0]]}))
    desc = {"calcset_format": "lamellume-calcset/1", "calculations": entries, "dielectric": {"file": "eps.json"},
            **(extra or {})}
    (folder / "calcset.json").write_text(json.dumps(desc))
    return folder


def _hex_line(key, p, per_segment=241, shift=-1.7, **kw):
    s = mc.hex_structure(key, a=A_HEX, c_bulk=6.2, **{k: v for k, v in kw.items() if k in ("tilt", "rotation")})
    k, labels = mc.path_kpoints(mc.HEX_PATH, per_segment)
    return mc.band_structure_dict(s, k, labels, mc.hex_bands, p, shift_ev=shift,
                                  **{k: v for k, v in kw.items() if k in ("spin_split", "embed_structure")})


@pytest.fixture(scope="module")
def hex_campaign(tmp_path_factory):
    root = tmp_path_factory.mktemp("hex")
    _write_compound(root, "hexa", {"1": _hex_line("1", HEX_1), "2": _hex_line("2", HEX_2),
                                   "bulk": _hex_line("bulk", HEX_BULK)},
                    extra={"fit_radius_per_angstrom": 0.03})
    return root


@pytest.fixture(scope="module")
def hex_result(hex_campaign):
    return importer.read_compound(hex_campaign, "hexa")


def _valley(record, label, band):
    found = [v for v in record["valleys"] if v["label"] == label and v["band"] == band]
    assert len(found) == 1, [(v["label"], v["band"]) for v in record["valleys"]]
    return found[0]


def test_hexagonal_labels_and_exact_edges(hex_result):
    rec = hex_result.record
    # Valleys of the model (common practice for this dispersion): valence maxima at Gamma and K,
    # conduction minimum at K; M is a saddle point and no valley.
    assert sorted((v["label"], v["band"]) for v in rec["valleys"]) == [
        ("Gamma", "valence"), ("K", "conduction"), ("K", "valence")]
    # Edges: the model energies at Gamma and K (formula of make_calculations.hex_bands evaluated by hand:
    # s(Gamma) = 3, s(K) = -3/2), the code's shift removed by the vacuum level.
    for key, p in (("1", HEX_1), ("2", HEX_2), ("bulk", HEX_BULK)):
        tz = p.get("tz", 0.0)
        gamma_v = p["ev"] + tz
        k_v = p["ev"] + p["av"] * ((-1.5 - p["sv"]) ** 2 - (3 - p["sv"]) ** 2) + tz
        k_c = p["ec"] - 1.5 * p["bc"]
        np.testing.assert_allclose(_valley(rec, "Gamma", "valence")["edge_ev"][key], gamma_v, rtol=0, atol=1e-12)
        np.testing.assert_allclose(_valley(rec, "K", "valence")["edge_ev"][key], k_v, rtol=0, atol=1e-12)
        np.testing.assert_allclose(_valley(rec, "K", "conduction")["edge_ev"][key], k_c, rtol=0, atol=1e-12)
    assert rec["energy_reference"] == "vacuum level"
    assert rec["record_format"] == "lamellume-record/1"


@pytest.mark.parametrize("label, band, sign", [("Gamma", "valence", -1.0), ("K", "valence", -1.0),
                                               ("K", "conduction", 1.0)])
def test_hexagonal_masses_match_analytic_curvature(hex_result, label, band, sign):
    e, kx, ky, gamma, kpt = _hex_energy(band, HEX_1, A_HEX)
    expected = _sympy_masses(e, kx, ky, gamma if label == "Gamma" else kpt, sign)
    row = next(r for r in hex_result.report if r["label"] == label and r["band"] == band)
    np.testing.assert_allclose(sorted(row["masses_me"]), expected, rtol=0.01)
    # the record carries the samples; the screen refits them with the same band fit
    from lamellume import bandfit

    v = _valley(hex_result.record, label, band)
    fit = bandfit.fit_effective_mass(np.array(v["band_samples"]["k_per_angstrom"]),
                                     np.array(v["band_samples"]["energy_ev"]), band,
                                     fix_k0=v["band_samples"]["extremum_at_origin"])
    np.testing.assert_allclose(sorted(fit.masses_me), expected, rtol=0.01)
    # a path gives two directions at K; the C3 little group completes the tensor
    assert "little group" in row["constraints"] and "all three" in row["constraints"]


def test_record_passes_the_screen_contract(hex_result, checker):
    assert checker.check(hex_result.record, stem="hexa", structure_problem=lambda n: "file not found") == []


def test_dielectric_and_geometry(hex_result):
    rec = hex_result.record
    # crystal frame with the layer normal along z: the tensor is unchanged (common practice)
    np.testing.assert_allclose(rec["dielectric"]["electronic"], [[15, 0, 0], [0, 15, 0], [0, 0, 6]], atol=1e-12)
    np.testing.assert_allclose(rec["layer_spacing_angstrom"], 6.2, rtol=1e-9)
    np.testing.assert_allclose(rec["inplane_lattice_angstrom"], A_HEX, rtol=1e-9)
    assert set(rec["sources"]) == {"calculations/hexa/calcset.json", "calculations/hexa/eps.json",
                                   *(f"calculations/hexa/bands_{k}.json" for k in ("1", "2", "bulk"))}
    assert all(len(h) == 64 for h in rec["sources"].values())


RECT = {"ev": -4.9, "tx": 0.55, "ty": 0.22, "ec": -3.3, "ux": 0.60, "uy": 0.25}
RECT_BULK = {"ev": -4.6, "tx": 0.55, "ty": 0.22, "ec": -3.7, "ux": 0.60, "uy": 0.25}
# an arbitrary proper rotation of the whole crystal (axis (1, 2, 3), 40 degrees; Rodrigues' formula)
_AX = np.array([1.0, 2.0, 3.0]) / np.sqrt(14.0)
_KM = np.array([[0, -_AX[2], _AX[1]], [_AX[2], 0, -_AX[0]], [-_AX[1], _AX[0], 0]])
ROT = np.eye(3) + np.sin(0.7) * _KM + (1 - np.cos(0.7)) * _KM @ _KM


@pytest.fixture(scope="module")
def rect_result(tmp_path_factory):
    root = tmp_path_factory.mktemp("rect")
    calcs = {}
    for key, p, mesh in (("1", RECT, (72, 72, 1)), ("bulk", RECT_BULK, (24, 24, 3))):
        s = mc.rect_structure(key, tilt=(0.9, 0.6), rotation=ROT)
        calcs[key] = mc.band_structure_dict(s, mc.grid_kpoints(mesh), {"\\Gamma": [0, 0, 0]}, mc.rect_bands, p,
                                            line=False, shift_ev=0.4)
    eps_crystal = ROT @ np.diag([13.0, 11.0, 8.0]) @ ROT.T
    _write_compound(root, "rect", calcs, shift=0.4, extra={"fit_radius_per_angstrom": 0.05},
                    dielectric={"dielectric_format": "lamellume-dielectric/1", "frame": "crystal",
                                "electronic": eps_crystal.tolist()})
    return importer.read_compound(root, "rect")


@pytest.mark.parametrize("band, sign", [("valence", -1.0), ("conduction", 1.0)])
def test_anisotropic_valley_in_a_tilted_rotated_crystal(rect_result, band, sign):
    """Rectangular layers, third cell vector tilted (layers not normal to c), whole crystal rotated."""
    e, kx, ky = _rect_energy(band, RECT)
    expected = _sympy_masses(e, kx, ky, (0, 0), sign)
    row = next(r for r in rect_result.report if r["label"] == "Gamma" and r["band"] == band)
    np.testing.assert_allclose(sorted(row["masses_me"]), expected, rtol=0.01)
    # the lighter mass lies along a (3.0 A, the in-plane x axis of the layer frame): the cosine
    # band is stiffer along the shorter period for these hoppings (sympy Hessian above)
    assert abs(row["angle_deg"]) < 0.5
    v = _valley(rect_result.record, "Gamma", band)
    model = RECT["ev"] if band == "valence" else RECT["ec"]
    np.testing.assert_allclose(v["edge_ev"]["1"], model, atol=1e-12)


def test_tilted_rotated_dielectric_back_in_layer_frame(rect_result):
    # the tensor was written rotated by ROT; in the layer frame it is diag(13, 11, 8) again
    np.testing.assert_allclose(rect_result.record["dielectric"]["electronic"], np.diag([13.0, 11.0, 8.0]), atol=1e-9)
    np.testing.assert_allclose(rect_result.record["layer_spacing_angstrom"], 5.5, rtol=1e-9)


def test_spin_polarised_edges(tmp_path):
    calcs = {k: _hex_line(k, p, per_segment=121, spin_split=0.05) for k, p in (("1", HEX_1), ("bulk", HEX_BULK))}
    _write_compound(tmp_path, "spin", calcs)
    rec = importer.read_compound(tmp_path, "spin").record
    # valence edge from the spin-down channel (shifted up by 0.05 eV), conduction from spin up
    np.testing.assert_allclose(_valley(rec, "Gamma", "valence")["edge_ev"]["1"], HEX_1["ev"] + 0.05, atol=1e-12)
    np.testing.assert_allclose(_valley(rec, "K", "conduction")["edge_ev"]["1"], HEX_1["ec"] - 1.5 * HEX_1["bc"],
                               atol=1e-12)


def test_mid_path_valley_is_labelled_by_position_and_reported_undetermined(tmp_path):
    # second-neighbour term: a conduction minimum between Gamma and K (found numerically below)
    p1 = {**HEX_1, "bc": 0.28, "gc": 0.12}
    pb = {**HEX_BULK, "bc": 0.26, "gc": 0.12}
    calcs = {"1": _hex_line("1", p1), "bulk": _hex_line("bulk", pb)}
    _write_compound(tmp_path, "mid", calcs, extra={"fit_radius_per_angstrom": 0.03})
    with pytest.raises(ImportProblem) as info:
        importer.read_compound(tmp_path, "mid")
    assert info.value.field.endswith(".mass")
    assert "not determined" in info.value.reason and "unconstrained" in info.value.reason
    assert info.value.file == "calculations/mid/bands_1.json"
    # position of the minimum along Gamma-K from the model (scipy, independent of the import)
    from scipy.optimize import minimize_scalar

    f = lambda t: mc.hex_bands(np.array([[t, t, 0.0]]), p1)[1][0]  # noqa: E731
    t_min = minimize_scalar(f, bounds=(0.01, 1 / 3 - 0.01), method="bounded").x
    pct = round(100 * t_min / (1 / 3))
    label = f"K-Gamma_{100 - pct}"
    assert label in info.value.reason or f"K-Gamma_{100 - pct - 1}" in info.value.reason \
        or f"K-Gamma_{100 - pct + 1}" in info.value.reason
    # with the documented isotropic fallback the compound imports, with a warning
    desc = json.loads((tmp_path / "calculations" / "mid" / "calcset.json").read_text())
    desc["undetermined_mass"] = "isotropic"
    (tmp_path / "calculations" / "mid" / "calcset.json").write_text(json.dumps(desc))
    out = importer.read_compound(tmp_path, "mid")
    assert any("isotropic mass assumed" in w for w in out.warnings)


def test_vacuum_level_from_planar_average():
    # square-well profile: vacuum plateau at 4.2 eV over 10 of 40 points spaced 0.5 A (common practice)
    z = np.zeros(40)
    z[:10] = 4.2
    z[10:] = -3.0
    assert calculations.vacuum_level_from_profile(z, 0.5) == pytest.approx(4.2, abs=1e-12)
    with pytest.raises(ValueError, match="no vacuum plateau"):
        calculations.vacuum_level_from_profile(np.cos(np.linspace(0, 2 * np.pi, 40)), 0.15)


def test_local_potential_file_sets_the_reference(tmp_path):
    from pymatgen.io.vasp.inputs import Poscar
    from pymatgen.io.vasp.outputs import Locpot

    calcs = {k: _hex_line(k, p, per_segment=61) for k, p in (("1", HEX_1), ("bulk", HEX_BULK))}
    folder = _write_compound(tmp_path, "pot", calcs, vacuum={"1": "none", "bulk": -1.7})
    s = mc.hex_structure("1", a=A_HEX, c_bulk=6.2)
    nz = 60
    profile = np.where(np.abs(np.arange(nz) / nz - 0.5) < 0.2, -8.0, -1.7)  # slab in the middle, vacuum -1.7 eV
    data = np.broadcast_to(profile, (4, 4, nz)).copy()
    Locpot(Poscar(s), {"total": data}).write_file(str(folder / "LOCPOT_1"))
    desc = json.loads((folder / "calcset.json").read_text())
    desc["calculations"][0]["local_potential"] = "LOCPOT_1"
    (folder / "calcset.json").write_text(json.dumps(desc))
    rec = importer.read_compound(tmp_path, "pot").record
    np.testing.assert_allclose(_valley(rec, "Gamma", "valence")["edge_ev"]["1"], HEX_1["ev"], atol=1e-6)
    assert "calculations/pot/LOCPOT_1" in rec["sources"]


def test_outcar_dielectric(tmp_path):
    calcs = {k: _hex_line(k, p, per_segment=61) for k, p in (("1", HEX_1), ("bulk", HEX_BULK))}
    folder = _write_compound(tmp_path, "outc", calcs)
    (folder / "OUTCAR").write_text(
        "   number of bands    NBANDS=     20\n   total plane-waves  NPLWV =   1000\n   IBRION =     -1\n"
        "   LEPSILON=     T\n MACROSCOPIC STATIC DIELECTRIC TENSOR (including local field effects in DFT)\n"
        " ------------------------------------------------------\n"
        "           12.500000     0.000000     0.000000\n            0.000000    12.500000     0.000000\n"
        "            0.000000     0.000000     5.500000\n ------------------------------------------------------\n")
    desc = json.loads((folder / "calcset.json").read_text())
    desc["dielectric"] = {"outcar": "OUTCAR"}
    (folder / "calcset.json").write_text(json.dumps(desc))
    rec = importer.read_compound(tmp_path, "outc").record
    np.testing.assert_allclose(rec["dielectric"]["electronic"], np.diag([12.5, 12.5, 5.5]), atol=1e-12)


# ----------------------------------------------------------------------------- bad input


def _good(tmp_path, name="bad", **kw):
    calcs = {k: _hex_line(k, p, per_segment=61, **kw) for k, p in (("1", HEX_1), ("bulk", HEX_BULK))}
    return _write_compound(tmp_path, name, calcs)


def _expect(tmp_path, name, file, field, reason):
    with pytest.raises(ImportProblem) as info:
        importer.read_compound(tmp_path, name)
    assert info.value.file == file, info.value
    assert info.value.field == field, info.value
    assert reason in info.value.reason, info.value


def test_truncated_json(tmp_path):
    folder = _good(tmp_path)
    text = (folder / "bands_1.json").read_text()
    (folder / "bands_1.json").write_text(text[: len(text) // 2])
    _expect(tmp_path, "bad", "calculations/bad/bands_1.json", "(file)", "truncated JSON")


def test_not_a_band_structure(tmp_path):
    folder = _good(tmp_path)
    (folder / "bands_bulk.json").write_text(json.dumps({"@class": "Structure", "lattice": {}}))
    _expect(tmp_path, "bad", "calculations/bad/bands_bulk.json", "@class", "not a pymatgen band structure")


def test_path_without_labels(tmp_path):
    folder = _good(tmp_path)
    d = json.loads((folder / "bands_1.json").read_text())
    d["labels_dict"] = {}
    (folder / "bands_1.json").write_text(json.dumps(d))
    _expect(tmp_path, "bad", "calculations/bad/bands_1.json", "labels_dict", "without labelled k points")


def test_spin_mismatch(tmp_path):
    folder = _good(tmp_path)
    (folder / "bands_bulk.json").write_text(json.dumps(_hex_line("bulk", HEX_BULK, per_segment=61, spin_split=0.0)))
    _expect(tmp_path, "bad", "calculations/bad/bands_bulk.json", "bands", "spin mismatch")


def test_missing_layer_count(tmp_path):
    folder = _good(tmp_path)
    desc = json.loads((folder / "calcset.json").read_text())
    desc["calculations"] = [c for c in desc["calculations"] if c["layers"] != "bulk"]
    (folder / "calcset.json").write_text(json.dumps(desc))
    _expect(tmp_path, "bad", "calculations/bad/calcset.json", "calculations", "missing layer count bulk")


def test_inconsistent_structures(tmp_path):
    folder = _good(tmp_path)
    s = mc.hex_structure("bulk", a=3.6, c_bulk=6.2)  # a different in-plane lattice
    k, labels = mc.path_kpoints(mc.HEX_PATH, 61)
    d = mc.band_structure_dict(s, k, labels, mc.hex_bands, HEX_BULK, shift_ev=-1.7)
    (folder / "bands_bulk.json").write_text(json.dumps(d))
    _expect(tmp_path, "bad", "calculations/bad/bands_1.json", "structure", "inconsistent structures")


def test_no_reference_for_bulk(tmp_path):
    calcs = {k: _hex_line(k, p, per_segment=61) for k, p in (("1", HEX_1), ("bulk", HEX_BULK))}
    _write_compound(tmp_path, "ref", calcs, vacuum={"1": -1.7})
    _expect(tmp_path, "ref", "calculations/ref/bands_bulk.json", "calculations[bulk].vacuum_level_ev",
            "cannot be put on one reference")


def test_no_embedded_structure_and_no_cif(tmp_path):
    folder = _good(tmp_path)
    (folder / "bands_1.json").write_text(json.dumps(_hex_line("1", HEX_1, per_segment=61, embed_structure=False)))
    _expect(tmp_path, "bad", "calculations/bad/bands_1.json", "structure", "no structure")


def test_shard_rejects_one_and_carries_on(tmp_path):
    good = _good(tmp_path, "good")
    bad = _good(tmp_path, "broken")
    (bad / "bands_1.json").write_text("{")
    out = {"records": str(tmp_path / "out" / "records"), "rejects": str(tmp_path / "out" / "rejects.parquet"),
           "report": str(tmp_path / "out" / "report.parquet")}
    counts = importer.run_import(["good", "broken"], str(tmp_path), str(tmp_path / "cache"), out)
    assert counts == {"imported": 1, "rejected": 1, "reused": 0}
    from lamellume import io

    rejects = io.read_parquet(out["rejects"])
    assert list(rejects["entry_id"]) == ["broken"]
    assert list(rejects["source_file"]) == ["calculations/broken/bands_1.json"]
    assert (Path(out["records"]) / "good.json").exists()
    # a revised calculation re-imports its compound alone
    d = json.loads((good / "bands_bulk.json").read_text())
    d["efermi"] += 1e-3
    (good / "bands_bulk.json").write_text(json.dumps(d))
    counts = importer.run_import(["good", "broken"], str(tmp_path), str(tmp_path / "cache"), out)
    assert counts == {"imported": 1, "rejected": 0, "reused": 1}
    assert math.isfinite(io.read_parquet(out["report"])["fit_rms_ev"].iloc[0])


def test_labels_are_cleaned():
    assert calculations.sanitize_label("\\Gamma") == "Gamma"
    assert calculations.sanitize_label("K$_1$") == "K_1"
    assert calculations.sanitize_label("\\Sigma_1") == "Sigma_1"


def test_segments_follow_pymatgen_branches():
    # pymatgen's BandStructureSymmLine.branches is the independent reference
    from pymatgen.electronic_structure.bandstructure import BandStructureSymmLine

    s = mc.hex_structure("1")
    k, labels = mc.path_kpoints(mc.HEX_PATH, 7)
    d = mc.band_structure_dict(s, k, labels, mc.hex_bands, HEX_1)
    bs = BandStructureSymmLine.from_dict(d)
    from lamellume import calcio

    band, _ = calcio.band_data_from_dict(d, "x")
    ours = calculations.segments_from_labels(calculations.kpoint_labels(band))
    assert ours == [(b["start_index"], b["end_index"]) for b in bs.branches]


def test_off_label_grid_valley_from_an_irreducible_grid(tmp_path):
    """A conduction minimum on the Gamma-M line, away from labels, on irreducible grids (pymatgen's own
    ``get_ir_reciprocal_mesh``): named after the nearest labelled point, mass against sympy."""
    from pymatgen.symmetry.analyzer import SpacegroupAnalyzer
    from scipy.optimize import minimize_scalar

    p1 = {**HEX_1, "bc": 0.1, "gc": 0.2}
    pb = {**HEX_BULK, "bc": 0.1, "gc": 0.2}
    labels = {"\\Gamma": [0, 0, 0], "M": [0.5, 0, 0], "K": [1 / 3, 1 / 3, 0]}
    calcs = {}
    for key, p, mesh in (("1", p1, (192, 192, 1)), ("bulk", pb, (48, 48, 2))):
        s = mc.hex_structure(key, a=A_HEX, c_bulk=6.2)
        ir = SpacegroupAnalyzer(s).get_ir_reciprocal_mesh(mesh=mesh, is_shift=(0, 0, 0))
        k = np.array([kp for kp, _ in ir], dtype=float)
        assert len(k) < np.prod(mesh) / 4  # really irreducible
        calcs[key] = mc.band_structure_dict(s, k, labels, mc.hex_bands, p, line=False, shift_ev=-1.7)
    _write_compound(tmp_path, "grid", calcs, extra={"fit_radius_per_angstrom": 0.03})
    out = importer.read_compound(tmp_path, "grid")
    cond = [r for r in out.report if r["band"] == "conduction"]
    assert len(cond) == 1, cond  # the six images are one valley
    # the grid minimum: the grid point of the Gamma-M line with the lowest model energy (numpy, model formula)
    t = np.arange(0, 97) / 192
    e_line = mc.hex_bands(np.c_[t, np.zeros_like(t), np.zeros_like(t)], p1)[1]
    t_grid = t[np.argmin(e_line)]
    b = 4 * np.pi / (np.sqrt(3) * A_HEX)  # |b1| of the hexagonal lattice (common practice)
    assert cond[0]["label"] == f"M_{round(100 * (0.5 - t_grid) * b)}"
    # mass at the true minimum (scipy on the model line, sympy Hessian), in the layer frame
    t_min = minimize_scalar(lambda x: mc.hex_bands(np.array([[x, 0.0, 0.0]]), p1)[1][0],
                            bounds=(0.2, 0.49), method="bounded", options={"xatol": 1e-12}).x
    e, kx, ky, _, _ = _hex_energy("conduction", p1, A_HEX)
    import sympy as sp

    amat = np.array([[A_HEX, 0.0], [-A_HEX / 2, A_HEX * np.sqrt(3) / 2]])
    bvec = 2 * np.pi * np.linalg.inv(amat).T
    kmin = t_min * bvec[0]
    expected = _sympy_masses(e, kx, ky, (sp.Float(kmin[0], 30), sp.Float(kmin[1], 30)), 1.0)
    # 2 %, not 1 %: the minimum lies between grid points (0.09 of a spacing from the nearest one), and a
    # quadratic fit returns the curvature at the centre of its samples; the model's third derivative
    # along the line moves it by about 1 % over that offset (the fit against the analytic Hessian at
    # the true minimum, not at the grid point, keeps this visible).
    np.testing.assert_allclose(sorted(cond[0]["masses_me"]), expected, rtol=0.02)


def test_slab_normal_of_a_tilted_rotated_slab():
    s = mc.rect_structure("2", tilt=(0.9, 0.6), rotation=ROT)
    normal, vacuum = calculations.slab_normal(s.lattice.matrix, s.frac_coords)
    a1, a2 = s.lattice.matrix[0], s.lattice.matrix[1]
    expected = np.cross(a1, a2) / np.linalg.norm(np.cross(a1, a2))  # the layer plane is spanned by a1, a2
    expected = expected if expected[np.argmax(np.abs(expected))] > 0 else -expected
    np.testing.assert_allclose(normal, expected, atol=1e-12)
    # vacuum 15 A, two layers 5.5 A apart, each 1 A thick (make_calculations.rect_structure)
    np.testing.assert_allclose(vacuum, 15.0 + 5.5 - 1.0, rtol=1e-9)
    with pytest.raises(ValueError, match="no vacuum"):
        bulk = mc.rect_structure("bulk")
        calculations.slab_normal(bulk.lattice.matrix, bulk.frac_coords)


def test_import_rejects_have_the_columns_of_the_rejects_table():
    from lamellume import pipeline

    assert importer.REJECT_COLUMNS == pipeline.REJECT_COLUMNS
