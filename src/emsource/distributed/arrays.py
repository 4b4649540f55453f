"""Snapshot quantities as Dask arrays over the HDF5 datasets, in blocks of whole stored chunks.

A quantity of a :class:`~.series.SeriesLevel` becomes a ``dask.array`` in storage order
(component axis first, then the grid axes as stored): :class:`StoredQuantity` is the array-like
that ``dask.array.from_array`` slices, and each slice is one call of
:meth:`emsource.snapshot.TimeLevel.read` in the task that needs it (the task opens the file
read-only, reads the rows and closes it), so native files and layout mappings read through the
same code, with the same checks (a ``valid_mask`` holding anything but 0 and 1 is an error) as
the single-process commands.

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

__all__ = ["StoredQuantity", "level_array", "block_rows", "block_starts", "DEFAULT_BLOCK_BYTES"]

#: Bytes of the values one task holds (inputs, outputs and temporaries of its block).
DEFAULT_BLOCK_BYTES = 64 * 2**20


class StoredQuantity:
    """A read-only array-like over one quantity of one level, read on demand (picklable).

    ``self[key]`` with ``key`` a tuple of slices (what ``dask.array.from_array`` passes) reads
    the rows of the slowest storage axis that ``key`` selects, in ``dtype``, and returns the
    selection. The file is opened for each read and closed after it.
    """

    def __init__(self, level, quantity, dtype=None):
        self.level = level
        self.quantity = quantity
        info = level.stored[quantity]
        self.shape = tuple(info.shape)
        self.dtype = np.dtype(info.dtype if dtype is None else dtype)
        self.ndim = len(self.shape)
        self.lead = 1 if COMPONENTS[quantity] else 0

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        key = key + (slice(None),) * (self.ndim - len(key))
        start, stop, step = key[self.lead].indices(self.shape[self.lead])
        rest = key[:self.lead] + (slice(None),) + key[self.lead + 1:]
        if stop <= start:
            return np.empty((0,) * self.ndim, self.dtype)[rest]
        shape = list(self.shape)
        shape[self.lead] = stop - start
        out = np.empty(shape, self.dtype)
        with open_snapshot(self.level.path, self.level.mapping) as snap:
            snap.levels[self.level.index].read(self.quantity, start, stop, dtype=self.dtype,
                                               out=out)
        if step != 1:
            out = out[(slice(None),) * self.lead + (slice(None, None, step),)]
        return out[rest]


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


def level_array(level, quantity, heights, dtype=None):
    """``quantity`` of ``level`` as a Dask array in storage order, blocks of ``heights`` rows.

    The array's name is derived from the file, its modification time, the level, the quantity,
    the type and the blocks, so that two arrays over the same data share their tasks.
    """
    source = StoredQuantity(level, quantity, dtype)
    lead = source.lead
    chunks = tuple((n,) for n in source.shape[:lead]) + (tuple(heights),) + tuple(
        (n,) for n in source.shape[lead + 1:])
    try:
        stamp = os.stat(level.path).st_mtime_ns
    except OSError:
        stamp = 0
    name = "emsource-read-" + da.core.tokenize(level.path, stamp, level.mapping, level.index,
                                               quantity, source.dtype.str, chunks)
    return da.from_array(source, chunks=chunks, name=name, asarray=False, lock=False,
                         meta=np.empty((0,) * source.ndim, source.dtype))
