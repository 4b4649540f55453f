"""Kernels for the residuals of the 3+1 energy and momentum equations of the electromagnetic field.

The equations (derived in :mod:`emsource.conservation`, which documents the form and the
sources) are, with sg = sqrt(gamma),

    d_t(sg rho) + d_i F^i      = sg [ alpha K_ij S^ij - S^i d_i alpha - alpha j^i E_i ]
    d_t(sg S_j) + d_i M^i_j    = sg [ (alpha/2) S^ik d_j gamma_ik + S_i d_j beta^i - rho d_j alpha
                                      - alpha (rho_e E_j + epsilon_jkl j^k B^l) ]

    F^i   = sg (alpha S^i   - beta^i rho)
    M^i_j = sg (alpha S^i_j - beta^i S_j)

Two passes over the grid, no other whole-grid temporaries:

1. :func:`fluxes_and_rates` writes, at every point, the 12 flux components and 4 time terms into
   one (16, nx, ny, nz) work array: F^i at 0..2, M^i_j at 3 + 3 i + j, and at 12..15 either the
   conserved densities (sg rho, sg S_j) (``rate_mode`` 0), their centred time difference from two
   outer time levels (mode 1), or their time derivative by the chain rule from caller-supplied
   d_t gamma_ij, d_t E^i, d_t B^i (mode 2).
2. :func:`residuals` differences the fluxes and the metric with the centred stencils of
   :mod:`emsource.kernels.stencils`, recomputes the point values it needs, and writes the
   residual, the size of the largest term of each equation, and optionally the source terms.

All arrays are (ncomp, nx, ny, nz) views (scalars as (1, nx, ny, nz)), any strides; a 1D or 2D
grid comes with length-1 trailing axes, along which ``radius`` is 0 and no derivative is taken.
Pass 2 may get them with the grid axes reversed (data stored z, y, x) and each plane as one line
(see :func:`residuals`); pass 1, a pointwise loop, takes any of these arrangements.
Metric and curvature are read through six component indices (``gidx``) so that a packed (6, ...)
or a full (3, 3, ...) block seen as (9, ...) serve one compiled kernel. Constants arrive in the
data's dtype.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function
from .electromagnetic import (
    FORM_CONTRAVARIANT,
    energy_momentum_fluxes,
    fields_both_indices,
    momentum_upper,
    projections,
    sqrt_determinant,
)
from .metric import inverse_metric, metric_factors
from .stencils import d1_directions_column, divergence_column
from .strip_buffers import strip_buffer


@point_function
def _contravariant_point(gxx, gxy, gxz, gyy, gyz, gzz, ex, ey, ez, bx, by, bz, coef, half):
    """The point physics the conservation kernels need, from contravariant fields.

    Returns one flat tuple (a tuple nested in a returned tuple breaks Numba's parallel array
    analysis): the metric factors (d1, d2, d3, l21, l31, l32), sg, the fields with both index
    positions (E^i, E_i, B^i, B_i), rho, S_i, S^i and E^2 + B^2, all from
    :mod:`emsource.kernels.electromagnetic`.
    """
    one = half + half
    d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
    sg = sqrt_determinant(d1, d2, d3)
    fields = fields_both_indices(FORM_CONTRAVARIANT, gxx, gxy, gxz, gyy, gyz, gzz,
                                 d1, d2, d3, l21, l31, l32, ex, ey, ez, bx, by, bz, one)
    (rho, sx, sy, sz, _sxx, _sxy, _sxz, _syy, _syz, _szz,
     energy2) = projections(gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half)
    ux, uy, uz = momentum_upper(sg, fields, coef)
    exu, eyu, ezu, exl, eyl, ezl, bxu, byu, bzu, bxl, byl, bzl = fields
    return (d1, d2, d3, l21, l31, l32, sg, exu, eyu, ezu, exl, eyl, ezl, bxu, byu, bzu,
            bxl, byl, bzl, rho, sx, sy, sz, ux, uy, uz, energy2)


@point_function
def _densities(g, g0, g1, g2, g3, g4, g5, e, b, i, j, k, coef, half):
    """sg rho and sg S_j at one point of the level (g, e, b): the conserved densities.

    ``g0..g5`` are the six component indices of the metric (xx, xy, xz, yy, yz, zz) in ``g``.
    """
    point = _contravariant_point(
        g[g0, i, j, k], g[g1, i, j, k], g[g2, i, j, k], g[g3, i, j, k], g[g4, i, j, k],
        g[g5, i, j, k], e[0, i, j, k], e[1, i, j, k], e[2, i, j, k], b[0, i, j, k], b[1, i, j, k],
        b[2, i, j, k], coef, half)
    sg = point[6]
    return sg * point[19], sg * point[20], sg * point[21], sg * point[22]


@point_function
def _flux_point(alpha, beta, gamma, c0, c1, c2, c3, c4, c5, E, B, i, j, k, coef, half, work):
    """Writes F^i and M^i_j at point (i, j, k) to rows 0..11 of ``work`` and returns the point
    values the time terms need: the metric factors, sg, E^i, E_i, B^i, B_i, rho and S_i."""
    (d1, d2, d3, l21, l31, l32, sg, ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl,
     rho, sx, sy, sz, ux, uy, uz, energy2) = _contravariant_point(
        gamma[c0, i, j, k], gamma[c1, i, j, k], gamma[c2, i, j, k], gamma[c3, i, j, k],
        gamma[c4, i, j, k], gamma[c5, i, j, k], E[0, i, j, k], E[1, i, j, k], E[2, i, j, k],
        B[0, i, j, k], B[1, i, j, k], B[2, i, j, k], coef, half)
    fields = (ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl)
    (f0, f1, f2, m0, m1, m2, m3, m4, m5, m6, m7, m8) = energy_momentum_fluxes(
        alpha[0, i, j, k], beta[0, i, j, k], beta[1, i, j, k], beta[2, i, j, k],
        sg, rho, sx, sy, sz, ux, uy, uz, fields, energy2, coef, half)
    work[0, i, j, k] = f0
    work[1, i, j, k] = f1
    work[2, i, j, k] = f2
    work[3, i, j, k] = m0
    work[4, i, j, k] = m1
    work[5, i, j, k] = m2
    work[6, i, j, k] = m3
    work[7, i, j, k] = m4
    work[8, i, j, k] = m5
    work[9, i, j, k] = m6
    work[10, i, j, k] = m7
    work[11, i, j, k] = m8
    return (d1, d2, d3, l21, l31, l32, sg, ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl,
            rho, sx, sy, sz)


@grid_kernel
def fluxes_and_rates(alpha, beta, gamma, gidx, E, B, rate_mode,
                     g_a, gidx_a, e_a, b_a, g_b, gidx_b, e_b, b_b, inv_2dt, coef, half, work):
    """Fluxes F^i, M^i_j and the time terms (see module docstring) at every grid point.

    ``rate_mode`` 0: densities; 1: (D(level b) - D(level a)) * inv_2dt with level a = t - dt,
    level b = t + dt; 2: d_t D from d_t gamma = g_a, d_t E = e_a, d_t B = b_a (level b unused).

    Loop shape: per grid column, in mode 2 one loop over k writes the fluxes and the rates from
    one evaluation of the point (its metric factorisation holds most of the divisions and the
    square root, the costliest instructions of the pass); in modes 0 and 1 one loop writes the
    fluxes and the densities, and for mode 1 a second loop overwrites rows 12..15 with the
    differences of the two levels' densities. The mode is branched on per column, outside the
    loops, so each loop is branch-free, and with a C-ordered ``work`` they vectorise along z
    (the machine code shows packed arithmetic; one loop with the mode branch inside, writing a
    padded work array, ran scalar and 2x slower on 128^3, measured). Component indices are
    read into scalars before the loops.
    """
    nx = alpha.shape[1]
    ny = alpha.shape[2]
    nz = alpha.shape[3]
    one = half + half
    two = one + one
    c0 = gidx[0]
    c1 = gidx[1]
    c2 = gidx[2]
    c3 = gidx[3]
    c4 = gidx[4]
    c5 = gidx[5]
    a0 = gidx_a[0]
    a1 = gidx_a[1]
    a2 = gidx_a[2]
    a3 = gidx_a[3]
    a4 = gidx_a[4]
    a5 = gidx_a[5]
    b0 = gidx_b[0]
    b1 = gidx_b[1]
    b2 = gidx_b[2]
    b3 = gidx_b[3]
    b4 = gidx_b[4]
    b5 = gidx_b[5]
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        if rate_mode == 2:
            # One loop: the rates need the point values the fluxes were computed from, so the
            # point (factorisation, divisions, square root) is computed once, not twice.
            for k in range(nz):
                (d1, d2, d3, l21, l31, l32, sg, ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl,
                 bzl, rho, sx, sy, sz) = _flux_point(alpha, beta, gamma, c0, c1, c2, c3, c4, c5,
                                                     E, B, i, j, k, coef, half, work)
                ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
                det = sg * sg
                hxx = g_a[a0, i, j, k]
                hxy = g_a[a1, i, j, k]
                hxz = g_a[a2, i, j, k]
                hyy = g_a[a3, i, j, k]
                hyz = g_a[a4, i, j, k]
                hzz = g_a[a5, i, j, k]
                fx = e_a[0, i, j, k]
                fy = e_a[1, i, j, k]
                fz = e_a[2, i, j, k]
                cx = b_a[0, i, j, k]
                cy = b_a[1, i, j, k]
                cz = b_a[2, i, j, k]
                # d_t ln det gamma = gamma^ij d_t gamma_ij (Jacobi's formula).
                dlndet = (ixx * hxx + iyy * hyy + izz * hzz
                          + two * (ixy * hxy + ixz * hxz + iyz * hyz))
                quad = (hxx * (ex * ex + bx * bx) + hyy * (ey * ey + by * by)
                        + hzz * (ez * ez + bz * bz)
                        + two * (hxy * (ex * ey + bx * by) + hxz * (ex * ez + bx * bz)
                                 + hyz * (ey * ez + by * bz)))
                drho = coef * (half * quad + exl * fx + eyl * fy + ezl * fz
                               + bxl * cx + byl * cy + bzl * cz)
                work[12, i, j, k] = sg * (half * dlndet * rho + drho)
                # sg S_j = coef det [jkl] E^k B^l.
                cdet = coef * det
                work[13, i, j, k] = (dlndet * sg * sx
                                     + cdet * (fy * bz - fz * by + ey * cz - ez * cy))
                work[14, i, j, k] = (dlndet * sg * sy
                                     + cdet * (fz * bx - fx * bz + ez * cx - ex * cz))
                work[15, i, j, k] = (dlndet * sg * sz
                                     + cdet * (fx * by - fy * bx + ex * cy - ey * cx))
            continue
        for k in range(nz):
            (d1, d2, d3, l21, l31, l32, sg, ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl,
             bzl, rho, sx, sy, sz) = _flux_point(alpha, beta, gamma, c0, c1, c2, c3, c4, c5,
                                                 E, B, i, j, k, coef, half, work)
            work[12, i, j, k] = sg * rho
            work[13, i, j, k] = sg * sx
            work[14, i, j, k] = sg * sy
            work[15, i, j, k] = sg * sz
        if rate_mode == 1:
            for k in range(nz):
                da0, da1, da2, da3 = _densities(g_a, a0, a1, a2, a3, a4, a5, e_a, b_a, i, j, k,
                                                coef, half)
                db0, db1, db2, db3 = _densities(g_b, b0, b1, b2, b3, b4, b5, e_b, b_b, i, j, k,
                                                coef, half)
                work[12, i, j, k] = (db0 - da0) * inv_2dt
                work[13, i, j, k] = (db1 - da1) * inv_2dt
                work[14, i, j, k] = (db2 - da2) * inv_2dt
                work[15, i, j, k] = (db3 - da3) * inv_2dt


@point_function
def _max3(a, b, c):
    m = a if a > b else b
    return m if m > c else c


@point_function
def _momentum_terms(q, sg, a, coef, half, energy2, rho, rho_e, e_low, lorentz_b, s_low, fields,
                    inverse, dt_m, der, k):
    """Residual, largest term and source of momentum equation q at row k of ``der``.

    sg [(alpha/2) S^ik d_q gamma_ik + S_i d_q beta^i - rho d_q alpha
        - alpha (rho_e E_q + epsilon_qkl j^k B^l)],
    S^ik dg_ik = coef (-E^i E^k dg_ik - B^i B^k dg_ik + 1/2 (E^2 + B^2) gamma^ik dg_ik).
    Derivatives come from the rows of ``der`` (see :func:`residuals`).
    """
    two = half * 4
    ex, ey, ez, bx, by, bz = fields
    ixx, ixy, ixz, iyy, iyz, izz = inverse
    sx, sy, sz = s_low
    g0 = _D_GAMMA + 6 * q
    hxx = der[g0, k]
    hxy = der[g0 + 1, k]
    hxz = der[g0 + 2, k]
    hyy = der[g0 + 3, k]
    hyz = der[g0 + 4, k]
    hzz = der[g0 + 5, k]
    b0 = _D_BETA + 3 * q
    divergence = der[_DIVERGENCE + 1 + q, k]
    trace_h = ixx * hxx + iyy * hyy + izz * hzz + two * (ixy * hxy + ixz * hxz + iyz * hyz)
    heb = (hxx * (ex * ex + bx * bx) + hyy * (ey * ey + by * by) + hzz * (ez * ez + bz * bz)
           + two * (hxy * (ex * ey + bx * by) + hxz * (ex * ez + bx * bz) + hyz * (ey * ez + by * bz)))
    metric_q = sg * half * a * coef * (half * energy2 * trace_h - heb)
    shift_q = sg * (sx * der[b0, k] + sy * der[b0 + 1, k] + sz * der[b0 + 2, k])
    lapse_q = -sg * rho * der[_D_ALPHA + q, k]
    charge_q = -sg * a * rho_e * e_low
    current_q = -sg * a * lorentz_b
    src_q = metric_q + shift_q + lapse_q + charge_q + current_q
    big = _max3(_max3(abs(dt_m), der[_FLUX_TERM + 1 + q, k], abs(metric_q)),
                _max3(abs(shift_q), abs(lapse_q), abs(charge_q)), abs(current_q))
    return dt_m + divergence - src_q, big, src_q


#: Points per strip of pass 2 (literals, so that LLVM sees the buffer's row stride as a
#: constant). A strip runs along the array's last axis, through several grid columns when the
#: wrapper hands the kernel an x-plane as one line (see :func:`residuals`): each strip costs a
#: fixed time besides its points (measured, one thread, 40 x 40 x 516 grid, order 4: 80 / 60 /
#: 55 ns per point with strips of 128 / 256 / 512). The rows hold one cache line more than a
#: strip, so that row r + 4 does not start in the same L1 set as row r (1-3 %, measured).
_STRIP = 512
_ROW_LENGTH = 520

#: Rows of the pass-2 buffer: the flux divergence of the energy and the three momentum
#: equations, the largest |d_a F^a| of each, d_q alpha, d_q gamma_c (6 per q), d_q beta^c
#: (3 per q); then the residuals, scales and sources (4 each).
_DIVERGENCE = 0
_FLUX_TERM = 4
_D_ALPHA = 8
_D_GAMMA = 11
_D_BETA = 29
_RESIDUAL = 38
_SCALE = 42
_SOURCE = 46
_ROWS = 50


@grid_kernel
def residuals(alpha, beta, gamma, gidx, K, kidx, E, B, charge, current, work,
              weights, inv_hx, inv_hy, inv_hz, steps, radius0, radius1, radius2, coef, half,
              residual, scale, sources, write_sources, partials, rows, row_length):
    """Residuals of the energy (component 0) and momentum (1..3) equations.

    Array axes and grid directions. The grid's points are held as (n0, rows, row_length) along
    three array axes; for (ncomp, nx, ny, nz) arrays these are x, y, z, for data stored z, y, x
    seen with the axes reversed (the wrapper's choice) z, y, x. The arrays are either
    (ncomp, n0, rows, row_length) or, when the wrapper can see the last two axes of every array
    as one (C-ordered along them), (ncomp, n0, 1, rows * row_length): each plane is then one
    line, and a strip runs through several rows (neighbours along axis 1 are ``row_length``
    apart along the line). ``radius0``, ``radius1``, ``radius2`` are the stencil radii along
    the three array axes (0 along an axis without extent). The derivatives are by grid
    direction: ``steps`` (3, 3) holds per direction x, y, z the array index step (i, j, k) to
    the next point (all 0 for a direction without extent), and ``inv_hx``.. the inverse
    spacings.

    ``partials`` (n0 * rows, 16) receives per row of ``row_length`` points the sums of squares
    of the residuals (0..3) and of the scales (4..7) and the largest |residual| (8..11) and
    scale (12..15) over the row's interior points, so that norms need no whole-grid
    temporaries (a max reduction across prange would be slow: measured in the source kernels).
    NaN residuals make the sums NaN and are skipped by the maxima.

    ``residual`` and ``scale`` are (4, ...) like the inputs; points within ``radius0``,
    ``radius1``, ``radius2`` of a face get NaN. ``scale`` is the largest absolute value among
    the terms of each equation at the point (time term, each d_i of the flux, each source
    term). With ``write_sources`` the right-hand sides are written to ``sources`` (4, ...) too
    (else ``sources`` is not touched).

    Each line is done in strips of up to ``_STRIP`` points, from the first interior point of
    its first interior row to the last of its last, with one (``_ROWS``, ``_ROW_LENGTH``)
    buffer on the thread's stack (:func:`emsource.kernels.strip_buffers.strip_buffer`; no
    whole-grid temporary). Per strip:

    1. the derivatives go to the buffer: the three first derivatives of each of alpha,
       gamma_c, beta^c in one loop (:func:`emsource.kernels.stencils.d1_directions_column`),
       and per conservation law the divergence of its flux and the largest of its three terms
       in one loop (:func:`emsource.kernels.stencils.divergence_column`), one call site per
       kind (Numba inlines at the IR level: one inlined stencil per derivative took over a
       minute to compile, measured). Rows: see ``_DIVERGENCE`` .. ``_D_BETA``;
    2. one loop over the strip reads the derivatives from the buffer and the point values
       from the inputs and writes residual, scale and source terms to the buffer;
    3. short loops copy those rows to the outputs and reduce each row's interior part into
       ``partials``.

    The points of a strip between two rows' interiors (within ``radius2`` of the faces) are
    computed with stencils that reach into the neighbouring row and are then overwritten with
    NaN, like the rest of the boundary layer.

    Why this shape (measured, README "Speed"): LLVM vectorises a loop only if it can prove, or
    check at run time with at most 8 comparisons, that its stores do not overlap its loads; a
    stack buffer overlaps no input, so loops that read many input rows and write only the
    buffer vectorise without checks. Strips through whole planes rather than single rows: the
    fixed cost per strip (loop set-up, the start of some 200 streams of neighbouring rows) is
    shared by 4x more points at 128^3. Indices along a line are unsigned for the reason given
    in ``d1_column``.
    """
    u = np.uint64
    n0 = alpha.shape[1]
    lines_per_plane = alpha.shape[2]
    # One line per plane (rows of row_length points) or one per row.
    flat = lines_per_plane != rows
    rows_per_line = rows if flat else 1
    nz = row_length
    one = half + half
    two = one + one
    zero = one - one
    nan = zero / zero
    order_radius = weights.shape[0]
    step_x = (steps[0, 0], steps[0, 1], u(steps[0, 2]))
    step_y = (steps[1, 0], steps[1, 1], u(steps[1, 2]))
    step_z = (steps[2, 0], steps[2, 1], u(steps[2, 2]))
    g0 = gidx[0]
    g1 = gidx[1]
    g2 = gidx[2]
    g3 = gidx[3]
    g4 = gidx[4]
    g5 = gidx[5]
    q0 = kidx[0]
    q1 = kidx[1]
    q2 = kidx[2]
    q3 = kidx[3]
    q4 = kidx[4]
    q5 = kidx[5]
    for line in prange(n0 * lines_per_plane):
        i = line // lines_per_plane
        j = line - i * lines_per_plane
        first_row = 0 if flat else j
        column0 = i * rows + first_row
        for r in range(rows_per_line):
            for c in range(8):
                partials[column0 + r, c] = zero
                partials[column0 + r, 8 + c] = zero
        # The line's interior rows lo..hi-1 (relative to first_row).
        lo = radius1 - first_row if radius1 > first_row else 0
        hi = rows - radius1 - first_row
        hi = hi if hi < rows_per_line else rows_per_line
        if (i >= radius0) & (i < n0 - radius0) & (lo < hi):
            buf = strip_buffer(_ROWS, _ROW_LENGTH, work)
            for start in range(lo * nz + radius2, hi * nz - radius2, _STRIP):
                count = min(_STRIP, hi * nz - radius2 - start)
                base = u(start)
                d1_directions_column(alpha, 0, i, j, start, count, order_radius, step_x, step_y,
                                     step_z, weights, inv_hx, inv_hy, inv_hz, buf, _D_ALPHA,
                                     _D_ALPHA + 1, _D_ALPHA + 2)
                for c in range(6):
                    d1_directions_column(gamma, gidx[c], i, j, start, count, order_radius,
                                         step_x, step_y, step_z, weights, inv_hx, inv_hy, inv_hz,
                                         buf, _D_GAMMA + c, _D_GAMMA + 6 + c, _D_GAMMA + 12 + c)
                for c in range(3):
                    d1_directions_column(beta, c, i, j, start, count, order_radius, step_x,
                                         step_y, step_z, weights, inv_hx, inv_hy, inv_hz, buf,
                                         _D_BETA + c, _D_BETA + 3 + c, _D_BETA + 6 + c)
                for q in range(4):
                    # F^a at work rows 0..2, M^a_q at 3 + 3a + q.
                    cx = 0 if q == 0 else 2 + q
                    cy = 1 if q == 0 else 5 + q
                    cz = 2 if q == 0 else 8 + q
                    divergence_column(work, cx, cy, cz, i, j, start, count, order_radius, step_x,
                                      step_y, step_z, weights, inv_hx, inv_hy, inv_hz, buf,
                                      _DIVERGENCE + q, _FLUX_TERM + q)
                for n in range(count):
                    k = base + u(n)
                    (d1, d2, d3, l21, l31, l32, sg, ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl,
                     byl, bzl, rho, sx, sy, sz, ux, uy, uz, energy2) = _contravariant_point(
                        gamma[g0, i, j, k], gamma[g1, i, j, k], gamma[g2, i, j, k],
                        gamma[g3, i, j, k], gamma[g4, i, j, k], gamma[g5, i, j, k],
                        E[0, i, j, k], E[1, i, j, k], E[2, i, j, k],
                        B[0, i, j, k], B[1, i, j, k], B[2, i, j, k], coef, half)
                    ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
                    a = alpha[0, i, j, k]
                    jx = current[0, i, j, k]
                    jy = current[1, i, j, k]
                    jz = current[2, i, j, k]
                    rho_e = charge[0, i, j, k]
                    # Energy: sg [alpha K_ij S^ij - S^i d_i alpha - alpha j^i E_i], with
                    # K_ij S^ij = coef (-K_ij E^i E^j - K_ij B^i B^j + 1/2 K (E^2 + B^2)).
                    kxx = K[q0, i, j, k]
                    kxy = K[q1, i, j, k]
                    kxz = K[q2, i, j, k]
                    kyy = K[q3, i, j, k]
                    kyz = K[q4, i, j, k]
                    kzz = K[q5, i, j, k]
                    trace_k = (ixx * kxx + iyy * kyy + izz * kzz
                               + two * (ixy * kxy + ixz * kxz + iyz * kyz))
                    kee = (kxx * ex * ex + kyy * ey * ey + kzz * ez * ez
                           + two * (kxy * ex * ey + kxz * ex * ez + kyz * ey * ez))
                    kbb = (kxx * bx * bx + kyy * by * by + kzz * bz * bz
                           + two * (kxy * bx * by + kxz * bx * bz + kyz * by * bz))
                    curvature = sg * a * coef * (half * trace_k * energy2 - kee - kbb)
                    lapse_e = -sg * (ux * buf[_D_ALPHA, n] + uy * buf[_D_ALPHA + 1, n]
                                     + uz * buf[_D_ALPHA + 2, n])
                    work_e = -sg * a * (jx * exl + jy * eyl + jz * ezl)
                    dt_e = work[12, i, j, k]
                    src_e = curvature + lapse_e + work_e
                    buf[_RESIDUAL, n] = dt_e + buf[_DIVERGENCE, n] - src_e
                    buf[_SCALE, n] = _max3(_max3(abs(dt_e), buf[_FLUX_TERM, n], abs(curvature)),
                                           abs(lapse_e), abs(work_e))
                    buf[_SOURCE, n] = src_e
                    # Momentum: epsilon_qkl j^k B^l = sg [qkl] j^k B^l.
                    fields = (ex, ey, ez, bx, by, bz)
                    inverse = (ixx, ixy, ixz, iyy, iyz, izz)
                    s_low = (sx, sy, sz)
                    r1, s1, src1 = _momentum_terms(0, sg, a, coef, half, energy2, rho, rho_e, exl,
                                                   sg * (jy * bz - jz * by), s_low, fields,
                                                   inverse, work[13, i, j, k], buf, n)
                    r2, s2, src2 = _momentum_terms(1, sg, a, coef, half, energy2, rho, rho_e, eyl,
                                                   sg * (jz * bx - jx * bz), s_low, fields,
                                                   inverse, work[14, i, j, k], buf, n)
                    r3, s3, src3 = _momentum_terms(2, sg, a, coef, half, energy2, rho, rho_e, ezl,
                                                   sg * (jx * by - jy * bx), s_low, fields,
                                                   inverse, work[15, i, j, k], buf, n)
                    buf[_RESIDUAL + 1, n] = r1
                    buf[_RESIDUAL + 2, n] = r2
                    buf[_RESIDUAL + 3, n] = r3
                    buf[_SCALE + 1, n] = s1
                    buf[_SCALE + 2, n] = s2
                    buf[_SCALE + 3, n] = s3
                    buf[_SOURCE + 1, n] = src1
                    buf[_SOURCE + 2, n] = src2
                    buf[_SOURCE + 3, n] = src3
                for c in range(4):
                    for n in range(count):
                        residual[c, i, j, base + u(n)] = buf[_RESIDUAL + c, n]
                    for n in range(count):
                        scale[c, i, j, base + u(n)] = buf[_SCALE + c, n]
                if write_sources:
                    for c in range(4):
                        for n in range(count):
                            sources[c, i, j, base + u(n)] = buf[_SOURCE + c, n]
                # Norm sums and maxima of each row's interior part of the strip, from the
                # buffer rows just written (still in cache).
                for r in range(start // nz, (start + count - 1) // nz + 1):
                    a0 = r * nz + radius2 - start if r * nz + radius2 > start else 0
                    a1 = r * nz + nz - radius2 - start
                    a1 = a1 if a1 < count else count
                    column = column0 + r
                    for c in range(4):
                        sum_r = zero
                        sum_s = zero
                        max_r = partials[column, 8 + c]
                        max_s = partials[column, 12 + c]
                        for n in range(a0, a1):
                            v = buf[_RESIDUAL + c, n]
                            w = buf[_SCALE + c, n]
                            sum_r += v * v
                            sum_s += w * w
                            max_r = abs(v) if abs(v) > max_r else max_r
                            max_s = w if w > max_s else max_s
                        partials[column, c] += sum_r
                        partials[column, 4 + c] += sum_s
                        partials[column, 8 + c] = max_r
                        partials[column, 12 + c] = max_s
        # NaN on the boundary layer, after the strips: in one-line-per-plane mode it overwrites
        # the points between two rows' interiors that the strips computed.
        for r in range(rows_per_line):
            row = first_row + r
            edge = ((i < radius0) | (i >= n0 - radius0) | (row < radius1)
                    | (row >= rows - radius1))
            low = nz if edge else radius2
            high = nz if edge else nz - radius2
            offset = r * nz
            for c in range(4):
                for k in range(offset, offset + low):
                    residual[c, i, j, k] = nan
                    scale[c, i, j, k] = nan
                for k in range(offset + high, offset + nz):
                    residual[c, i, j, k] = nan
                    scale[c, i, j, k] = nan
                if write_sources:
                    for k in range(offset, offset + low):
                        sources[c, i, j, k] = nan
                    for k in range(offset + high, offset + nz):
                        sources[c, i, j, k] = nan
