"""How a grid loop is written so that LLVM vectorises it: strips, unsigned indices, float counts.

Three things decide whether the point loop of a kernel becomes packed (SIMD) code, each found
by reading the machine code of the source drivers (``benchmarks/vector_code.py``, DEVELOPERS.md
"Vectorised point loops"):

- Unsigned indices. Numba indexes an array with a signed integer by first adding the length
  to a negative index. In a ``prange`` loop the index is known not to be negative, so the
  loop vectorises; a nested ``for k in range(start, stop)`` over int64 bounds keeps the
  adjustment in the loop body and stays scalar (the column loop of the sources and a strip loop
  over int64 bounds: 0 packed operations; the same loops over uint64 bounds: 138-147).
  :func:`strip_range` gives uint64 bounds. Mixing uint64 and int64 in one expression gives a
  float64 in Numba: index arithmetic in these loops is uint64 throughout.
- No 64-bit reductions in the vectorised loop. LLVM picks the vector length from the widest type
  the loop loads, stores or reduces; the int64 counts of bad points made it 4 lanes for float32
  data as for float64 (half the width of a 256-bit register). Each strip therefore counts in
  the data's dtype (:func:`count_flag`, exact: a strip has far fewer than 2^24 points, the
  first integer float32 cannot hold) and adds the strip's count to an int64 total after the
  loop. Measured on an in-cache 16^3 grid, one thread: float32 5.3 -> 2.9 ns per point.
- Arrays of "C" layout along the loop. An array typed "A" (any strides) has an unknown stride
  on the loop axis, and LLVM does not version 20-odd strides at once: the column loop over
  strided views was scalar. Windowed views (ghost zones sliced off) are handed to the kernels
  as 1-D spans of their memory with explicit element steps (:mod:`emsource._arguments`
  ``unit_stride_spans``), C-contiguous along z.

The parallel loop runs over strips (flat drivers) or columns (windowed drivers); Numba splits
its range evenly between the threads.
"""

from __future__ import annotations

import numpy as np

from ._compile import point_function

__all__ = ["STRIP_POINTS", "SHORTEST_STRIP", "SMALL_GRID_STRIPS", "ALIASING_BYTES",
           "LINE_STEP_ROW_BYTES", "STREAMING_ROW_BYTES", "window_column", "span_start",
           "packed_rows", "strip_length", "strip_count", "strip_range", "as_spans", "as_rows",
           "count_flag", "line_as_strips", "span_metric_fields"]

#: Points per strip of a flat loop on a large grid: float32 counts per strip stay exact.
STRIP_POINTS = 1024
#: Shortest strip, and the number of strips a small grid is cut into: on a small grid the strips
#: shrink (to a multiple of 16 points, not below 64) so that the threads share it (an 8^3 grid in
#: one strip took 5.5 us in the kernel on one thread, against 4.6 us shared by two, measured in
#: ``bench_sources.py --small-call``). The thread count itself is not asked for: a kernel that
#: calls ``numba.get_num_threads`` cannot be cached on disk.
SHORTEST_STRIP = 64
SMALL_GRID_STRIPS = 8


#: Row distances (bytes) at which rows share first-level cache sets: the size of one way of that
#: cache (48 KiB, 12 ways on the machine measured; 32 KiB, 8 ways is the same 4 KiB on older
#: x86 parts, from memory). Common practice: a multiple of the page size aliases.
ALIASING_BYTES = 4096
#: Shortest component rows (bytes) on which a flat driver takes its line-step form (compiled for
#: 512-bit vectors: each loop step uses a whole 64-byte line of every row instead of half of
#: one) where the rows lie a multiple of :data:`ALIASING_BYTES` apart. Then the rows of a point
#: (23 for the sources) fall into one first-level cache set (12 ways here), and a line can be
#: evicted between the two 256-bit steps that use its halves. Measured for the source driver per
#: size (float64 / float32, time line steps / 256-bit driver, interleaved probes and three
#: benchmark runs): 96^3 1.02-1.05 / 1.05, 112^3 1.00 / 1.07, 120^3 0.98, 128^3 0.92-0.98
#: (16 MiB rows) / 0.96-1.08 (8 MiB rows), 160^3 0.93-0.95 / 0.95, 192^3 0.92 / 0.90, 256^3
#: 0.92-0.94 / 0.91-0.97: a gain from rows of about 16 MiB on, in either dtype; padded rows
#: (no aliasing) 1.00-1.04 at every size. T_ab 0.90-0.97 / 0.88-0.95 and the conformal sources
#: (chi) 0.94-0.95 / 0.87-0.94 at 128^3 / 256^3 float64 (a probe and ``bench_forms.py
#: --line-steps``); ideal MHD 1.00 in a probe (not given a line-step form).
LINE_STEP_ROW_BYTES = 2 ** 24
#: Shortest output rows (bytes) on which a flat driver takes its streaming-store form
#: (:mod:`.streaming_stores`): 2 MiB, a 64^3 float64 grid, where the 11 output rows of the
#: sources (22 MiB) and their 12 input rows no longer fit together in a 32 MiB last-level cache.
#: Measured with the cache flushed between calls the streaming form wins from 32^3 on (0.54-0.75
#: of the C time), but there the ordinary stores leave the outputs in cache for the next
#: consumer (the right-hand side that reads them): this threshold keeps those grids on ordinary
#: stores. A judgement, not a measurement of a consumer; common practice for streaming stores.
STREAMING_ROW_BYTES = 2 ** 21


@point_function
def strip_length(npoints):
    """Points per strip for a loop over ``npoints``: :data:`STRIP_POINTS`, or the length that
    cuts a small grid into :data:`SMALL_GRID_STRIPS` strips, a multiple of 16 and at least
    :data:`SHORTEST_STRIP`."""
    share = (npoints + SMALL_GRID_STRIPS - 1) // SMALL_GRID_STRIPS
    share = (share + 15) // 16 * 16
    return min(STRIP_POINTS, max(SHORTEST_STRIP, share))


@point_function
def strip_count(npoints, length):
    """Number of strips of ``length`` points that cover ``npoints`` points."""
    return (npoints + length - 1) // length


@point_function
def strip_range(strip, length, npoints):
    """(start, stop) of strip number ``strip`` as uint64, for a vectorisable ``range``."""
    start = np.uint64(strip) * np.uint64(length)
    return start, min(start + np.uint64(length), np.uint64(npoints))


@point_function
def as_spans(a):
    """A C-contiguous array as the 1-D span of all its elements (a view; a 1-D span as it is),
    so that a driver over spans also takes whole arrays: the reshape costs nothing here and
    spares the caller one per array (about 0.1 us each on a small grid's call)."""
    return a.reshape(a.size)


@point_function
def as_rows(a):
    """A C-contiguous array with its component axis first as the (ncomp, row length) array of
    its rows (a view; an (ncomp, stride) block as it is), so that a flat driver also takes
    whole (ncomp, *grid) arrays."""
    return a.reshape((a.shape[0], a.size // a.shape[0]))


@point_function
def count_flag(flag, one, zero):
    """1 or 0 in the data's dtype (``one``, ``zero``): a count that keeps the loop's widest type
    that of the data."""
    return one if flag else zero


# ------------------------------------------------------------------ windows given as 1-D spans
# A windowed driver gets each array as a 1-D span and a row of uint64 element steps
# (component, x, y; z is 1): see ``emsource._arguments.unit_stride_spans``.


@point_function
def window_column(column, ny):
    """(i, j), uint64, of column number ``column`` of a window with ``ny`` columns along y."""
    i = np.uint64(column) // ny
    return i, np.uint64(column) - i * ny


@point_function
def span_start(steps, array, i, j):
    """Offset in array number ``array``'s span of the window's point (i, j, 0)."""
    return i * steps[array, 1] + j * steps[array, 2]


@point_function
def packed_rows(gidx, step):
    """Offsets of the six packed metric components (rows ``gidx`` of a span whose component
    step is ``step``)."""
    return (np.uint64(gidx[0]) * step, np.uint64(gidx[1]) * step, np.uint64(gidx[2]) * step,
            np.uint64(gidx[3]) * step, np.uint64(gidx[4]) * step, np.uint64(gidx[5]) * step)


@point_function
def span_metric_fields(gamma, metric_rows, g, E, e_step, e, B, b_step, b):
    """The six packed metric components and the six stored field components at one point of
    windows given as spans: ``g``, ``e``, ``b`` are the point's offsets in the three spans,
    ``metric_rows`` the metric's component offsets (:func:`packed_rows`), and ``e_step``,
    ``b_step`` the field spans' component steps. Shared by the source, T_ab and conformal
    drivers over spans."""
    r0, r1, r2, r3, r4, r5 = metric_rows
    return (gamma[r0 + g], gamma[r1 + g], gamma[r2 + g], gamma[r3 + g], gamma[r4 + g],
            gamma[r5 + g], E[e], E[e_step + e], E[e_step + e_step + e], B[b], B[b_step + b],
            B[b_step + b_step + b])


def line_as_strips(npoints):
    """A line of ``npoints`` points (C-contiguous or padded rows) cut into strips of
    :func:`strip_length` points, described as the columns of a window for a driver over spans:
    ((1, strips, strip length), length of the last strip). Plain Python, for the wrappers."""
    length = strip_length.py_func(npoints)
    count = strip_count.py_func(npoints, length)
    return (1, count, length), npoints - (count - 1) * length

