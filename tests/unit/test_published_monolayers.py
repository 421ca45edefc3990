"""Published monolayer exciton binding energies reproduced from their published inputs.

Library level (lamellume.keldysh). The same tables run end to end through the workflow in
tests/integration/test_published_bindings.py; both read the tables from PUBLISHED below.

Every value below was typed from memory of the cited papers (marked so per row); the
tolerance of each table is stated beside it with its reason.
"""

from __future__ import annotations

import numpy as np
import pytest

from lamellume import keldysh

# Each row: (label, reduced mass mu in m_e, screening length r0 in Angstrom,
#            kappa = mean dielectric constant of the surroundings, published E_b in eV).
PUBLISHED = {
    # M. Goryca et al., Nat. Commun. 10, 4172 (2019), Table 1: hBN-encapsulated monolayers,
    # mu and r0 from high-field magneto-absorption, kappa per sample, E_b from the Rytova-Keldysh
    # fit (from memory). The WSe2 row is the earlier measurement of A. V. Stier et al.,
    # Phys. Rev. Lett. 120, 057405 (2018), listed in the same table (from memory).
    "goryca2019": [
        ("MoS2", 0.275, 34.0, 4.45, 0.221),
        ("MoSe2", 0.350, 39.0, 4.40, 0.231),
        ("MoTe2", 0.360, 64.0, 4.40, 0.177),
        ("WS2", 0.175, 34.0, 4.35, 0.180),
        ("WSe2", 0.200, 45.0, 4.35, 0.167),
    ],
    # A. Chernikov et al., Phys. Rev. Lett. 113, 076802 (2014): WS2 on SiO2, the non-hydrogenic
    # Rydberg series fitted with mu = 0.16, r0 = 75 Angstrom and the surroundings' average
    # folded into r0 (kappa = 1); E_b = 0.32 eV (from memory).
    "chernikov2014": [
        ("WS2", 0.16, 75.0, 1.0, 0.32),
    ],
    # T. C. Berkelbach, M. S. Hybertsen, D. R. Reichman, Phys. Rev. B 88, 045318 (2013), Table I:
    # suspended monolayers, r0 = 2 pi chi_2D with chi_2D from first principles (from memory).
    "berkelbach2013": [
        ("MoS2", 0.25, 41.47, 1.0, 0.54),
        ("MoSe2", 0.27, 51.71, 1.0, 0.47),
        ("WS2", 0.16, 37.89, 1.0, 0.50),
        ("WSe2", 0.17, 45.11, 1.0, 0.45),
    ],
}

#: Relative tolerance per table, with the reason.
TOLERANCE = {
    # Inputs are quoted to 2-3 digits (r0 to 0.1 nm is +-1.5 % in r0, about +-0.7 % in E_b;
    # kappa to 0.05 is about +-1.5 % in E_b) and E_b to 1 meV: 2 % covers the rounding.
    "goryca2019": 0.02,
    # Two-digit E_b (+-1.6 %) and two-digit mu: 2 %.
    "chernikov2014": 0.02,
    # Two-digit E_b and mu (+-2-3 % each). Our exact solution lies 2-5 % above the table; the
    # paper's numerical method is not recalled, and a single-exponential variational solution
    # (computed independently in test_variational_bound_below_exact) lies 0-2.5 % above it,
    # so the table is reproduced to 5 %. That still catches the errors this check is for:
    # a wrong kappa power, r0 versus alpha_2D, or 2D-versus-3D Rydberg move E_b by >= 30 %.
    "berkelbach2013": 0.05,
}

# Berkelbach et al. (2013), Table I, chi_2D in Angstrom (from memory); r0 = 2 pi chi_2D.
BERKELBACH_CHI_2D = {"MoS2": 6.60, "MoSe2": 8.23, "WS2": 6.03, "WSe2": 7.18}


@pytest.fixture(scope="module")
def table():
    return keldysh.build_table()


@pytest.mark.parametrize("source, row", [(s, r) for s, rows in PUBLISHED.items() for r in rows],
                         ids=[f"{s}-{r[0]}" for s, rows in PUBLISHED.items() for r in rows])
def test_published_binding(source, row, table):
    _, mu, r0, kappa, eb = row
    np.testing.assert_allclose(keldysh.keldysh_binding_ev(mu, r0, kappa, table), eb, rtol=TOLERANCE[source])


@pytest.mark.parametrize("name, chi", sorted(BERKELBACH_CHI_2D.items()))
def test_berkelbach_r0_from_polarizability(name, chi):
    # The table's r0 column is 2 pi chi_2D, to the 4 digits printed.
    r0 = dict((r[0], r[2]) for r in PUBLISHED["berkelbach2013"])[name]
    np.testing.assert_allclose(keldysh.screening_length_from_polarizability_angstrom(chi), r0, atol=0.006)


def test_variational_bound_below_exact(table):
    # Independent check of the solver on the Berkelbach inputs: the variational energy of
    # psi ~ exp(-r/a) with the Rytova-Keldysh potential (scipy quad over r, bounded scalar
    # minimisation over a; CODATA typed below) must lie below the exact binding, and close to it.
    from scipy import integrate, optimize, special

    e2 = 14.399645  # e^2/(4 pi eps0), eV Angstrom (CODATA 2018, from memory)
    h2m = 3.80998212  # hbar^2/(2 m_e), eV Angstrom^2 (CODATA 2018, from memory)

    def energy(a, mu, r0, kappa):
        pot = lambda r: -np.pi * e2 / (2 * r0) * (special.struve(0, kappa * r / r0)  # noqa: E731
                                                  - special.y0(kappa * r / r0))
        mean_v = integrate.quad(lambda r: 4 / a**2 * r * np.exp(-2 * r / a) * pot(r), 0, np.inf, limit=400)[0]
        return h2m / (mu * a * a) + mean_v

    for _, mu, r0, kappa, _eb in PUBLISHED["berkelbach2013"]:
        best = optimize.minimize_scalar(lambda a: energy(a, mu, r0, kappa), bounds=(1.0, 200.0), method="bounded")
        exact = float(keldysh.keldysh_binding_ev(mu, r0, kappa, table))
        assert -best.fun < exact
        np.testing.assert_allclose(-best.fun, exact, rtol=0.03)
