"""Kernels of the conformal decompositions: the physical metric at a point, and the sources in
the forms the conformal right-hand sides use (equations in :mod:`emsource.conformal`).

Decompositions (codes of :mod:`emsource.metric_forms`), with tilde-gamma_ij the conformal metric:

    DECOMPOSITION_CHI: gamma_ij = tilde-gamma_ij / chi,        rescale = chi
    DECOMPOSITION_W:   gamma_ij = tilde-gamma_ij / W^2,        rescale = W^2    (W = sqrt(chi))
    DECOMPOSITION_PHI: gamma_ij = e^{4 phi} tilde-gamma_ij,    rescale = e^{-4 phi}

Loops. :data:`CONFORMAL_SOURCES` holds one vectorised driver per (decomposition, input form),
both constants in its loop (built here, compiled on first use), over arrays given as 1-D spans:
contiguous data and padded rows as a line cut into strips, ghost-zone windows as columns (see
:func:`_conformal_sources_for` and DEVELOPERS.md "Vectorised point loops").
:func:`conformal_sources_grid` is the column loop over strided views, with the decomposition and
form as run-time arguments, for every other layout. :data:`CONFORMAL_SOURCES_STREAMING` holds
flat drivers with streaming stores for large grids (:mod:`.streaming_stores`). All inline
:func:`_conformal_values`.
"""

from __future__ import annotations

import math

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function, prefer_512_bit_vectors
from .electromagnetic import fields_both_indices, point_is_valid, projections, sqrt_determinant
from .metric import metric_at, metric_factors
from .sources import INPUT_FORMS
from .streaming_stores import (STREAMING_BUFFER_LANES, buffer_ten, line_extent, line_offset,
                               rows_at_offset, store_fence, stream_line)
from .strip_buffers import strip_buffer
from .vector_loops import (STRIP_POINTS, as_rows, as_spans, count_flag, packed_rows,
                           span_metric_fields, span_start, strip_count, strip_range,
                           window_column)

DECOMPOSITION_CHI = 0
DECOMPOSITION_W = 1
DECOMPOSITION_PHI = 2


@point_function
def conformal_rescale(decomposition, factor, one):
    """The factor c with gamma_ij = tilde-gamma_ij / c: chi, W^2 or e^{-4 phi}, in the dtype of
    ``one`` (the data's 1).

    NaN for chi or W not positive (phi may take any finite value)."""
    zero = one - one
    nan = zero / zero  # NaN in the data's dtype (error_model "numpy": no exception)
    two = one + one
    if decomposition == DECOMPOSITION_PHI:
        c = math.exp(-(two + two) * factor)
    elif decomposition == DECOMPOSITION_W:
        c = factor * factor if factor > zero else nan
    else:
        c = factor if factor > zero else nan
    return c


@grid_kernel
def physical_metric_grid(factor, tgamma, gidx, gamma, decomposition, one):
    """Packed physical gamma_ij = tilde-gamma_ij / c over strided arrays (no checks)."""
    nx, ny, nz = factor.shape
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        for k in range(nz):
            ic = one / conformal_rescale(decomposition, factor[i, j, k], one)
            for c in range(6):
                gamma[c, i, j, k] = tgamma[gidx[c], i, j, k] * ic


@point_function
def _conformal_values(factor, txx, txy, txz, tyy, tyz, tzz, f1, f2, f3, f4, f5, f6,
                      decomposition, form, coef, half, third, pivot_floor):
    """rho, S_x, S_y, S_z and the packed A_ij at one point from its conformal factor, conformal
    metric and stored field components, and the check as an integer: 1 if the point fails
    (conformal factor, metric not positive definite, non-finite input or output), else 0.

    An integer, not a boolean, for the reason :func:`emsource.kernels.sources._adm_values`
    gives (a boolean returned from a large inlined function stopped LLVM vectorising there).
    """
    one = half + half
    c = conformal_rescale(decomposition, factor, one)
    ic = one / c
    gxx, gxy, gxz = txx * ic, txy * ic, txz * ic
    gyy, gyz, gzz = tyy * ic, tyz * ic, tzz * ic
    d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
    sg = sqrt_determinant(d1, d2, d3)
    fields = fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32,
                                 f1, f2, f3, f4, f5, f6, one)
    r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, _e2 = projections(
        gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half)
    trace = third * r
    a0 = c * sxx - trace * txx
    a1 = c * sxy - trace * txy
    a2 = c * sxz - trace * txz
    a3 = c * syy - trace * tyy
    a4 = c * syz - trace * tyz
    a5 = c * szz - trace * tzz
    # c (NaN for a factor that is not positive) and S_x join rho's bound of the outputs.
    ok = point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz),
                        r * (one + gxx + gyy + gzz) + c + sx)
    return r, sx, sy, sz, a0, a1, a2, a3, a4, a5, 0 if ok else 1


@grid_kernel
def conformal_sources_grid(factor, tgamma, gidx, E, B, rho, S_i, S, A, decomposition, form,
                           coef, pivot_floor, one):
    """rho, S_i, S and A_ij = c (S_ij - gamma_ij S / 3) = c S_ij - tilde-gamma_ij S / 3 over
    strided (ncomp, nx, ny, nz) arrays; returns the count of bad points (conformal factor,
    metric not positive definite, non-finite input or output).

    The column loop (scalar code, run-time ``decomposition`` and ``form``): layouts without a
    unit stride along z. Contiguous data, padded rows and ghost-zone windows take the
    vectorised drivers :data:`CONFORMAL_SOURCES`.
    """
    nx, ny, nz = rho.shape
    bad = 0
    third = one / (one + one + one)
    half = one / (one + one)
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            txx, txy, txz, tyy, tyz, tzz = metric_at(tgamma, gidx, i, j, k)
            r, sx, sy, sz, a0, a1, a2, a3, a4, a5, status = _conformal_values(
                factor[i, j, k], txx, txy, txz, tyy, tyz, tzz, E[0, i, j, k], E[1, i, j, k],
                E[2, i, j, k], B[0, i, j, k], B[1, i, j, k], B[2, i, j, k], decomposition, form,
                coef, half, third, pivot_floor)
            rho[i, j, k] = r
            S[i, j, k] = r  # the electromagnetic stress-energy is traceless: S = rho
            S_i[0, i, j, k] = sx
            S_i[1, i, j, k] = sy
            S_i[2, i, j, k] = sz
            A[0, i, j, k] = a0
            A[1, i, j, k] = a1
            A[2, i, j, k] = a2
            A[3, i, j, k] = a3
            A[4, i, j, k] = a4
            A[5, i, j, k] = a5
            count += status
        bad += count
    return bad


@point_function
def _conformal_window_column(factor, tgamma, metric_rows, E, e1, B, b1, rho, S_i, v1, S, A, a1,
                             steps, i, j, nz, decomposition, form, coef, half, third,
                             pivot_floor):
    """Column (i, j), ``nz`` points, of arrays given as spans (the drivers of
    :data:`CONFORMAL_SOURCES`); returns the column's count of bad points in the data's dtype."""
    zero = half - half
    one = half + half
    at_f = span_start(steps, 0, i, j)
    at_g = span_start(steps, 1, i, j)
    at_e = span_start(steps, 2, i, j)
    at_b = span_start(steps, 3, i, j)
    at_rho = span_start(steps, 4, i, j)
    at_v = span_start(steps, 5, i, j)
    at_s = span_start(steps, 6, i, j)
    at_a = span_start(steps, 7, i, j)
    bad = zero
    for k in range(nz):
        (txx, txy, txz, tyy, tyz, tzz, f1, f2, f3, f4, f5, f6) = span_metric_fields(
            tgamma, metric_rows, at_g + k, E, e1, at_e + k, B, b1, at_b + k)
        r, sx, sy, sz, c0, c1, c2, c3, c4, c5, status = _conformal_values(
            factor[at_f + k], txx, txy, txz, tyy, tyz, tzz, f1, f2, f3, f4, f5, f6,
            decomposition, form, coef, half, third, pivot_floor)
        rho[at_rho + k] = r
        S[at_s + k] = r
        v = at_v + k
        S_i[v] = sx
        S_i[v1 + v] = sy
        S_i[v1 + v1 + v] = sz
        t = at_a + k
        A[t] = c0
        A[a1 + t] = c1
        A[a1 + a1 + t] = c2
        t = a1 + a1 + a1 + t
        A[t] = c3
        A[a1 + t] = c4
        A[a1 + a1 + t] = c5
        bad += count_flag(status, one, zero)
    return bad


def _conformal_sources_for(decomposition, form, line_steps=False):
    """The conformal-source driver of one (decomposition, input form), both constants in its
    loop: one compiled loop for contiguous data, padded rows and ghost-zone windows alike; with
    ``line_steps``, compiled for 512-bit vectors (:data:`CONFORMAL_SOURCES_LINE_STEPS`)."""

    @grid_kernel
    def conformal_sources_spans(factor, tgamma, gidx, E, B, rho, S_i, S, A, steps, shape, last,
                                coef, pivot_floor, one, check):
        """rho, S_i, S, A_ij over arrays given as 1-D spans of their memory (factor,
        tilde-gamma, E, B, rho, S_i, S, A: rows of ``steps`` in this order), or as whole
        C-contiguous arrays, seen as their one line (:func:`~.vector_loops.as_spans`); returns
        the count of bad points (0 with ``check`` False).

        Array a holds component c of point (i, j, k) at c steps[a, 0] + i steps[a, 1]
        + j steps[a, 2] + k (uint64 element steps), for (i, j) the columns of ``shape`` =
        (nx, ny, nz) and k below nz, or below ``last`` in the last column. A window (ghost zones
        sliced off, :func:`emsource._arguments.unit_stride_spans`) has last = nz; a contiguous
        line of npoints (C-contiguous arrays, padded rows) is cut into strips as the columns of
        (1, strips, strip length) with steps (row stride, 0, strip length) and the last strip's
        length (:func:`~.vector_loops.line_as_strips`). Either way the loop along k reads and
        writes unit-stride rows and vectorises (:mod:`~emsource.kernels.vector_loops`), and one
        compiled driver serves both routes (half the first compilation of a flat and a
        windowed driver apiece).
        """
        factor, tgamma, E, B = as_spans(factor), as_spans(tgamma), as_spans(E), as_spans(B)
        rho, S_i, S, A = as_spans(rho), as_spans(S_i), as_spans(S), as_spans(A)
        ny = np.uint64(shape[1])
        nz = np.uint64(shape[2])
        final = shape[0] * shape[1] - 1
        metric_rows = packed_rows(gidx, steps[1, 0])
        e1 = steps[2, 0]
        b1 = steps[3, 0]
        v1 = steps[5, 0]
        a1 = steps[7, 0]
        third = one / (one + one + one)
        half = one / (one + one)
        bad_count = 0
        for column in prange(shape[0] * shape[1]):
            if line_steps:  # a constant: the branch is pruned where it is False
                prefer_512_bit_vectors()
            i, j = window_column(column, ny)
            length = nz if column != final else np.uint64(last)
            bad = _conformal_window_column(factor, tgamma, metric_rows, E, e1, B, b1, rho, S_i,
                                           v1, S, A, a1, steps, i, j, length, decomposition,
                                           form, coef, half, third, pivot_floor)
            if check:
                bad_count += int(bad)
        return bad_count

    return conformal_sources_spans


@point_function
def _conformal_values_at(n, factor, tgamma, gidx, E, B, decomposition, form, coef, half, third,
                         pivot_floor):
    """:func:`_conformal_values` at point ``n`` of (npoints,) and (ncomp, row) arrays."""
    return _conformal_values(
        factor[n], tgamma[gidx[0], n], tgamma[gidx[1], n], tgamma[gidx[2], n],
        tgamma[gidx[3], n], tgamma[gidx[4], n], tgamma[gidx[5], n], E[0, n], E[1, n], E[2, n],
        B[0, n], B[1, n], B[2, n], decomposition, form, coef, half, third, pivot_floor)


@point_function
def _conformal_edge(start, stop, factor, tgamma, gidx, E, B, rho, S_i, S, A, decomposition,
                    form, coef, half, third, pivot_floor):
    """Points ``start`` to ``stop`` of (ncomp, row) arrays with ordinary stores (the head and
    tail of a streaming driver's rows); returns their count of bad points."""
    bad = 0
    for n in range(start, stop):
        r, sx, sy, sz, a0, a1, a2, a3, a4, a5, status = _conformal_values_at(
            n, factor, tgamma, gidx, E, B, decomposition, form, coef, half, third, pivot_floor)
        rho[n] = r
        S[n] = r
        S_i[0, n] = sx
        S_i[1, n] = sy
        S_i[2, n] = sz
        A[0, n] = a0
        A[1, n] = a1
        A[2, n] = a2
        A[3, n] = a3
        A[4, n] = a4
        A[5, n] = a5
        bad += status
    return bad


def _conformal_streaming_for(decomposition, form):
    """The streaming-store conformal-source driver of one (decomposition, input form)
    (:data:`CONFORMAL_SOURCES_STREAMING`), built as the sources' streaming driver
    (``kernels/sources.py`` ``_adm_sources_streaming_for``)."""

    @grid_kernel
    def conformal_sources_streaming(factor, tgamma, gidx, E, B, rho, S_i, S, A, coef,
                                    pivot_floor, one, check):
        """rho, S_i, S, A_ij over arrays of shape (ncomp, row length) and (npoints,), or
        C-contiguous whole arrays (as the flat source driver takes them), every whole cache
        line of the 11 output rows written by a streaming store (:mod:`.streaming_stores`);
        returns the count of bad points, or -1 having written nothing where the output rows
        do not share their offset within a cache line."""
        npoints = rho.size
        factor = factor.reshape(npoints)
        tgamma = as_rows(tgamma)
        E = as_rows(E)
        B = as_rows(B)
        rho = rho.reshape(npoints)
        S = S.reshape(npoints)
        S_i = as_rows(S_i)
        A = as_rows(A)
        rho_row = rho.reshape((1, npoints))
        S_row = S.reshape((1, npoints))
        offset = line_offset(rho_row, 0)
        if not (rows_at_offset(rho_row, offset) and rows_at_offset(S_row, offset)
                and rows_at_offset(S_i, offset) and rows_at_offset(A, offset)):
            return -1
        head, lines, lanes = line_extent(offset, rho.itemsize, npoints)
        body_stop = head + lines * lanes
        third = one / (one + one + one)
        half = one / (one + one)
        zero = half - half
        edges = (_conformal_edge(0, head, factor, tgamma, gidx, E, B, rho, S_i, S, A,
                                 decomposition, form, coef, half, third, pivot_floor)
                 + _conformal_edge(body_stop, npoints, factor, tgamma, gidx, E, B, rho, S_i, S,
                                   A, decomposition, form, coef, half, third, pivot_floor))
        bad_count = edges if check else 0
        per_task = STRIP_POINTS // lanes
        for task in prange(strip_count(lines, per_task)):
            line_values = strip_buffer(10, STREAMING_BUFFER_LANES, rho)
            first, last = strip_range(task, per_task, lines)
            bad = zero
            for line in range(first, last):
                start = np.uint64(head) + line * np.uint64(lanes)
                for n in range(start, start + np.uint64(lanes)):
                    r, sx, sy, sz, a0, a1, a2, a3, a4, a5, status = _conformal_values_at(
                        n, factor, tgamma, gidx, E, B, decomposition, form, coef, half, third,
                        pivot_floor)
                    buffer_ten(line_values, n - start, r, sx, sy, sz, a0, a1, a2, a3, a4, a5)
                    bad += count_flag(status, one, zero)
                stream_line(rho_row, 0, start, line_values, 0)
                stream_line(S_row, 0, start, line_values, 0)  # S = rho
                for c in range(3):
                    stream_line(S_i, c, start, line_values, 1 + c)
                for c in range(6):
                    stream_line(A, c, start, line_values, 4 + c)
            store_fence()
            if check:
                bad_count += int(bad)
        return bad_count

    return conformal_sources_streaming


# ------------------------------------------------ one driver per (decomposition, form)
# The decomposition and the input form are constants in each of these drivers' loops (as the
# input form in kernels/sources.py: LLVM does not unswitch a run-time branch of the point
# physics). The dispatchers are made here; each compiles on first use only.
DECOMPOSITIONS = (DECOMPOSITION_CHI, DECOMPOSITION_W, DECOMPOSITION_PHI)
#: The conformal-source driver of each (decomposition, input form) over spans.
CONFORMAL_SOURCES = {(d, form): _conformal_sources_for(d, form)
                     for d in DECOMPOSITIONS for form in INPUT_FORMS}
#: The same drivers compiled for 512-bit vectors, for the line of a large grid whose component
#: rows share cache sets (:data:`~.vector_loops.LINE_STEP_ROW_BYTES`): chi, 0.94 / 0.87 of the
#: 256-bit time at 128^3 / 256^3 float64 in a probe, 0.954 / 0.944 in
#: ``benchmarks/bench_forms.py --line-steps`` (two threads, interleaved in one process).
CONFORMAL_SOURCES_LINE_STEPS = {(d, form): _conformal_sources_for(d, form, True)
                                for d in DECOMPOSITIONS for form in INPUT_FORMS}
#: The flat drivers with streaming stores (:mod:`.streaming_stores`), for large grids whose
#: rows do not alias (``emsource._arguments.flat_driver_tables``); compiled on first use.
CONFORMAL_SOURCES_STREAMING = {(d, form): _conformal_streaming_for(d, form)
                               for d in DECOMPOSITIONS for form in INPUT_FORMS}
