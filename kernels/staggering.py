"""Interpolation along one axis with a per-row stencil: the hot loop of staggered reads.

For output row j of the middle axis of a (pre, n, post) array,

    out[a, j, b] = sum_{q < p} weights[j, q] * values[a, starts[j] - base + q, b],

with ``p = weights.shape[1]`` stencil points. The stencil starts and weights come from
:mod:`emsource.staggering` (Lagrange weights, centred in the interior, one-sided of the same
order at the faces); this file only runs the sum. Any axis of a C-ordered 3D array is the
middle axis of a reshaped view (pre = 1 for the first axis, post = 1 for the last), so one
compiled loop serves all three axes. The innermost loop runs over ``post``, the contiguous
direction.
"""

from __future__ import annotations

import numba

from ._compile import grid_kernel

__all__ = ["interpolate_middle_axis"]


@grid_kernel
def interpolate_middle_axis(values, starts, weights, base, out):
    """``out[a, j, b] = sum_q weights[j, q] values[a, starts[j] - base + q, b]`` (module docstring).

    values : (pre, m, post) array; starts : (n,) int64; weights : (n, p) in the values' dtype;
    base : int, the stored index of ``values[:, 0]``; out : (pre, n, post), C-ordered.
    """
    pre, n, post = out.shape
    p = weights.shape[1]
    for flat in numba.prange(pre * n):
        a = flat // n
        j = flat - a * n
        first = starts[j] - base
        row = out[a, j]
        w0 = weights[j, 0]
        src = values[a, first]
        for b in range(post):
            row[b] = w0 * src[b]
        for q in range(1, p):
            w = weights[j, q]
            src = values[a, first + q]
            for b in range(post):
                row[b] += w * src[b]
    return out

