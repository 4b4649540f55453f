"""The one table of the quantities emsource reads and writes.

Every place that needs to know a quantity derives it from :data:`TABLE`: the native snapshot
layout (dataset names and component counts, :mod:`emsource.snapshot`), the keys a layout
mapping may name under ``[quantities.*]``, the choices of ``emsource sources --outputs``, the
names of the in-memory API (``alpha``, ``beta``, ``gamma``, ...), and unit conversions that
depend on a quantity's dimension.

Columns
-------
name
    File and dataset name (plain words, the native layout and the mapping keys).
api
    Name of the same quantity in the Python API (argument names of :func:`emsource.adm_sources`
    and attributes of :class:`emsource.exact.TimeLevelFields`).
components
    0 for a scalar, 3 for a vector or covector, 6 for a symmetric 3x3 tensor packed
    (xx, xy, xz, yy, yz, zz).
kind
    "scalar", "vector" (upper index), "covector" (lower index), "symmetric_lower" (two lower
    indices), "antisymmetric" (a 4x4 antisymmetric tensor packed (tx, ty, tz, xy, xz, yz), see
    :mod:`emsource.faraday`), or "mask" (uint8 flags, 1 = valid).
dimension
    Unit dimension in code units (G = c = 1): "dimensionless", "1/length", "field" (E, B),
    "field^2" (energy density and stresses), "field^2/c" (momentum density), "field*length" (the vector
    potential A_i), "charge/length^3", "charge/length^2/time".
role
    "input" (read by the computations), "mask" or "output" (written by ``emsource sources``), or
    "form_output" (written by ``emsource sources --outputs NAME`` only when asked).

Unit systems. Between Gaussian and Heaviside-Lorentz code units a field is divided by
sqrt(4 pi) and a charge or current density multiplied by it, while the stress-energy (the
"field^2" and "field^2/c" quantities) is the same physical value in both (J. D. Jackson, Classical
Electrodynamics, 3rd ed. (1999), appendix on units, table 2; from memory):
:func:`heaviside_lorentz_factor`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Quantity", "TABLE", "BY_NAME", "BY_API", "NAMES", "COMPONENTS", "INPUTS",
           "OUTPUTS", "FORM_OUTPUTS", "SOURCE_INPUTS", "components", "heaviside_lorentz_factor",
           "physical_scale_attributes", "DIMENSIONS"]


@dataclass(frozen=True)
class Quantity:
    """One row of :data:`TABLE` (see the module docstring for the columns)."""

    name: str
    api: str
    components: int
    kind: str
    dimension: str
    role: str

    @property
    def values_per_point(self) -> int:
        """Stored values per grid point (a scalar counts 1)."""
        return max(self.components, 1)


#: The quantities, inputs first, in the order of the native layout's documentation.
TABLE = (
    Quantity("lapse", "alpha", 0, "scalar", "dimensionless", "input"),
    Quantity("shift", "beta", 3, "vector", "dimensionless", "input"),
    Quantity("spatial_metric", "gamma", 6, "symmetric_lower", "dimensionless", "input"),
    Quantity("extrinsic_curvature", "K", 6, "symmetric_lower", "1/length", "input"),
    Quantity("electric_field", "E", 3, "vector", "field", "input"),
    Quantity("magnetic_field", "B", 3, "vector", "field", "input"),
    Quantity("charge_density", "charge_density", 0, "scalar", "charge/length^3", "input"),
    Quantity("current_density", "current_density", 3, "vector", "charge/length^2/time", "input"),
    # A_i: read through a mapping, which derives B^i from it (emsource.snapshot.potential_sources)
    Quantity("vector_potential", "A", 3, "covector", "field*length", "input"),
    Quantity("conformal_metric", "gamma_tilde", 6, "symmetric_lower", "dimensionless", "input"),
    Quantity("conformal_factor", "conformal_factor", 0, "scalar", "dimensionless", "input"),
    Quantity("faraday_tensor", "F", 6, "antisymmetric", "field", "input"),
    Quantity("fluid_velocity", "velocity", 3, "vector", "dimensionless", "input"),
    Quantity("valid_mask", "valid_mask", 0, "mask", "dimensionless", "mask"),
    Quantity("energy_density", "rho", 0, "scalar", "field^2", "output"),
    Quantity("momentum_density", "S_i", 3, "covector", "field^2/c", "output"),
    Quantity("spatial_stress", "S_ij", 6, "symmetric_lower", "field^2", "output"),
    Quantity("stress_trace", "S", 0, "scalar", "field^2", "output"),
    Quantity("conformal_tracefree_stress", "A_ij", 6, "symmetric_lower", "field^2", "form_output"),
    Quantity("faraday_lower", "F_ab", 6, "antisymmetric", "field", "form_output"),
    Quantity("faraday_upper", "F^ab", 6, "antisymmetric", "field", "form_output"),
    Quantity("field_invariant", "F_ab F^ab", 0, "scalar", "field^2", "form_output"),
    Quantity("dual_invariant", "F_ab *F^ab", 0, "scalar", "field^2", "form_output"),
)

BY_NAME = {q.name: q for q in TABLE}
BY_API = {q.api: q for q in TABLE}
#: Dataset names in table order.
NAMES = tuple(q.name for q in TABLE)
#: Dataset name -> number of components (0 for a scalar).
COMPONENTS = {q.name: q.components for q in TABLE}
#: Everything a snapshot may hold as data (inputs and the mask).
INPUTS = tuple(q.name for q in TABLE if q.role in ("input", "mask"))
#: What ``emsource sources`` can write, in the order of :class:`emsource.AdmSources`.
OUTPUTS = tuple(q.name for q in TABLE if q.role == "output")
#: What ``emsource sources --outputs`` can write besides :data:`OUTPUTS`: the stress in the form
#: of a conformal decomposition, the Faraday tensor and the invariants (:mod:`emsource.snapshot.form_outputs`).
FORM_OUTPUTS = tuple(q.name for q in TABLE if q.role == "form_output")
#: What the sources need: gamma_ij, E^i, B^i.
SOURCE_INPUTS = tuple(BY_API[a].name for a in ("gamma", "E", "B"))

#: Unit dimension -> (cgs, SI) attributes of :class:`emsource.physical_units.PhysicalScale`
#: that convert a code-unit value of that dimension, or None where the scale has none. A field's
#: cgs factor is the same for E and B (statvolt/cm and gauss), its SI one is not (V/m and T):
#: "field" is resolved per quantity in :func:`physical_scale_attributes`.
DIMENSIONS = {
    "dimensionless": None,
    "1/length": None,
    "field": {"E": ("electric_field_statV_cm", "electric_field_V_m"),
              "B": ("magnetic_field_G", "magnetic_field_T"), "F": None, "F_ab": None,
              "F^ab": None},
    "field^2": ("energy_density_erg_cm3", "energy_density_J_m3"),
    "field^2/c": ("momentum_density_g_cm2_s", "momentum_density_kg_m2_s"),
    "field*length": ("vector_potential_G_cm", "vector_potential_T_m"),
    "charge/length^3": None,
    "charge/length^2/time": None,
}


def components(name: str) -> int:
    """Number of components of the quantity ``name`` (0 for a scalar)."""
    try:
        return COMPONENTS[name]
    except KeyError:
        raise KeyError(f"unknown quantity {name!r}; known: {', '.join(NAMES)}") from None


def heaviside_lorentz_factor(name: str) -> float:
    """Factor that turns a Gaussian code-unit value of ``name`` into Heaviside-Lorentz.

    1 / sqrt(4 pi) for fields and the vector potential, sqrt(4 pi) for charge and current densities, 1 otherwise.
    """
    dimension = BY_NAME[name].dimension
    if dimension in ("field", "field*length"):
        return 1.0 / math.sqrt(4.0 * math.pi)
    if dimension.startswith("charge"):
        return math.sqrt(4.0 * math.pi)
    return 1.0


def physical_scale_attributes(name: str):
    """(cgs, SI) attribute names of a ``PhysicalScale`` for the quantity ``name``, or None.

    Derived from the quantity's dimension; None where :class:`~emsource.physical_units.PhysicalScale`
    has no factor for it (lengths, charges).
    """
    quantity = BY_NAME[name]
    attributes = DIMENSIONS[quantity.dimension]
    return attributes[quantity.api] if isinstance(attributes, dict) else attributes
