"""Exact solutions of Maxwell's equations on 3+1 slices, sampled on Cartesian grids.

Every generator returns a :class:`TimeLevelFields` (the data of one time level, in memory) with
the conventions of the package:
component axis first, symmetric tensors packed (xx, xy, xz, yy, yz, zz), fields measured by the
normal observer, contravariant E and B, Gaussian units unless a generator says otherwise, and
the exact coordinate-time derivatives dt_E, dt_B, dt_gamma of the slicing.

Flat spacetime:

- :func:`plane_wave`: vacuum plane wave, any direction, polarization and profile, inertial
  coordinates; :func:`periodic_wave_vector` makes it periodic in a box.
- :func:`boosted_gaussian_charge`: a Gaussian ball of charge moving at constant velocity.
- :func:`plane_wave_moving_frame`: the plane wave in drifting coordinates x' = x - V t
  (lapse 1, shift V).
- :func:`plane_wave_gauge_wave`: the plane wave on the gauge-wave slicing of flat spacetime
  (lapse, metric and extrinsic curvature all nontrivial).
- :func:`rotating_dipole`: the vacuum field of a rotating point magnetic dipole (all zones),
  a model of a spinning magnetized compact star; :func:`rotating_dipole_fields` at arbitrary
  points and :func:`rotating_dipole_luminosity`, its radiated power.
- :func:`sheared_circular_wave`: a circularly polarised plane wave in sheared, stretched
  coordinates (a constant non-diagonal metric), with its exact energy and momentum density
  (the data of ``emsource example``).

Curved spacetime (electrovacuum black holes, Kerr-Schild coordinates, stationary slices):

- :func:`kerr_newman` (mass, spin, charge), :func:`reissner_nordstrom` (spin 0),
  :func:`kerr` (charge 0); :func:`kerr_newman_arrays` evaluates the same at arbitrary points;
  :func:`kerr_schild_radius`, :func:`outer_horizon_radius`, :func:`inner_horizon_radius`.
"""

from .boosted_charge import boosted_gaussian_charge, gaussian_sphere_field_factors
from .gauge_wave import plane_wave_gauge_wave
from .kerr_schild import (
    inner_horizon_radius,
    kerr,
    kerr_newman,
    kerr_newman_arrays,
    kerr_schild_radius,
    outer_horizon_radius,
    reissner_nordstrom,
)
from .moving_frame import plane_wave_moving_frame
from .plane_wave import periodic_wave_vector, plane_wave
from .sheared_wave import ShearedWave, sheared_circular_wave
from .rotating_dipole import rotating_dipole, rotating_dipole_fields, rotating_dipole_luminosity
from .time_level_fields import TimeLevelFields
from .._deprecated_names import module_aliases

#: ``SliceFields`` is the deprecated name of :class:`TimeLevelFields`.
__getattr__ = module_aliases(__name__, {"SliceFields": ("TimeLevelFields", TimeLevelFields)})

__all__ = [
    "TimeLevelFields",
    "boosted_gaussian_charge",
    "gaussian_sphere_field_factors",
    "periodic_wave_vector",
    "plane_wave",
    "plane_wave_gauge_wave",
    "plane_wave_moving_frame",
    "rotating_dipole",
    "rotating_dipole_fields",
    "rotating_dipole_luminosity",
    "ShearedWave",
    "sheared_circular_wave",
    "inner_horizon_radius",
    "kerr",
    "kerr_newman",
    "kerr_newman_arrays",
    "kerr_schild_radius",
    "outer_horizon_radius",
    "reissner_nordstrom",
]
