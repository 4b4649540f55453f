"""Newman-Penrose radiation on extraction spheres of a snapshot time series, on Dask.

Per time level, each block of whole stored chunks (:mod:`.arrays`), extended by the
interpolation halo of ``interpolation_points - 1`` rows of its neighbour
(``dask.array.overlap.overlap``, no padding at the grid's faces), gives the
:class:`emsource.reductions.SpherePartial` of the quadrature nodes whose interpolation stencil
starts in its own rows (:meth:`emsource.radiation.ExtractionSpheres.slab_partial`, the method
the single-process stream calls per slab): each node is interpolated in exactly one block.
The partials of a level merge in a tree of ``combine`` tasks and
:meth:`~emsource.radiation.ExtractionSpheres.finalise` checks that every node was summed once
and forms the modes and powers: the single-process numbers to within (n + 1) eps of each sum's
magnitude for n blocks (:mod:`emsource.reductions`).
"""

from __future__ import annotations

import numpy as np
from dask import delayed
from dask.array.overlap import overlap

from ..radiation import RADIATION_VALUES_PER_POINT, ExtractionSpheres
from ..snapshot import SnapshotError
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import compute_reductions
from .series import open_series

__all__ = ["radiation_series"]

_NEEDED = ("spatial_metric", "electric_field", "magnetic_field")


def _radiation_block(stacked, level, layout, spheres, start, stop, lower):
    """The SpherePartial of the nodes served by rows start:stop; ``stacked`` begins ``lower``
    rows before ``start``."""
    stacked = stacked[:, lower:]
    xyz = level.to_xyz
    arrays = tuple(xyz(stacked[layout[q]]) for q in _NEEDED)
    valid = xyz(stacked[layout["valid_mask"].start]) != 0 if "valid_mask" in layout else None
    try:
        return spheres.slab_partial(arrays, valid, level.slab_axis, start, stop)
    except SnapshotError as error:
        raise SnapshotError(f"{level.where}, time level {level.label!r}: {error}") from None


def radiation_series(inputs, *, radii, mapping=None, l_max=4, theta_points=32,
                     interpolation_points=4, levels=None, block_bytes=DEFAULT_BLOCK_BYTES,
                     progress=False) -> list:
    """:func:`emsource.radiation.radiation_snapshot` of one or many files on Dask.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`).
    radii, l_max, theta_points, interpolation_points
        As for :class:`emsource.radiation.ExtractionSpheres`.
    levels : sequence of int, optional
        Positions in the time-ordered series (default all).
    block_bytes : int
        Bound on the values one task holds (:func:`.arrays.block_rows`).

    Returns
    -------
    list of emsource.radiation.LevelRadiation
        One per level, in time order.
    """
    chosen = open_series(inputs, mapping, levels)
    groups, plans = [], []
    for level in chosen:
        level.require(_NEEDED, "the radiation")
        try:  # every level of a series has the same grid: the spheres differ only by level
            spheres = ExtractionSpheres(level.grid, radii, l_max=l_max, theta_points=theta_points,
                                        interpolation_points=interpolation_points)
        except SnapshotError as error:
            raise SnapshotError(f"{level.where}, time level {level.label!r}: {error}") from None
        halo = spheres.halo
        names = _NEEDED + (("valid_mask",) if level.has("valid_mask") else ())
        heights = block_rows(level, names, RADIATION_VALUES_PER_POINT, 8, block_bytes,
                             minimum=max(halo, 1))
        stacked, layout = level_stack(level, names, heights, np.float64)
        several = len(heights) > 1
        if several:
            stacked = overlap(stacked, depth={1: halo}, boundary="none")
        shared = delayed(spheres, pure=True)  # one copy of the harmonic tables in the graph
        task = delayed(_radiation_block, pure=True)
        groups.append([task(block, level, layout, shared, start, start + height,
                            min(halo, start) if several else 0)
                       for block, start, height in zip(stacked.to_delayed().ravel(),
                                                       block_starts(heights), heights)])
        plans.append((level, spheres))
    partials = compute_reductions(groups, progress=progress, description="radiation")
    return [spheres.finalise(partial, units=level.units, label=level.label, time=level.time)
            for (level, spheres), partial in zip(plans, partials)]
