"""Kernels for the 3+1 projections of the electromagnetic stress-energy tensor.

Equations (signature -+++, normal observer n^a, fields E^i, B^i measured by it,
coef = 1/(4 pi) in Gaussian units, 1 in Heaviside-Lorentz units):

    rho  = coef/2 (E^2 + B^2)
    S_i  = coef sqrt(gamma) [ijk] E^j B^k
    S_ij = coef ( -E_i E_j - B_i B_j + 1/2 gamma_ij (E^2 + B^2) )
    S    = gamma^ij S_ij = rho

and the 4D components assembled from them,

    T_tt = alpha^2 rho - 2 alpha beta^i S_i + beta^i beta^j S_ij
    T_ti = beta^j S_ij - alpha S_i,        T_ij = S_ij
    T^ab = rho n^a n^b + n^a S^b + S^a n^b + S^ab,   n^a = (1, -beta^i) / alpha.

References: E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2 and 6.1;
T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 5.2.

Array conventions. ``gamma`` is indexed through ``gidx``: six component indices into its first
axis (xx, xy, xz, yy, yz, zz), so one compiled kernel serves a packed (6, ...) metric and a
full (3, 3, ...) metric reshaped to (9, ...) as a view. The ``*_flat`` drivers take arrays of
shape (ncomp, npoints) (contiguous grids seen as one line); the ``*_grid`` drivers take
(ncomp, nx, ny, nz) arrays with arbitrary strides (ghost zones sliced off, component-last data)
and run the same point code on one (ncomp, nz) column view at a time. The flat and windowed
drivers exist once per input form (and T_ab / T^ab), with the form a constant in the loop:
``ADM_SOURCES_FLAT[form]``, ``ADM_SOURCES_WINDOW[form]``, ``STRESS_ENERGY_FLAT[form, upper]``,
``STRESS_ENERGY_WINDOW[form, upper]`` (they take no ``form``/``upper`` argument). (Indexing with tuples
built per point, ``a[(c,) + idx]``, is about four times slower: it defeats vectorisation.)

Scalar constants ``coef`` and ``half`` arrive in the dtype of the data so that float32 data are
computed in float32 (a Python literal would promote the arithmetic to float64).

The point physics (input forms, projections, fluxes, the point checks) is that of
:mod:`emsource.kernels.electromagnetic`; this module only loops over grids and stores.

Every driver folds the point checks into its pass and returns two counts: bad points
(non-finite input or output, metric not positive definite, lapse not positive) and points
whose energy density underflows (see :func:`~emsource.kernels.electromagnetic.point_underflows`);
with ``check=False`` it returns (0, 0) and checks nothing. Outputs are written at every
point, bad or not. Where a count is not zero, a ``first_failing_*`` search finds the first
such point on the error path, with the same point functions.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function, prefer_512_bit_vectors, search_kernel
from .electromagnetic import (
    FORM_CONTRAVARIANT,
    FORM_COVARIANT,
    FORM_DENSITIZED,
    energy_momentum_fluxes,
    fields_both_indices,
    momentum_upper,
    point_is_valid,
    point_underflows,
    projections,
    sources_bound,
    sqrt_determinant,
)
from .metric import inverse_metric, metric_factors
from .point_checks import is_finite
from .strip_buffers import strip_buffer
from .streaming_stores import (STREAMING_BUFFER_LANES, buffer_ten, line_extent, line_offset,
                               rows_at_offset, store_fence, stream_line)
from .vector_loops import (STRIP_POINTS, as_rows, count_flag, packed_rows, span_metric_fields,
                           span_start, strip_count, strip_length, strip_range, window_column)


@point_function
def _adm_values(gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, f4, f5, f6, form, coef, half, tiny,
                pivot_floor):
    """rho, S_x, S_y, S_z, S_ij (packed) at one point from its metric and stored field
    components, and the checks as bits: 1 if it fails :func:`point_is_valid` (the ten outputs
    bounded by :func:`sources_bound`), 2 if its energy density underflows
    (:func:`point_underflows`).

    The checks come back as one integer: returning boolean flags from this inlined function
    made the kernel 2-4 times slower (measured twice; LLVM stopped vectorising), and a check
    apart from it, re-reading inputs or outputs after the stores, cost 10-20 % on strided views
    (measured), where this costs 0-4 % against the plain finiteness test it replaced.
    """
    one = half + half
    d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
    sg = sqrt_determinant(d1, d2, d3)
    fields = fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32,
                                 f1, f2, f3, f4, f5, f6, one)
    r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, _energy2 = projections(
        gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half)
    trace = gxx + gyy + gzz
    valid = point_is_valid(d1, d2, d3, pivot_floor * trace, sources_bound(r, trace, one))
    status = (0 if valid else 1) + (2 if point_underflows(r, fields, tiny) else 0)
    return r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, status


@point_function
def _adm_values_at(n, gamma, gidx, E, B, form, coef, half, tiny, pivot_floor):
    """:func:`_adm_values` at point ``n`` of (ncomp, npoints) input arrays."""
    return _adm_values(
        gamma[gidx[0], n], gamma[gidx[1], n], gamma[gidx[2], n],
        gamma[gidx[3], n], gamma[gidx[4], n], gamma[gidx[5], n],
        E[0, n], E[1, n], E[2, n], B[0, n], B[1, n], B[2, n],
        form, coef, half, tiny, pivot_floor)


@point_function
def _adm_point(n, gamma, gidx, E, B, rho, S_i, S_ij, S, form, coef, half, tiny, pivot_floor):
    """Write rho, S_i, S_ij, S at point ``n`` of (ncomp, npoints) arrays; return the check bits
    of :func:`_adm_values`."""
    r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, status = _adm_values_at(
        n, gamma, gidx, E, B, form, coef, half, tiny, pivot_floor)
    rho[n] = r
    S[n] = r  # the electromagnetic stress-energy is traceless: S = gamma^ij S_ij = rho
    S_i[0, n] = sx
    S_i[1, n] = sy
    S_i[2, n] = sz
    S_ij[0, n] = sxx
    S_ij[1, n] = sxy
    S_ij[2, n] = sxz
    S_ij[3, n] = syy
    S_ij[4, n] = syz
    S_ij[5, n] = szz
    return status


@point_function
def _stress_energy_values(gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, f4, f5, f6, a, b1, b2, b3,
                          form, coef, half, tiny, pivot_floor, upper):
    """The 10 packed T_ab (or T^ab) at one point from its metric, stored field components,
    lapse and shift, and the checks as bits (1 invalid: also a lapse that is not positive or a
    non-finite lapse or shift; 2 underflow), as :func:`_adm_values`.

    It returned its checks as two booleans until the windowed driver was added: the T_ab loops
    then compiled to scalar code only (0 packed operations in flat, column and windowed loops
    alike); with the bits they vectorise as the sources do. T^ab is built from contravariant pieces, S^i = coef [ijk] E_j B_k / sg and
    S^ij = coef (1/2 (E^2 + B^2) gamma^ij - E^i E^j - B^i B^j): raising both indices of S_ij
    instead costs eps kappa^2 rather than eps kappa (measured against exact arithmetic,
    tests/test_metric_conditioning.py).
    """
    one = half + half
    d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
    sg = sqrt_determinant(d1, d2, d3)
    fields = fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32,
                                 f1, f2, f3, f4, f5, f6, one)
    r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, energy2 = projections(
        gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half)
    if upper:
        ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
        ux, uy, uz = momentum_upper(sg, fields, coef)
        ex, ey, ez, _exl, _eyl, _ezl, bx, by, bz, _bxl, _byl, _bzl = fields
        pressure = half * energy2
        ia = one / a
        # n^a = (1, -beta^i)/alpha; T^ab = rho n^a n^b + n^a S^b + S^a n^b + S^ab.
        nx = -b1 * ia
        ny = -b2 * ia
        nz = -b3 * ia
        t0 = r * ia * ia
        t1 = ia * (r * nx + ux)
        t2 = ia * (r * ny + uy)
        t3 = ia * (r * nz + uz)
        t4 = r * nx * nx + (nx * ux + nx * ux) + coef * (pressure * ixx - ex * ex - bx * bx)
        t5 = r * nx * ny + (nx * uy + ny * ux) + coef * (pressure * ixy - ex * ey - bx * by)
        t6 = r * nx * nz + (nx * uz + nz * ux) + coef * (pressure * ixz - ex * ez - bx * bz)
        t7 = r * ny * ny + (ny * uy + ny * uy) + coef * (pressure * iyy - ey * ey - by * by)
        t8 = r * ny * nz + (ny * uz + nz * uy) + coef * (pressure * iyz - ey * ez - by * bz)
        t9 = r * nz * nz + (nz * uz + nz * uz) + coef * (pressure * izz - ez * ez - bz * bz)
    else:
        # beta^j S_ij, one row per i.
        qx = b1 * sxx + b2 * sxy + b3 * sxz
        qy = b1 * sxy + b2 * syy + b3 * syz
        qz = b1 * sxz + b2 * syz + b3 * szz
        beta_s = b1 * sx + b2 * sy + b3 * sz
        t0 = a * a * r - (a * beta_s + a * beta_s) + (b1 * qx + b2 * qy + b3 * qz)
        t1 = qx - a * sx
        t2 = qy - a * sy
        t3 = qz - a * sz
        t4 = sxx
        t5 = sxy
        t6 = sxz
        t7 = syy
        t8 = syz
        t9 = szz
    total = (t0 + t1 + t2 + t3) + (t4 + t5 + t6 + t7 + t8 + t9)
    valid = (point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz), total) & (a > 0)
             & is_finite(a + b1 + b2 + b3))
    status = (0 if valid else 1) + (2 if point_underflows(r, fields, tiny) else 0)
    return t0, t1, t2, t3, t4, t5, t6, t7, t8, t9, status


@point_function
def _stress_energy_values_at(n, alpha, beta, gamma, gidx, E, B, form, coef, half, tiny,
                             pivot_floor, upper):
    """:func:`_stress_energy_values` at point ``n`` of (ncomp, npoints) input arrays."""
    return _stress_energy_values(
        gamma[gidx[0], n], gamma[gidx[1], n], gamma[gidx[2], n],
        gamma[gidx[3], n], gamma[gidx[4], n], gamma[gidx[5], n],
        E[0, n], E[1, n], E[2, n], B[0, n], B[1, n], B[2, n],
        alpha[n], beta[0, n], beta[1, n], beta[2, n], form, coef, half, tiny, pivot_floor, upper)


@point_function
def _stress_energy_point(n, alpha, beta, gamma, gidx, E, B, T, form, coef, half, tiny,
                         pivot_floor, upper):
    """Write the 10 packed T_ab (or T^ab) of :func:`_stress_energy_values` at point ``n`` of
    (ncomp, npoints) arrays; return the check bits."""
    t0, t1, t2, t3, t4, t5, t6, t7, t8, t9, status = _stress_energy_values_at(
        n, alpha, beta, gamma, gidx, E, B, form, coef, half, tiny, pivot_floor, upper)
    T[0, n] = t0
    T[1, n] = t1
    T[2, n] = t2
    T[3, n] = t3
    T[4, n] = t4
    T[5, n] = t5
    T[6, n] = t6
    T[7, n] = t7
    T[8, n] = t8
    T[9, n] = t9
    return status


@point_function
def _flux_point(n, alpha, beta, gamma, gidx, E, B, out, form, coef, half, tiny, pivot_floor):
    """Write (sg rho, sg S_x, sg S_y, sg S_z, F^x, F^y, F^z) at point ``n``; return
    (valid, underflows). The conserved densities and the energy flux density that the
    integrals sum (F^i = sg (alpha S^i - beta^i rho))."""
    gxx = gamma[gidx[0], n]
    gxy = gamma[gidx[1], n]
    gxz = gamma[gidx[2], n]
    gyy = gamma[gidx[3], n]
    gyz = gamma[gidx[4], n]
    gzz = gamma[gidx[5], n]
    one = half + half
    d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
    sg = sqrt_determinant(d1, d2, d3)
    fields = fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32,
                                 E[0, n], E[1, n], E[2, n], B[0, n], B[1, n], B[2, n], one)
    r, sx, sy, sz, _sxx, _sxy, _sxz, _syy, _syz, _szz, energy2 = projections(
        gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half)
    ux, uy, uz = momentum_upper(sg, fields, coef)
    a = alpha[n]
    bx = beta[0, n]
    by = beta[1, n]
    bz = beta[2, n]
    (fx, fy, fz, _m0, _m1, _m2, _m3, _m4, _m5, _m6, _m7, _m8) = energy_momentum_fluxes(
        a, bx, by, bz, sg, r, sx, sy, sz, ux, uy, uz, fields, energy2, coef, half)
    out[0, n] = sg * r
    out[1, n] = sg * sx
    out[2, n] = sg * sy
    out[3, n] = sg * sz
    out[4, n] = fx
    out[5, n] = fy
    out[6, n] = fz
    total = sg * (r + sx + sy + sz) + (fx + fy + fz)
    valid = (point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz), total) & (a > 0)
             & is_finite(a + bx + by + bz))
    return valid, point_underflows(r, fields, tiny)


@point_function
def _adm_strip(start, stop, gamma, gidx, E, B, rho, S_i, S_ij, S, form, coef, half, tiny,
               pivot_floor):
    """Points ``start`` to ``stop`` (uint64) of (ncomp, npoints) arrays, as :func:`_adm_point`;
    returns the strip's two counts in the data's dtype (:func:`~.vector_loops.count_flag`)."""
    zero = half - half
    one = half + half
    bad = zero
    low = zero
    for n in range(start, stop):
        status = _adm_point(n, gamma, gidx, E, B, rho, S_i, S_ij, S, form, coef, half, tiny,
                            pivot_floor)
        bad += count_flag(status & 1, one, zero)
        low += count_flag(status & 2, one, zero)
    return bad, low


def _adm_sources_flat_for(form, line_steps=False):
    """The flat source driver of input form ``form`` (a constant in its loop); with
    ``line_steps``, compiled for 512-bit vectors (:data:`ADM_SOURCES_FLAT_LINE_STEPS`)."""

    @grid_kernel
    def adm_sources_flat(gamma, gidx, E, B, rho, S_i, S_ij, S, coef, half, tiny, pivot_floor,
                         check):
        """rho, S_i, S_ij, S over arrays of shape (ncomp, row length) and (npoints,), or over
        C-contiguous (ncomp, *grid) and grid-shaped arrays, which it sees as those (a reshape
        here costs nothing; each in Python costs a small grid's call about 0.15 us); returns
        the two counts. The loop count is the scalar output's size: rows may be longer
        (padded)."""
        npoints = rho.size
        gamma = as_rows(gamma)
        E = as_rows(E)
        B = as_rows(B)
        rho = rho.reshape(npoints)
        S_i = as_rows(S_i)
        S_ij = as_rows(S_ij)
        S = S.reshape(npoints)
        bad_count = 0
        underflow_count = 0
        length = strip_length(npoints)
        for strip in prange(strip_count(npoints, length)):
            if line_steps:  # a constant: the branch is pruned where it is False
                prefer_512_bit_vectors()
            start, stop = strip_range(strip, length, npoints)
            bad, low = _adm_strip(start, stop, gamma, gidx, E, B, rho, S_i, S_ij, S, form, coef,
                                  half, tiny, pivot_floor)
            if check:
                bad_count += int(bad)
                underflow_count += int(low)
        return bad_count, underflow_count

    return adm_sources_flat


def _adm_sources_streaming_for(form):
    """The streaming-store source driver of input form ``form``
    (:data:`ADM_SOURCES_FLAT_STREAMING`)."""

    @grid_kernel
    def adm_sources_streaming(gamma, gidx, E, B, rho, S_i, S_ij, S, coef, half, tiny,
                              pivot_floor, check):
        """As the flat driver (same arguments, same values bit for bit), with every whole
        cache line of the outputs written by a streaming store (:mod:`.streaming_stores`):
        each task computes one line's points into a stack buffer, then streams that line of
        the 11 output rows. The points before the first whole line and after the last are
        stored the ordinary way. Returns (-1, -1) and writes nothing where the output rows do
        not all start at the same offset within a cache line (nor on whole elements): the
        caller then takes the flat driver."""
        npoints = rho.size
        gamma = as_rows(gamma)
        E = as_rows(E)
        B = as_rows(B)
        rho = rho.reshape(npoints)
        S = S.reshape(npoints)
        S_i = as_rows(S_i)
        S_ij = as_rows(S_ij)
        rho_row = rho.reshape((1, npoints))
        S_row = S.reshape((1, npoints))
        offset = line_offset(rho_row, 0)
        if not (rows_at_offset(rho_row, offset) and rows_at_offset(S_row, offset)
                and rows_at_offset(S_i, offset) and rows_at_offset(S_ij, offset)):
            return -1, -1
        head, lines, lanes = line_extent(offset, rho.itemsize, npoints)
        body_stop = head + lines * lanes
        zero = half - half
        one = half + half
        bad_head, low_head = _adm_strip(np.uint64(0), np.uint64(head), gamma, gidx, E, B, rho,
                                        S_i, S_ij, S, form, coef, half, tiny, pivot_floor)
        bad_tail, low_tail = _adm_strip(np.uint64(body_stop), np.uint64(npoints), gamma, gidx,
                                        E, B, rho, S_i, S_ij, S, form, coef, half, tiny,
                                        pivot_floor)
        bad_count = int(bad_head + bad_tail) if check else 0
        underflow_count = int(low_head + low_tail) if check else 0
        per_task = STRIP_POINTS // lanes
        for task in prange(strip_count(lines, per_task)):
            line_values = strip_buffer(10, STREAMING_BUFFER_LANES, rho)
            first, last = strip_range(task, per_task, lines)
            bad = zero
            low = zero
            for line in range(first, last):
                start = np.uint64(head) + line * np.uint64(lanes)
                for n in range(start, start + np.uint64(lanes)):
                    r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, status = _adm_values_at(
                        n, gamma, gidx, E, B, form, coef, half, tiny, pivot_floor)
                    buffer_ten(line_values, n - start, r, sx, sy, sz, sxx, sxy, sxz, syy, syz,
                               szz)
                    bad += count_flag(status & 1, one, zero)
                    low += count_flag(status & 2, one, zero)
                stream_line(rho_row, 0, start, line_values, 0)
                stream_line(S_row, 0, start, line_values, 0)  # S = rho
                for c in range(3):
                    stream_line(S_i, c, start, line_values, 1 + c)
                for c in range(6):
                    stream_line(S_ij, c, start, line_values, 4 + c)
            store_fence()
            if check:
                bad_count += int(bad)
                underflow_count += int(low)
        return bad_count, underflow_count

    return adm_sources_streaming


@point_function
def _adm_window_column(gamma, metric_rows, E, e1, B, b1, rho, S_i, v1, S_ij, t1, S, steps, i, j,
                       nz, form, coef, half, tiny, pivot_floor):
    """Column (i, j) of windows given as spans, as :func:`adm_sources_window`; returns the
    column's two counts in the data's dtype."""
    zero = half - half
    one = half + half
    at_g = span_start(steps, 0, i, j)
    at_e = span_start(steps, 1, i, j)
    at_b = span_start(steps, 2, i, j)
    at_rho = span_start(steps, 3, i, j)
    at_v = span_start(steps, 4, i, j)
    at_t = span_start(steps, 5, i, j)
    at_s = span_start(steps, 6, i, j)
    bad = zero
    low = zero
    for k in range(nz):
        (gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, f4, f5, f6) = span_metric_fields(
            gamma, metric_rows, at_g + k, E, e1, at_e + k, B, b1, at_b + k)
        r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, status = _adm_values(
            gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, f4, f5, f6,
            form, coef, half, tiny, pivot_floor)
        rho[at_rho + k] = r
        S[at_s + k] = r
        v = at_v + k
        S_i[v] = sx
        S_i[v1 + v] = sy
        S_i[v1 + v1 + v] = sz
        t = at_t + k
        S_ij[t] = sxx
        S_ij[t1 + t] = sxy
        S_ij[t1 + t1 + t] = sxz
        t = t1 + t1 + t1 + t
        S_ij[t] = syy
        S_ij[t1 + t] = syz
        S_ij[t1 + t1 + t] = szz
        bad += count_flag(status & 1, one, zero)
        low += count_flag(status & 2, one, zero)
    return bad, low


def _adm_sources_window_for(form):
    """The windowed source driver of input form ``form`` (a constant in its loop)."""

    @grid_kernel
    def adm_sources_window(gamma, gidx, E, B, rho, S_i, S_ij, S, steps, shape, coef, half, tiny,
                           pivot_floor, check):
        """rho, S_i, S_ij, S over windows of larger arrays (ghost zones sliced off), each array
        a 1-D span of its memory; returns the two counts.

        Array a (gamma, E, B, rho, S_i, S_ij, S in this order) holds component c of point
        (i, j, k) of the (nx, ny, nz) = ``shape`` window at c steps[a, 0] + i steps[a, 1]
        + j steps[a, 2] + k (uint64 element steps; z is contiguous): the loop along z then
        reads and writes unit-stride rows and vectorises (:mod:`~emsource.kernels.vector_loops`),
        where :func:`adm_sources_grid` over the same views as strided arrays stays scalar.
        """
        ny = np.uint64(shape[1])
        nz = np.uint64(shape[2])
        metric_rows = packed_rows(gidx, steps[0, 0])
        e1 = steps[1, 0]
        b1 = steps[2, 0]
        v1 = steps[4, 0]
        t1 = steps[5, 0]
        bad_count = 0
        underflow_count = 0
        for column in prange(shape[0] * shape[1]):
            i, j = window_column(column, ny)
            bad, low = _adm_window_column(gamma, metric_rows, E, e1, B, b1, rho, S_i, v1, S_ij,
                                          t1, S, steps, i, j, nz, form, coef, half, tiny,
                                          pivot_floor)
            if check:
                bad_count += int(bad)
                underflow_count += int(low)
        return bad_count, underflow_count

    return adm_sources_window


@grid_kernel
def adm_sources_grid(gamma, gidx, E, B, rho, S_i, S_ij, S, form, coef, half, tiny, pivot_floor,
                     check):
    """rho, S_i, S_ij, S over strided (ncomp, nx, ny, nz) arrays; returns the two counts."""
    nx, ny, nz = rho.shape
    bad_count = 0
    underflow_count = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        g_c = gamma[:, i, j]
        e_c = E[:, i, j]
        b_c = B[:, i, j]
        rho_c = rho[i, j]
        s_i_c = S_i[:, i, j]
        s_ij_c = S_ij[:, i, j]
        s_c = S[i, j]
        for k in range(nz):
            status = _adm_point(k, g_c, gidx, e_c, b_c, rho_c, s_i_c, s_ij_c, s_c, form, coef,
                                half, tiny, pivot_floor)
            if check:
                bad_count += status & 1
                underflow_count += status >> 1
    return bad_count, underflow_count


@point_function
def _stress_energy_strip(start, stop, alpha, beta, gamma, gidx, E, B, T, form, coef, half, tiny,
                         pivot_floor, upper):
    """Points ``start`` to ``stop`` (uint64) of (ncomp, npoints) arrays, as
    :func:`_stress_energy_point`; returns the strip's two counts in the data's dtype."""
    zero = half - half
    one = half + half
    bad = zero
    low = zero
    for n in range(start, stop):
        status = _stress_energy_point(n, alpha, beta, gamma, gidx, E, B, T, form, coef, half,
                                      tiny, pivot_floor, upper)
        bad += count_flag(status & 1, one, zero)
        low += count_flag(status & 2, one, zero)
    return bad, low


def _stress_energy_flat_for(form, upper, line_steps=False):
    """The flat T_ab (``upper`` False) or T^ab driver of input form ``form`` (both constants
    in its loop); with ``line_steps``, compiled for 512-bit vectors
    (:data:`STRESS_ENERGY_FLAT_LINE_STEPS`)."""

    @grid_kernel
    def stress_energy_flat(alpha, beta, gamma, gidx, E, B, T, coef, half, tiny, pivot_floor,
                           check):
        """Packed T_ab or T^ab over arrays of shape (ncomp, row length) and (npoints,), or over
        C-contiguous (ncomp, *grid) and grid-shaped arrays, which it sees as those (as
        :func:`_adm_sources_flat_for`'s driver); returns the two counts."""
        bad_count = 0
        underflow_count = 0
        npoints = alpha.size
        alpha = alpha.reshape(npoints)
        beta = as_rows(beta)
        gamma = as_rows(gamma)
        E = as_rows(E)
        B = as_rows(B)
        T = as_rows(T)
        length = strip_length(npoints)
        for strip in prange(strip_count(npoints, length)):
            if line_steps:  # a constant: the branch is pruned where it is False
                prefer_512_bit_vectors()
            start, stop = strip_range(strip, length, npoints)
            bad, low = _stress_energy_strip(start, stop, alpha, beta, gamma, gidx, E, B, T, form,
                                            coef, half, tiny, pivot_floor, upper)
            if check:
                bad_count += int(bad)
                underflow_count += int(low)
        return bad_count, underflow_count

    return stress_energy_flat


def _stress_energy_streaming_for(form, upper):
    """The streaming-store T_ab (T^ab) driver of (``form``, ``upper``)
    (:data:`STRESS_ENERGY_FLAT_STREAMING`), built as the sources' (:func:`_adm_sources_streaming_for`)."""

    @grid_kernel
    def stress_energy_streaming(alpha, beta, gamma, gidx, E, B, T, coef, half, tiny,
                                pivot_floor, check):
        """As the flat T_ab driver, with every whole cache line of the 10 output rows written
        by a streaming store; (-1, -1) and nothing written where those rows do not share their
        offset within a line (see :func:`_adm_sources_streaming_for`)."""
        npoints = alpha.size
        alpha = alpha.reshape(npoints)
        beta = as_rows(beta)
        gamma = as_rows(gamma)
        E = as_rows(E)
        B = as_rows(B)
        T = as_rows(T)
        offset = line_offset(T, 0)
        if not rows_at_offset(T, offset):
            return -1, -1
        head, lines, lanes = line_extent(offset, T.itemsize, npoints)
        body_stop = head + lines * lanes
        zero = half - half
        one = half + half
        bad_head, low_head = _stress_energy_strip(
            np.uint64(0), np.uint64(head), alpha, beta, gamma, gidx, E, B, T, form, coef, half,
            tiny, pivot_floor, upper)
        bad_tail, low_tail = _stress_energy_strip(
            np.uint64(body_stop), np.uint64(npoints), alpha, beta, gamma, gidx, E, B, T, form,
            coef, half, tiny, pivot_floor, upper)
        bad_count = int(bad_head + bad_tail) if check else 0
        underflow_count = int(low_head + low_tail) if check else 0
        per_task = STRIP_POINTS // lanes
        for task in prange(strip_count(lines, per_task)):
            line_values = strip_buffer(10, STREAMING_BUFFER_LANES, T)
            first, last = strip_range(task, per_task, lines)
            bad = zero
            low = zero
            for line in range(first, last):
                start = np.uint64(head) + line * np.uint64(lanes)
                for n in range(start, start + np.uint64(lanes)):
                    t0, t1, t2, t3, t4, t5, t6, t7, t8, t9, status = _stress_energy_values_at(
                        n, alpha, beta, gamma, gidx, E, B, form, coef, half, tiny, pivot_floor,
                        upper)
                    buffer_ten(line_values, n - start, t0, t1, t2, t3, t4, t5, t6, t7, t8, t9)
                    bad += count_flag(status & 1, one, zero)
                    low += count_flag(status & 2, one, zero)
                for c in range(10):
                    stream_line(T, c, start, line_values, c)
            store_fence()
            if check:
                bad_count += int(bad)
                underflow_count += int(low)
        return bad_count, underflow_count

    return stress_energy_streaming


@point_function
def _stress_energy_window_column(alpha, beta, s1, gamma, metric_rows, E, e1, B, b1, T, t1, steps,
                                 i, j, nz, form, coef, half, tiny, pivot_floor, upper):
    """Column (i, j) of windows given as spans, as :func:`stress_energy_window`; returns the
    column's two counts in the data's dtype."""
    zero = half - half
    one = half + half
    at_a = span_start(steps, 0, i, j)
    at_s = span_start(steps, 1, i, j)
    at_g = span_start(steps, 2, i, j)
    at_e = span_start(steps, 3, i, j)
    at_b = span_start(steps, 4, i, j)
    at_t = span_start(steps, 5, i, j)
    bad = zero
    low = zero
    for k in range(nz):
        (gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, f4, f5, f6) = span_metric_fields(
            gamma, metric_rows, at_g + k, E, e1, at_e + k, B, b1, at_b + k)
        v = at_s + k
        c0, c1, c2, c3, c4, c5, c6, c7, c8, c9, status = _stress_energy_values(
            gxx, gxy, gxz, gyy, gyz, gzz, f1, f2, f3, f4, f5, f6,
            alpha[at_a + k], beta[v], beta[s1 + v], beta[s1 + s1 + v],
            form, coef, half, tiny, pivot_floor, upper)
        t = at_t + k
        T[t] = c0
        t += t1
        T[t] = c1
        t += t1
        T[t] = c2
        t += t1
        T[t] = c3
        t += t1
        T[t] = c4
        t += t1
        T[t] = c5
        t += t1
        T[t] = c6
        t += t1
        T[t] = c7
        t += t1
        T[t] = c8
        t += t1
        T[t] = c9
        bad += count_flag(status & 1, one, zero)
        low += count_flag(status & 2, one, zero)
    return bad, low


def _stress_energy_window_for(form, upper):
    """The windowed T_ab / T^ab driver of input form ``form`` (both constants in its loop)."""

    @grid_kernel
    def stress_energy_window(alpha, beta, gamma, gidx, E, B, T, steps, shape, coef, half, tiny,
                             pivot_floor, check):
        """Packed T_ab or T^ab over windows of larger arrays given as 1-D spans (alpha, beta,
        gamma, E, B, T: rows of ``steps`` in this order), as the windowed source driver;
        returns the two counts."""
        ny = np.uint64(shape[1])
        nz = np.uint64(shape[2])
        metric_rows = packed_rows(gidx, steps[2, 0])
        s1 = steps[1, 0]
        e1 = steps[3, 0]
        b1 = steps[4, 0]
        t1 = steps[5, 0]
        bad_count = 0
        underflow_count = 0
        for column in prange(shape[0] * shape[1]):
            i, j = window_column(column, ny)
            bad, low = _stress_energy_window_column(alpha, beta, s1, gamma, metric_rows, E, e1, B,
                                                    b1, T, t1, steps, i, j, nz, form, coef, half,
                                                    tiny, pivot_floor, upper)
            if check:
                bad_count += int(bad)
                underflow_count += int(low)
        return bad_count, underflow_count

    return stress_energy_window


# ------------------------------------------------------------------ one driver per input form
# The input form (and, for T_ab, the index position) is a constant in each of these drivers'
# loops: with both as run-time values LLVM kept one loop and computed part of the other forms'
# arithmetic in it (DEVELOPERS.md "Vectorised point loops"). Each compiles on first use, so a
# program that uses one form compiles one loop; indexed by form code (and ``upper``).
INPUT_FORMS = (FORM_CONTRAVARIANT, FORM_COVARIANT, FORM_DENSITIZED)
#: The flat source driver of each input form.
ADM_SOURCES_FLAT = {form: _adm_sources_flat_for(form) for form in INPUT_FORMS}
#: The same drivers compiled for 512-bit vectors, for large grids whose component rows share
#: cache sets (:data:`~.vector_loops.LINE_STEP_ROW_BYTES`): each step of the loop reads and
#: writes a whole 64-byte cache line of every row. 0.92-0.98 of the 256-bit time at 128^3 and
#: 256^3 float64, 0.93-0.97 at 256^3 float32 (two threads, interleaved in one process,
#: ``benchmarks/bench_sources.py``). Compiled on first use like the others.
ADM_SOURCES_FLAT_LINE_STEPS = {form: _adm_sources_flat_for(form, line_steps=True)
                               for form in INPUT_FORMS}
#: The windowed source driver of each input form.
ADM_SOURCES_WINDOW = {form: _adm_sources_window_for(form) for form in INPUT_FORMS}
#: The flat T_ab / T^ab driver of each (input form, upper).
STRESS_ENERGY_FLAT = {(form, upper): _stress_energy_flat_for(form, upper)
                      for form in INPUT_FORMS for upper in (False, True)}
#: The flat T_ab / T^ab drivers compiled for 512-bit vectors (as
#: :data:`ADM_SOURCES_FLAT_LINE_STEPS`): 0.90 / 0.88 of the 256-bit time at 128^3 / 256^3
#: float64 in a probe, 0.966 / 0.949 in ``benchmarks/bench_forms.py --line-steps`` (T_ab, two
#: threads, interleaved in one process).
STRESS_ENERGY_FLAT_LINE_STEPS = {(form, upper): _stress_energy_flat_for(form, upper, True)
                                 for form in INPUT_FORMS for upper in (False, True)}
#: The flat T_ab / T^ab drivers with streaming stores (as :data:`ADM_SOURCES_FLAT_STREAMING`).
STRESS_ENERGY_FLAT_STREAMING = {(form, upper): _stress_energy_streaming_for(form, upper)
                                for form in INPUT_FORMS for upper in (False, True)}
#: The windowed T_ab / T^ab driver of each (input form, upper).
STRESS_ENERGY_WINDOW = {(form, upper): _stress_energy_window_for(form, upper)
                        for form in INPUT_FORMS for upper in (False, True)}
#: The flat source drivers with streaming stores, by input form: taken on large grids
#: (:data:`~.vector_loops.STREAMING_ROW_BYTES`; ``emsource._arguments.takes_streaming_stores``).
ADM_SOURCES_FLAT_STREAMING = {form: _adm_sources_streaming_for(form)
                              for form in INPUT_FORMS}


@grid_kernel
def stress_energy_grid(alpha, beta, gamma, gidx, E, B, T, form, coef, half, tiny, pivot_floor,
                       upper, check):
    """Packed T_ab or T^ab over strided (ncomp, nx, ny, nz) arrays; returns the two counts."""
    nx, ny, nz = alpha.shape
    bad_count = 0
    underflow_count = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        a_c = alpha[i, j]
        beta_c = beta[:, i, j]
        g_c = gamma[:, i, j]
        e_c = E[:, i, j]
        b_c = B[:, i, j]
        t_c = T[:, i, j]
        for k in range(nz):
            status = _stress_energy_point(k, a_c, beta_c, g_c, gidx, e_c, b_c, t_c,
                                          form, coef, half, tiny, pivot_floor, upper)
            if check:
                bad_count += status & 1
                underflow_count += status >> 1
    return bad_count, underflow_count


@grid_kernel
def energy_fluxes_grid(alpha, beta, gamma, gidx, E, B, out, form, coef, half, tiny, pivot_floor,
                       check):
    """(sg rho, sg S_i, F^i) over strided (ncomp, nx, ny, nz) arrays; returns the two counts.

    Post-processing only (the integrals of a slab), so one strided driver serves every layout.
    """
    nx, ny, nz = alpha.shape
    bad_count = 0
    underflow_count = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        a_c = alpha[i, j]
        beta_c = beta[:, i, j]
        g_c = gamma[:, i, j]
        e_c = E[:, i, j]
        b_c = B[:, i, j]
        o_c = out[:, i, j]
        for k in range(nz):
            valid, low = _flux_point(k, a_c, beta_c, g_c, gidx, e_c, b_c, o_c,
                                     form, coef, half, tiny, pivot_floor)
            if check:
                bad_count += 0 if valid else 1
                underflow_count += 1 if low else 0
    return bad_count, underflow_count


@search_kernel
def first_failing_adm(gamma, gidx, E, B, rho, S_i, S_ij, S, form, coef, half, tiny, pivot_floor,
                      underflow):
    """C-order flat index of the first point of (ncomp, nx, ny, nz) arrays that fails the check
    (``underflow`` False) or underflows (True), or -1.

    Run only after a driver counted such points: a min-reduction folded into the main pass
    made it 2-3 times slower (measured); this serial search on the error path re-evaluates
    the same point function, so it applies exactly the driver's criterion (and writes the
    values the driver wrote).
    """
    nx, ny, nz = rho.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                status = _adm_point(k, gamma[:, i, j], gidx, E[:, i, j], B[:, i, j], rho[i, j],
                                    S_i[:, i, j], S_ij[:, i, j], S[i, j], form, coef, half, tiny,
                                    pivot_floor)
                failed = (status & 2) != 0 if underflow else (status & 1) != 0
                if failed:
                    return (i * ny + j) * nz + k
    return -1


@search_kernel
def first_failing_stress_energy(alpha, beta, gamma, gidx, E, B, T, form, coef, half, tiny,
                                pivot_floor, upper, underflow):
    """As :func:`first_failing_adm`, for the 4D components (lapse and shift checked too)."""
    nx, ny, nz = alpha.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                status = _stress_energy_point(k, alpha[i, j], beta[:, i, j], gamma[:, i, j],
                                              gidx, E[:, i, j], B[:, i, j], T[:, i, j],
                                              form, coef, half, tiny, pivot_floor, upper)
                if (status & 2 if underflow else status & 1) != 0:
                    return (i * ny + j) * nz + k
    return -1


@search_kernel
def first_failing_flux(alpha, beta, gamma, gidx, E, B, out, form, coef, half, tiny, pivot_floor,
                       underflow):
    """As :func:`first_failing_adm`, for :func:`energy_fluxes_grid`."""
    nx, ny, nz = alpha.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                valid, low = _flux_point(k, alpha[i, j], beta[:, i, j], gamma[:, i, j], gidx,
                                         E[:, i, j], B[:, i, j], out[:, i, j],
                                         form, coef, half, tiny, pivot_floor)
                if (low if underflow else not valid):
                    return (i * ny + j) * nz + k
    return -1
