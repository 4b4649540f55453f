"""emsource: electromagnetic stress-energy sources in 3+1 form for numerical relativity.

The main entry points are :func:`adm_sources` (rho, S_i, S_ij, S for the 3+1 equations) and
:func:`stress_energy_4d` (T_ab or T^ab). Signs, units and layouts: see the README.
"""

__version__ = "0.1.0"

from . import unit_systems  # noqa: E402, F401  (emsource.unit_systems as an attribute)
from .sources import AdmSources, GridPointError, adm_sources, stress_energy_4d  # noqa: E402

__all__ = ["AdmSources", "GridPointError", "adm_sources", "stress_energy_4d", "__version__"]
