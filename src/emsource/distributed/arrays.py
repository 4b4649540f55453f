"""Snapshot quantities as Dask arrays over the HDF5 datasets, in blocks of whole stored chunks.

The quantities a computation reads from a :class:`~.series.SeriesLevel` become one
``dask.array`` in storage order, stacked along a first channel axis (each quantity's components
in table order, a scalar as one channel; :func:`channel_layout`): :class:`StoredQuantities` is
the array-like that ``dask.array.from_array`` slices, and each slice is one task that opens the
file read-only, reads the rows of every quantity through :meth:`emsource.snapshot.TimeLevel.read`
and closes it. Native files and layout mappings thus read through the same code, with the same
checks (a ``valid_mask`` holding anything but 0 and 1 is an error), as the single-process
commands; one open per block, not per quantity (opening scans the file's levels: measured as
most of the time of small blocks).

Blocks. A block is a run of whole planes of the slowest storage axis (every other axis whole),
like a slab of :mod:`emsource.snapshot.slabs`. :func:`block_rows` makes it a whole number of
the file's chunks along that axis (the least common multiple of the chunk heights of the
quantities read; contiguous datasets do not constrain it), so that no stored chunk is read by
two tasks, and sizes it so that the values a task holds fit ``block_bytes``.
"""

from __future__ import annotations

import math
import os

import dask.array as da
import numpy as np

from ..quantities import COMPONENTS
from ..snapshot import open_snapshot

__all__ = ["StoredQuantities", "level_stack", "channel_layout", "block_rows", "block_starts", "DEFAULT_BLOCK_BYTES"]

#: Bytes of the values one task holds (inputs, outputs and temporaries of its block). Tasks cost
#: a fixed overhead on a cluster (scheduling, a file open): 64 MiB blocks (2 planes of 256^2)
#: ran the integrals 2x slower than 256 MiB ones on 2 workers (benchmarks/bench_dask.py).
DEFAULT_BLOCK_BYTES = 256 * 2**20


def channel_layout(quantities) -> dict:
    """Quantity -> slice of its components in a stack of ``quantities`` (a scalar takes one)."""
    layout, first = {}, 0
    for q in quantities:
        count = max(COMPONENTS[q], 1)
        layout[q] = slice(first, first + count)
        first += count
    return layout


class StoredQuantities:
    """A read-only array-like over several quantities of one level, stacked along a first
    channel axis (:func:`channel_layout`), read on demand (picklable).

    ``self[key]`` with ``key`` a tuple of slices (what ``dask.array.from_array`` passes) opens
    the file once, reads the rows of the slowest storage axis that ``key`` selects for every
    quantity (in ``dtype``; a valid_mask is checked in its stored type, then converted: 0 and 1
    are exact in any float type) and returns the selection.
    """

    def __init__(self, level, quantities, dtype):
        self.level = level
        self.quantities = tuple(quantities)
        self.layout = channel_layout(self.quantities)
        self.dtype = np.dtype(dtype)
        channels = sum(s.stop - s.start for s in self.layout.values())
        self.shape = (channels,) + tuple(level.storage_shape)
        self.ndim = 4

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        key = key + (slice(None),) * (self.ndim - len(key))
        start, stop, step = key[1].indices(self.shape[1])
        out = np.empty((self.shape[0], max(stop - start, 0)) + self.shape[2:], self.dtype)
        if stop > start:
            with open_snapshot(self.level.path, self.level.mapping) as snap:
                level = snap.levels[self.level.index]
                for q, channels in self.layout.items():
                    target = out[channels] if COMPONENTS[q] else out[channels.start]
                    if q == "valid_mask":
                        target[...] = _stored(level, q, start, stop)
                    else:
                        level.read(q, start, stop, dtype=self.dtype, out=target)
        return out[(key[0], slice(None, None, step)) + key[2:]]


def _stored(level, quantity, start, stop):
    """``quantity`` over rows start:stop in storage order, in its stored type."""
    source = level.source(quantity)
    shape = ((COMPONENTS[quantity],) if COMPONENTS[quantity] else ()) + (stop - start,) + \
        tuple(level.storage_shape[1:])
    out = np.empty(shape, source.dtype)
    level.read(quantity, start, stop, out=out)
    return out


def block_rows(level, quantities, values_per_point, itemsize=8, block_bytes=DEFAULT_BLOCK_BYTES,
               minimum=1) -> tuple:
    """Rows per block along the slowest storage axis, as a tuple of block heights.

    Each height is a multiple of the stored chunk height (the least common multiple over the
    chunked datasets of ``quantities``), at least ``minimum`` (a stencil's halo needs that
    many rows in a neighbour), and as large as ``values_per_point`` values of ``itemsize``
    bytes allow within ``block_bytes``. A short last block is merged into the one before.
    """
    n0 = level.storage_shape[0]
    unit = 1
    for q in quantities:
        info = level.stored.get(q)
        if info is not None and info.chunk_bytes > 0:
            unit = math.lcm(unit, max(1, info.chunk_rows))
    unit = min(unit, n0)
    plane = level.plane_points * values_per_point * itemsize
    rows = max(1, int(block_bytes) // max(plane, 1))
    rows = max(unit, rows // unit * unit, -(-int(minimum) // unit) * unit)
    rows = min(rows, n0)
    heights = [rows] * (n0 // rows)
    if n0 % rows:
        if heights and n0 % rows < minimum:
            heights[-1] += n0 % rows
        else:
            heights.append(n0 % rows)
    return tuple(heights)


def block_starts(heights) -> list:
    """First row of each block."""
    return [int(s) for s in np.cumsum((0,) + tuple(heights))[:-1]]


def level_stack(level, quantities, heights, dtype=np.float64):
    """``quantities`` of ``level`` stacked into one Dask array in storage order.

    Returns
    -------
    (dask.array.Array, dict)
        The array, (channels, *storage grid) in ``dtype`` with blocks of ``heights`` rows and
        every channel in each block (one task reads one block of every quantity, opening the
        file once), and :func:`channel_layout` of ``quantities``.

    The array's name is derived from the file, its modification time, the level, the
    quantities, the type and the blocks, so that two arrays over the same data share tasks.
    """
    source = StoredQuantities(level, quantities, dtype)
    chunks = ((source.shape[0],), tuple(heights)) + tuple((n,) for n in source.shape[2:])
    try:
        stamp = os.stat(level.path).st_mtime_ns
    except OSError:
        stamp = 0
    name = "emsource-read-" + da.core.tokenize(level.path, stamp, level.mapping, level.index,
                                               source.quantities, source.dtype.str, chunks)
    array = da.from_array(source, chunks=chunks, name=name, asarray=False, lock=False,
                          meta=np.empty((0,) * 4, source.dtype))
    return array, source.layout
