"""Per-column partial norms of residual fields over a point mask.

The norms of a diagnostic (L2 and max of each residual component and of its scale, the largest
term of the equation at each point) are reductions over the masked points. Done in NumPy they
cost more than the diagnostic's own kernel (boolean indexing copies every component, then
long-double sums: about 38 ms against 16 ms for the constraint kernel at 64^3, measured). This
kernel reads each value once and writes, per grid column (i, j), the count of masked points and
per component the sum of squares and the largest absolute value of the residual and of its
scale; :meth:`emsource.reductions.NormPartial.of_column_sums` then adds the columns in extended
precision.

Accuracy: a column's sum of squares is accumulated in float64, n_z terms of one sign, so its
relative error is at most (n_z - 1) eps (common practice: the error bound of recursive
summation, N. J. Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed. (2002),
section 4.2, section number from memory); the columns are then summed as before.

A NaN among the summed values makes the maximum NaN, as ``np.max`` does (the sum of squares is
NaN exactly then: the terms are squares, so no inf - inf arises).
"""

from __future__ import annotations

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function
from .point_checks import is_nan

__all__ = ["masked_norm_columns", "column_slots"]


@point_function
def column_slots(ncomp):
    """Values per column in ``partials``: the count, then per component the sums of squares,
    the maxima, the scales' sums of squares and the scales' maxima."""
    return 1 + 4 * ncomp


@point_function
def _masked_row_sums(values, scales, mask, zero):
    """(sum of values^2, max |value|, sum of scales^2, max |scale|) over the nonzero entries of
    the 1-D ``mask`` (local accumulators: the partials array could alias the inputs, so sums
    kept there would go through memory at every point)."""
    square_sum = zero
    largest = zero
    scale_square_sum = zero
    largest_scale = zero
    for k in range(np.uint64(0), np.uint64(mask.shape[0])):  # unsigned: see vector_loops
        # Selects, not a branch around the sums: the loop then vectorises (values outside the
        # mask are often NaN, so they cannot be multiplied by a 0/1 weight).
        inside = mask[k] != 0
        value = values[k] if inside else zero
        scale = scales[k] if inside else zero
        square_sum += value * value
        scale_square_sum += scale * scale
        size = abs(value)
        largest = size if size > largest else largest
        size = abs(scale)
        largest_scale = size if size > largest_scale else largest_scale
    # A NaN never wins the comparisons: carry it into the maximum from the sum of squares (NaN
    # exactly when a value is NaN: the terms are squares, so no inf - inf arises).
    largest = square_sum if is_nan(square_sum) else largest
    largest_scale = scale_square_sum if is_nan(scale_square_sum) else largest_scale
    return square_sum, largest, scale_square_sum, largest_scale


@point_function
def _store(partials, column, c, ncomp, sums):
    partials[column, 1 + c] = sums[0]
    partials[column, 1 + ncomp + c] = sums[1]
    partials[column, 1 + 2 * ncomp + c] = sums[2]
    partials[column, 1 + 3 * ncomp + c] = sums[3]


@grid_kernel
def masked_norm_columns(scalar, vector, scalar_scale, vector_scale, mask, partials):
    """Per-column sums and maxima of a scalar and a vector residual and their scales.

    Parameters
    ----------
    scalar, scalar_scale : (nx, ny, nz) float64
    vector, vector_scale : (nv, nx, ny, nz) float64
    mask : (nx, ny, nz) uint8
        Nonzero at the points summed.
    partials : (nx * ny, 1 + 4 (1 + nv)) float64, written
        Row i * ny + j: the count of masked points of column (i, j), then for the components
        (scalar, vector 0 .. nv - 1) the sums of squares, the largest absolute values, the sums
        of the squared scales and the largest absolute scales (0 for a column without points).
    """
    nv = vector.shape[0]
    ncomp = 1 + nv
    nx, ny, nz = mask.shape
    zero = partials.dtype.type(0)
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        row = mask[i, j]
        count = 0
        for k in range(nz):
            count += 1 if row[k] != 0 else 0
        partials[column, 0] = count
        _store(partials, column, 0, ncomp,
               _masked_row_sums(scalar[i, j], scalar_scale[i, j], row, zero))
        for c in range(nv):
            _store(partials, column, 1 + c, ncomp,
                   _masked_row_sums(vector[c, i, j], vector_scale[c, i, j], row, zero))
