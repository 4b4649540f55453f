"""The conservation check of a snapshot time series on Dask: local residual norms and the
global energy-momentum balance (what ``emsource balance`` computes in one process).

Blocks. Every chosen level is read as one stack of its quantities (:mod:`.arrays`) in blocks of
whole stored chunks along the slowest storage axis; all levels share the block heights (those
of the first level), so that the stacks of three neighbouring levels line up block by block.
A series whose files differ in storage order is refused (its levels' rows would not line up);
a series stored "zyx" is one block per level, because the balance's pieces are rows of x.

Local residual (:func:`emsource.conservation.level_residual`, norms only). Level k with an
equally spaced level on either side: the stacks of levels k - 1, k, k + 1 are joined along the
channel axis and extended by r = order / 2 rows of each neighbouring block
(``dask.array.overlap.overlap``, depth = the stencil radius, no padding at the grid's faces),
as ``map_overlap`` does. The interior of an extended block is then exactly the part of the
whole grid's interior in the block's own rows, so the kernel's own per-column sums are the
block's :class:`emsource.reductions.NormPartial`; the partials of a level merge in a tree.

Global balance (:func:`emsource.conservation.balance_partial`). Each block is extended by r + 1
rows (r for the metric derivatives of the volume sources, one more so that a block's extension
never counts as a face of the box) and gives the :class:`emsource.reductions.BalancePartial`
of its own box rows; the partials of all blocks of all levels merge in one tree, and
``finalise`` takes the time integrals.

Absent lapse, shift, extrinsic curvature and charges take their flat, empty values as in
:func:`emsource.snapshot_balance.level_fields`; a valid_mask holding a 0 is refused there too
(checked in the blocks that read it). Numbers: the single-process command's to within the
rounding of the combine, (n + 1) eps of each sum's magnitude for n blocks
(:mod:`emsource.reductions`).
"""

from __future__ import annotations

from types import SimpleNamespace

import dask.array as da
import numpy as np
from dask import delayed
from dask.array.overlap import overlap

from ..conservation import balance_partial, level_residual
from ..kernels.stencils import stencil_radius
from ..reductions import BalancePartial, Sum
from ..snapshot import SnapshotError
from ..snapshot_balance import (ABSENT_DEFAULTS, API_NAMES, REQUIRED, LevelResidual,
                                SnapshotBalance, equally_spaced, excised_points_message)
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import compute_reductions
from .series import open_series

__all__ = ["balance_series", "global_balance_series"]

_CHARGES = ("charge_density", "current_density")
#: Values per point a block of the local residual holds: three levels' inputs (26 + 2 x 12),
#: the kernels' 16-row work array, residual and scale (8), float64 copies and defaults.
_VALUES_PER_POINT = 110


def _names(level) -> tuple:
    """The quantities of ``level`` the balance reads (absent ones take defaults)."""
    return tuple(q for q in API_NAMES if level.has(q)) + (
        ("valid_mask",) if level.has("valid_mask") else ())


def _fields(stacked, level, layout, include_charges):
    """The time-level fields of one block (xyz views of ``stacked``; defaults for the absent
    quantities), as the attributes the conservation functions read."""
    if "valid_mask" in layout and not np.all(stacked[layout["valid_mask"].start] != 0):
        raise SnapshotError(excised_points_message(level))
    xyz = level.to_xyz
    shape = xyz(stacked[0]).shape
    values = {}
    for q, api in API_NAMES.items():
        if q in layout:
            channels = layout[q]
            values[api] = xyz(stacked[channels] if channels.stop - channels.start > 1
                              else stacked[channels.start])
    charges = {}
    if include_charges and ("charge_density" in values or "current_density" in values):
        charges = {"charge_density": values.get("charge_density", np.zeros(shape)),
                   "current_density": values.get("current_density", np.zeros((3,) + shape))}
    return SimpleNamespace(
        grid=level.grid, units=level.units, t=level.time,
        alpha=values.get("alpha", np.ones(shape)), beta=values.get("beta", np.zeros((3,) + shape)),
        gamma=values["gamma"], K=values.get("K", np.zeros((6,) + shape)), E=values["E"],
        B=values["B"], charge_density=charges.get("charge_density"),
        current_density=charges.get("current_density"), dt_E=None, dt_B=None, dt_gamma=None)


def _located(error, level, start, stop, first):
    """A block's error in the whole grid's terms (file, level, rows; the whole-grid index)."""
    if isinstance(error, SnapshotError):
        return error
    where = (f"{level.where}, time level {level.label!r} "
             f"({'xyz'[level.slab_axis]} rows {start}:{stop})")
    relocate = getattr(error, "relocated", None)
    if relocate is not None:
        return relocate(level.slab_axis, first, where)
    return SnapshotError(f"{where}: {error}")


def _balance_block(stacked, level, layout, times, k, order, charges, check, start, stop, lower):
    """The BalancePartial of the box rows among global rows start:stop of level ``k``;
    ``stacked`` begins ``lower`` rows before ``start``."""
    n = level.storage_shape[0]
    r = stencil_radius(order)
    first = start - lower  # global row of the block's first row
    whole = (start, stop) == (0, n)
    try:
        fields = _fields(stacked, level, layout, charges)
        own = (max(start, r), min(stop, n - r))
        if own[1] <= own[0] and not whole:  # all the block's rows are boundary layer
            zero = Sum.zero(4)
            return BalancePartial.of_level(times, k, zero, zero, zero)
        # The whole level (also one stored "zyx", whose rows are not rows of x): the whole box.
        rows = None if whole else (own[0] - first - r, own[1] - first - r)
        return balance_partial(fields, times, k, order=order, spacing=level.grid.spacing,
                               units=level.units, include_charges=charges, rows=rows,
                               check=check)
    except ValueError as error:
        raise _located(error, level, start, stop, first) from None


def _residual_block(stacked, levels, layouts, offsets, order, charges, start, stop, lower):
    """The NormPartial (energy, momentum x, y, z) of the local residual of ``levels[1]`` over
    the interior points in global rows start:stop; ``stacked`` holds the stacks of the three
    levels one after the other along the channel axis (``offsets``) and begins ``lower`` rows
    before ``start``."""
    fields = [_fields(stacked[a:a + sum(s.stop - s.start for s in layout.values())], level,
                      layout, charges)
              for level, layout, a in zip(levels, layouts, offsets)]
    try:
        res = level_residual(fields[1], before=fields[0], after=fields[2], order=order,
                             include_charges=charges)
    except ValueError as error:
        raise _located(error, levels[1], start, stop, start - lower) from None
    return res.norm_partial


def _check_levels(chosen):
    if len(chosen) < 2:
        raise SnapshotError(f"the balance needs at least two time levels, found {len(chosen)}")
    times = [level.time for level in chosen]
    if not all(b > a for a, b in zip(times, times[1:])):
        raise SnapshotError(f"the times of the chosen levels must increase, found {times}")
    orders = {level.axis_order for level in chosen}
    if len(orders) > 1:
        raise SnapshotError("the balance on Dask needs one storage order for every level; the "
                            f"series mixes {', '.join(sorted(orders))} ({chosen[0].where} and "
                            f"{next(lv.where for lv in chosen if lv.axis_order != chosen[0].axis_order)})")
    for level in chosen:
        level.require(REQUIRED, "the balance")


def _stacks(chosen, order, block_bytes):
    """(heights, per level (stack, layout)) with heights shared by every level."""
    r = stencil_radius(order)
    first = chosen[0]
    if first.axis_order == "xyz":
        heights = block_rows(first, _names(first), _VALUES_PER_POINT, 8, block_bytes,
                             minimum=max(2 * r + 1, r + 2))
    else:
        heights = (first.storage_shape[0],)
    return heights, [level_stack(level, _names(level), heights) for level in chosen]


def _balance_leaves(chosen, stacks, heights, order, include_charges, check):
    r = stencil_radius(order)
    times = tuple(level.time for level in chosen)
    task = delayed(_balance_block, pure=True)
    several = len(heights) > 1
    leaves = []
    for k, (level, (stacked, layout)) in enumerate(zip(chosen, stacks)):
        if several:
            stacked = overlap(stacked, depth={1: r + 1}, boundary="none")
        for block, start, height in zip(stacked.to_delayed().ravel(), block_starts(heights),
                                        heights):
            lower = min(r + 1, start) if several else 0
            leaves.append(task(block, level, layout, times, k, order, include_charges, check,
                               start, start + height, lower))
    return leaves


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
        As for ``global_balance`` (the charges are used at the levels that hold them).

    Returns
    -------
    emsource.reductions.GlobalBalance
    """
    chosen = open_series(inputs, mapping, levels)
    _check_levels(chosen)
    heights, stacks = _stacks(chosen, order, block_bytes)
    leaves = _balance_leaves(chosen, stacks, heights, order, include_charges, check)
    partial, = compute_reductions([leaves], progress=progress, description="balance")
    return partial.finalise(_box(chosen, order))


def _box(chosen, order):
    r = stencil_radius(order)
    return tuple(slice(r, n - r) if n > 1 else slice(0, 1) for n in chosen[0].grid.shape)


def balance_series(inputs, *, mapping=None, levels=None, order=2, include_charges=True,
                   block_bytes=DEFAULT_BLOCK_BYTES, progress=False) -> SnapshotBalance:
    """:func:`emsource.snapshot_balance.balance_open_snapshot` of one or many files, on Dask.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`).
    levels : sequence of int, optional
        Positions in the time-ordered series (default all), in increasing time; at least two.
    order, include_charges
        As for ``balance_open_snapshot``.
    block_bytes : int
        Bound on the values one task holds (:func:`.arrays.block_rows`).

    Returns
    -------
    SnapshotBalance
        The residual norms of every level with equally spaced neighbours and the global
        balance; ``absent`` as the single-process function reports it.
    """
    chosen = open_series(inputs, mapping, levels)
    _check_levels(chosen)
    r = stencil_radius(order)
    heights, stacks = _stacks(chosen, order, block_bytes)
    groups = [_balance_leaves(chosen, stacks, heights, order, include_charges, True)]
    several = len(heights) > 1
    with_residual = []
    task = delayed(_residual_block, pure=True)
    for now in range(1, len(chosen) - 1):
        three = chosen[now - 1:now + 2]
        if not equally_spaced(*three):
            continue
        parts = [stacks[i][0] for i in (now - 1, now, now + 1)]
        layouts = [stacks[i][1] for i in (now - 1, now, now + 1)]
        offsets = list(np.cumsum([0] + [p.shape[0] for p in parts[:-1]]))
        joined = da.concatenate(parts, axis=0).rechunk({0: -1})  # one task: all three levels
        if several:
            joined = overlap(joined, depth={1: r}, boundary="none")
        groups.append([task(block, three, layouts, offsets, order, include_charges, start,
                            start + height, min(r, start) if several else 0)
                       for block, start, height in zip(joined.to_delayed().ravel(),
                                                       block_starts(heights), heights)])
        with_residual.append(now)
    partials = compute_reductions(groups, progress=progress, description="balance")
    balance = partials[0].finalise(_box(chosen, order))
    norms = dict(zip(with_residual, partials[1:]))
    residuals = []
    for k, level in enumerate(chosen):
        entry = LevelResidual(level.label, level.time)
        partial = norms.get(k)
        if partial is not None:
            entry.energy, entry.momentum = partial.finalise(0), partial.finalise(slice(1, 4))
            entry.interior_points = int(partial.count)
        residuals.append(entry)
    absent = [q for q in ABSENT_DEFAULTS if not chosen[0].has(q)]
    return SnapshotBalance(residuals, balance, absent, order)
