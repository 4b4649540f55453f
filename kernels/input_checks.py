"""Counts of suspect input points, for the argument checks of the diagnostics.

``emsource._arguments.check_points`` decides whether a diagnostic's inputs are acceptable (finite,
a positive lapse, a positive-definite metric, at the valid points) and names the first bad point.
Done in NumPy it makes a boolean array per test and costs about half of the constraint kernel's
time at 64^3 (measured: 8 of 16 ms). These kernels only count, in one pass per array; where every
count is zero the check is over, and where one is not, the NumPy check runs and has the last
word (its message, and its verdict). The counts must therefore never miss a point the NumPy
check would reject: the finiteness and lapse tests are the same comparisons, and the metric
test flags a margin around the NumPy criterion (below).

Arrays are (ncomp, nx, ny, nz) (1-D and 2-D grids with trailing axes of length 1) and the
valid points a uint8 (nx, ny, nz) array, nonzero where valid.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from ._compile import grid_kernel
from .metric import metric_factors
from .point_checks import is_finite

__all__ = ["nonfinite_points", "nonpositive_points", "suspect_metric_points"]


@grid_kernel
def nonfinite_points(values, valid):
    """Non-finite values of ``values`` at valid points (a count of values, not of points: it
    is zero exactly when no valid point has one)."""
    ncomp, nx, ny, nz = values.shape
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for c in range(ncomp):
            for k in range(np.uint64(0), np.uint64(nz)):  # unsigned: see vector_loops
                count += 0 if (valid[i, j, k] == 0 or is_finite(values[c, i, j, k])) else 1
        bad += count
    return bad


@grid_kernel
def nonpositive_points(values, valid):
    """Valid points where ``values[0]`` (a lapse) is not positive (NaN included)."""
    _, nx, ny, nz = values.shape
    zero = values.dtype.type(0)
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(np.uint64(0), np.uint64(nz)):
            count += 1 if (valid[i, j, k] != 0 and not values[0, i, j, k] > zero) else 0
        bad += count
    return bad


@grid_kernel
def suspect_metric_points(values, gidx, valid, margin):
    """Valid points where a pivot of gamma = L D L^T (packed components ``values[gidx]``) is not
    above ``margin`` times tr(gamma) (NaN included).

    The NumPy criterion rejects pivots at or below ``pivot_floor`` times the trace
    (``_arguments.metric_is_positive_definite``), with another order of operations than
    :func:`~.metric.metric_factors` under fast-math; near the floor the two may round apart. The
    caller's ``margin`` lies well above the floor (twice it plus 64 eps: the pivots' rounding
    is a few eps of the trace for the metrics the package accepts), so that every point the
    NumPy test rejects is counted here; a point counted here that the NumPy test accepts costs
    only the NumPy pass.
    """
    _, nx, ny, nz = values.shape
    one = values.dtype.type(1)
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(np.uint64(0), np.uint64(nz)):
            gxx = values[gidx[0], i, j, k]
            gyy = values[gidx[3], i, j, k]
            gzz = values[gidx[5], i, j, k]
            d1, d2, d3, _, _, _ = metric_factors(gxx, values[gidx[1], i, j, k],
                                                 values[gidx[2], i, j, k], gyy,
                                                 values[gidx[4], i, j, k], gzz, one)
            least = margin * (gxx + gyy + gzz)
            definite = d1 > least and d2 > least and d3 > least
            count += 1 if (valid[i, j, k] != 0 and not definite) else 0
        bad += count
    return bad
