"""kernels/strip_buffers.strip_buffer: a scratch matrix on the stack of a compiled loop body.

Checked against plain NumPy (an independent route): every row of the buffer is written and read
back, in a parallel loop, so overlapping rows, a buffer shorter than rows x points or one buffer
shared by two threads would change the sums.
"""

import numba
import numpy as np
import pytest
from numba import prange

from emsource.kernels._compile import grid_kernel
from emsource.kernels.strip_buffers import strip_buffer

ROWS, POINTS = 5, 16


@grid_kernel
def _row_sums(values, out):
    """out[c, r] = sum_n (r + 1) * values[c, n], computed through the buffer's rows."""
    for column in prange(values.shape[0]):
        buf = strip_buffer(ROWS, POINTS, values)
        for r in range(ROWS):
            for n in range(POINTS):
                buf[r, n] = (r + 1) * values[column, n]
        for r in range(ROWS):
            total = 0.0
            for n in range(POINTS):
                total += buf[r, n]
            out[column, r] = total


def test_every_row_of_the_strip_buffer_is_its_own_memory():
    values = np.random.default_rng(3).standard_normal((257, POINTS))
    out = np.empty((257, ROWS))
    _row_sums(values, out)
    expected = values.sum(axis=1)[:, None] * np.arange(1, ROWS + 1)
    # Both sides add the same 16 products in some order: each rounding is at most eps times the
    # partial sum, so together they differ by at most 2 x 16 eps x (r + 1) sum_n |values[c, n]|
    # (N. J. Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed. (2002), sec. 4.2,
    # from memory). A row read from the wrong memory is off by the size of the row itself.
    bound = 32 * np.finfo(float).eps * np.abs(values).sum(axis=1)[:, None] * np.arange(1, ROWS + 1)
    assert np.all(np.abs(out - expected) <= bound)


def test_sizes_must_be_literal():
    @numba.njit
    def not_literal(rows, like):
        return strip_buffer(rows, 4, like).shape[0]

    with pytest.raises(numba.core.errors.TypingError, match="literal integer sizes"):
        not_literal(3, np.zeros(1))
