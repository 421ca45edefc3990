"""Internal unit system and physical constants.

Internal units: energies in eV, lengths in Angstrom, masses in units of the
free-electron mass m_e, temperatures in kelvin, dielectric constants relative
to the vacuum permittivity. Every constant comes from :mod:`scipy.constants`
(CODATA); conversions are named as conversions.
"""

from scipy import constants as _c

#: Rydberg energy Ry = m_e e^4 / (2 (4 pi eps0)^2 hbar^2) in eV (CODATA).
RYDBERG_EV: float = _c.physical_constants["Rydberg constant times hc in eV"][0]

#: Bohr radius a0 in Angstrom (CODATA).
BOHR_RADIUS_ANGSTROM: float = _c.physical_constants["Bohr radius"][0] / _c.angstrom

#: Hartree energy in eV (= 2 Ry).
HARTREE_EV: float = _c.physical_constants["Hartree energy in eV"][0]

#: Boltzmann constant in eV/K (CODATA).
BOLTZMANN_EV_PER_K: float = _c.physical_constants["Boltzmann constant in eV/K"][0]

#: Planck constant times speed of light in eV nm: wavelength_nm = HC_EV_NM / energy_ev.
HC_EV_NM: float = _c.h * _c.c / _c.electron_volt / _c.nano

#: hbar^2 / (2 m_e) in eV Angstrom^2; a band E = HBAR2_OVER_2ME_EV_A2 * k^2 / m has mass m in m_e.
HBAR2_OVER_2ME_EV_A2: float = _c.hbar**2 / (2.0 * _c.m_e) / _c.electron_volt / _c.angstrom**2

#: Conversion factor from eV to meV.
MEV_PER_EV: float = 1.0 / _c.milli

#: Conversion factor from cm^-2 to Angstrom^-2.
PER_CM2_TO_PER_ANGSTROM2: float = (_c.angstrom / _c.centi) ** 2

#: Conversion factor from cm^-3 to Angstrom^-3.
PER_CM3_TO_PER_ANGSTROM3: float = (_c.angstrom / _c.centi) ** 3


def thermal_energy_ev(temperature_k):
    """Thermal energy k_B T in eV for a temperature in kelvin (scalar or array)."""
    return BOLTZMANN_EV_PER_K * temperature_k


def wavelength_nm_from_energy_ev(energy_ev):
    """Vacuum photon wavelength in nm for a photon energy in eV (scalar or array)."""
    return HC_EV_NM / energy_ev


#: Electron rest energy m_e c^2 in eV (CODATA).
ELECTRON_REST_ENERGY_EV: float = _c.physical_constants["electron mass energy equivalent in MeV"][0] * 1.0e6

#: e^2 / (2 eps0 c m_e) in m^2/s: radiative rate per oscillator strength per area of a
#: sheet of dipoles in vacuum (SI, CODATA).
SHEET_RADIATIVE_RATE_M2_PER_S: float = _c.e**2 / (2.0 * _c.epsilon_0 * _c.c * _c.m_e)

#: Conversion factor from Angstrom^-2 to m^-2.
PER_ANGSTROM2_TO_PER_M2: float = 1.0 / _c.angstrom**2
