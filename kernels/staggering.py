"""Interpolation along one axis with a per-row stencil: the hot loop of staggered reads.

For output row j of the middle axis of a (pre, n, post) array,

    out[a, j, b] = sum_{q < p} weights[j, q] * values[a, starts[j] - base + q, b],

with ``p = weights.shape[1]`` stencil points. The stencil starts and weights come from
:mod:`emsource.staggering` (Lagrange weights, centred in the interior, one-sided of the same
order at the faces); this file only runs the sum. Any axis of a C-ordered 3D array is the
middle axis of a reshaped view (pre = 1 for the first axis, post = 1 for the last), so one
compiled loop serves all three axes.

Loop shape. Rows ``interior_lo <= j < interior_hi`` share one stencil (the centred weights,
starts increasing by one), so over them the sum is a 1D stencil along the flattened (j, b)
index: ``out[i] = sum_q w_q values[i + shift + q * post]``, one contiguous loop that LLVM
vectorises whatever the axis (a loop over (j, b) with the stencil looked up per row would
have an inner loop of length 1 along the last axis, where post = 1). The few rows at the
faces go through the
general per-row loop. Work is split over ``pre`` and, when ``pre`` is small (the first axis),
over blocks of the flattened index, so that both threads work.
"""

from __future__ import annotations

import numba

from ._compile import grid_kernel

__all__ = ["interpolate_middle_axis"]

#: Blocks per (pre) row when there are few rows: enough for two threads and load balance.
_BLOCKS = 8


@grid_kernel
def interpolate_middle_axis(values, starts, weights, base, interior_lo, interior_hi, out):
    """``out[a, j, b] = sum_q weights[j, q] values[a, starts[j] - base + q, b]`` (module docstring).

    values : (pre, m, post) C-ordered; starts : (n,) int64; weights : (n, p) in the values'
    dtype; base : stored index of ``values[:, 0]``; rows interior_lo:interior_hi share the
    stencil of row interior_lo, with starts[j] = starts[interior_lo] + j - interior_lo;
    out : (pre, n, post) C-ordered.
    """
    pre, n, post = out.shape
    m = values.shape[1]
    p = weights.shape[1]
    flat_in = values.reshape(pre, m * post)
    flat_out = out.reshape(pre, n * post)
    blocks = 1 if pre >= 2 * _BLOCKS else _BLOCKS
    lo = interior_lo * post
    hi = interior_hi * post
    span = hi - lo
    shift = (starts[interior_lo] - base - interior_lo) * post if interior_hi > interior_lo else 0
    for task in numba.prange(pre * blocks):
        a = task // blocks
        block = task - a * blocks
        src = flat_in[a]
        dst = flat_out[a]
        if block == 0:  # rows at the faces: stencil per row
            for j in range(n):
                if interior_lo <= j < interior_hi:
                    continue
                first = (starts[j] - base) * post
                for b in range(post):
                    s = weights[j, 0] * src[first + b]
                    for q in range(1, p):
                        s += weights[j, q] * src[first + q * post + b]
                    dst[j * post + b] = s
        start = lo + (span * block) // blocks
        stop = lo + (span * (block + 1)) // blocks
        if stop <= start:
            continue
        w = weights[interior_lo]
        if p == 2:
            w0, w1 = w[0], w[1]
            for i in range(start, stop):
                k = i + shift
                dst[i] = w0 * src[k] + w1 * src[k + post]
        elif p == 4:
            w0, w1, w2, w3 = w[0], w[1], w[2], w[3]
            for i in range(start, stop):
                k = i + shift
                dst[i] = (w0 * src[k] + w1 * src[k + post] + w2 * src[k + 2 * post]
                          + w3 * src[k + 3 * post])
        else:
            for i in range(start, stop):
                k = i + shift
                s = w[0] * src[k]
                for q in range(1, p):
                    s += w[q] * src[k + q * post]
                dst[i] = s
    return out
