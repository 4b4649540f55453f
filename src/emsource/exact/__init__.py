"""Exact solutions of Maxwell's equations on 3+1 slices, sampled on Cartesian grids.

Every generator returns a :class:`SliceFields` with the conventions of the package:
component axis first, symmetric tensors packed (xx, xy, xz, yy, yz, zz), fields measured by the
normal observer, contravariant E and B, Gaussian units unless a generator says otherwise.
"""

from .rotating_dipole import rotating_dipole, rotating_dipole_fields, rotating_dipole_luminosity
from .slice_fields import SliceFields

__all__ = ["SliceFields", "rotating_dipole", "rotating_dipole_fields", "rotating_dipole_luminosity"]
