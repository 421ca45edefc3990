"""Tests of lamellume.structure: layer geometry from CIF text.

Structures are built with pymatgen from lattice parameters and Wyckoff
positions, written to CIF text with CifWriter and analysed from that text, so
the parsing path is exercised. Sources of the crystallographic data are named
beside each case.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from pymatgen.core import Lattice, Structure
from pymatgen.io.cif import CifWriter

from lamellume.structure import (
    LayerGeometry,
    StructureError,
    analyse_cif_text,
    cif_content_hash,
    compare_geometry,
)

FUZZ_DIR = Path(__file__).parent / "data" / "cif_fuzz"
BONDINGS = ("crystalnn", "covalent_radii")


def _graphite():
    # Bernal graphite, P6_3/mmc, a = 2.46, c = 6.71 A, C at 2b and 2c (from memory).
    return Structure.from_spacegroup(
        "P6_3/mmc", Lattice.hexagonal(2.46, 6.71), ["C", "C"], [[0, 0, 0.25], [1 / 3, 2 / 3, 0.25]]
    )


def _mos2():
    # 2H-MoS2, P6_3/mmc, a = 3.16, c = 12.30 A, Mo 2c (1/3,2/3,1/4), S 4f z = 0.621 (from memory).
    return Structure.from_spacegroup(
        "P6_3/mmc", Lattice.hexagonal(3.16, 12.30), ["Mo", "S"], [[1 / 3, 2 / 3, 0.25], [1 / 3, 2 / 3, 0.621]]
    )


def _hbn():
    # h-BN, P6_3/mmc, a = 2.504, c = 6.66 A, B 2c, N 2d (from memory).
    return Structure.from_spacegroup(
        "P6_3/mmc", Lattice.hexagonal(2.504, 6.66), ["B", "N"], [[1 / 3, 2 / 3, 0.25], [1 / 3, 2 / 3, 0.75]]
    )


def _black_phosphorus():
    # Black phosphorus, Cmce, a = 3.3136, b = 10.478, c = 4.3763 A, P 8f (0, 0.10168, 0.08056);
    # A. Brown, S. Rundqvist, Acta Cryst. 19, 684 (1965) (values from memory). Layers normal to b.
    return Structure.from_spacegroup(
        "Cmce", Lattice.orthorhombic(3.3136, 10.478, 4.3763), ["P"], [[0, 0.10168, 0.08056]]
    )


def _nacl():
    # Rocksalt NaCl, a = 5.64 A (from memory).
    return Structure.from_spacegroup("Fm-3m", Lattice.cubic(5.64), ["Na", "Cl"], [[0, 0, 0], [0.5, 0.5, 0.5]])


def _si():
    # Diamond Si, a = 5.431 A (from memory).
    return Structure.from_spacegroup("Fd-3m", Lattice.cubic(5.431), ["Si"], [[0, 0, 0]])


def _gaas():
    # Zinc-blende GaAs, a = 5.653 A (from memory).
    return Structure.from_spacegroup("F-43m", Lattice.cubic(5.653), ["Ga", "As"], [[0, 0, 0], [0.25, 0.25, 0.25]])


def _graphite_stacked_along_a():
    # Graphite relabelled so the stacking axis is a (a = 6.71, b = c = 2.46 A, alpha = 120 deg):
    # pymatgen puts c along z, so the layer normal is perpendicular to z (not trivially z).
    lat = Lattice.from_parameters(6.71, 2.46, 2.46, 120.0, 90.0, 90.0)
    g = _graphite()
    frac = g.frac_coords[:, [2, 0, 1]]
    return Structure(lat, g.species, frac)


def _mos2_oblique():
    # 2H-MoS2 in an equivalent oblique cell c' = c + a (unimodular): c' is not normal to the
    # layers, and since pymatgen puts c' along z the normal is tilted away from z.
    s = _mos2()
    s.make_supercell([[1, 0, 0], [0, 1, 0], [1, 0, 1]])
    return s


def _cif(structure) -> str:
    return str(CifWriter(structure))


# (builder, formula, layers per cell, repeat distance A, in-plane lattice A, layer thickness A)
LAYERED = {
    # graphite: repeat c/2 = 3.355 A, flat sheets (from memory)
    "graphite": (_graphite, "C", 2, 6.71 / 2, 2.46, 0.0),
    # 2H-MoS2: repeat c/2 = 6.15 A; S at z = 0.379 and 0.121 around Mo at z = 1/4 (4f with
    # z = 0.621 mapped by the 6_3 axis), so the S-S thickness is 2 (0.379 - 0.25) c = 3.173 A
    "MoS2": (_mos2, "MoS2", 2, 12.30 / 2, 3.16, 2 * (0.379 - 0.25) * 12.30),
    # h-BN: repeat c/2 = 3.33 A, flat sheets (from memory)
    "hBN": (_hbn, "BN", 2, 6.66 / 2, 2.504, 0.0),
    # black phosphorus: repeat b/2 = 5.239 A; the puckered layer centred on y = 0 has atoms at
    # y = +-0.10168, so its thickness is 2 y b = 2.131 A; shortest in-plane vector a = 3.3136 A
    "black_P": (_black_phosphorus, "P", 2, 10.478 / 2, 3.3136, 2 * 0.10168 * 10.478),
    "graphite_along_a": (_graphite_stacked_along_a, "C", 2, 6.71 / 2, 2.46, 0.0),
    "MoS2_oblique": (_mos2_oblique, "MoS2", 2, 12.30 / 2, 3.16, 2 * (0.379 - 0.25) * 12.30),
}


@pytest.mark.parametrize("bonding", BONDINGS)
@pytest.mark.parametrize("name", sorted(LAYERED))
def test_layered_geometry(name, bonding):
    build, formula, n_layers, repeat, a_inplane, thickness = LAYERED[name]
    geom = analyse_cif_text(_cif(build()), bonding=bonding)
    assert isinstance(geom, LayerGeometry)
    assert geom.formula == formula
    assert geom.is_layered and geom.dimensionality == 2
    assert geom.layers_per_cell == n_layers
    # CIF text carries 8 decimals; 1e-5 A is well above that round-off.
    np.testing.assert_allclose(geom.repeat_distance_angstrom, repeat, atol=1e-5)
    np.testing.assert_allclose(geom.inplane_lattice_angstrom, a_inplane, atol=1e-5)
    np.testing.assert_allclose(geom.vdw_gap_angstrom, repeat - thickness, atol=1e-5)
    np.testing.assert_allclose(np.linalg.norm(geom.layer_normal), 1.0, atol=1e-12)


@pytest.mark.parametrize("bonding", BONDINGS)
@pytest.mark.parametrize("name", ["graphite", "MoS2", "hBN"])
def test_hexagonal_normal_is_z(name, bonding):
    # For a hexagonal cell pymatgen puts c along z and c is normal to the basal layers.
    geom = analyse_cif_text(_cif(LAYERED[name][0]()), bonding=bonding)
    np.testing.assert_allclose(geom.layer_normal, (0.0, 0.0, 1.0), atol=1e-7)


@pytest.mark.parametrize("bonding", BONDINGS)
@pytest.mark.parametrize("name", ["graphite_along_a", "MoS2_oblique", "black_P"])
def test_normal_is_perpendicular_to_inplane_vectors(name, bonding):
    # Geometry: the normal is orthogonal to the in-plane lattice vectors and parallel to the
    # stacking direction of the original (untransformed) cell.
    structure = LAYERED[name][0]()
    geom = analyse_cif_text(_cif(structure), bonding=bonding)
    # Rebuild the lattice exactly as the CIF parser does (from the six cell parameters).
    lat = Lattice.from_parameters(*structure.lattice.abc, *structure.lattice.angles)
    n = np.asarray(geom.layer_normal)
    if name == "graphite_along_a":
        inplane = [lat.matrix[1], lat.matrix[2]]
        assert abs(n[2]) < 1e-7  # normal perpendicular to z here
    elif name == "MoS2_oblique":
        inplane = [lat.matrix[0], lat.matrix[1]]
        assert abs(n[2]) < 0.99  # tilted away from z
    else:
        inplane = [lat.matrix[0], lat.matrix[2]]
        np.testing.assert_allclose(n, (0.0, 1.0, 0.0), atol=1e-7)
    for v in inplane:
        assert abs(np.dot(n, v)) < 1e-6 * np.linalg.norm(v)


@pytest.mark.parametrize("bonding", BONDINGS)
@pytest.mark.parametrize(
    "build, formula",
    [
        (_nacl, "NaCl"),  # rocksalt: 3D ionic network (from memory)
        (_si, "Si"),  # diamond: 3D covalent network (from memory)
        (_gaas, "GaAs"),  # zinc blende: 3D covalent network (from memory)
    ],
)
def test_non_layered(build, formula, bonding):
    geom = analyse_cif_text(_cif(build()), bonding=bonding)
    assert geom.formula == formula
    assert not geom.is_layered
    assert geom.dimensionality == 3
    assert geom.layers_per_cell == 0
    assert geom.layer_normal is None
    assert geom.repeat_distance_angstrom is None
    assert geom.vdw_gap_angstrom is None
    assert geom.inplane_lattice_angstrom is None


def test_supercell_along_normal_keeps_repeat():
    # Scaling law: doubling the cell along c doubles layers_per_cell, repeat distance unchanged.
    s = _mos2()
    s.make_supercell([1, 1, 2])
    geom = analyse_cif_text(_cif(s), bonding="covalent_radii")
    assert geom.layers_per_cell == 4
    np.testing.assert_allclose(geom.repeat_distance_angstrom, 6.15, atol=1e-5)


def test_inplane_supercell_reports_primitive_inplane_vector():
    # The in-plane lattice constant is the shortest in-plane lattice vector; a 2x1 in-plane
    # supercell still contains the primitive vector b = 3.16 A (common practice).
    s = _mos2()
    s.make_supercell([2, 1, 1])
    geom = analyse_cif_text(_cif(s), bonding="covalent_radii")
    np.testing.assert_allclose(geom.inplane_lattice_angstrom, 3.16, atol=1e-5)
    assert geom.layers_per_cell == 2


def test_isolated_intercalant_is_flagged_not_layered():
    # Toy (not a real phase): graphite sheets with the gap expanded to c = 10 A, a 2x2 in-plane
    # supercell and one Li at (0, 0, 1/2): 2.5 A from the nearest C and 4.92 A from the next Li,
    # beyond 1.1 x (r_Li + r_C) = 2.21 A and 1.1 x 2 r_Li = 2.82 A (Cordero radii). Li forms a
    # 0D component between the layers: mixed-dimensional, not a clean vdW stack.
    s = Structure.from_spacegroup(
        "P6_3/mmc", Lattice.hexagonal(2.46, 10.0), ["C", "C"], [[0, 0, 0.25], [1 / 3, 2 / 3, 0.25]]
    )
    s.make_supercell([2, 2, 1])
    s.append("Li", [0.0, 0.0, 0.5])
    geom = analyse_cif_text(_cif(s), bonding="covalent_radii", tolerance=0.1)
    assert geom.dimensionality == 2
    assert not geom.is_layered
    assert any("mixed dimensionality" in w for w in geom.warnings)


def test_bridging_atom_merges_two_sheets_into_one_layer():
    # Toy: Li at (0, 0, 1/2) in Bernal graphite sits 1.68 A from the C atoms of both sheets of
    # the cell, bonding them into one bilayer slab; the next gap stays empty. Expected: one
    # 2D component per cell, repeat = c = 6.71 A, gap = c - c/2 = 3.355 A (geometry).
    s = _graphite()
    s.append("Li", [0.0, 0.0, 0.5])
    geom = analyse_cif_text(_cif(s), bonding="covalent_radii", tolerance=0.1)
    assert geom.is_layered and geom.layers_per_cell == 1
    np.testing.assert_allclose(geom.repeat_distance_angstrom, 6.71, atol=1e-5)
    np.testing.assert_allclose(geom.vdw_gap_angstrom, 6.71 / 2, atol=1e-5)


def test_substitutional_disorder_uses_majority_species():
    # Mo0.75W0.25S2: full occupancy with mixed species is handled by the majority species.
    s = _mos2()
    s.replace_species({"Mo": {"Mo": 0.75, "W": 0.25}})
    geom = analyse_cif_text(_cif(s), bonding="covalent_radii")
    assert geom.is_layered
    assert any("substitutional disorder" in w for w in geom.warnings)


def test_no_output_on_stdout_stderr(capfd):
    analyse_cif_text(_cif(_mos2()), bonding="crystalnn")
    with pytest.raises(StructureError):
        analyse_cif_text((FUZZ_DIR / "truncated.cif").read_bytes())
    out, err = capfd.readouterr()
    assert out == "" and err == ""


def test_str_and_bytes_give_same_result():
    text = _cif(_hbn())
    assert analyse_cif_text(text) == analyse_cif_text(text.encode("utf-8"))


def test_fuzz_control_is_valid():
    # The fuzz fixtures are mutations of this valid h-BN (AA' stacking) file.
    good = (FUZZ_DIR / "non_utf8.cif").read_bytes().split(b"\n", 1)[1]
    geom = analyse_cif_text(good, bonding="covalent_radii")
    assert geom.is_layered and geom.layers_per_cell == 2


FUZZ_FILES = sorted(p.name for p in FUZZ_DIR.glob("*.cif"))


def test_fuzz_set_is_large_enough():
    assert len(FUZZ_FILES) >= 10


@pytest.mark.parametrize("bonding", BONDINGS)
@pytest.mark.parametrize("name", FUZZ_FILES)
def test_fuzz_raises_structure_error(name, bonding, capfd):
    data = (FUZZ_DIR / name).read_bytes()
    with pytest.raises(StructureError) as info:
        analyse_cif_text(data, bonding=bonding)
    assert type(info.value) is StructureError
    assert len(str(info.value)) > 10
    out, err = capfd.readouterr()
    assert out == "" and err == ""


@pytest.mark.parametrize(
    "kwargs",
    [{"bonding": "voronoi"}, {"tolerance": -0.1}, {"tolerance": 1.5}, {"tolerance": "x"}],
)
def test_bad_arguments(kwargs):
    with pytest.raises(StructureError):
        analyse_cif_text(_cif(_hbn()), **kwargs)


@pytest.mark.parametrize("value", [None, 12, 3.5, ["data_x"]])
def test_wrong_type_raises_structure_error(value):
    with pytest.raises(StructureError):
        analyse_cif_text(value)


def test_cif_content_hash_normalises_line_endings():
    text = _cif(_hbn())
    h = cif_content_hash(text)
    assert len(h) == 64 and int(h, 16) >= 0
    assert cif_content_hash(text.replace("\n", "\r\n")) == h
    assert cif_content_hash(text.replace("\n", "\r")) == h
    assert cif_content_hash(text.encode()) == h
    assert cif_content_hash(text + "#") != h


def test_compare_geometry_policy():
    geom = analyse_cif_text(_cif(_mos2()), bonding="covalent_radii")
    # Agreement within 5 %: input values kept, no message.
    spacing, lattice, msgs = compare_geometry(6.2, 3.17, geom, rel_tol=0.05)
    assert (spacing, lattice, msgs) == (6.2, 3.17, ())
    # Disagreement: input value still wins, one message per disagreeing quantity.
    spacing, lattice, msgs = compare_geometry(7.0, 3.16, geom, rel_tol=0.05)
    assert spacing == 7.0 and lattice == 3.16
    assert len(msgs) == 1 and "layer spacing" in msgs[0] and "input value used" in msgs[0]
    # Missing input: structure value used and reported.
    spacing, lattice, msgs = compare_geometry(None, float("nan"), geom, rel_tol=0.05)
    assert math.isclose(spacing, 6.15, abs_tol=1e-5) and math.isclose(lattice, 3.16, abs_tol=1e-5)
    assert len(msgs) == 2
    # No structure: inputs pass through.
    assert compare_geometry(6.0, 3.0, None) == (6.0, 3.0, ())


def test_geometry_is_frozen():
    geom = analyse_cif_text(_cif(_hbn()), bonding="covalent_radii")
    with pytest.raises(AttributeError):
        geom.is_layered = False
