r"""Code units (G = c = 1, a mass scale M) converted to SI and cgs.

With the mass scale M (in solar masses, times the nominal solar mass parameter), the code units
of length, time and mass are

.. math:: L = GM/c^2, \quad T = GM/c^3, \quad M = (GM)/G,

so energy is M c^2, luminosity c^5/G (independent of M), energy density M c^2 / L^3. Field
strengths follow from the energy density of the unit system the code uses: in Gaussian code
units rho = B^2/(8 pi), and in Gaussian cgs rho = B^2/(8 pi) too, so
B[G] = B_code sqrt(u[erg/cm^3]) with u the code unit of energy density; in SI rho = B^2/(2 mu_0),
so B[T] = B_code sqrt(mu_0 u[J/m^3] / (4 pi)). Heaviside-Lorentz code units (rho = B^2/2) carry an
extra sqrt(4 pi). Electric fields likewise with rho = E^2/(8 pi) (cgs, statvolt/cm) and
rho = epsilon_0 E^2 / 2 (SI, V/m).

Constants: CODATA values from :mod:`scipy.constants` (c, G, mu_0, epsilon_0) and the IAU 2015
Resolution B3 nominal solar mass parameter (G M_sun)^N = 1.3271244e20 m^3 s^-2. The solar mass in
kilograms is (G M_sun)^N / G, so its uncertainty is that of G (about 2e-5), while lengths and
times depend only on (G M_sun)^N and c, which are exact or nearly so.
References: E. E. Mamajek et al., IAU 2015 Resolution B3 on nominal solar and planetary
conversion constants, arXiv:1510.07674; CODATA via scipy.constants.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import constants

from .unit_systems import check_unit_system

__all__ = ["NOMINAL_SOLAR_MASS_PARAMETER", "PhysicalScale", "physical_scale"]

#: (G M_sun)^N in m^3 s^-2, IAU 2015 Resolution B3.
NOMINAL_SOLAR_MASS_PARAMETER = 1.3271244e20

_C = constants.c
_G = constants.G


@dataclass(frozen=True)
class PhysicalScale:
    """Multiply a code-unit value by one of these factors to get it in the named unit.

    Parameters
    ----------
    mass_solar : float
        Mass scale M in nominal solar masses.
    units : {"gaussian", "heaviside_lorentz"}
        Electromagnetic unit system of the code-unit fields.
    """

    mass_solar: float
    units: str = "gaussian"

    def __post_init__(self):
        if not (math.isfinite(self.mass_solar) and self.mass_solar > 0):
            raise ValueError(f"mass scale must be positive and finite, found {self.mass_solar!r}")
        check_unit_system(self.units)

    # --- mechanics ------------------------------------------------------------------------
    @property
    def gm_si(self) -> float:
        """G M in m^3 s^-2."""
        return self.mass_solar * NOMINAL_SOLAR_MASS_PARAMETER

    @property
    def length_m(self) -> float:
        return self.gm_si / _C**2

    @property
    def length_cm(self) -> float:
        return 100.0 * self.length_m

    @property
    def time_s(self) -> float:
        return self.gm_si / _C**3

    @property
    def mass_kg(self) -> float:
        return self.gm_si / _G

    @property
    def mass_g(self) -> float:
        return 1e3 * self.mass_kg

    @property
    def energy_J(self) -> float:
        return self.mass_kg * _C**2

    @property
    def energy_erg(self) -> float:
        return 1e7 * self.energy_J

    @property
    def momentum_kg_m_s(self) -> float:
        return self.mass_kg * _C

    @property
    def luminosity_W(self) -> float:
        """c^5 / G: the code unit of power, the same for every mass scale."""
        return self.energy_J / self.time_s

    @property
    def luminosity_erg_s(self) -> float:
        return 1e7 * self.luminosity_W

    @property
    def energy_density_J_m3(self) -> float:
        return self.energy_J / self.length_m**3

    @property
    def energy_density_erg_cm3(self) -> float:
        return self.energy_erg / self.length_cm**3

    # --- fields ---------------------------------------------------------------------------
    @property
    def _field_factor(self) -> float:
        """rho_code = field^2 / (8 pi) in Gaussian code units, field^2 / 2 in HL."""
        return 1.0 if self.units == "gaussian" else math.sqrt(4 * math.pi)

    @property
    def magnetic_field_G(self) -> float:
        """gauss per code unit: B_G^2/(8 pi) [erg/cm^3] = rho_code * u_cgs."""
        return self._field_factor * math.sqrt(self.energy_density_erg_cm3)

    @property
    def magnetic_field_T(self) -> float:
        """tesla per code unit: B_T^2/(2 mu_0) [J/m^3] = rho_code * u_SI."""
        return self._field_factor * math.sqrt(constants.mu_0 * self.energy_density_J_m3 / (4 * math.pi))

    @property
    def electric_field_statV_cm(self) -> float:
        return self._field_factor * math.sqrt(self.energy_density_erg_cm3)

    @property
    def electric_field_V_m(self) -> float:
        """volt/metre per code unit: epsilon_0 E^2 / 2 [J/m^3] = rho_code * u_SI."""
        return self._field_factor * math.sqrt(self.energy_density_J_m3
                                              / (4 * math.pi * constants.epsilon_0))


def physical_scale(mass_solar: float, units: str = "gaussian") -> PhysicalScale:
    """The conversion factors for a mass scale in solar masses (see :class:`PhysicalScale`).

    Examples
    --------
    >>> from emsource.physical_units import physical_scale
    >>> f"{physical_scale(1.0).magnetic_field_G:.3e}"
    '2.356e+19'
    """
    return PhysicalScale(float(mass_solar), units)
