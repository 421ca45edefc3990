"""The exciton model's plumbing: label codes, pair selection and reduced masses, requested quantities."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants as sc

from flakelight import keldysh, model

# CODATA via scipy.constants, independent of flakelight.units.
RY_EV = sc.value("Rydberg constant times hc in eV")


def test_label_codes_are_lexical_within_each_compound():
    # Worked by hand: compound 0 has labels {Q, K, G} -> G=0, K=1, Q=2; compound 1 has {K, Q} -> K=0, Q=1.
    owner = np.array([1, 0, 0, 1, 0, 0])
    labels = np.array(["Q", "Q", "K", "K", "G", "K"])
    np.testing.assert_array_equal(model.label_codes(owner, labels), [1, 2, 1, 0, 0, 1])


def _two_valley_inputs(m_e_me: float, m_h_me: float, gap_ev: float = 2.0) -> model.ModelInputs:
    """One compound with one valence and one conduction valley at the same label (direct)."""
    inv = np.array([np.eye(2) / m_h_me, np.eye(2) / m_e_me])
    edges = np.array([[-5.0, -5.0], [-5.0 + gap_ev, -5.0 + gap_ev]])
    return model.ModelInputs(
        layers=np.array([1, 0]), owner=np.array([0, 0]), label_code=np.array([0, 0]),
        is_conduction=np.array([False, True]), edges_ev=edges, inv_mass=inv, mass_perp_me=np.full(2, np.nan),
        scissor_ev=np.zeros(1), eps_parallel=np.array([10.0]), eps_perpendicular=np.array([5.0]),
        eps_bulk=np.array([np.sqrt(50.0)]), spacing_angstrom=np.array([6.0]),
        r0_given_angstrom=np.array([40.0]), kappa=np.array([1.0, 4.5]))


@pytest.fixture(scope="module")
def table():
    return keldysh.build_table(keldysh.default_s_grid(per_decade=8))


def test_bright_pair_mass_and_bulk_binding(table):
    # Reduced mass of m_e = m_h = 0.5: mu = 0.25 (computed by hand); 3D hydrogenic binding
    # Ry mu / eps^2 with eps = sqrt(10 x 5) (Wannier-Mott, hydrogen scaled).
    res = model.evaluate(_two_valley_inputs(0.5, 0.5), model.ModelSettings(), table)
    np.testing.assert_allclose(res.pairs["bright"].mu_me, [[0.25, 0.25]], rtol=1e-12)
    np.testing.assert_allclose(res.bulk["bulk_binding_ev"], RY_EV * 0.25 / 50.0, rtol=1e-12)
    assert res.gap.is_direct.all()
    # stronger surroundings screen more: binding decreases with kappa (Rytova-Keldysh, common practice)
    eb = res.stack["binding_ev"][0, 0]
    assert eb[0] > eb[1] > 0
    # optical gap = direct gap - binding (definition)
    np.testing.assert_allclose(res.stack["optical_gap_ev"][0, 0], 2.0 - eb, rtol=1e-12)


def test_only_requested_quantities_are_computed(table):
    wanted = model.ModelSettings(stack=frozenset({"binding_ev"}), bulk=frozenset({"bulk_binding_ev"}),
                                 principal_masses=False)
    res = model.evaluate(_two_valley_inputs(0.5, 0.5), wanted, table)
    assert set(res.stack) == {"binding_ev"}
    assert "binding_3s_ev" not in res.bulk and "dark" not in res.pairs
    full = model.evaluate(_two_valley_inputs(0.5, 0.5), model.ModelSettings(), table)
    np.testing.assert_array_equal(res.stack["binding_ev"], full.stack["binding_ev"])


def test_layers_must_end_with_bulk(table):
    inputs = _two_valley_inputs(0.5, 0.5)
    bad = model.ModelInputs(**{**inputs.__dict__, "layers": np.array([1, 2])})
    with pytest.raises(ValueError):
        model.evaluate(bad, model.ModelSettings(), table)
