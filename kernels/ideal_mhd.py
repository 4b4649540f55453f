"""Kernel of ideal MHD: E^i, the fluid 4-velocity u^a and the comoving magnetic field b^a from
B^i and a fluid velocity (equations in :mod:`emsource.ideal_mhd`).

Velocity kinds: VELOCITY_EULERIAN, the 3-velocity v^i measured by the normal observer
(u^a = W (n^a + v^a), W = 1 / sqrt(1 - v_i v^i)); VELOCITY_FOUR, the spatial coordinate part
u^i of u^a, with W = alpha u^t from g_ab u^a u^b = -1:
W^2 (1 - beta_i beta^i / alpha^2) - 2 W u_i beta^i / alpha - (1 + u_i u^i) = 0, whose one
positive root (for |beta|_gamma < alpha) is W = 2 (1 + u_i u^i) / (q + sqrt(q^2 + 4 a c)),
q = -2 u_i beta^i / alpha, a = 1 - beta_i beta^i / alpha^2, c = 1 + u_i u^i (written so that
it does not cancel); then v^i = u^i / W + beta^i / alpha.
"""

from __future__ import annotations

import math

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function
from .electromagnetic import fields_both_indices, point_is_valid, sqrt_determinant
from .metric import contract_index, metric_at, metric_factors
from .sources import INPUT_FORMS
from .streaming_stores import (STREAMING_BUFFER_LANES, buffer_ten, line_extent, line_offset,
                               rows_at_offset, store_fence, stream_line)
from .strip_buffers import strip_buffer
from .vector_loops import (STRIP_POINTS, as_rows, as_spans, count_flag, packed_rows, span_start,
                           strip_count, strip_range, window_column)

VELOCITY_EULERIAN = 0
VELOCITY_FOUR = 1


@point_function
def eulerian_velocity(kind, alpha, b1, b2, b3, gxx, gxy, gxz, gyy, gyz, gzz, w1, w2, w3, one):
    """(v^i, v_i, W) from the stored velocity ``w`` of kind ``kind`` (NaN W where undefined:
    v_i v^i >= 1, or |beta|_gamma >= alpha for VELOCITY_FOUR), in the dtype of ``one``."""
    zero = one - one
    nan = zero / zero  # NaN in the data's dtype (error_model "numpy": no exception)
    two = one + one
    if kind == VELOCITY_FOUR:
        ia = one / alpha
        c1, c2, c3 = b1 * ia, b2 * ia, b3 * ia
        cl1, cl2, cl3 = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, c1, c2, c3)
        ul1, ul2, ul3 = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, w1, w2, w3)
        a = one - (c1 * cl1 + c2 * cl2 + c3 * cl3)
        c = one + (w1 * ul1 + w2 * ul2 + w3 * ul3)
        q = -two * (ul1 * c1 + ul2 * c2 + ul3 * c3)
        root = math.sqrt(q * q + two * two * a * c)
        lorentz = two * c / (q + root) if a > zero else nan
        v1 = w1 / lorentz + c1
        v2 = w2 / lorentz + c2
        v3 = w3 / lorentz + c3
        vl1, vl2, vl3 = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, v1, v2, v3)
    else:
        v1, v2, v3 = w1, w2, w3
        vl1, vl2, vl3 = contract_index(gxx, gxy, gxz, gyy, gyz, gzz, w1, w2, w3)
        speed2 = v1 * vl1 + v2 * vl2 + v3 * vl3
        lorentz = one / math.sqrt(one - speed2) if speed2 < one else nan
    return v1, v2, v3, vl1, vl2, vl3, lorentz


@point_function
def _ideal_mhd_values(a, s1, s2, s3, gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, w1, w2, w3, form,
                      kind, pivot_floor, one):
    """E^i (3), u^a (4) and b^a (4) at one point from its lapse, shift, metric, stored B
    components ``f`` and stored velocity ``w``, and the check as an integer: 1 if the point
    fails (metric, lapse, non-finite input or output, velocity not below light), else 0 (an
    integer, as :func:`emsource.kernels.sources._adm_values` explains)."""
    zero = one - one
    d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
    sg = sqrt_determinant(d1, d2, d3)
    (_ex, _ey, _ez, _exl, _eyl, _ezl, bx, by, bz, bxl, byl, bzl) = fields_both_indices(
        form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32, zero, zero, zero,
        f1, f2, f3, one)
    v1, v2, v3, vl1, vl2, vl3, lorentz = eulerian_velocity(
        kind, a, s1, s2, s3, gxx, gxy, gxz, gyy, gyz, gzz, w1, w2, w3, one)
    # E^i = -epsilon^ijk v_j B_k = -[ijk] v_j B_k / sg
    isg = one / sg
    e1 = -(vl2 * bzl - vl3 * byl) * isg
    e2 = -(vl3 * bxl - vl1 * bzl) * isg
    e3 = -(vl1 * byl - vl2 * bxl) * isg
    ia = one / a
    ut = lorentz * ia
    u1 = lorentz * (v1 - s1 * ia)
    u2 = lorentz * (v2 - s2 * ia)
    u3 = lorentz * (v3 - s3 * ia)
    # b^a = B^a / W + (B_i v^i) u^a
    bv = bxl * v1 + byl * v2 + bzl * v3
    il = one / lorentz
    c0 = bv * ut
    c1 = bx * il + bv * u1
    c2 = by * il + bv * u2
    c3 = bz * il + bv * u3
    ok = (point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz),
                         bv * ut + u1 + u2 + u3 + e1 + e2 + e3 + bx + by + bz) & (a > zero))
    return e1, e2, e3, ut, u1, u2, u3, c0, c1, c2, c3, 0 if ok else 1


@grid_kernel
def ideal_mhd_grid(alpha, beta, gamma, gidx, B, V, E, U, b, form, kind, pivot_floor, one):
    """E^i (3), u^a (4) and b^a (4) over strided (ncomp, nx, ny, nz) arrays; returns the count
    of bad points (metric, lapse, non-finite input or output, velocity not below light).

    The column loop (run-time ``form`` and ``kind``) for layouts without a unit stride along z;
    contiguous data, padded rows and ghost-zone windows take :data:`IDEAL_MHD`."""
    nx, ny, nz = alpha.shape
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            gxx, gxy, gxz, gyy, gyz, gzz = metric_at(gamma, gidx, i, j, k)
            e1, e2, e3, ut, u1, u2, u3, c0, c1, c2, c3, status = _ideal_mhd_values(
                alpha[i, j, k], beta[0, i, j, k], beta[1, i, j, k], beta[2, i, j, k],
                gxx, gxy, gxz, gyy, gyz, gzz, B[0, i, j, k], B[1, i, j, k], B[2, i, j, k],
                V[0, i, j, k], V[1, i, j, k], V[2, i, j, k], form, kind, pivot_floor, one)
            E[0, i, j, k] = e1
            E[1, i, j, k] = e2
            E[2, i, j, k] = e3
            U[0, i, j, k] = ut
            U[1, i, j, k] = u1
            U[2, i, j, k] = u2
            U[3, i, j, k] = u3
            b[0, i, j, k] = c0
            b[1, i, j, k] = c1
            b[2, i, j, k] = c2
            b[3, i, j, k] = c3
            count += status
        bad += count
    return bad


@point_function
def _ideal_mhd_column(alpha, beta, s1, gamma, metric_rows, B, f1, V, w1, E, e1, U, u1, b, c1,
                      steps, i, j, nz, form, kind, pivot_floor, one):
    """Column (i, j), ``nz`` points, of arrays given as spans (the drivers of
    :data:`IDEAL_MHD`; ``s1``, ``f1``, ``w1``, ``e1``, ``u1``, ``c1`` the component steps of
    beta, B, V, E, U, b); returns the column's count of bad points in the data's dtype."""
    zero = one - one
    bad = zero
    at_a = span_start(steps, 0, i, j)
    at_s = span_start(steps, 1, i, j)
    at_g = span_start(steps, 2, i, j)
    at_f = span_start(steps, 3, i, j)
    at_w = span_start(steps, 4, i, j)
    at_e = span_start(steps, 5, i, j)
    at_u = span_start(steps, 6, i, j)
    at_c = span_start(steps, 7, i, j)
    r0, r1, r2, r3, r4, r5 = metric_rows
    for k in range(nz):
        g = at_g + k
        s = at_s + k
        f = at_f + k
        w = at_w + k
        x1, x2, x3, ut, y1, y2, y3, z0, z1, z2, z3, status = _ideal_mhd_values(
            alpha[at_a + k], beta[s], beta[s1 + s], beta[s1 + s1 + s],
            gamma[r0 + g], gamma[r1 + g], gamma[r2 + g], gamma[r3 + g], gamma[r4 + g],
            gamma[r5 + g], B[f], B[f1 + f], B[f1 + f1 + f], V[w], V[w1 + w], V[w1 + w1 + w],
            form, kind, pivot_floor, one)
        t = at_e + k
        E[t] = x1
        E[e1 + t] = x2
        E[e1 + e1 + t] = x3
        t = at_u + k
        U[t] = ut
        U[u1 + t] = y1
        U[u1 + u1 + t] = y2
        U[u1 + u1 + u1 + t] = y3
        t = at_c + k
        b[t] = z0
        b[c1 + t] = z1
        b[c1 + c1 + t] = z2
        b[c1 + c1 + c1 + t] = z3
        bad += count_flag(status, one, zero)
    return bad


def _ideal_mhd_for(form, kind):
    """The ideal-MHD driver of one (input form, velocity kind), both constants in its loop,
    over spans: contiguous data, padded rows and ghost-zone windows alike (as the conformal
    sources' :func:`~emsource.kernels.conformal._conformal_sources_for`)."""

    @grid_kernel
    def ideal_mhd_spans(alpha, beta, gamma, gidx, B, V, E, U, b, steps, shape, last,
                        pivot_floor, one, check):
        """E^i, u^a, b^a over arrays given as 1-D spans or whole C-contiguous arrays (alpha,
        beta, gamma, B, V, E, U, b: rows of ``steps`` in this order), the columns of ``shape``
        with ``last`` points in the last one (:func:`emsource._arguments.driver_spans`); returns
        the count of bad points (0 with ``check`` False)."""
        alpha, beta, gamma, B, V = (as_spans(alpha), as_spans(beta), as_spans(gamma),
                                    as_spans(B), as_spans(V))
        E, U, b = as_spans(E), as_spans(U), as_spans(b)
        ny = np.uint64(shape[1])
        nz = np.uint64(shape[2])
        final = shape[0] * shape[1] - 1
        metric_rows = packed_rows(gidx, steps[2, 0])
        bad_count = 0
        for column in prange(shape[0] * shape[1]):
            i, j = window_column(column, ny)
            length = nz if column != final else np.uint64(last)
            bad = _ideal_mhd_column(alpha, beta, steps[1, 0], gamma, metric_rows, B,
                                    steps[3, 0], V, steps[4, 0], E, steps[5, 0], U, steps[6, 0],
                                    b, steps[7, 0], steps, i, j, length, form, kind,
                                    pivot_floor, one)
            if check:
                bad_count += int(bad)
        return bad_count

    return ideal_mhd_spans


@point_function
def _ideal_mhd_values_at(n, alpha, beta, gamma, gidx, B, V, form, kind, pivot_floor, one):
    """:func:`_ideal_mhd_values` at point ``n`` of (npoints,) and (ncomp, row) arrays."""
    return _ideal_mhd_values(
        alpha[n], beta[0, n], beta[1, n], beta[2, n], gamma[gidx[0], n], gamma[gidx[1], n],
        gamma[gidx[2], n], gamma[gidx[3], n], gamma[gidx[4], n], gamma[gidx[5], n], B[0, n],
        B[1, n], B[2, n], V[0, n], V[1, n], V[2, n], form, kind, pivot_floor, one)


@point_function
def _ideal_mhd_edge(start, stop, alpha, beta, gamma, gidx, B, V, E, U, b, form, kind,
                    pivot_floor, one):
    """Points ``start`` to ``stop`` of (ncomp, row) arrays with ordinary stores (the head and
    tail of the streaming driver's rows); returns their count of bad points."""
    bad = 0
    for n in range(start, stop):
        e1, e2, e3, ut, u1, u2, u3, c0, c1, c2, c3, status = _ideal_mhd_values_at(
            n, alpha, beta, gamma, gidx, B, V, form, kind, pivot_floor, one)
        E[0, n] = e1
        E[1, n] = e2
        E[2, n] = e3
        U[0, n] = ut
        U[1, n] = u1
        U[2, n] = u2
        U[3, n] = u3
        b[0, n] = c0
        b[1, n] = c1
        b[2, n] = c2
        b[3, n] = c3
        bad += status
    return bad


def _ideal_mhd_streaming_for(form, kind):
    """The streaming-store ideal-MHD driver of one (input form, velocity kind)
    (:data:`IDEAL_MHD_STREAMING`), built as the sources' streaming driver
    (``kernels/sources.py`` ``_adm_sources_streaming_for``)."""

    @grid_kernel
    def ideal_mhd_streaming(alpha, beta, gamma, gidx, B, V, E, U, b, pivot_floor, one, check):
        """E^i, u^a, b^a over arrays of shape (ncomp, row length) and (npoints,), or
        C-contiguous whole arrays, every whole cache line of the 11 output rows written by a
        streaming store (:mod:`.streaming_stores`); returns the count of bad points, or -1
        having written nothing where the output rows do not share their offset within a
        cache line."""
        npoints = alpha.size
        alpha = alpha.reshape(npoints)
        beta = as_rows(beta)
        gamma = as_rows(gamma)
        B = as_rows(B)
        V = as_rows(V)
        E = as_rows(E)
        U = as_rows(U)
        b = as_rows(b)
        offset = line_offset(E, 0)
        if not (rows_at_offset(E, offset) and rows_at_offset(U, offset)
                and rows_at_offset(b, offset)):
            return -1
        head, lines, lanes = line_extent(offset, E.itemsize, npoints)
        body_stop = head + lines * lanes
        zero = one - one
        edges = (_ideal_mhd_edge(0, head, alpha, beta, gamma, gidx, B, V, E, U, b, form, kind,
                                 pivot_floor, one)
                 + _ideal_mhd_edge(body_stop, npoints, alpha, beta, gamma, gidx, B, V, E, U, b,
                                   form, kind, pivot_floor, one))
        bad_count = edges if check else 0
        per_task = STRIP_POINTS // lanes
        for task in prange(strip_count(lines, per_task)):
            line_values = strip_buffer(11, STREAMING_BUFFER_LANES, E)
            first, last = strip_range(task, per_task, lines)
            bad = zero
            for line in range(first, last):
                start = np.uint64(head) + line * np.uint64(lanes)
                for n in range(start, start + np.uint64(lanes)):
                    e1, e2, e3, ut, u1, u2, u3, c0, c1, c2, c3, status = _ideal_mhd_values_at(
                        n, alpha, beta, gamma, gidx, B, V, form, kind, pivot_floor, one)
                    m = n - start
                    buffer_ten(line_values, m, e1, e2, e3, ut, u1, u2, u3, c0, c1, c2)
                    line_values[10, m] = c3
                    bad += count_flag(status, one, zero)
                for c in range(3):
                    stream_line(E, c, start, line_values, c)
                for c in range(4):
                    stream_line(U, c, start, line_values, 3 + c)
                    stream_line(b, c, start, line_values, 7 + c)
            store_fence()
            if check:
                bad_count += int(bad)
        return bad_count

    return ideal_mhd_streaming


#: The ideal-MHD driver of each (input form, velocity kind); each compiles on first use only.
IDEAL_MHD = {(form, kind): _ideal_mhd_for(form, kind)
             for form in INPUT_FORMS for kind in (VELOCITY_EULERIAN, VELOCITY_FOUR)}
#: The flat drivers with streaming stores (:mod:`.streaming_stores`), for large grids whose rows
#: do not alias (``emsource._arguments.tries_streaming``); compiled on first use.
IDEAL_MHD_STREAMING = {(form, kind): _ideal_mhd_streaming_for(form, kind)
                       for form in INPUT_FORMS for kind in (VELOCITY_EULERIAN, VELOCITY_FOUR)}
