"""Exact solutions of Maxwell's equations on 3+1 slices, sampled on Cartesian grids.

Every generator returns a :class:`SliceFields` with the conventions of the package:
component axis first, symmetric tensors packed (xx, xy, xz, yy, yz, zz), fields measured by the
normal observer, contravariant E and B, Gaussian units unless a generator says otherwise.
"""

from .kerr_schild import (
    inner_horizon_radius,
    kerr,
    kerr_newman,
    kerr_newman_arrays,
    kerr_schild_radius,
    outer_horizon_radius,
    reissner_nordstrom,
)
from .slice_fields import SliceFields

__all__ = [
    "SliceFields",
    "kerr",
    "kerr_newman",
    "kerr_newman_arrays",
    "kerr_schild_radius",
    "inner_horizon_radius",
    "outer_horizon_radius",
    "reissner_nordstrom",
]
