"""The electromagnetic unit systems the package understands, and the one factor that differs.

In Gaussian units T^ab = (1/4 pi) (F^ac F^b_c - (1/4) g^ab F_cd F^cd); in Heaviside-Lorentz
units the same expression has no 1/(4 pi) (J. D. Jackson, Classical Electrodynamics, 3rd ed.
(1999), appendix on units and dimensions, table 3 and eq. (A.4)ff.). Both are used with
G = c = 1 for the geometry. The system is always named explicitly; the default is Gaussian.
"""

from __future__ import annotations

import math

__all__ = ["UNIT_SYSTEMS", "stress_energy_prefactor", "check_unit_system"]

#: Names accepted wherever a unit system is asked for.
UNIT_SYSTEMS = ("gaussian", "heaviside_lorentz")

_PREFACTOR = {"gaussian": 1.0 / (4.0 * math.pi), "heaviside_lorentz": 1.0}


def check_unit_system(units: str, argument: str = "units") -> str:
    """Return ``units`` if it names a supported system, else raise a ValueError that lists them."""
    if units not in _PREFACTOR:
        raise ValueError(f"{argument} must be one of {UNIT_SYSTEMS}, found {units!r}")
    return units


def stress_energy_prefactor(units: str) -> float:
    """The factor in front of F^ac F^b_c - (1/4) g^ab F^2: 1/(4 pi) (Gaussian) or 1 (HL)."""
    return _PREFACTOR[check_unit_system(units)]
