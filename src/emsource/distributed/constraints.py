"""ADM constraint residuals and norms of snapshot levels on Dask (``map_overlap``).

The residuals need centred differences of order 2, 4 or 6, whose stencil reaches r = order / 2
points on each side. :func:`constraint_residuals` is a ``dask.array.map_overlap`` with depth r
along the block axis (the slowest storage axis; every other axis is whole in a block) and no
padding at the grid's faces: each block, extended by r rows of each neighbour, goes through
:func:`emsource.constraints.adm_constraints`, and the result is trimmed back to the block's own
rows. A point of the block is interior there exactly when it is interior in the whole grid
(its stencil lies in the extended block), so the residuals are those of the single-process
call, point by point. :func:`constraint_norms` reduces them block by block into
:class:`emsource.reductions.NormPartial` results merged in a tree.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import dask.array as da
import numpy as np
from dask import delayed

from ..constraints import adm_constraints, norm_partial
from ..kernels.stencils import stencil_radius
from ..reductions import NormPartial, ResidualNorms
from ..snapshot import SnapshotError
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import compute_reductions
from .series import open_series

__all__ = ["ConstraintNorms", "constraint_residuals", "constraint_norms", "CHANNELS"]

#: Channels of :func:`constraint_residuals`: H, M_i, their scales, and 1 where interior.
CHANNELS = ("hamiltonian", "momentum_x", "momentum_y", "momentum_z", "hamiltonian_scale",
            "momentum_scale_x", "momentum_scale_y", "momentum_scale_z", "interior")
_METRIC = ("spatial_metric", "extrinsic_curvature")
_FIELDS = ("electric_field", "magnetic_field")
#: Values per point a block holds: 18 inputs + mask, the float64 copies and sources (about
#: 30), the 9 outputs and the erosion's masks.
_VALUES_PER_POINT = 64


@dataclass(frozen=True)
class ConstraintNorms:
    """Norms of the constraints over the interior points of one time level.

    Attributes
    ----------
    label, time : str, float
    hamiltonian_norms, momentum_norms : ResidualNorms
        As :class:`emsource.constraints.ConstraintResiduals` has them.
    norm_partial : NormPartial
        The combined partial (components H, M_x, M_y, M_z).
    interior_points : int
    order : int
    units : str or None
        None for vacuum.
    """

    label: str
    time: float
    hamiltonian_norms: ResidualNorms
    momentum_norms: ResidualNorms
    norm_partial: NormPartial
    interior_points: int
    order: int
    units: str | None


def _residual_block(stacked, *, level, order, units, has_mask, starts, halo, block_info=None):
    """The 9 channels of one block extended by ``halo`` rows of its neighbours (trimmed by
    ``map_overlap`` afterwards)."""
    block = block_info[None]["chunk-location"][1]
    start = starts[block]
    lower = min(halo, start)  # no rows below the first block: no padding at the faces
    xyz = level.to_xyz
    gamma, K = xyz(stacked[0:6]), xyz(stacked[6:12])
    fields = (xyz(stacked[12:15]), xyz(stacked[15:18])) if units else (None, None)
    valid = xyz(stacked[-1]) != 0 if has_mask else None
    try:
        res = adm_constraints(gamma, K, *fields, spacing=level.grid.spacing, order=order,
                              units=units or "gaussian", valid_mask=valid)
    except ValueError as error:  # GridPointError included: index in the whole grid
        relocate = getattr(error, "relocated", None)
        where = (f"{level.where}, time level {level.label!r} "
                 f"({'xyz'[level.slab_axis]} rows {start}:{starts[block] + stacked.shape[1] - lower})")
        if relocate is not None:
            raise relocate(level.slab_axis, start - lower, where) from None
        raise SnapshotError(f"{where}: {error}") from None
    out = np.empty((len(CHANNELS),) + stacked.shape[1:])
    storage = level.to_xyz  # its own inverse: a transposition of the three grid axes
    out[0] = storage(res.hamiltonian)
    out[1:4] = storage(res.momentum)
    out[4] = storage(res.hamiltonian_scale)
    out[5:8] = storage(res.momentum_scale)
    out[8] = storage(res.interior)
    return out


def constraint_residuals(level, *, order=4, units="file", block_bytes=DEFAULT_BLOCK_BYTES):
    """H, M_i, their scales and the interior of ``level`` as a lazy Dask array.

    Parameters
    ----------
    level : SeriesLevel
    order : {2, 4, 6}
    units : {"file", "gaussian", "heaviside_lorentz", "vacuum"}
        Unit system of the EM sources ("file": the level's), or vacuum (no sources, E and B
        not read).

    Returns
    -------
    dask.array.Array
        float64, (9, *storage grid) in storage order: the channels of :data:`CHANNELS` (NaN
        where not interior; the last channel 1.0 at interior points, 0.0 elsewhere).
    """
    units = level.units if units == "file" else units
    units = None if units == "vacuum" else units
    names = _METRIC + (_FIELDS if units else ())
    level.require(names, "the constraints")
    r = stencil_radius(order)
    has_mask = level.has("valid_mask")
    heights = block_rows(level, names + (("valid_mask",) if has_mask else ()), _VALUES_PER_POINT,
                         8, block_bytes, minimum=2 * r + 1)
    stacked, _ = level_stack(level, names + (("valid_mask",) if has_mask else ()), heights)
    n1, n2 = level.storage_shape[1:]
    return da.map_overlap(
        _residual_block, stacked, depth={0: 0, 1: r, 2: 0, 3: 0}, boundary="none",
        chunks=((len(CHANNELS),), heights, (n1,), (n2,)), dtype=np.float64,
        meta=np.empty((0, 0, 0, 0)), level=level, order=order, units=units,
        has_mask=has_mask, starts=block_starts(heights), halo=r)


def _block_norms(block) -> NormPartial:
    interior = block[8] != 0
    return norm_partial(block[0], block[1:4], block[4], block[5:8], interior)


def constraint_norms(inputs, *, mapping=None, levels=None, order=4, units="file",
                     block_bytes=DEFAULT_BLOCK_BYTES, progress=False) -> list:
    """Constraint norms of the chosen levels of one or many snapshot files, on Dask.

    The numbers of :func:`emsource.constraints.adm_constraints` on each whole level (its
    ``hamiltonian_norms`` and ``momentum_norms``) to within the rounding of the tree's combine.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`).
    levels : sequence of int, optional
        Positions in the time-ordered series (default all).
    order, units
        As for :func:`constraint_residuals`.

    Returns
    -------
    list of ConstraintNorms
    """
    chosen = open_series(inputs, mapping, levels)
    groups = []
    for level in chosen:
        residuals = constraint_residuals(level, order=order, units=units, block_bytes=block_bytes)
        groups.append([delayed(_block_norms, pure=True)(b) for b in residuals.to_delayed().ravel()])
    partials = compute_reductions(groups, progress=progress, description="constraints")
    results = []
    for level, partial in zip(chosen, partials):
        used = level.units if units == "file" else units
        results.append(ConstraintNorms(
            level.label, level.time, partial.finalise(0, zero_scale=math.nan),
            partial.finalise(slice(1, 4), zero_scale=math.nan), partial, partial.count, order,
            None if used == "vacuum" else used))
    return results
