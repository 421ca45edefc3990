"""Normalisation of records: band samples given in the crystal frame reach the layer frame.

The record is the hand-written fixture tests/unit/data/record_valid.json; its K conduction
valley is replaced by band samples built here from hbar^2/(2 m_e) with CODATA 2018 values
typed in this file (E. Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)), not the library's
constant.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from lamellume import bandfit, ingest

HBAR_J_S = 1.054571817e-34  # CODATA 2018 (exact in the 2019 SI)
M_E_KG = 9.1093837015e-31  # CODATA 2018
E_C = 1.602176634e-19  # exact (2019 SI)
C = HBAR_J_S**2 / (2.0 * M_E_KG) / E_C * 1e20  # hbar^2/(2 m_e), eV Angstrom^2


def _samples_normal_along_y():
    """K conduction band with in-plane masses 0.5 / 0.5 and out-of-plane 2.0; normal along y.

    Layer-frame axes (x, y, z) map to crystal axes (z, x, y): a proper rotation whose third
    column (the layer normal) is +y.
    """
    g = np.linspace(-0.04, 0.04, 3)
    kl = np.stack(np.meshgrid(g, g, g, indexing="ij"), axis=-1).reshape(-1, 3)
    e = -4.1 + C * (kl[:, 0] ** 2 / 0.5 + kl[:, 1] ** 2 / 0.5 + kl[:, 2] ** 2 / 2.0)
    q = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [1.0, 0.0, 0.0]])  # columns: layer x, y, z in crystal
    np.testing.assert_array_equal(q[:, 2], [0.0, 1.0, 0.0])
    assert np.isclose(np.linalg.det(q), 1.0)
    return (kl @ q.T).tolist(), e.tolist()


def _normalize(record):
    return ingest.normalize(record, source_file="x.json", input_hash="h", max_layers=6, geometry=None,
                            structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05)


def _crystal_frame(record, normal):
    record["dielectric"] = {"frame": "crystal", "normal": list(normal),
                            "electronic": [[10.0, 0.0, 0.0], [0.0, 5.0, 0.0], [0.0, 0.0, 10.0]]}
    return record


def test_crystal_frame_samples_fitted_in_layer_plane(record):
    k, e = _samples_normal_along_y()
    _crystal_frame(record, (0.0, 1.0, 0.0))
    record["valleys"][2] = {"label": "K", "band": "conduction", "edge_ev": {"1": -4.1, "bulk": -4.15},
                            "band_samples": {"k_per_angstrom": k, "energy_ev": e, "extremum_at_origin": True}}
    norm = _normalize(record)
    row = norm.valleys[2]
    np.testing.assert_allclose([row["inv_mass_xx"], row["inv_mass_yy"], row["inv_mass_xy"]], [2.0, 2.0, 0.0],
                               atol=1e-6)
    np.testing.assert_allclose(row["mass_perp_me"], 2.0, rtol=1e-6)
    assert row["mass_source"] == "fitted"
    # The tensor of the same record comes out as diag(10, 10, 5) in the layer frame.
    np.testing.assert_allclose([norm.entry["eps_inf_xx"], norm.entry["eps_inf_yy"], norm.entry["eps_inf_zz"]],
                               [10.0, 10.0, 5.0], atol=1e-12)


def test_two_component_samples_with_tilted_normal_rejected(record):
    _crystal_frame(record, (0.0, 1.0, 0.0))
    g = np.linspace(-0.04, 0.04, 3)
    k = [[a, b] for a in g for b in g]
    record["valleys"][2] = {"label": "K", "band": "conduction", "edge_ev": {"1": -4.1, "bulk": -4.15},
                            "band_samples": {"k_per_angstrom": k,
                                             "energy_ev": [C * (a * a + b * b) / 0.5 for a, b in k],
                                             "extremum_at_origin": True}}
    with pytest.raises(ingest.Rejected) as info:
        _normalize(record)
    (problem,) = info.value.problems
    assert problem.field == "valleys[2].band_samples"
    assert "not along z" in problem.reason


def test_masses_and_rotations_prepared_for_many_records_change_nothing(record):
    # common practice: normalize with the stacked mass fits, isotropic masses and rotations of
    # prepare_masses / layer_rotations gives exactly the rows it computes alone (repr: exact floats)
    k, e = _samples_normal_along_y()
    crystal = _crystal_frame(copy.deepcopy(record), (0.0, 1.0, 0.0))
    crystal["valleys"][2] = {"label": "K", "band": "conduction", "edge_ev": {"1": -4.1, "bulk": -4.15},
                             "band_samples": {"k_per_angstrom": k, "energy_ev": e, "extremum_at_origin": True}}
    tilted = _crystal_frame(copy.deepcopy(crystal), (0.3, 0.2, 0.9))
    tilted["id"] = "tilted"
    records = [record, crystal, tilted]
    normals = [ingest.layer_normal(r, None) for r in records]
    prepared = ingest.prepare_masses(records, normals)
    rotations = ingest.layer_rotations(records, normals)
    assert rotations[0] is None and isinstance(prepared[1][2], bandfit.MassFit)
    for rec, masses, rotation in zip(records, prepared, rotations):
        alone = _normalize(rec)
        together = ingest.normalize(rec, source_file="x.json", input_hash="h", max_layers=6, geometry=None,
                                    structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05,
                                    prepared=masses, rotation=rotation)
        assert repr((together.entry, together.valleys)) == repr((alone.entry, alone.valleys))
