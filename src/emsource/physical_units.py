r"""Code units (G = c = 1, one scale) converted to SI and cgs, and stored physical values to code units.

In G = c = 1 units one number fixes every mechanical unit: a mass M, a length L or a time T,
related by

.. math:: L = GM/c^2, \quad T = GM/c^3 = L/c, \quad M = (GM)/G = L c^2 / G,

so energy is M c^2, momentum M c, luminosity (power) c^5/G (independent of the scale), energy
density M c^2 / L^3, momentum density M c / L^3 and energy flux (c^5/G) / L^2. The scale may
be given as any one of them (:func:`physical_scale`): a mass in nominal solar masses, grams or
kilograms, a length in metres or centimetres, a time in seconds; it is kept as G M in
m^3 s^-2. A length of one metre is M = c^2 / (G M_sun)^N = 6.7722e-4 solar masses.

Field strengths follow from the energy density of the unit system the code uses: in Gaussian
code units rho = B^2/(8 pi), and in Gaussian cgs rho = B^2/(8 pi) too, so
B[G] = B_code sqrt(u[erg/cm^3]) with u the code unit of energy density; in SI rho = B^2/(2 mu_0),
so B[T] = B_code sqrt(mu_0 u[J/m^3] / (4 pi)). Heaviside-Lorentz code units (rho = B^2/2) carry an
extra sqrt(4 pi). Electric fields likewise with rho = E^2/(8 pi) (cgs, statvolt/cm) and
rho = epsilon_0 E^2 / 2 (SI, V/m). The vector potential has the unit of a field times a length
(B = curl A): G cm and T m. A magnetising field H in A/m is read as B = mu_0 H (in vacuum).

Stored physical values become code values through :func:`to_code_units` (and back through
:func:`from_code_units`), with the unit names of :data:`STORED_UNITS`.

Constants: CODATA values from :mod:`scipy.constants` (c, G, mu_0, epsilon_0) and the IAU 2015
Resolution B3 nominal solar mass parameter (G M_sun)^N = 1.3271244e20 m^3 s^-2. The solar mass in
kilograms is (G M_sun)^N / G, so its uncertainty is that of G (about 2e-5), while lengths and
times depend only on (G M_sun)^N and c, which are exact or nearly so; a scale given in grams or
kilograms carries that uncertainty of G into every length and time.
References: E. E. Mamajek et al., IAU 2015 Resolution B3 on nominal solar and planetary
conversion constants, arXiv:1510.07674; CODATA via scipy.constants; J. D. Jackson, Classical
Electrodynamics, 3rd ed. (1999), appendix on units and dimensions (conversion table).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy import constants

from ._arguments import positive_number
from .unit_systems import check_unit_system

__all__ = ["NOMINAL_SOLAR_MASS_PARAMETER", "SCALE_UNITS", "STORED_UNITS", "PhysicalScale",
           "physical_scale", "scale_of", "to_code_units", "from_code_units"]

#: (G M_sun)^N in m^3 s^-2, IAU 2015 Resolution B3.
NOMINAL_SOLAR_MASS_PARAMETER = 1.3271244e20

_C = constants.c
_G = constants.G


@dataclass(frozen=True)
class PhysicalScale:
    """Multiply a code-unit value by one of these factors to get it in the named unit.

    Build it with :func:`physical_scale`, which also takes a length, a time or a mass in other
    units (all three are one scale in G = c = 1, see the module docstring).

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
    def momentum_g_cm_s(self) -> float:
        return 1e5 * self.momentum_kg_m_s

    @property
    def power_W(self) -> float:
        """The code unit of power (the same as :attr:`luminosity_W`), c^5 / G."""
        return self.luminosity_W

    @property
    def power_erg_s(self) -> float:
        return self.luminosity_erg_s

    @property
    def energy_flux_W_m2(self) -> float:
        """Energy per time per area: (c^5 / G) / L^2 in W m^-2."""
        return self.luminosity_W / self.length_m**2

    @property
    def energy_flux_erg_s_cm2(self) -> float:
        return self.luminosity_erg_s / self.length_cm**2

    @property
    def momentum_density_kg_m2_s(self) -> float:
        """Momentum per volume, M c / L^3, in kg m^-2 s^-1."""
        return self.momentum_kg_m_s / self.length_m**3

    @property
    def momentum_density_g_cm2_s(self) -> float:
        return self.momentum_g_cm_s / self.length_cm**3

    @property
    def energy_density_J_m3(self) -> float:
        return self.energy_J / self.length_m**3

    @property
    def energy_density_erg_cm3(self) -> float:
        return self.energy_erg / self.length_cm**3

    @property
    def power_density_W_m3(self) -> float:
        """Energy per volume per time (a rate of energy density, e.g. the conservation
        residual): (c^5 / G) / L^3 in W m^-3."""
        return self.power_W / self.length_m**3

    @property
    def power_density_erg_s_cm3(self) -> float:
        return self.power_erg_s / self.length_cm**3

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


    @property
    def vector_potential_G_cm(self) -> float:
        """gauss centimetre per code unit of A (B = curl A: a field times a length)."""
        return self.magnetic_field_G * self.length_cm

    @property
    def vector_potential_T_m(self) -> float:
        return self.magnetic_field_T * self.length_m


#: Unit of a scale -> (what it measures, G M in m^3 s^-2 for a scale of 1 in that unit).
#: L = GM/c^2, T = GM/c^3, GM = G m, and (G M_sun)^N for a solar mass (module docstring).
SCALE_UNITS = {
    "m": ("length", _C**2),
    "cm": ("length", 1e-2 * _C**2),
    "s": ("time", _C**3),
    "kg": ("mass", _G),
    "g": ("mass", 1e-3 * _G),
    "solar_mass": ("mass", NOMINAL_SOLAR_MASS_PARAMETER),
}

#: Stored physical unit -> (what it measures, ``PhysicalScale`` attribute, multiplier): a value
#: v stored in that unit is ``v * multiplier / getattr(scale, attribute)`` in code units. A
#: magnetising field H in A/m is the magnetic field B = mu_0 H in tesla (in vacuum).
STORED_UNITS = {
    "V/m": ("electric field", "electric_field_V_m", 1.0),
    "statV/cm": ("electric field", "electric_field_statV_cm", 1.0),
    "T": ("magnetic field", "magnetic_field_T", 1.0),
    "G": ("magnetic field", "magnetic_field_G", 1.0),
    "A/m": ("magnetic field", "magnetic_field_T", constants.mu_0),
    "T m": ("vector potential", "vector_potential_T_m", 1.0),
    "G cm": ("vector potential", "vector_potential_G_cm", 1.0),
    "m": ("length", "length_m", 1.0),
    "cm": ("length", "length_cm", 1.0),
    "s": ("time", "time_s", 1.0),
}


def physical_scale(mass_solar: float | None = None, units: str = "gaussian", *,
                   length_m=None, length_cm=None, time_s=None, mass_kg=None, mass_g=None,
                   ) -> PhysicalScale:
    """The conversion factors of a code-unit scale (see :class:`PhysicalScale`).

    Give exactly one of ``mass_solar`` (nominal solar masses), ``mass_kg``, ``mass_g``,
    ``length_m``, ``length_cm`` or ``time_s``: the code unit of that quantity. In G = c = 1 they
    are one scale: L = GM/c^2, T = GM/c^3 (module docstring).

    Parameters
    ----------
    units : {"gaussian", "heaviside_lorentz"}
        Electromagnetic unit system of the code-unit fields.

    Raises
    ------
    ValueError
        None or more than one scale given, a scale that is not a positive finite number, or an
        unknown unit system.

    Examples
    --------
    >>> from emsource.physical_units import physical_scale
    >>> f"{physical_scale(1.0).magnetic_field_G:.3e}"
    '2.356e+19'
    >>> f"{physical_scale(length_m=1.0).mass_solar:.4e}"
    '6.7722e-04'
    """
    given = {name: value for name, value in (
        ("mass_solar", mass_solar), ("length_m", length_m), ("length_cm", length_cm),
        ("time_s", time_s), ("mass_kg", mass_kg), ("mass_g", mass_g)) if value is not None}
    if len(given) != 1:
        raise ValueError("physical_scale: give exactly one of mass_solar, mass_kg, mass_g, "
                         f"length_m, length_cm or time_s; found {sorted(given) or 'none'}")
    (name, value), = given.items()
    unit = {"mass_solar": "solar_mass", "length_m": "m", "length_cm": "cm", "time_s": "s",
            "mass_kg": "kg", "mass_g": "g"}[name]
    return scale_of(positive_number(f"physical_scale: {name}", value), unit, units)


def scale_of(value: float, unit: str, units: str = "gaussian", *, argument="unit") -> PhysicalScale:
    """The scale whose code unit of length, time or mass is ``value`` ``unit``.

    ``unit`` is one of :data:`SCALE_UNITS` ("m", "cm", "s", "kg", "g", "solar_mass").
    """
    if unit not in SCALE_UNITS:
        raise ValueError(f"{argument} must be one of {list(SCALE_UNITS)}, found {unit!r}")
    value = positive_number("scale value", value)
    return PhysicalScale(value * SCALE_UNITS[unit][1] / NOMINAL_SOLAR_MASS_PARAMETER, units)


def _stored_unit(unit, argument):
    try:
        return STORED_UNITS[unit]
    except (KeyError, TypeError):
        raise ValueError(f"{argument} must be one of {list(STORED_UNITS)}, found {unit!r}") from None


def to_code_units(values, unit: str, scale: PhysicalScale, *, argument="unit"):
    """Values stored in a physical ``unit`` (:data:`STORED_UNITS`) as code-unit values.

    Returns a new array or float (the input is not modified): ``values * multiplier / factor``.

    Examples
    --------
    >>> from emsource.physical_units import physical_scale, to_code_units
    >>> s = physical_scale(length_m=1.0)
    >>> f"{to_code_units(2.0, 'm', s):.6g}"
    '2'
    """
    _, attribute, multiplier = _stored_unit(unit, argument)
    return values * (multiplier / getattr(scale, attribute))


def from_code_units(values, unit: str, scale: PhysicalScale, *, argument="unit"):
    """Code-unit values in the physical ``unit`` (the inverse of :func:`to_code_units`)."""
    _, attribute, multiplier = _stored_unit(unit, argument)
    return values * (getattr(scale, attribute) / multiplier)
