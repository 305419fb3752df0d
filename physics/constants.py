"""Physical constants in the units the package uses (eV, nm, m0, K, A/cm^2).

All values derive from CODATA through :mod:`scipy.constants`, so the package carries
no hand-typed constant.
"""

from scipy import constants as _c

#: hbar^2 / (2 m0) in eV nm^2; k [1/nm] = sqrt((E - U) [eV] * mass [m0] / HBAR2_2M0_eV_nm2).
HBAR2_2M0_eV_nm2: float = _c.hbar**2 / (2.0 * _c.m_e) / _c.e * 1e18

#: Boltzmann constant in eV/K.
KB_eV_K: float = _c.k / _c.e

#: Reduced Planck constant in eV s (lifetime = HBAR_eV_s / width).
HBAR_eV_s: float = _c.hbar / _c.e

#: Richardson constant A* = 4 pi q m0 kB^2 / h^3 in A cm^-2 K^-2 (about 120.17).
RICHARDSON_A_cm2_K2: float = 4.0 * _c.pi * _c.e * _c.m_e * _c.k**2 / _c.h**3 * 1e-4

#: Effective density of states prefactor: N_c = NC_PREFACTOR_cm3 * (m/m0 * T/300 K)^1.5,
#: N_c = 2 (m kB T / (2 pi hbar^2))^{3/2}, in cm^-3 at m = m0 and T = 300 K.
NC_300K_cm3: float = 2.0 * (_c.m_e * _c.k * 300.0 / (2.0 * _c.pi * _c.hbar**2)) ** 1.5 * 1e-6
