"""The assembled screen against independent references and a worked example.

The record is the hand-written fixture tests/unit/data/record_valid.json:
K valleys with m_e = m_h = 0.5 (mu = 0.25 m_e), a layer-frame tensor
diag(10, 10, 5), r0 = 40 Angstrom, scissor 0.5 eV.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from scipy import constants as sc

from lamellume import ingest, keldysh, screen, tables
from lamellume import layers as layer_model

# CODATA via scipy.constants, independent of lamellume.units.
RY_EV = sc.value("Rydberg constant times hc in eV")
HC_EV_NM = sc.h * sc.c / sc.e * 1e9

SETTINGS = {
    "layers": {"max_layers": 6, "fit_exponent": False},
    "structure": {"non_layered": "warn", "reconcile_rel_tol": 0.05},
    "environments": {"suspended": {"top": 1.0, "bottom": 1.0}, "hbn": {"top": 4.5, "bottom": 4.5}},
    "monolayer": {"hydrogenic_eps": 0.0, "few_layer_r0_scaling": True},
    "excitons": {"max_binding_fraction": 0.5, "model_rel_unc_layers": 0.1, "model_rel_unc_bulk": 0.2},
    "emission_bands": [{"name": "visible", "min_nm": 380, "max_nm": 750},
                       {"name": "near-infrared", "min_nm": 750, "max_nm": 1260}],
}


@pytest.fixture(scope="module")
def table():
    return keldysh.build_table()


def frames(*records):
    entries, valleys = [], []
    for rec in records:
        norm = ingest.normalize(rec, source_file=f"{rec['id']}.json", input_hash="h" + rec["id"], max_layers=6,
                                geometry=None, structure_hash=None, non_layered="warn", reconcile_rel_tol=0.05)
        entries.append(norm.entry)
        valleys.extend(norm.valleys)
    return (pd.DataFrame(entries, columns=ingest.ENTRY_COLUMNS),
            pd.DataFrame(valleys, columns=ingest.valley_columns(6)))


def _screen(record, table):
    e, v = frames(record)
    return screen.screen_entries(e, v, SETTINGS, table)


def test_bulk_and_quasi2d_against_hydrogen_formulas(record, table):
    long, wide = _screen(record, table)
    mu, eps = 0.25, math.sqrt(10.0 * 5.0)
    # 3D Wannier-Mott: E_b = Ry mu / eps^2, a = a0 eps / mu (hydrogen scaled; CODATA via scipy.constants)
    np.testing.assert_allclose(wide["bulk_binding_ev"], RY_EV * mu / eps**2, rtol=1e-12)
    # The fixture gives out-of-plane masses: the bulk row's binding, 2s/3s and radius come from the
    # anisotropic model, and the wide bulk radius is the bulk row's radius (one convention).
    bulk = long[long["layers"] == 0].iloc[0]
    assert bulk["binding_model"] == "3d-anisotropic"
    np.testing.assert_allclose(wide["bulk_radius_angstrom"].iloc[0], bulk["radius_angstrom"], rtol=0)
    # 2s, 3s of the same model: E_1s / n^2 of the bulk row's own binding (hydrogenic series, common practice)
    np.testing.assert_allclose([bulk["binding_2s_ev"], bulk["binding_3s_ev"]],
                               [bulk["binding_ev"] / 4, bulk["binding_ev"] / 9], rtol=1e-12)
    # Units: the bulk row carries a 3D Mott density in cm^-3 and no areal one; layer rows the reverse.
    assert np.isnan(bulk["mott_density_per_cm2"]) and bulk["mott_density_3d_per_cm3"] > 0
    layer_rows = long[long["layers"] > 0]
    assert layer_rows["mott_density_3d_per_cm3"].isna().all() and (layer_rows["mott_density_per_cm2"] > 0).all()
    # Strict 2D ground state binds four times the 3D one (common practice; Yang et al. PRA 43, 1186 (1991)).
    np.testing.assert_allclose(wide["quasi2d_binding_ev"], 4 * wide["bulk_binding_ev"], rtol=1e-12)


def test_isotropic_bulk_radius_is_inplane_rms_of_hydrogen(record, table):
    # Without out-of-plane masses the bulk exciton is hydrogen scaled: a = a0 eps / mu (CODATA via
    # scipy.constants). The stated convention is the in-plane rms radius sqrt(<x^2 + y^2>) of
    # |psi|^2 ~ exp(-2 r / a), computed here by scipy quadrature; the 3D Mott density is
    # (0.26 / a)^3 with the decay length a (Edwards and Sienko, PRB 17, 2575 (1978)).
    from scipy.integrate import quad

    flat = {**record, "valleys": [{**v, "mass": {k: x for k, x in v["mass"].items() if k != "perpendicular_me"}}
                                  for v in record["valleys"]]}
    long, wide = _screen(flat, table)
    a = sc.physical_constants["Bohr radius"][0] / 1e-10 * math.sqrt(10.0 * 5.0) / 0.25
    dens = lambda r: math.exp(-2 * r / a) * r * r  # noqa: E731  radial weight; <x^2 + y^2> = (2/3) <r^2>
    r2 = quad(lambda r: r * r * dens(r), 0, 50 * a)[0] / quad(dens, 0, 50 * a)[0]
    bulk = long[long["layers"] == 0].iloc[0]
    assert bulk["binding_model"] == "3d-hydrogenic"
    np.testing.assert_allclose(bulk["radius_angstrom"], math.sqrt(2.0 / 3.0 * r2), rtol=1e-9)
    np.testing.assert_allclose(wide["bulk_radius_angstrom"].iloc[0], math.sqrt(2.0 / 3.0 * r2), rtol=1e-9)
    np.testing.assert_allclose(bulk["mott_density_3d_per_cm3"], (0.26 / (a * 1e-8)) ** 3, rtol=1e-9)
    np.testing.assert_allclose(bulk["binding_2s_ev"], RY_EV * 0.25 / 50.0 / 4, rtol=1e-12)


def test_monolayer_keldysh_matches_direct_solve(record, table):
    long, _ = _screen(record, table)
    for env, kappa in (("suspended", 1.0), ("hbn", 4.5)):
        row = long[(long["layers"] == 1) & (long["environment"] == env)].iloc[0]
        levels = keldysh.solve_levels_ev(0.25, 40.0, kappa)
        direct = np.asarray(levels[0] if isinstance(levels, tuple) else levels).ravel()[0]
        np.testing.assert_allclose(row["binding_ev"], direct, rtol=1e-5)
        # r0(N) = N r0(1): the bilayer uses 80 Angstrom (stated approximation).
        bi = long[(long["layers"] == 2) & (long["environment"] == env)].iloc[0]
        assert bi["r0_angstrom"] == pytest.approx(80.0)
        assert bi["binding_ev"] < row["binding_ev"]


def test_optical_gap_and_wavelength(record, table):
    long, _ = _screen(record, table)
    row = long[(long["layers"] == 1) & (long["environment"] == "hbn")].iloc[0]
    # monolayer K-K gap with scissor: (-4.1 + 0.5) - (-5.9) = 2.3 eV
    assert row["direct_gap_ev"] == pytest.approx(2.3)
    assert row["optical_gap_ev"] == pytest.approx(2.3 - row["binding_ev"])
    # lambda = hc / E with hc from CODATA (scipy.constants): 1239.84198 eV nm
    assert row["emission_nm"] == pytest.approx(HC_EV_NM / row["optical_gap_ev"], rel=1e-12)


def test_worked_example_gap_character_by_layer_count(record, table):
    """Hand-worked example: chain factors 1, 1/2, 1 - cos(pi/4), 1 - cos(pi/5) for N = 1..4.

    N=3: Gamma valence -5.6 - 0.8*0.2929 = -5.834 < K valence -5.8 - 0.1*0.2929 = -5.829 -> direct at K.
    N=4: Gamma -5.6 - 0.8*0.1910 = -5.753 > K -5.819 -> the maximum moves to Gamma: indirect.
    Bulk: Gamma valence, Q conduction (-4.2 < -4.15): indirect.
    """
    long, wide = _screen(record, table)
    per_layer = long[long["environment"].isin(["suspended", screen.BULK_ENVIRONMENT])].set_index("layers")
    assert list(per_layer.loc[[1, 2, 3], "gap_character"]) == ["direct"] * 3
    assert per_layer.loc[4, "gap_character"] == "indirect"
    assert per_layer.loc[4, "vbm_label"] == "G" and per_layer.loc[4, "cbm_label"] == "K"
    assert per_layer.loc[0, "vbm_label"] == "G" and per_layer.loc[0, "cbm_label"] == "Q"
    assert int(wide["direct_through_layers"].iloc[0]) == 3
    assert int(wide["switch_layers"].iloc[0]) == 4
    assert wide["thinning_state"].iloc[0] == "direct when thin"
    assert wide["thinning_verdict"].iloc[0] == "direct up to 3 layers, indirect from 4"


# Crossovers by hand (layer counts 1..6 then bulk) and the thinning columns they must give: the
# state by its definition in lamellume.tables, the counts a layer count or empty (None), never a code.
# Sentinels of lamellume.layers: BULK 0 (only bulk differs), NO_SWITCH -1, UNDETERMINED -2.
_THINNING_CASES = [
    # (direct_through, switch code, monolayer direct) -> (state, direct_through_layers, switch_layers, verdict)
    ((6, -1, True), ("direct at every thickness", 6, None, "direct at every thickness")),
    ((0, -1, False), ("indirect at every thickness", None, None, "indirect at every thickness")),
    ((1, 2, True), ("direct when thin", 1, 2, "direct only as a monolayer, indirect from 2 layers")),
    ((3, 4, True), ("direct when thin", 3, 4, "direct up to 3 layers, indirect from 4")),
    ((0, 3, False), ("indirect when thin", None, 3, "indirect up to 2 layers, direct from 3")),
    ((6, 0, True), ("direct except in bulk", 6, None, "direct up to 6 layers, indirect in bulk")),
    ((0, 0, False), ("indirect except in bulk", None, None, "indirect up to 6 layers, direct in bulk")),
    ((-2, -2, False), ("unknown as a monolayer", None, None, "unknown: the record's band edges")),
    ((2, -2, True), ("unknown beyond", 2, None, "direct up to at least 2 layers; unknown at a thicker")),
    ((0, -2, False), ("unknown beyond", None, None, "indirect as a monolayer; unknown at a thicker")),
]


def test_thinning_columns_name_every_state_and_leave_missing_counts_empty():
    codes = np.array([c for c, _ in _THINNING_CASES])
    cross = layer_model.Crossover(codes[:, 0], codes[:, 1], codes[:, 2].astype(bool), np.zeros(len(codes), bool))
    cols = screen.thinning_columns(cross, max_layers=6)
    for i, (_, (state, through, switch, verdict)) in enumerate(_THINNING_CASES):
        assert cols["thinning_state"][i] == state
        assert cols["thinning_verdict"][i].startswith(verdict)
        for name, want in (("direct_through_layers", through), ("switch_layers", switch)):
            got = cols[name][i]
            assert (got is pd.NA) if want is None else (int(got) == want), (name, i, got)
    assert str(cols["switch_layers"].dtype) == "Int16" and str(cols["direct_through_layers"].dtype) == "Int16"
    # every value of the declared list occurs, and nothing else
    assert set(cols["thinning_state"]) == set(tables.THINNING_STATES)


def test_crystal_frame_tensor_is_rotated(record, table):
    """A uniaxial tensor tilted by 30 degrees about y, given with its normal, screens like the layer one."""
    tilt = math.radians(30.0)
    n = np.array([math.sin(tilt), 0.0, math.cos(tilt)])
    eps = 10.0 * np.eye(3) + (5.0 - 10.0) * np.outer(n, n)
    tilted = dict(record, id="fixture-b",
                  dielectric={"frame": "crystal", "normal": n.tolist(), "electronic": eps.tolist()})
    e, v = frames(record, tilted)
    _, wide = screen.screen_entries(e, v, SETTINGS, table)
    np.testing.assert_allclose(wide["eps_parallel"], [10.0, 10.0], rtol=1e-12)
    np.testing.assert_allclose(wide["eps_perpendicular"], [5.0, 5.0], rtol=1e-12)
    np.testing.assert_allclose(wide["bulk_binding_ev"].iloc[0], wide["bulk_binding_ev"].iloc[1], rtol=1e-12)


def test_batch_equals_one_at_a_time(record, table):
    other = dict(record, id="fixture-c", scissor_ev=0.1)
    e, v = frames(record, other)
    long2, wide2 = screen.screen_entries(e, v, SETTINGS, table)
    long1, wide1 = _screen(other, table)
    pd.testing.assert_frame_equal(wide2[wide2["entry_id"] == "fixture-c"].reset_index(drop=True), wide1)


def test_empty_screen_has_columns(table):
    e = pd.DataFrame(columns=ingest.ENTRY_COLUMNS)
    v = pd.DataFrame(columns=ingest.valley_columns(6))
    long, wide = screen.screen_entries(e, v, SETTINGS, table)
    assert len(long) == 0 and len(wide) == 0
    assert "binding_ev" in long.columns and "bulk_binding_ev" in wide.columns


def test_spin_sub_bands_and_validity_flag_reach_the_long_table(record, table):
    # Spin sub-bands (issue 17 item 2): the K conduction edge has spin down, its split-off sub-band (spin
    # up) lies 30 meV higher; the K valence edge has spin up. The edge pair K(up)->K(down) is spin-dark and
    # the lowest bright exciton is K(up)->K(up), 30 meV higher with the same masses, so the same binding
    # (selection rule: Yu and Cardona, Fundamentals of Semiconductors, secs. 6.3-6.4; by hand).
    # Bindings from the direct radial solve keldysh.solve_levels_ev (as in the test above).
    plain, _ = _screen(record, table)
    spin = json.loads(json.dumps(record))
    spin["valleys"][0].update(spin_split_ev=0.15, edge_spin="up")
    spin["valleys"][2].update(spin_split_ev=0.03, edge_spin="down")
    e, v = frames(spin)
    strict = {**SETTINGS, "excitons": {**SETTINGS["excitons"], "max_binding_fraction": 0.2}}
    long, _ = screen.screen_entries(e, v, strict, table)
    assert long["spin_given"].all() and not plain["spin_given"].any()
    for env, kappa, beyond in (("suspended", 1.0, True), ("hbn", 4.5, False)):
        eb = float(np.asarray(keldysh.solve_levels_ev(0.25, 40.0, kappa)[0]).ravel()[0])
        row = long[(long["layers"] == 1) & (long["environment"] == env)].iloc[0]
        before = plain[(plain["layers"] == 1) & (plain["environment"] == env)].iloc[0]
        # without spin data the same-label K pair is bright: nothing else changes
        assert before["brightness"] == "bright" and before["bright_pair"] == "K->K"
        np.testing.assert_allclose(before["bright_exciton_ev"], 2.3 - eb, rtol=1e-5)
        assert (row["brightness"], row["bright_pair"], row["dark_pair"]) == ("dark", "K(up)->K(up)", "K(up)->K(down)")
        np.testing.assert_allclose(row["bright_exciton_ev"], 2.3 + 0.03 - eb, rtol=1e-5)
        np.testing.assert_allclose(row["dark_exciton_ev"], 2.3 - eb, rtol=1e-5)
        np.testing.assert_allclose(row["exciton_margin_ev"], -0.03, atol=1e-9)
        # validity flag: binding above 0.2 of the 2.3 eV direct gap (0.57 / 2.3 suspended, 0.19 / 2.3 in hBN)
        assert eb / 2.3 > 0.2 if beyond else eb / 2.3 < 0.2
        assert bool(row["binding_beyond_validity"]) is beyond
