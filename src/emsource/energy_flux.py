"""Conserved densities and the energy flux density of the electromagnetic field.

Public wrapper around :func:`emsource.kernels.sources.energy_fluxes_grid`: the quantities that
volume and surface integrals of a time level sum, from one pass over the grid with the point
physics of :mod:`emsource.kernels.electromagnetic`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import _arguments as arg
from ._threading import kernel_call
from .kernels import sources as kernels
from .sources import SPACETIME_INPUT_NAMES, raise_for_counts, spacetime_inputs

__all__ = ["EnergyFluxes", "energy_fluxes"]


class EnergyFluxes(NamedTuple):
    """Densities and flux on a grid (views into one (7, *grid) array).

    Attributes
    ----------
    energy : (*grid) ndarray
        sqrt(gamma) rho, the energy per unit coordinate volume.
    momentum : (3, *grid) ndarray
        sqrt(gamma) S_i, the momentum per unit coordinate volume (covariant index).
    flux : (3, *grid) ndarray
        F^i = sqrt(gamma) (alpha S^i - beta^i rho): the energy flux density through
        coordinate surfaces, d_t(sqrt(gamma) rho) + d_i F^i = sources.
    """

    energy: np.ndarray
    momentum: np.ndarray
    flux: np.ndarray


def energy_fluxes(alpha, beta, gamma, E, B, *, units="gaussian", field_index="upper",
                  check=True, out=None) -> EnergyFluxes:
    r"""sqrt(gamma) rho, sqrt(gamma) S_i and the energy flux density F^i at every grid point.

    .. math::

        F^i = \sqrt{\gamma}\,(\alpha S^i - \beta^i \rho), \qquad
        S^i = \frac{[ijk] E_j B_k}{4\pi\sqrt{\gamma}} \ \text{(Gaussian)},

    the flux of the 3+1 energy equation
    d_t(sqrt(gamma) rho) + d_i F^i = sqrt(gamma) (alpha K_ij S^ij - S^i d_i alpha - alpha j^i E_i).

    Parameters
    ----------
    alpha : (*grid) ndarray
        Lapse, positive.
    beta : (3, *grid) ndarray
        Shift beta^i.
    gamma, E, B, units, field_index, check
        As for :func:`emsource.adm_sources` (component-first layout).
    out : (7, *grid) ndarray, optional
        Preallocated result in the inputs' dtype, rows (energy, momentum x, y, z, flux x, y, z).

    Returns
    -------
    EnergyFluxes
        Views into the (7, *grid) result.

    Raises
    ------
    TypeError, ValueError, GridPointError
        As for :func:`emsource.stress_energy_4d`.

    References
    ----------
    E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 6.3 (energy conservation).

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.energy_flux import energy_fluxes
    >>> gamma = np.zeros((6, 2, 2, 2)); gamma[[0, 3, 5]] = 1.0
    >>> E = np.zeros((3, 2, 2, 2)); E[1] = 1.0
    >>> B = np.zeros((3, 2, 2, 2)); B[2] = 1.0
    >>> f = energy_fluxes(np.ones((2, 2, 2)), np.zeros((3, 2, 2, 2)), gamma, E, B)
    >>> bool(np.allclose(f.flux[0], f.energy))     # a wave carries its energy at the speed of light
    True
    """
    function = "energy_fluxes"
    layout = "component_first"
    (grid, lapse, shift, metric, gidx, e, b, prefactor, form,
     dtype) = spacetime_inputs(function, alpha, beta, gamma, E, B, units, field_index, layout)
    names = SPACETIME_INPUT_NAMES
    inputs = (alpha, beta, gamma, E, B)
    shape = (7,) + grid
    if out is None:
        result = np.empty(shape, dtype)
    else:
        result = out
        arg.outputs(function, ("",), (out,), (shape,), (1,), dtype, layout, names, inputs)
    fluxes = EnergyFluxes(result[0], result[1:4], result[4:7])
    if not arg.has_points(grid):
        return fluxes
    views = arg.three_axis_views([lapse, shift, metric, e, b, result], grid)
    constants = arg.kernel_constants(form, dtype, prefactor)
    with kernel_call():
        counts = kernels.energy_fluxes_grid(views[0], views[1], views[2], gidx, views[3],
                                            views[4], views[5], *constants, bool(check))
        if counts[0] or counts[1]:
            raise_for_counts(function, counts, grid, dtype, kernels.first_failing_flux,
                             (views[0], views[1], views[2], gidx, views[3], views[4], views[5],
                              *constants), names, views[:5], views[5:], gidx)
    return fluxes
