"""Shifts of the quasiparticle gap with temperature and with the dielectric surroundings.

Pure functions. The thermal shift is wired: :func:`thermal_gap_change_ev`
moves every gap of a compound to the operating temperature inside
:func:`lamellume.model.evaluate` (nominal screen and Monte Carlo alike). The
image-charge renormalisation is not wired (the screen reports the optical gap
as a bracket instead). Energies in eV, temperatures in K, lengths in Angstrom,
dielectric constants relative to the vacuum permittivity. All functions
broadcast over compounds.

Temperature
-----------
Two published forms of the thermal gap shift E_g(T) - E_g(0):

* Varshni (empirical): ``-alpha T^2 / (T + beta)``; slope -alpha at T >> beta,
  quadratic at low T.
* Bose-Einstein, in the form of O'Donnell and Chen:
  ``-S <hbar w> [coth(<hbar w> / 2kT) - 1]`` = ``-2 S <hbar w> / (exp(<hbar w>/kT) - 1)``,
  the electron-phonon renormalisation by one effective phonon of energy
  <hbar w> with dimensionless coupling S; flat at T -> 0 (exponentially
  small shift), slope -2 S k_B at kT >> <hbar w>. The same form, written
  ``-2 a_B / (exp(Theta/T) - 1)``, is due to Vina, Logothetidis and Cardona.

A first-principles gap belongs to the temperature of its calculation (0 K
for a static lattice, apart from zero-point renormalisation, which neither
form contains); :func:`gap_at_temperature_ev` moves it to another temperature.

Surroundings and thickness
--------------------------
:func:`slab_gap_shift_ev` is the static image-charge (polarisation)
self-energy of an electron and a hole at the midplane of a uniaxial
dielectric slab of thickness L between two half-spaces, relative to the same
carriers in the infinite crystal: each carrier gains half the potential of
the charge its field induces, so the gap moves by the full induced potential
at the carrier, ``dE_g = int d^2q/(2 pi)^2 [W(q) - W_bulk(q)]``. The screened
interaction of the three-layer dielectric (Rytova; Keldysh) at the midplane
is, with ``eps = sqrt(eps_par eps_perp)``, ``L~ = L sqrt(eps_par/eps_perp)``,
``x = exp(-q L~)`` and ``l_i = (eps - eps_i) / (eps + eps_i)``::

    W(q) = (2 pi e^2 / (eps q)) (1 + l_1 x)(1 + l_2 x) / (1 - l_1 l_2 x^2),

and the q integral has the closed form (P = l_1 l_2)::

    dE_g = e^2 / (eps_par L) [ (l_1 + l_2) artanh(sqrt P)/sqrt P - ln(1 - P) ].

Limits: zero when the surroundings match the slab (l = 0) and as L -> infinity
(the bulk crystal); positive (the gap opens) in weaker surroundings. For a thin
sheet with ``r0 = eps_par L / 2`` held fixed as L -> 0, the change between two
symmetric surroundings kappa_a and kappa_b tends to ``(e^2 / r0) ln(kappa_b/kappa_a)``,
the result of the strict-2D Keldysh sheet. This is the dielectric model of the
environment- and thickness-dependent quasiparticle gap used by Cho and
Berkelbach; it omits dynamical (frequency-dependent) screening and the spread
of the carriers' charge across the slab, so it tends to overestimate the
shift of the thinnest sheets.

References
----------
.. [1] Y. P. Varshni, Physica 34, 149 (1967).
.. [2] K. P. O'Donnell and X. Chen, Appl. Phys. Lett. 58, 2924 (1991).
.. [3] L. Vina, S. Logothetidis and M. Cardona, Phys. Rev. B 30, 1979 (1984).
.. [4] N. S. Rytova, Moscow Univ. Phys. Bull. 3, 30 (1967); L. V. Keldysh,
   JETP Lett. 29, 658 (1979) (three-layer dielectric, images).
.. [5] Y. Cho and T. C. Berkelbach, Phys. Rev. B 97, 041409(R) (2018)
   (environment-dependent quasiparticle gaps of atomically thin semiconductors).
.. [6] A. Raja et al., Nat. Commun. 8, 15251 (2017) (measured compensation of
   gap and binding changes with the surroundings).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from lamellume.units import BOHR_RADIUS_ANGSTROM, HARTREE_EV, thermal_energy_ev

__all__ = [
    "varshni_shift_ev",
    "bose_einstein_shift_ev",
    "gap_at_temperature_ev",
    "GapThermal",
    "THERMAL_FORMS",
    "thermal_shift_ev",
    "thermal_gap_change_ev",
    "slab_gap_shift_ev",
    "environment_gap_change_ev",
]

#: e^2 / (4 pi eps0) in eV Angstrom (= Hartree * Bohr radius).
_E2_EV_ANGSTROM: float = HARTREE_EV * BOHR_RADIUS_ANGSTROM


def varshni_shift_ev(alpha_ev_per_k, beta_k, temperature_k):
    """Thermal gap shift E_g(T) - E_g(0) = -alpha T^2 / (T + beta) (Varshni), eV.

    Parameters
    ----------
    alpha_ev_per_k : array_like
        Varshni alpha in eV/K (high-temperature slope, positive for a gap
        that shrinks on heating).
    beta_k : array_like
        Varshni beta in K (> 0).
    temperature_k : array_like
        Temperature in K (>= 0).

    Returns
    -------
    numpy.ndarray
        Shift in eV (0 at T = 0).

    References
    ----------
    .. [1] Y. P. Varshni, Physica 34, 149 (1967).
    """
    t = np.asarray(temperature_k, dtype=float)
    return -np.asarray(alpha_ev_per_k, dtype=float) * t * t / (t + np.asarray(beta_k, dtype=float))


def bose_einstein_shift_ev(coupling_s, phonon_energy_ev, temperature_k):
    """Thermal gap shift E_g(T) - E_g(0) = -S <hbar w> [coth(<hbar w>/2kT) - 1] (O'Donnell-Chen), eV.

    Written as ``-2 S <hbar w> / expm1(<hbar w>/kT)``, exact and free of
    overflow at T = 0.

    Parameters
    ----------
    coupling_s : array_like
        Dimensionless electron-phonon coupling S.
    phonon_energy_ev : array_like
        Average phonon energy <hbar w> in eV (> 0).
    temperature_k : array_like
        Temperature in K (>= 0).

    Returns
    -------
    numpy.ndarray
        Shift in eV (0 at T = 0; slope -2 S k_B when kT >> <hbar w>).

    References
    ----------
    .. [1] K. P. O'Donnell and X. Chen, Appl. Phys. Lett. 58, 2924 (1991).
    .. [2] L. Vina, S. Logothetidis and M. Cardona, Phys. Rev. B 30, 1979 (1984).
    """
    kt = thermal_energy_ev(np.asarray(temperature_k, dtype=float))
    w = np.asarray(phonon_energy_ev, dtype=float)
    with np.errstate(divide="ignore", over="ignore"):
        occupation = 1.0 / np.expm1(w / kt)
    return -2.0 * np.asarray(coupling_s, dtype=float) * w * occupation


def gap_at_temperature_ev(gap_ev, shift_at_calc_ev, shift_at_target_ev):
    """A gap moved from the temperature of its calculation to a target temperature, eV.

    ``E_g(T_target) = E_g(T_calc) - shift(T_calc) + shift(T_target)``, with
    shifts from :func:`varshni_shift_ev` or :func:`bose_einstein_shift_ev`.

    Parameters
    ----------
    gap_ev : array_like
        Gap at the calculation's temperature, eV.
    shift_at_calc_ev, shift_at_target_ev : array_like
        Thermal shifts E_g(T) - E_g(0) at the two temperatures, eV.

    Returns
    -------
    numpy.ndarray
        Gap at the target temperature, eV.
    """
    return (np.asarray(gap_ev, dtype=float) - np.asarray(shift_at_calc_ev, dtype=float)
            + np.asarray(shift_at_target_ev, dtype=float))


#: Codes of the thermal forms in :class:`GapThermal` (record field ``gap_temperature.form``).
THERMAL_FORMS = {"": 0, "varshni": 1, "bose-einstein": 2}


class GapThermal(NamedTuple):
    """Per-compound temperature dependence of the gap (arrays of equal shape).

    Attributes
    ----------
    form_code : int array
        :data:`THERMAL_FORMS` code: 0 none given, 1 Varshni, 2 Bose-Einstein.
    alpha_ev_per_k, beta_k : float arrays
        Varshni coefficients (NaN where not Varshni).
    coupling, phonon_energy_ev : float arrays
        Bose-Einstein coupling S and mean phonon energy (NaN where not Bose-Einstein).
    calculation_temperature_k : float array
        Temperature the band edges belong to, K.
    """

    form_code: np.ndarray
    alpha_ev_per_k: np.ndarray
    beta_k: np.ndarray
    coupling: np.ndarray
    phonon_energy_ev: np.ndarray
    calculation_temperature_k: np.ndarray

    def take(self, index) -> "GapThermal":
        """The rows ``index`` of every array (e.g. one row per Monte Carlo sample)."""
        return GapThermal(*(np.asarray(a)[index] for a in self))


def thermal_shift_ev(thermal: GapThermal, temperature_k):
    """E_g(T) - E_g(0) of each compound's own form (0 where no form is given), eV."""
    code = np.asarray(thermal.form_code)
    with np.errstate(all="ignore"):
        varshni = varshni_shift_ev(thermal.alpha_ev_per_k, thermal.beta_k, temperature_k)
        bose = bose_einstein_shift_ev(thermal.coupling, thermal.phonon_energy_ev, temperature_k)
    return np.where(code == THERMAL_FORMS["varshni"], varshni,
                    np.where(code == THERMAL_FORMS["bose-einstein"], bose, 0.0))


def thermal_gap_change_ev(thermal: GapThermal, temperature_k):
    """Change of every gap of a compound from its calculation's temperature to ``temperature_k``, eV.

    ``shift(T) - shift(T_calc)`` (:func:`gap_at_temperature_ev` applied to a
    zero gap) with each compound's own form, Varshni or Bose-Einstein; 0 for
    compounds without a form (their gaps stay at the calculation's
    temperature). Negative when the target is warmer and the gap shrinks on
    heating.

    Parameters
    ----------
    thermal : GapThermal
        Per-compound forms and coefficients.
    temperature_k : float or array_like
        Target (operating) temperature, K.

    Returns
    -------
    numpy.ndarray
        Gap change in eV, shape of ``thermal``'s arrays.

    References
    ----------
    .. [1] Y. P. Varshni, Physica 34, 149 (1967).
    .. [2] K. P. O'Donnell and X. Chen, Appl. Phys. Lett. 58, 2924 (1991).
    """
    return gap_at_temperature_ev(0.0, thermal_shift_ev(thermal, thermal.calculation_temperature_k),
                                 thermal_shift_ev(thermal, temperature_k))


def _artanh_sqrt_over_sqrt(p):
    """artanh(sqrt p)/sqrt p for p < 1, continued to p <= 0 as arctan(sqrt(-p))/sqrt(-p)."""
    p = np.asarray(p, dtype=float)
    small = np.abs(p) < 1e-6
    pp = np.where(small, 0.5, p)  # placeholder away from 0 for the closed forms
    pos = np.where(pp > 0, pp, 0.25)
    neg = np.where(pp < 0, -pp, 0.25)
    closed = np.where(pp > 0, np.arctanh(np.sqrt(pos)) / np.sqrt(pos), np.arctan(np.sqrt(neg)) / np.sqrt(neg))
    series = 1.0 + p / 3.0 + p * p / 5.0
    return np.where(small, series, closed)


def slab_gap_shift_ev(eps_parallel, eps_perpendicular, thickness_angstrom, eps_top, eps_bottom):
    """Image-charge shift of the quasiparticle gap of a slab against the bulk crystal, eV.

    Static polarisation self-energy of an electron and a hole at the midplane
    of a uniaxial slab (in-plane eps_parallel, out-of-plane eps_perpendicular,
    thickness L) between half-spaces eps_top and eps_bottom, minus the same in
    the infinite crystal (module docstring for the formula and its limits).

    Parameters
    ----------
    eps_parallel, eps_perpendicular : array_like
        Dielectric constants of the slab material (> 0).
    thickness_angstrom : array_like
        Slab thickness L in Angstrom (N layers: N times the interlayer
        spacing), > 0.
    eps_top, eps_bottom : array_like
        Dielectric constants of the surroundings (>= 1).

    Returns
    -------
    numpy.ndarray
        Gap shift in eV: > 0 (the gap opens) in surroundings that screen
        less than the slab, 0 for matched surroundings or L -> infinity.

    References
    ----------
    .. [1] L. V. Keldysh, JETP Lett. 29, 658 (1979).
    .. [2] Y. Cho and T. C. Berkelbach, Phys. Rev. B 97, 041409(R) (2018).
    """
    e_par = np.asarray(eps_parallel, dtype=float)
    e_perp = np.asarray(eps_perpendicular, dtype=float)
    eps = np.sqrt(e_par * e_perp)
    l1 = (eps - np.asarray(eps_top, dtype=float)) / (eps + np.asarray(eps_top, dtype=float))
    l2 = (eps - np.asarray(eps_bottom, dtype=float)) / (eps + np.asarray(eps_bottom, dtype=float))
    p = l1 * l2
    bracket = (l1 + l2) * _artanh_sqrt_over_sqrt(p) - np.log1p(-p)
    return _E2_EV_ANGSTROM / (e_par * np.asarray(thickness_angstrom, dtype=float)) * bracket


def environment_gap_change_ev(eps_parallel, eps_perpendicular, thickness_angstrom, eps_top, eps_bottom,
                              ref_top, ref_bottom):
    """Change of a slab's quasiparticle gap from reference surroundings to other surroundings, eV.

    ``slab_gap_shift_ev(..., eps_top, eps_bottom) - slab_gap_shift_ev(..., ref_top, ref_bottom)``:
    the correction to add to a gap computed (or measured) in the reference
    surroundings, e.g. a suspended-layer calculation (ref 1, 1) moved into
    hBN encapsulation.

    Parameters
    ----------
    eps_parallel, eps_perpendicular, thickness_angstrom : array_like
        As in :func:`slab_gap_shift_ev`.
    eps_top, eps_bottom : array_like
        Target surroundings.
    ref_top, ref_bottom : array_like
        Surroundings the given gap belongs to.

    Returns
    -------
    numpy.ndarray
        Gap change in eV (< 0 when the target screens more than the reference).

    References
    ----------
    .. [1] Y. Cho and T. C. Berkelbach, Phys. Rev. B 97, 041409(R) (2018).
    """
    args = (eps_parallel, eps_perpendicular, thickness_angstrom)
    return slab_gap_shift_ev(*args, eps_top, eps_bottom) - slab_gap_shift_ev(*args, ref_top, ref_bottom)
