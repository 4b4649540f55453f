"""The magnetic field from a vector potential: B^i = [ijk] d_j A_k / sqrt(gamma).

Two drivers, over (ncomp, nx, ny, nz) arrays:

``curl_collocated``
    A_k on the vertices, centred differences of the order the weights encode
    (:func:`.stencils.first_derivative_weights`), B^i on the vertices of the interior (``radius``
    points from every face along each axis with extent; an axis with ``radius`` 0 has no extent
    and its derivatives are zero). sqrt(gamma) from the pivots of gamma = L D L^T
    (:func:`.metric.metric_factors`).
``curl_edges``
    A_k at the centre of the edges along axis k (A_x at (i + 1/2, j, k), ...), staggered
    differences (:func:`.stencils.staggered_derivative_weights`): component c of the result at
    the centre of the face normal to axis c (B^x at (i, j + 1/2, k + 1/2)), for the face indices
    ``lo[c, a] <= index < hi[c, a]`` along each axis a; divided by ``sqrt_gamma[c]`` there.

Both return the number of computed points whose result is not finite (or, for the collocated
driver, whose metric pivots are not above ``floor`` times the trace): the public wrapper then
finds the first one.
"""

from __future__ import annotations

import math

from numba import prange

from ._compile import grid_kernel, point_function
from .metric import metric_factors
from .point_checks import is_finite
from .stencils import d1, d1_staggered

__all__ = ["curl_collocated", "curl_edges"]


@point_function
def _derivative(f, c, i, j, k, axis, weights, inv_h, radius):
    """d1 along ``axis``, or 0 along an axis without extent (radius 0)."""
    if radius[axis] == 0:
        return f[c, i, j, k] * 0
    return d1(f, c, i, j, k, axis, weights, inv_h[axis])


@grid_kernel
def curl_collocated(A, g, gidx, B, weights, inv_h, radius, one, floor):
    nx, ny, nz = A.shape[1], A.shape[2], A.shape[3]
    bad = 0
    for i in prange(radius[0], nx - radius[0]):
        count = 0
        for j in range(radius[1], ny - radius[1]):
            for k in range(radius[2], nz - radius[2]):
                d1_, d2_, d3_, _, _, _ = metric_factors(
                    g[gidx[0], i, j, k], g[gidx[1], i, j, k], g[gidx[2], i, j, k],
                    g[gidx[3], i, j, k], g[gidx[4], i, j, k], g[gidx[5], i, j, k], one)
                trace = g[gidx[0], i, j, k] + g[gidx[3], i, j, k] + g[gidx[5], i, j, k]
                limit = floor * trace
                valid = d1_ > limit and d2_ > limit and d3_ > limit
                inverse_root = one / math.sqrt(d1_ * d2_ * d3_) if valid else one * 0
                total = one * 0
                for c in range(3):
                    a = (c + 1) % 3
                    b = (c + 2) % 3
                    value = (_derivative(A, b, i, j, k, a, weights, inv_h, radius)
                             - _derivative(A, a, i, j, k, b, weights, inv_h, radius)) * inverse_root
                    B[c, i, j, k] = value
                    total += value
                if not (valid and is_finite(total)):
                    count += 1
        bad += count
    return bad


@grid_kernel
def curl_edges(A, sqrt_gamma, B, weights, inv_h, lo, hi):
    nx = A.shape[1]
    first = lo[0, 0] * 0  # a signed start: a prange(n) index is unsigned (d1_staggered)
    bad = 0
    for i in prange(first, nx):
        count = 0
        for c in range(3):
            if i < lo[c, 0] or i >= hi[c, 0]:
                continue
            a = (c + 1) % 3
            b = (c + 2) % 3
            for j in range(lo[c, 1], hi[c, 1]):
                for k in range(lo[c, 2], hi[c, 2]):
                    # B^c at the face centre (c normal): A_b is at the edge along b, so it sits
                    # on the face's plane along a at index and index + 1 (half a step apart):
                    # d_a A_b is a staggered difference along a, likewise d_b A_a along b.
                    value = (d1_staggered(A, b, i, j, k, a, weights, inv_h[a])
                             - d1_staggered(A, a, i, j, k, b, weights, inv_h[b])) / sqrt_gamma[c, i, j, k]
                    B[c, i, j, k] = value
                    if not is_finite(value):
                        count += 1
        bad += count
    return bad
