"""Energy, momentum, face fluxes and luminosity of a time series on Dask (a tree reduction).

Per time level, each block of whole stored chunks (:mod:`.arrays`), with the luminosity
spheres' halo of ``interpolation_points - 1`` rows taken from its neighbour
(``dask.array.overlap.overlap``, no padding at the grid's faces), gives the
:class:`emsource.reductions.LevelPartial` of its own rows through
:func:`emsource.integrals.slab_partial`, the function the single-process
:func:`emsource.integrals.integrate_open_snapshot` calls per slab. The partials merge in a tree of
``combine`` tasks (:func:`.cluster.tree_reduce`) and the root is finalised into
:class:`emsource.integrals.LevelIntegrals`: the single-process numbers to within (n + 1) eps of
each sum's magnitude for n blocks (:mod:`emsource.reductions`).
"""

from __future__ import annotations

import numpy as np
from dask import delayed
from dask.array.overlap import overlap

from ..integrals import INTEGRATION_VALUES_PER_POINT, LevelIntegrals, level_spheres, slab_partial
from ..quantities import COMPONENTS
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import compute_reductions
from .series import open_series

__all__ = ["integrate_series", "level_partials"]

_NEEDED = ("spatial_metric", "electric_field", "magnetic_field")
_OPTIONAL = ("lapse", "shift")


def _integrate_block(stacked, level, layout, spheres, start, stop, lower):
    """The LevelPartial of rows start:stop; ``stacked`` begins ``lower`` rows before ``start``."""
    stacked = stacked[:, lower:]
    arrays = {q: level.to_xyz(stacked[c] if COMPONENTS[q] else stacked[c.start])
              for q, c in layout.items()}
    valid = arrays.pop("valid_mask", None)
    return slab_partial(level, arrays, None if valid is None else valid != 0, spheres, start, stop)


def _leaves(level, radii, theta_points, interpolation_points, block_bytes):
    """Delayed LevelPartials of the blocks of one level, and the spheres' radii."""
    level.require(_NEEDED, "the integrals")
    spheres = level_spheres(level, radii, theta_points, interpolation_points)
    halo = interpolation_points - 1 if radii else 0
    names = [q for q in _NEEDED + _OPTIONAL + ("valid_mask",) if level.has(q)]
    heights = block_rows(level, names, INTEGRATION_VALUES_PER_POINT, 8, block_bytes,
                         minimum=max(halo, 1))
    stacked, layout = level_stack(level, names, heights, np.float64)
    several = len(heights) > 1
    if halo and several:
        stacked = overlap(stacked, depth={1: halo}, boundary="none")
    task = delayed(_integrate_block, pure=True)
    leaves = [task(block, level, layout, spheres, start, start + height,
                   min(halo, start) if several else 0)
              for block, start, height in zip(stacked.to_delayed().ravel(), block_starts(heights),
                                              heights)]
    return leaves, [s.radius for s in spheres]


def level_partials(inputs, *, mapping=None, radii=(), theta_points=32, interpolation_points=4,
                   levels=None, block_bytes=DEFAULT_BLOCK_BYTES, progress=False):
    """(levels, the combined LevelPartial of each, the radii) of a series; see
    :func:`integrate_series`."""
    chosen = open_series(inputs, mapping, levels)
    groups, kept = [], None
    for level in chosen:
        leaves, kept = _leaves(level, radii, theta_points, interpolation_points, block_bytes)
        groups.append(leaves)
    return chosen, compute_reductions(groups, progress=progress, description="integrate"), kept


def integrate_series(inputs, *, mapping=None, radii=(), theta_points=32, interpolation_points=4,
                     levels=None, block_bytes=DEFAULT_BLOCK_BYTES, progress=False) -> list:
    """:func:`emsource.integrals.integrate_snapshot` of one or many files on Dask.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`).
    mapping, radii, theta_points, interpolation_points, progress
        As for ``integrate_snapshot``; ``levels`` are positions in the time-ordered series.
    block_bytes : int
        Bound on the values one task holds (:func:`.arrays.block_rows`).

    Returns
    -------
    list of LevelIntegrals
        One per level, in time order.
    """
    chosen, partials, radii = level_partials(
        inputs, mapping=mapping, radii=radii, theta_points=theta_points,
        interpolation_points=interpolation_points, levels=levels, block_bytes=block_bytes,
        progress=progress)
    return [LevelIntegrals.from_partial(p, level.label, level.time, radii)
            for level, p in zip(chosen, partials)]
