"""The container that every exact-data generator fills: one time level, in memory."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._deprecated_names import renamed_fields
from ..grid import UniformGrid

__all__ = ["TimeLevelFields"]


@renamed_fields(mask="valid_mask")
@dataclass(frozen=True)
class TimeLevelFields:
    """Lapse, shift, spatial metric, extrinsic curvature and Eulerian fields at one time level.

    A time level is the data on one slice t = const; the same term names the groups of a
    snapshot file (``/time_levels/<k>``, :class:`emsource.snapshot.TimeLevel`). All arrays have
    the component axis first; ``grid`` is ``grid.shape``.

    Attributes
    ----------
    grid : UniformGrid
        Where the arrays are sampled.
    t : float
        Coordinate time of the level.
    alpha : (*grid) ndarray
        Lapse.
    beta : (3, *grid) ndarray
        Shift beta^i (contravariant).
    gamma : (6, *grid) ndarray
        Spatial metric gamma_ij, packed (xx, xy, xz, yy, yz, zz).
    K : (6, *grid) ndarray
        Extrinsic curvature K_ij, packed, sign convention
        K_ij = -(d_t gamma_ij - D_i beta_j - D_j beta_i) / (2 alpha).
    E, B : (3, *grid) ndarray
        Electric and magnetic field measured by the normal observer, contravariant E^i, B^i.
    charge_density : (*grid) ndarray
        rho_e = -n_a J^a.
    current_density : (3, *grid) ndarray
        j^i = gamma^i_a J^a.
    units : str
        Unit system of the fields and sources, "gaussian" or "heaviside_lorentz".
    dt_E, dt_B : (3, *grid) ndarray or None
        Exact coordinate-time derivatives d_t E^i and d_t B^i, where the generator knows them.
    dt_gamma : (6, *grid) ndarray or None
        Exact d_t gamma_ij, where the generator knows it.
    valid_mask : (*grid) bool ndarray or None
        True where the data are valid (False inside an excised region); None: valid everywhere.
        Written to files as the dataset ``valid_mask``.
    """

    grid: UniformGrid
    t: float
    alpha: np.ndarray
    beta: np.ndarray
    gamma: np.ndarray
    K: np.ndarray
    E: np.ndarray
    B: np.ndarray
    charge_density: np.ndarray
    current_density: np.ndarray
    units: str = "gaussian"
    dt_E: np.ndarray | None = None
    dt_B: np.ndarray | None = None
    dt_gamma: np.ndarray | None = None
    valid_mask: np.ndarray | None = None
