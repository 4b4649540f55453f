"""The global energy-momentum balance of a snapshot time series on Dask.

:func:`emsource.conservation.global_balance` integrates, per time level, the box totals, the
face outflows and the volume sources over the box of interior points, then over time. Here
each level is cut into blocks of whole stored chunks along x (files stored "xyz"; a file
stored "zyx" is one block per level, since the balance's pieces are rows of x), each block
extended by r + 1 rows of its neighbours (r = stencil radius: r rows for the metric
derivatives of the sources, one more so that the box faces of a block's extension are not
counted as faces of the box): :func:`emsource.conservation.balance_partial` gives the
:class:`emsource.reductions.BalancePartial` of the block's own box rows. The partials of all
blocks of all levels merge in one tree, and ``finalise`` takes the time integrals.

Every level needs the lapse, shift, spatial metric, extrinsic curvature, E and B; the charge
and current densities are used where every level has them. Excised points are not handled by
the balance (as in ``global_balance``): a level with a valid_mask is refused.
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from dask import delayed
from dask.array.overlap import overlap

from ..conservation import balance_partial
from ..kernels.stencils import stencil_radius
from ..reductions import BalancePartial, Sum
from ..snapshot import SnapshotError
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import compute_reductions
from .series import open_series

__all__ = ["global_balance_series"]

_NEEDED = ("lapse", "shift", "spatial_metric", "extrinsic_curvature", "electric_field",
           "magnetic_field")
_CHARGES = ("charge_density", "current_density")
#: Channel ranges of the stacked inputs.
_LAYOUT = {"alpha": (0, 1), "beta": (1, 4), "gamma": (4, 10), "K": (10, 16), "E": (16, 19),
           "B": (19, 22), "charge_density": (22, 23), "current_density": (23, 26)}
#: Values per point a block holds: 26 inputs, the balance kernels' 16-row work array and
#: sources, float64 copies of the box terms.
_VALUES_PER_POINT = 80


def _balance_block(stacked, level, times, k, order, charges, check, start, stop, lower):
    """The BalancePartial of the box rows among global rows start:stop of level ``k``."""
    xyz = level.to_xyz
    fields = {name: xyz(stacked[a:b]) for name, (a, b) in _LAYOUT.items() if b <= len(stacked)}
    for name in ("alpha", "charge_density"):
        if name in fields:
            fields[name] = fields[name][0]
    fields.setdefault("charge_density", None)
    fields.setdefault("current_density", None)
    n = level.storage_shape[0]
    r = stencil_radius(order)
    first = start - lower  # global row of the block's first row
    own = (max(start, r), min(stop, n - r))
    if own[1] <= own[0] and (start, stop) != (0, n):  # all the block's rows are boundary layer
        zero = Sum.zero(4)
        return BalancePartial.of_level(times, k, zero, zero, zero)
    # The whole level (also one stored "zyx", whose rows are not rows of x): the whole box.
    rows = None if (start, stop) == (0, n) else (own[0] - first - r, own[1] - first - r)
    level_fields = SimpleNamespace(grid=level.grid, units=level.units, **fields)
    try:
        return balance_partial(level_fields, times, k, order=order, spacing=level.grid.spacing,
                               units=level.units, include_charges=charges, rows=rows,
                               check=check)
    except ValueError as error:
        where = f"{level.where}, time level {level.label!r} (x rows {start}:{stop})"
        relocate = getattr(error, "relocated", None)
        if relocate is not None:
            raise relocate(0, first, where) from None
        raise SnapshotError(f"{where}: {error}") from None


def global_balance_series(inputs, *, mapping=None, levels=None, order=4, include_charges=True,
                          check=True, block_bytes=DEFAULT_BLOCK_BYTES, progress=False):
    """:func:`emsource.conservation.global_balance` of the levels of one or many snapshot files.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`);
        at least two levels, on one grid, in one unit system.
    levels : sequence of int, optional
        Positions in the time-ordered series (default all).
    order, include_charges, check
        As for ``global_balance`` (the charges are used where every level has them).

    Returns
    -------
    emsource.reductions.GlobalBalance
    """
    chosen = open_series(inputs, mapping, levels)
    if len(chosen) < 2:
        raise SnapshotError(f"the balance needs at least two time levels, found {len(chosen)}")
    charges = include_charges and all(level.has(q) for level in chosen for q in _CHARGES)
    times = tuple(level.time for level in chosen)
    r = stencil_radius(order)
    task = delayed(_balance_block, pure=True)
    leaves = []
    for k, level in enumerate(chosen):
        level.require(_NEEDED, "the balance")
        if level.has("valid_mask"):
            raise SnapshotError(f"{level.where}, time level {level.label!r} has a valid_mask: "
                                "the balance does not handle excised points")
        names = _NEEDED + (_CHARGES if charges else ())
        if level.axis_order == "xyz":
            heights = block_rows(level, names, _VALUES_PER_POINT, 8, block_bytes,
                                 minimum=r + 2)
        else:
            heights = (level.storage_shape[0],)
        stacked, _ = level_stack(level, names, heights)  # the channels of _LAYOUT
        if len(heights) > 1:
            stacked = overlap(stacked, depth={1: r + 1}, boundary="none")
        blocks = stacked.to_delayed().ravel()
        for block, start, height in zip(blocks, block_starts(heights), heights):
            lower = min(r + 1, start) if len(heights) > 1 else 0
            leaves.append(task(block, level, times, k, order, charges, check, start,
                               start + height, lower))
    partial, = compute_reductions([leaves], progress=progress, description="balance")
    grid = chosen[0].grid.shape
    box = tuple(slice(r, n - r) if n > 1 else slice(0, 1) for n in grid)
    return partial.finalise(box)
