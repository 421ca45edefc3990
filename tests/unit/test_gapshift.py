"""Tests of lamellume.gapshift: thermal gap shifts and the image-charge gap shift of a slab.

References: published Varshni and O'Donnell-Chen parameters with handbook room-temperature
gaps; an independent numerical solution of the three-region electrostatics (a 4x4 linear
system per wave vector, integrated with scipy quad) for the slab model; sympy for limits.
"""

from __future__ import annotations

import numpy as np
import pytest
import sympy as sp
from scipy import integrate

from lamellume.gapshift import (
    THERMAL_FORMS,
    GapThermal,
    bose_einstein_shift_ev,
    environment_gap_change_ev,
    gap_at_temperature_ev,
    slab_gap_shift_ev,
    thermal_gap_change_ev,
    varshni_shift_ev,
)

# CODATA 2018 (Tiesinga et al., Rev. Mod. Phys. 93, 025010 (2021)), typed here.
KB_EV_PER_K = 8.617333262e-5
E2_EV_ANGSTROM = 14.399645  # e^2/(4 pi eps0) in eV Angstrom (CODATA 2018, from memory)


# --------------------------------------------------------------------------- temperature


def test_varshni_gaas_room_temperature():
    # GaAs Varshni parameters: E_g(0) = 1.519 eV, alpha = 0.5405 meV/K, beta = 204 K
    # (I. Vurgaftman, J. R. Meyer, L. R. Ram-Mohan, J. Appl. Phys. 89, 5815 (2001); from memory).
    # Handbook room-temperature gap 1.424 eV (S. M. Sze, Physics of Semiconductor Devices; from
    # memory). The Varshni fit reproduces it to about 2 meV, the scatter of published fits.
    gap_300 = 1.519 + varshni_shift_ev(5.405e-4, 204.0, 300.0)
    np.testing.assert_allclose(gap_300, 1.424, atol=0.003)
    # Hand computation of the formula: 1.519 - 5.405e-4 * 300^2 / 504.
    np.testing.assert_allclose(gap_300, 1.519 - 5.405e-4 * 90000.0 / 504.0, rtol=1e-14)


def test_bose_einstein_silicon_room_temperature():
    # Si in the O'Donnell-Chen form: E_g(0) = 1.170 eV, S = 1.49, <hbar w> = 25.5 meV
    # (K. P. O'Donnell and X. Chen, Appl. Phys. Lett. 58, 2924 (1991); from memory).
    # Handbook 300 K gap of Si 1.12 eV (Sze; from memory; 1.124 eV in M. A. Green,
    # J. Appl. Phys. 67, 2944 (1990), from memory): agreement within 5 meV.
    gap_300 = 1.170 + bose_einstein_shift_ev(1.49, 0.0255, 300.0)
    np.testing.assert_allclose(gap_300, 1.122, atol=0.005)
    # The coth form as published, evaluated with sympy.
    s, w, t = 1.49, 0.0255, 300.0
    coth = float(sp.coth(sp.Float(w) / (2 * sp.Float(KB_EV_PER_K) * t)))
    np.testing.assert_allclose(bose_einstein_shift_ev(s, w, t), -s * w * (coth - 1.0), rtol=1e-8)


def test_thermal_limits():
    # Both shifts vanish at T = 0; the Bose-Einstein form is flat there (no linear term, sympy
    # series of -2 S w / (exp(w/kT) - 1) is exponentially small), Varshni is quadratic.
    assert varshni_shift_ev(5e-4, 200.0, 0.0) == 0.0
    assert bose_einstein_shift_ev(1.5, 0.025, 0.0) == 0.0
    np.testing.assert_allclose(bose_einstein_shift_ev(1.5, 0.025, 5.0), 0.0, atol=1e-20)
    np.testing.assert_allclose(varshni_shift_ev(5e-4, 200.0, 1.0), -5e-4 / 201.0, rtol=1e-14)
    # High-temperature slopes: -alpha (Varshni) and -2 S k_B (Bose-Einstein), from sympy limits.
    T, a, b, S, W, k = sp.symbols("T alpha beta S W k", positive=True)
    varshni_slope = sp.limit(sp.diff(-a * T**2 / (T + b), T), T, sp.oo)
    be_slope = sp.limit(sp.diff(-2 * S * W / (sp.exp(W / (k * T)) - 1), T), T, sp.oo)
    assert sp.simplify(varshni_slope + a) == 0 and sp.simplify(be_slope + 2 * S * k) == 0
    hi = np.array([1e5, 1e5 + 1.0])
    np.testing.assert_allclose(np.diff(varshni_shift_ev(5e-4, 200.0, hi)), -5e-4, rtol=1e-3)
    np.testing.assert_allclose(np.diff(bose_einstein_shift_ev(1.5, 0.025, hi)), -2 * 1.5 * KB_EV_PER_K, rtol=1e-3)


def test_gap_at_temperature_round_trip():
    shift = lambda t: varshni_shift_ev(5.405e-4, 204.0, t)  # noqa: E731
    gap_77 = gap_at_temperature_ev(1.519, shift(0.0), shift(77.0))
    np.testing.assert_allclose(gap_at_temperature_ev(gap_77, shift(77.0), shift(0.0)), 1.519, rtol=1e-15)
    np.testing.assert_allclose(gap_77, 1.519 - 5.405e-4 * 77**2 / 281.0, rtol=1e-14)


# --------------------------------------------------------------------------- per-record thermal change


def _thermal(form, alpha=np.nan, beta=np.nan, coupling=np.nan, phonon=np.nan, calc=0.0):
    return GapThermal(*(np.atleast_1d(np.asarray(v)) for v in (THERMAL_FORMS[form], alpha, beta, coupling, phonon,
                                                               calc)))


def test_thermal_change_gaas_77k_to_300k():
    # GaAs (Vurgaftman, Meyer and Ram-Mohan, J. Appl. Phys. 89, 5815 (2001); from memory): Varshni
    # alpha = 0.5405 meV/K, beta = 204 K; handbook gaps 1.508 eV at 77 K and 1.424 eV at 300 K
    # (Sze; from memory). A calculation "at 77 K" moved to 300 K loses about 85 meV.
    change = thermal_gap_change_ev(_thermal("varshni", 5.405e-4, 204.0, calc=77.0), 300.0)
    np.testing.assert_allclose(change, 1.424 - 1.508, atol=0.004)
    # Hand computation of the Varshni difference: alpha (77^2/281 - 300^2/504).
    np.testing.assert_allclose(change, 5.405e-4 * (77.0**2 / 281.0 - 300.0**2 / 504.0), rtol=1e-13)


def test_thermal_change_bose_einstein_against_mpmath():
    # -S w [coth(w/2kT) - 1] at both temperatures, evaluated with mpmath (O'Donnell and Chen 1991);
    # Si parameters S = 1.49, <hbar w> = 25.5 meV (from memory), calculation at 10 K, target 77 K.
    import mpmath as mp

    def shift(t):
        return -1.49 * 0.0255 * (mp.coth(mp.mpf(0.0255) / (2 * mp.mpf(KB_EV_PER_K) * t)) - 1)

    change = thermal_gap_change_ev(_thermal("bose-einstein", coupling=1.49, phonon=0.0255, calc=10.0), 77.0)
    np.testing.assert_allclose(change, float(shift(77.0) - shift(10.0)), rtol=1e-8)


def test_thermal_change_per_compound_form_and_none():
    # Mixed compounds: no form -> 0 (gaps stay at the calculation's temperature); same temperature -> 0.
    th = GapThermal(np.array([0, 1, 2]), np.array([np.nan, 5e-4, np.nan]), np.array([np.nan, 200.0, np.nan]),
                    np.array([np.nan, np.nan, 1.5]), np.array([np.nan, np.nan, 0.025]), np.zeros(3))
    change = thermal_gap_change_ev(th, 300.0)
    assert change[0] == 0.0 and np.all(change[1:] < 0)
    np.testing.assert_allclose(change[1], -5e-4 * 300.0**2 / 500.0, rtol=1e-14)
    np.testing.assert_array_equal(thermal_gap_change_ev(th._replace(calculation_temperature_k=np.full(3, 300.0)),
                                                        300.0), 0.0)
    np.testing.assert_array_equal(th.take(np.array([2, 2, 0])).form_code, [2, 2, 0])


# --------------------------------------------------------------------------- surroundings


def _w_numeric(q, eps_par, eps_perp, thickness, e_top, e_bottom):
    """Screened interaction at the midplane, eV Angstrom^2, from the boundary-value problem.

    Potential of a unit charge at z = 0 in a uniaxial slab |z| < L/2: inside
    phi = C e^{-k|z|} + B1 e^{kz} + B2 e^{-kz} with k = q sqrt(eps_par/eps_perp) and
    C = 2 pi / (eps_perp k) (Gaussian units, jump of eps_perp phi' = -4 pi); outside
    A e^{-qz} (top) and D e^{qz} (bottom). Continuity of phi and of D_z at both faces gives
    a 4x4 linear system solved with numpy. W = e^2 phi(0).
    """
    k = q * np.sqrt(eps_par / eps_perp)
    c = 2.0 * np.pi / (eps_perp * k)
    h = thickness / 2.0
    ek, emk, eq = np.exp(k * h), np.exp(-k * h), np.exp(-q * h)
    # unknowns: A, D, B1, B2
    m = np.array([
        [eq, 0.0, -ek, -emk],                                     # phi continuous at +h
        [-e_top * q * eq, 0.0, -eps_perp * k * ek, eps_perp * k * emk],  # D_z continuous at +h
        [0.0, eq, -emk, -ek],                                     # phi continuous at -h
        [0.0, e_bottom * q * eq, -eps_perp * k * emk, eps_perp * k * ek],  # D_z at -h
    ])
    rhs = np.array([c * emk, -eps_perp * k * c * emk, c * emk, eps_perp * k * c * emk])
    a_, d_, b1, b2 = np.linalg.solve(m, rhs)
    return E2_EV_ANGSTROM * (c + b1 + b2)


def _shift_numeric(eps_par, eps_perp, thickness, e_top, e_bottom):
    eps = np.sqrt(eps_par * eps_perp)

    def integrand(q):
        return q / (2.0 * np.pi) * (_w_numeric(q, eps_par, eps_perp, thickness, e_top, e_bottom)
                                    - 2.0 * np.pi * E2_EV_ANGSTROM / (eps * q))

    scale = 1.0 / (thickness * np.sqrt(eps_par / eps_perp))
    return integrate.quad(integrand, 1e-12, 60.0 * scale, limit=400, epsabs=1e-12, epsrel=1e-10)[0]


@pytest.mark.parametrize(
    "eps_par, eps_perp, thickness, e_top, e_bottom",
    [
        (13.5, 13.5, 6.15, 1.0, 1.0),  # MoS2-like monolayer (r0 ~ 41 A), suspended
        (13.5, 13.5, 6.15, 4.5, 4.5),  # hBN-encapsulated (kappa 4.5, common practice)
        (15.0, 6.0, 6.5, 1.0, 3.9),  # uniaxial slab on SiO2-like substrate
        (15.0, 6.0, 19.5, 2.0, 20.0),  # three layers, one side screening more than the slab
        (4.0, 3.0, 10.0, 8.0, 12.0),  # surroundings screening more on both sides: gap shrinks
    ],
)
def test_slab_shift_matches_boundary_value_solution(eps_par, eps_perp, thickness, e_top, e_bottom):
    expected = _shift_numeric(eps_par, eps_perp, thickness, e_top, e_bottom)
    np.testing.assert_allclose(slab_gap_shift_ev(eps_par, eps_perp, thickness, e_top, e_bottom), expected,
                               rtol=1e-6, atol=1e-9)


def test_slab_shift_limits():
    # Matched surroundings: no images, no shift. Thick slab: shift -> 0 as 1/L.
    np.testing.assert_allclose(slab_gap_shift_ev(7.0, 7.0, 6.0, 7.0, 7.0), 0.0, atol=1e-15)
    thick = slab_gap_shift_ev(10.0, 5.0, np.array([1e3, 2e3]), 1.0, 1.0)
    np.testing.assert_allclose(thick[0] / thick[1], 2.0, rtol=1e-12)
    # Symmetric isotropic slab, closed form by hand: (2 e^2 / (eps L)) ln((eps + k) / (2 k)).
    eps, L, kap = 12.0, 6.5, 2.0
    np.testing.assert_allclose(slab_gap_shift_ev(eps, eps, L, kap, kap),
                               2 * E2_EV_ANGSTROM / (eps * L) * np.log((eps + kap) / (2 * kap)), rtol=1e-6)
    # Weaker surroundings open the gap, stronger ones close it.
    assert slab_gap_shift_ev(12.0, 12.0, 6.5, 1.0, 1.0) > 0 > slab_gap_shift_ev(12.0, 12.0, 6.5, 20.0, 20.0)


def test_strict_2d_limit_of_environment_change():
    # Thin sheet with r0 = eps L / 2 fixed as L -> 0: the change between symmetric surroundings
    # kappa_a and kappa_b tends to (e^2/r0) ln(kappa_b/kappa_a), obtained by hand from the
    # Keldysh sheet interaction 2 pi e^2 / (q (kappa + r0 q)) integrated over q.
    r0, ka, kb = 40.0, 4.5, 1.0
    limit = E2_EV_ANGSTROM / r0 * np.log(kb / ka)
    changes = []
    for L in (1.0, 0.1, 0.01):
        eps = 2 * r0 / L
        changes.append(environment_gap_change_ev(eps, eps, L, ka, ka, kb, kb))
    errors = np.abs(np.array(changes) - limit)
    assert np.all(np.diff(errors) < 0)
    np.testing.assert_allclose(changes[-1], limit, rtol=1e-3)


def test_gap_change_with_thickness_falls_off():
    # N layers: thickness N d. The suspended-vs-encapsulated change shrinks with N (bulk limit 0).
    n = np.arange(1, 8)
    change = environment_gap_change_ev(14.0, 7.0, 6.2 * n, 4.5, 4.5, 1.0, 1.0)
    assert np.all(change < 0) and np.all(np.diff(np.abs(change)) < 0)
