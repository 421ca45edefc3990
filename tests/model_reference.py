"""Expected valley masses of the model band structures of inputs/make_calculations.py.

Masses come from the analytic Hessian of each model dispersion at its extremum,
computed with sympy (an independent reference for the import's band fits). The
models are written here again from their formulas in the generator's docstring.
"""

from __future__ import annotations

import numpy as np
import sympy as sp
from scipy import constants as c

# hbar^2 / (2 m_e) in eV A^2 straight from CODATA (scipy.constants), not from lamellume.units.
C_EV_A2 = c.hbar**2 / (2 * c.m_e) / c.e / c.angstrom**2


def sympy_masses(energy, kx, ky, point, carrier_sign):
    """Principal carrier masses (m_e) from the analytic Hessian of energy(kx, ky) at point (computed with sympy)."""
    h = sp.hessian(energy, (kx, ky)).subs({kx: point[0], ky: point[1]})
    h = np.array(h.evalf(30), dtype=float)
    inv = carrier_sign * h / (2 * C_EV_A2)
    return np.sort(1.0 / np.linalg.eigvalsh(inv))


def hex_energy(kind, p, a):
    """Model band of make_calculations.hex_bands as a sympy expression of in-plane Cartesian k (layer frame:
    x along a1)."""
    kx, ky = sp.symbols("kx ky", real=True)
    a = sp.nsimplify(a)
    a1 = sp.Matrix([a, 0])
    a2 = sp.Matrix([-a / 2, a * sp.sqrt(3) / 2])
    k = sp.Matrix([kx, ky])
    s = sp.cos(k.dot(a1)) + sp.cos(k.dot(a2)) + sp.cos(k.dot(a1 + a2))
    g = sp.cos(k.dot(2 * a1 + a2)) + sp.cos(k.dot(a1 + 2 * a2)) + sp.cos(k.dot(a1 - a2))
    if kind == "valence":
        e = p["ev"] + p["av"] * (s - p["sv"]) ** 2 - p["av"] * (3 - p["sv"]) ** 2
    else:
        e = p["ec"] + p["bc"] * s + p.get("gc", 0.0) * g
    # reciprocal basis: b_i . a_j = 2 pi delta_ij
    amat = sp.Matrix([[a1[0], a1[1]], [a2[0], a2[1]]])
    b = 2 * sp.pi * amat.inv().T
    kpoint = (b[0, :] + b[1, :]) / 3  # K = (1/3, 1/3)
    return e, kx, ky, (0, 0), (kpoint[0], kpoint[1])


def rect_energy(band, p, a=3.0, b=4.0):
    kx, ky = sp.symbols("kx ky", real=True)
    cx, cy = sp.cos(kx * sp.nsimplify(a)) - 1, sp.cos(ky * sp.nsimplify(b)) - 1
    if band == "valence":
        return p["ev"] + 2 * p["tx"] * cx + 2 * p["ty"] * cy, kx, ky
    return p["ec"] - 2 * p["ux"] * cx - 2 * p["uy"] * cy, kx, ky


