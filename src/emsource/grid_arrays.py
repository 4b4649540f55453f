"""Grid functions whose component rows are placed apart in the cache: an allocator.

A component-first grid function, shape (ncomp, nx, ny, nz), is normally one C-contiguous block,
so its component rows start n^3 * itemsize bytes apart. For power-of-two grids (128^3, 256^3)
that is a multiple of every cache's set period, and a kernel that streams the rows of several
such arrays at once (the sources read 12 rows and write 10-11) keeps all its current cache lines
in the same few cache sets: they evict each other long before the cache is full (measured, see
``benchmarks/bench_sources.py``, "padding" rows, and DEVELOPERS.md "Grid functions").

:func:`empty_grid_function` returns an ordinary ``numpy.ndarray`` of the asked shape that is a
view of a slightly larger buffer: every component row (the grid part) is C-contiguous, rows are
spaced by a whole number of cache lines chosen so that their start addresses fall into different
cache sets, and each new array starts at a different set too. It is used like any other array
(slices, ufuncs, ``out=``); the package's kernels take it on their flat fast path, which needs
only each component row to be contiguous (``emsource._arguments.kernel_views``).

Cost: per array at most 2 ``SET_PERIOD`` (256 KiB) plus ``ncomp`` times a few KiB of unused
memory (4 KiB plus 4 KiB per row for rows under 128 KiB); nothing per grid point.
"""

from __future__ import annotations

import itertools
import math
import weakref

import numpy as np

__all__ = ["empty_grid_function", "zeros_grid_function", "grid_function_like",
           "has_contiguous_rows", "rows_of", "empty_line_aligned", "CACHE_LINE", "SET_PERIOD",
           "ROW_SHIFT_LINES"]

#: Bytes per cache line (64 on x86-64 and most ARM cores).
CACHE_LINE = 64
#: Bytes after which addresses map to the same cache set again in the caches we spread over:
#: 128 KiB = 2048 sets of 64-byte lines (the 2 MiB, 16-way L2 of the development machine; an
#: L1 of 48 KiB, 12 ways, has 64 sets and a 4 KiB period, which divides this one).
SET_PERIOD = 131072
#: Consecutive rows (within an array and from one array to the next) start this many cache
#: lines apart modulo ``SET_PERIOD``. Odd, so that 2048 successive rows fall into 2048 distinct
#: sets of the 128 KiB period, and 61 = -3 (mod 64), so that 21 successive rows also fall into
#: distinct sets of a 4 KiB period (an L1). The 23 streams of the source kernel then share no
#: L1 set three at a time. (A C probe of the same traffic at 256^3 went from 7 % of a triad to
#: 72 % with rows padded by 61 lines; shared performance notes, measured before this module.)
ROW_SHIFT_LINES = 61

_LINES_PER_PERIOD = SET_PERIOD // CACHE_LINE
_L1_LINES = 4096 // CACHE_LINE
# Set of the next row to be placed, in cache lines modulo the period; advanced by every
# allocation so that arrays allocated one after another do not alias each other either.
# itertools.count is atomic under the GIL: concurrent allocations get distinct slots.
_next_row = itertools.count()


def _row_layout(ncomp: int, npoints: int, itemsize: int):
    """(first row's offset in lines mod the period, row stride in bytes) for a new array."""
    slot = next(_next_row)
    # Advance the shared counter by the rows this array uses (the first call took one slot).
    for _ in range(ncomp - 1):
        next(_next_row)
    lines = -(-npoints * itemsize // CACHE_LINE)  # row length, rounded up to whole lines
    # Rows shorter than the period are spread over the 4 KiB (L1) period only, so that a small
    # grid wastes at most 4 KiB per row, not 64 KiB.
    period = _LINES_PER_PERIOD if lines >= _LINES_PER_PERIOD else _L1_LINES
    # Smallest stride >= the row whose length in lines is ROW_SHIFT_LINES modulo the period.
    stride_lines = lines + (ROW_SHIFT_LINES - lines) % period
    first = (slot * ROW_SHIFT_LINES) % period
    return first, period * CACHE_LINE, stride_lines * CACHE_LINE


def empty_grid_function(shape, dtype=np.float64, *, grid_ndim: int | None = None) -> np.ndarray:
    """An uninitialised grid function with cache-spaced component rows.

    Parameters
    ----------
    shape : tuple of int
        Components first, then the grid: (ncomp, nx, ny, nz), (3, 3, nx, ny, nz), or just the
        grid (nx, ny, nz) for a scalar.
    dtype : float32 or float64 (or any NumPy dtype)
        Element type.
    grid_ndim : int, optional
        How many trailing axes are the grid (1, 2 or 3). Default: 3, or ``len(shape)`` when the
        shape has fewer than 3 axes.

    Returns
    -------
    ndarray
        A writeable view of the asked shape and dtype. Each component row (``a[c]``, or
        ``a[c1, c2]``) is C-contiguous and 64-byte aligned; rows lie a little more than their
        length apart, so ``a`` as a whole is not C-contiguous (``a.reshape(ncomp, -1)`` is still
        a view). Memory overhead: under 128 KiB plus 4 KiB per component row.

    Examples
    --------
    >>> import numpy as np
    >>> from emsource.grid_arrays import empty_grid_function, has_contiguous_rows
    >>> gamma = empty_grid_function((6, 32, 32, 32))
    >>> gamma.shape, gamma.dtype.name, has_contiguous_rows(gamma, 3), gamma.flags.c_contiguous
    ((6, 32, 32, 32), 'float64', True, False)
    """
    shape = tuple(int(n) for n in shape)
    if grid_ndim is None:
        grid_ndim = min(3, len(shape))
    if not 1 <= grid_ndim <= len(shape) or any(n < 0 for n in shape):
        raise ValueError(f"empty_grid_function: shape must be (components..., grid) with "
                         f"{grid_ndim} grid axes and no negative length, found {shape}")
    dtype = np.dtype(dtype)
    components, grid = shape[:len(shape) - grid_ndim], shape[len(shape) - grid_ndim:]
    ncomp, npoints = math.prod(components), math.prod(grid)
    if ncomp * npoints == 0:
        return np.empty(shape, dtype)
    first, period, stride = _row_layout(ncomp, npoints, dtype.itemsize)
    # One byte buffer: room to align its start to the period, the first row's offset, then
    # ncomp rows of ``stride`` bytes.
    nbytes = period + first * CACHE_LINE + ncomp * stride
    buffer = np.empty(nbytes, np.uint8)
    start = (-buffer.ctypes.data) % period + first * CACHE_LINE
    # Every row is followed by its padding, the last one too, so that the kernels may see the
    # whole (ncomp, stride) block as one C-contiguous array (``_arguments.kernel_views``). Only
    # ndarray views: the .base chain leads back to ``buffer``, which it keeps alive.
    rows = buffer[start:start + ncomp * stride].view(dtype).reshape(ncomp, stride // dtype.itemsize)
    array = rows[:, :npoints].reshape(shape)
    _remember_rows(array, rows)
    return array


# The (ncomp, stride) block of each array made here, by the array's id, for as long as the array
# lives: ``_arguments.kernel_views`` hands the kernels that block, and finding it from the array
# alone takes two address lookups (about 5 us per array, measured; the whole of an 8^3 call's
# cost through the flat path is about 9 us). An entry is removed when its array dies, before its
# id can be given to another object; a lookup also compares the array itself (``rows_of``).
_ROWS = {}


def _remember_rows(array, rows) -> None:
    key = id(array)

    def forget(reference, key=key):
        entry = _ROWS.get(key)
        if entry is not None and entry[0] is reference:
            del _ROWS[key]

    _ROWS[key] = (weakref.ref(array, forget), rows)


def rows_of(array):
    """The C-contiguous (ncomp, stride) block behind ``array`` if :func:`empty_grid_function`
    made ``array`` itself (not a view of it), else None. Its first ``npoints`` entries of each
    row are ``array``'s component rows; the rest is the padding, which belongs to the block."""
    entry = _ROWS.get(id(array))
    if entry is not None and entry[0]() is array:
        return entry[1]
    return None


def empty_line_aligned(shape, dtype=np.float64) -> np.ndarray:
    """An uninitialised C-contiguous array whose first element starts a cache line.

    What the package's functions allocate for their results on large grids: the streaming
    drivers (``emsource.kernels.streaming_stores``) write whole cache lines only where every
    output row starts at the same offset within a line, and ``np.empty`` places large arrays
    anywhere on a 16-byte boundary (seen at every offset). Here the rows of an (ncomp, *grid)
    array share the offset whenever a row is a whole number of lines (n^3 a multiple of 8 in
    float64, of 16 in float32). An ordinary C-contiguous ``ndarray`` (a view of a byte buffer
    one line longer, which it keeps alive).

    Examples
    --------
    >>> from emsource.grid_arrays import empty_line_aligned, CACHE_LINE
    >>> a = empty_line_aligned((3, 16, 16, 16))
    >>> a.flags.c_contiguous, a.ctypes.data % CACHE_LINE
    (True, 0)
    """
    dtype = np.dtype(dtype)
    nbytes = math.prod(int(n) for n in shape) * dtype.itemsize
    buffer = np.empty(nbytes + CACHE_LINE, np.uint8)
    start = (-buffer.ctypes.data) % CACHE_LINE
    return buffer[start:start + nbytes].view(dtype).reshape(shape)


def zeros_grid_function(shape, dtype=np.float64, *, grid_ndim: int | None = None) -> np.ndarray:
    """As :func:`empty_grid_function`, filled with zeros."""
    array = empty_grid_function(shape, dtype, grid_ndim=grid_ndim)
    array[...] = 0
    return array


def grid_function_like(array: np.ndarray, *, grid_ndim: int | None = None) -> np.ndarray:
    """An uninitialised grid function with the shape and dtype of ``array``."""
    return empty_grid_function(array.shape, array.dtype, grid_ndim=grid_ndim)


def has_contiguous_rows(array: np.ndarray, grid_ndim: int) -> bool:
    """True when every component row of ``array`` (its last ``grid_ndim`` axes) is C-contiguous,
    whatever the spacing of the rows: the condition of the kernels' flat path."""
    expected = array.itemsize
    for n, stride in zip(reversed(array.shape[array.ndim - grid_ndim:]),
                         reversed(array.strides[array.ndim - grid_ndim:])):
        if n != 1 and stride != expected:
            return False
        expected *= n
    return True
