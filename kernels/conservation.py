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
Metric and curvature are read through six component indices (``gidx``) so that a packed (6, ...)
or a full (3, 3, ...) block seen as (9, ...) serve one compiled kernel. Constants arrive in the
data's dtype.
"""

from __future__ import annotations

import math

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function


@point_function
def _inverse_metric(gxx, gxy, gxz, gyy, gyz, gzz, one):
    """Inverse metric gamma^ij (packed) and det gamma, by cofactors."""
    cxx = gyy * gzz - gyz * gyz
    cxy = gxz * gyz - gxy * gzz
    cxz = gxy * gyz - gxz * gyy
    cyy = gxx * gzz - gxz * gxz
    cyz = gxy * gxz - gxx * gyz
    czz = gxx * gyy - gxy * gxy
    det = gxx * cxx + gxy * cxy + gxz * cxz
    inv_det = one / det
    return cxx * inv_det, cxy * inv_det, cxz * inv_det, cyy * inv_det, cyz * inv_det, czz * inv_det, det


@point_function
def _lower(gxx, gxy, gxz, gyy, gyz, gzz, vx, vy, vz):
    return (gxx * vx + gxy * vy + gxz * vz,
            gxy * vx + gyy * vy + gyz * vz,
            gxz * vx + gyz * vy + gzz * vz)


@point_function
def _densities(g, gidx, e, b, i, j, k, coef, half):
    """sg rho and sg S_j at one point of the level (g, e, b): the conserved densities."""
    one = half + half
    gxx = g[gidx[0], i, j, k]
    gxy = g[gidx[1], i, j, k]
    gxz = g[gidx[2], i, j, k]
    gyy = g[gidx[3], i, j, k]
    gyz = g[gidx[4], i, j, k]
    gzz = g[gidx[5], i, j, k]
    _ixx, _ixy, _ixz, _iyy, _iyz, _izz, det = _inverse_metric(gxx, gxy, gxz, gyy, gyz, gzz, one)
    ex = e[0, i, j, k]
    ey = e[1, i, j, k]
    ez = e[2, i, j, k]
    bx = b[0, i, j, k]
    by = b[1, i, j, k]
    bz = b[2, i, j, k]
    exl, eyl, ezl = _lower(gxx, gxy, gxz, gyy, gyz, gzz, ex, ey, ez)
    bxl, byl, bzl = _lower(gxx, gxy, gxz, gyy, gyz, gzz, bx, by, bz)
    sg = math.sqrt(det)
    dens = sg * coef * half * (ex * exl + ey * eyl + ez * ezl + bx * bxl + by * byl + bz * bzl)
    # sg S_j = coef det [jkl] E^k B^l (epsilon_jkl = sg [jkl]).
    c = coef * det
    return (dens, c * (ey * bz - ez * by), c * (ez * bx - ex * bz), c * (ex * by - ey * bx))


@grid_kernel
def fluxes_and_rates(alpha, beta, gamma, gidx, E, B, rate_mode,
                     g_a, gidx_a, e_a, b_a, g_b, gidx_b, e_b, b_b, inv_2dt, coef, half, work):
    """Fluxes F^i, M^i_j and the time terms (see module docstring) at every grid point.

    ``rate_mode`` 0: densities; 1: (D(level b) - D(level a)) * inv_2dt with level a = t - dt,
    level b = t + dt; 2: d_t D from d_t gamma = g_a, d_t E = e_a, d_t B = b_a (level b unused).
    """
    nx = alpha.shape[1]
    ny = alpha.shape[2]
    nz = alpha.shape[3]
    one = half + half
    two = one + one
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        for k in range(nz):
            gxx = gamma[gidx[0], i, j, k]
            gxy = gamma[gidx[1], i, j, k]
            gxz = gamma[gidx[2], i, j, k]
            gyy = gamma[gidx[3], i, j, k]
            gyz = gamma[gidx[4], i, j, k]
            gzz = gamma[gidx[5], i, j, k]
            ixx, ixy, ixz, iyy, iyz, izz, det = _inverse_metric(gxx, gxy, gxz, gyy, gyz, gzz, one)
            sg = math.sqrt(det)
            ex = E[0, i, j, k]
            ey = E[1, i, j, k]
            ez = E[2, i, j, k]
            bx = B[0, i, j, k]
            by = B[1, i, j, k]
            bz = B[2, i, j, k]
            exl, eyl, ezl = _lower(gxx, gxy, gxz, gyy, gyz, gzz, ex, ey, ez)
            bxl, byl, bzl = _lower(gxx, gxy, gxz, gyy, gyz, gzz, bx, by, bz)
            energy2 = ex * exl + ey * eyl + ez * ezl + bx * bxl + by * byl + bz * bzl
            rho = coef * half * energy2
            pressure = half * energy2
            # S_j = coef sg [jkl] E^k B^l; S^i = coef [ikl] E_k B_l / sg.
            csg = coef * sg
            sx = csg * (ey * bz - ez * by)
            sy = csg * (ez * bx - ex * bz)
            sz = csg * (ex * by - ey * bx)
            cinv = coef / sg
            ux = cinv * (eyl * bzl - ezl * byl)
            uy = cinv * (ezl * bxl - exl * bzl)
            uz = cinv * (exl * byl - eyl * bxl)
            a = alpha[0, i, j, k]
            b1 = beta[0, i, j, k]
            b2 = beta[1, i, j, k]
            b3 = beta[2, i, j, k]
            work[0, i, j, k] = sg * (a * ux - b1 * rho)
            work[1, i, j, k] = sg * (a * uy - b2 * rho)
            work[2, i, j, k] = sg * (a * uz - b3 * rho)
            # S^i_j = coef (-E^i E_j - B^i B_j + 1/2 delta^i_j (E^2 + B^2)).
            asg = a * sg
            work[3, i, j, k] = asg * coef * (pressure - ex * exl - bx * bxl) - sg * b1 * sx
            work[4, i, j, k] = asg * coef * (-ex * eyl - bx * byl) - sg * b1 * sy
            work[5, i, j, k] = asg * coef * (-ex * ezl - bx * bzl) - sg * b1 * sz
            work[6, i, j, k] = asg * coef * (-ey * exl - by * bxl) - sg * b2 * sx
            work[7, i, j, k] = asg * coef * (pressure - ey * eyl - by * byl) - sg * b2 * sy
            work[8, i, j, k] = asg * coef * (-ey * ezl - by * bzl) - sg * b2 * sz
            work[9, i, j, k] = asg * coef * (-ez * exl - bz * bxl) - sg * b3 * sx
            work[10, i, j, k] = asg * coef * (-ez * eyl - bz * byl) - sg * b3 * sy
            work[11, i, j, k] = asg * coef * (pressure - ez * ezl - bz * bzl) - sg * b3 * sz
            if rate_mode == 0:
                work[12, i, j, k] = sg * rho
                work[13, i, j, k] = sg * sx
                work[14, i, j, k] = sg * sy
                work[15, i, j, k] = sg * sz
            elif rate_mode == 1:
                da0, da1, da2, da3 = _densities(g_a, gidx_a, e_a, b_a, i, j, k, coef, half)
                db0, db1, db2, db3 = _densities(g_b, gidx_b, e_b, b_b, i, j, k, coef, half)
                work[12, i, j, k] = (db0 - da0) * inv_2dt
                work[13, i, j, k] = (db1 - da1) * inv_2dt
                work[14, i, j, k] = (db2 - da2) * inv_2dt
                work[15, i, j, k] = (db3 - da3) * inv_2dt
            else:
                hxx = g_a[gidx_a[0], i, j, k]
                hxy = g_a[gidx_a[1], i, j, k]
                hxz = g_a[gidx_a[2], i, j, k]
                hyy = g_a[gidx_a[3], i, j, k]
                hyz = g_a[gidx_a[4], i, j, k]
                hzz = g_a[gidx_a[5], i, j, k]
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


@point_function
def _column_derivative(f, c, i, j, axis, radius, weights, inv_h, zero, out, row, k0, k1):
    """out[row, k0:k1] = d f[c, i, j, k] / d x^axis for the column (i, j), or 0 if radius is 0.

    The centred sum of :func:`emsource.kernels.stencils.d1` with its weights
    (:func:`~emsource.kernels.stencils.first_derivative_weights`), written with the stencil
    radius resolved outside the loop over k (one pass over contiguous k) and the axis as an
    index offset instead of d1's branches, so that one call site in a loop serves every axis and
    component (d1 itself, inlined once per derivative, compiled for over a minute).
    """
    if radius == 0:
        for k in range(k0, k1):
            out[row, k] = zero
    else:
        oi = 1 if axis == 0 else 0
        oj = 1 if axis == 1 else 0
        ok = 1 if axis == 2 else 0
        w1 = weights[0] * inv_h
        if radius == 1:
            for k in range(k0, k1):
                out[row, k] = w1 * (f[c, i + oi, j + oj, k + ok] - f[c, i - oi, j - oj, k - ok])
        elif radius == 2:
            w2 = weights[1] * inv_h
            for k in range(k0, k1):
                out[row, k] = (w1 * (f[c, i + oi, j + oj, k + ok] - f[c, i - oi, j - oj, k - ok])
                               + w2 * (f[c, i + 2 * oi, j + 2 * oj, k + 2 * ok]
                                       - f[c, i - 2 * oi, j - 2 * oj, k - 2 * ok]))
        else:
            w2 = weights[1] * inv_h
            w3 = weights[2] * inv_h
            for k in range(k0, k1):
                out[row, k] = (w1 * (f[c, i + oi, j + oj, k + ok] - f[c, i - oi, j - oj, k - ok])
                               + w2 * (f[c, i + 2 * oi, j + 2 * oj, k + 2 * ok]
                                       - f[c, i - 2 * oi, j - 2 * oj, k - 2 * ok])
                               + w3 * (f[c, i + 3 * oi, j + 3 * oj, k + 3 * ok]
                                       - f[c, i - 3 * oi, j - 3 * oj, k - 3 * ok]))


@point_function
def _max3(a, b, c):
    m = a if a > b else b
    return m if m > c else c


@point_function
def _momentum_terms(q, sg, a, coef, half, energy2, rho, rho_e, e_low, lorentz_b, s_low, fields,
                    inverse, dt_m, der, k):
    """Residual, largest term and source of momentum equation q at point k of the column.

    sg [(alpha/2) S^ik d_q gamma_ik + S_i d_q beta^i - rho d_q alpha
        - alpha (rho_e E_q + epsilon_qkl j^k B^l)],
    S^ik dg_ik = coef (-E^i E^k dg_ik - B^i B^k dg_ik + 1/2 (E^2 + B^2) gamma^ik dg_ik).
    Derivatives come from the rows of ``der`` (see :func:`residuals`).
    """
    two = half * 4
    ex, ey, ez, bx, by, bz = fields
    ixx, ixy, ixz, iyy, iyz, izz = inverse
    sx, sy, sz = s_low
    g0 = 15 + 6 * q
    hxx = der[g0, k]
    hxy = der[g0 + 1, k]
    hxz = der[g0 + 2, k]
    hyy = der[g0 + 3, k]
    hyz = der[g0 + 4, k]
    hzz = der[g0 + 5, k]
    b0 = 33 + 3 * q
    div_a = der[3 + q, k]
    div_b = der[6 + q, k]
    div_c = der[9 + q, k]
    trace_h = ixx * hxx + iyy * hyy + izz * hzz + two * (ixy * hxy + ixz * hxz + iyz * hyz)
    heb = (hxx * (ex * ex + bx * bx) + hyy * (ey * ey + by * by) + hzz * (ez * ez + bz * bz)
           + two * (hxy * (ex * ey + bx * by) + hxz * (ex * ez + bx * bz) + hyz * (ey * ez + by * bz)))
    metric_q = sg * half * a * coef * (half * energy2 * trace_h - heb)
    shift_q = sg * (sx * der[b0, k] + sy * der[b0 + 1, k] + sz * der[b0 + 2, k])
    lapse_q = -sg * rho * der[12 + q, k]
    charge_q = -sg * a * rho_e * e_low
    current_q = -sg * a * lorentz_b
    src_q = metric_q + shift_q + lapse_q + charge_q + current_q
    big = _max3(_max3(abs(dt_m), abs(div_a), abs(div_b)),
                _max3(abs(div_c), abs(metric_q), abs(shift_q)),
                _max3(abs(lapse_q), abs(charge_q), abs(current_q)))
    return dt_m + (div_a + div_b + div_c) - src_q, big, src_q


@grid_kernel
def residuals(alpha, beta, gamma, gidx, K, kidx, E, B, charge, current, work,
              weights, inv_hx, inv_hy, inv_hz, rx, ry, rz, coef, half,
              residual, scale, sources, write_sources, partials):
    """Residuals of the energy (component 0) and momentum (1..3) equations.

    ``partials`` (nx * ny, 16) receives per grid column the sums of squares of the residuals
    (0..3) and of the scales (4..7) and the largest |residual| (8..11) and scale (12..15) over
    the column's interior points, so that norms need no whole-grid temporaries (a max
    reduction across prange would be slow: measured in the source kernels). NaN residuals make
    the sums NaN and are skipped by the maxima.

    ``residual`` and ``scale`` are (4, nx, ny, nz); points within ``rx``, ``ry``, ``rz`` of a face
    get NaN. ``scale`` is the largest absolute value among the terms of each equation at the
    point (time term, each d_i of the flux, each source term). With ``write_sources`` the right-
    hand sides are written to ``sources`` (4, nx, ny, nz) too (else ``sources`` is not touched).

    Per grid column (i, j) the 42 first derivatives the equations need are first written into a
    small (42, nz) buffer (it stays in cache; no whole-grid temporary), one call site of
    :func:`_column_derivative` per kind of derivative: Numba inlines at the IR level, and one
    inlined stencil per derivative (42 copies) took over a minute to compile (measured). Rows:
    0..2 d_a F^a, 3 + 3a + q d_a M^a_q, 12 + q d_q alpha, 15 + 6q + c d_q gamma_c,
    33 + 3q + c d_q beta^c.
    """
    nx = alpha.shape[1]
    ny = alpha.shape[2]
    nz = alpha.shape[3]
    one = half + half
    two = one + one
    zero = one - one
    nan = zero / zero
    radius = (rx, ry, rz)
    inv_hs = (inv_hx, inv_hy, inv_hz)
    k0 = rz
    k1 = nz - rz
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        edge = (i < rx) | (i >= nx - rx) | (j < ry) | (j >= ny - ry)
        for c in range(4):
            for k in range(nz):
                if edge | (k < k0) | (k >= k1):
                    residual[c, i, j, k] = nan
                    scale[c, i, j, k] = nan
                    if write_sources:
                        sources[c, i, j, k] = nan
        for c in range(16):
            partials[column, c] = zero
        if edge:
            continue
        q0 = zero
        q1 = zero
        q2 = zero
        q3 = zero
        p0 = zero
        p1 = zero
        p2 = zero
        p3 = zero
        m0 = zero
        m1 = zero
        m2 = zero
        m3 = zero
        n0 = zero
        n1 = zero
        n2 = zero
        n3 = zero
        der = np.empty((42, nz), dtype=work.dtype)
        for a in range(3):
            _column_derivative(work, a, i, j, a, radius[a], weights, inv_hs[a], zero, der, a, k0, k1)
        for a in range(3):
            for q in range(3):
                _column_derivative(work, 3 + 3 * a + q, i, j, a, radius[a], weights, inv_hs[a],
                                   zero, der, 3 + 3 * a + q, k0, k1)
        for q in range(3):
            _column_derivative(alpha, 0, i, j, q, radius[q], weights, inv_hs[q], zero, der,
                               12 + q, k0, k1)
        for q in range(3):
            for c in range(6):
                _column_derivative(gamma, gidx[c], i, j, q, radius[q], weights, inv_hs[q], zero,
                                   der, 15 + 6 * q + c, k0, k1)
        for q in range(3):
            for c in range(3):
                _column_derivative(beta, c, i, j, q, radius[q], weights, inv_hs[q], zero, der,
                                   33 + 3 * q + c, k0, k1)
        for k in range(k0, k1):
            gxx = gamma[gidx[0], i, j, k]
            gxy = gamma[gidx[1], i, j, k]
            gxz = gamma[gidx[2], i, j, k]
            gyy = gamma[gidx[3], i, j, k]
            gyz = gamma[gidx[4], i, j, k]
            gzz = gamma[gidx[5], i, j, k]
            ixx, ixy, ixz, iyy, iyz, izz, det = _inverse_metric(gxx, gxy, gxz, gyy, gyz, gzz, one)
            sg = math.sqrt(det)
            ex = E[0, i, j, k]
            ey = E[1, i, j, k]
            ez = E[2, i, j, k]
            bx = B[0, i, j, k]
            by = B[1, i, j, k]
            bz = B[2, i, j, k]
            exl, eyl, ezl = _lower(gxx, gxy, gxz, gyy, gyz, gzz, ex, ey, ez)
            bxl, byl, bzl = _lower(gxx, gxy, gxz, gyy, gyz, gzz, bx, by, bz)
            energy2 = ex * exl + ey * eyl + ez * ezl + bx * bxl + by * byl + bz * bzl
            rho = coef * half * energy2
            csg = coef * sg
            sx = csg * (ey * bz - ez * by)
            sy = csg * (ez * bx - ex * bz)
            sz = csg * (ex * by - ey * bx)
            cinv = coef / sg
            ux = cinv * (eyl * bzl - ezl * byl)
            uy = cinv * (ezl * bxl - exl * bzl)
            uz = cinv * (exl * byl - eyl * bxl)
            a = alpha[0, i, j, k]
            jx = current[0, i, j, k]
            jy = current[1, i, j, k]
            jz = current[2, i, j, k]
            rho_e = charge[0, i, j, k]
            # Energy: sg [alpha K_ij S^ij - S^i d_i alpha - alpha j^i E_i], with
            # K_ij S^ij = coef (-K_ij E^i E^j - K_ij B^i B^j + 1/2 K (E^2 + B^2)).
            kxx = K[kidx[0], i, j, k]
            kxy = K[kidx[1], i, j, k]
            kxz = K[kidx[2], i, j, k]
            kyy = K[kidx[3], i, j, k]
            kyz = K[kidx[4], i, j, k]
            kzz = K[kidx[5], i, j, k]
            trace_k = ixx * kxx + iyy * kyy + izz * kzz + two * (ixy * kxy + ixz * kxz + iyz * kyz)
            kee = (kxx * ex * ex + kyy * ey * ey + kzz * ez * ez
                   + two * (kxy * ex * ey + kxz * ex * ez + kyz * ey * ez))
            kbb = (kxx * bx * bx + kyy * by * by + kzz * bz * bz
                   + two * (kxy * bx * by + kxz * bx * bz + kyz * by * bz))
            curvature = sg * a * coef * (half * trace_k * energy2 - kee - kbb)
            da0 = der[12, k]
            da1 = der[13, k]
            da2 = der[14, k]
            lapse_e = -sg * (ux * da0 + uy * da1 + uz * da2)
            work_e = -sg * a * (jx * exl + jy * eyl + jz * ezl)
            dt_e = work[12, i, j, k]
            fe0 = der[0, k]
            fe1 = der[1, k]
            fe2 = der[2, k]
            src_e = curvature + lapse_e + work_e
            r0 = dt_e + (fe0 + fe1 + fe2) - src_e
            s0 = _max3(_max3(abs(dt_e), abs(fe0), abs(fe1)),
                       _max3(abs(fe2), abs(curvature), abs(lapse_e)), abs(work_e))
            residual[0, i, j, k] = r0
            scale[0, i, j, k] = s0
            # Momentum: epsilon_qkl j^k B^l = sg [qkl] j^k B^l.
            fields = (ex, ey, ez, bx, by, bz)
            inverse = (ixx, ixy, ixz, iyy, iyz, izz)
            s_low = (sx, sy, sz)
            r1, s1, src1 = _momentum_terms(0, sg, a, coef, half, energy2, rho, rho_e, exl,
                                           sg * (jy * bz - jz * by), s_low, fields, inverse,
                                           work[13, i, j, k], der, k)
            r2, s2, src2 = _momentum_terms(1, sg, a, coef, half, energy2, rho, rho_e, eyl,
                                           sg * (jz * bx - jx * bz), s_low, fields, inverse,
                                           work[14, i, j, k], der, k)
            r3, s3, src3 = _momentum_terms(2, sg, a, coef, half, energy2, rho, rho_e, ezl,
                                           sg * (jx * by - jy * bx), s_low, fields, inverse,
                                           work[15, i, j, k], der, k)
            residual[1, i, j, k] = r1
            residual[2, i, j, k] = r2
            residual[3, i, j, k] = r3
            scale[1, i, j, k] = s1
            scale[2, i, j, k] = s2
            scale[3, i, j, k] = s3
            if write_sources:
                sources[0, i, j, k] = src_e
                sources[1, i, j, k] = src1
                sources[2, i, j, k] = src2
                sources[3, i, j, k] = src3
            q0 += r0 * r0
            q1 += r1 * r1
            q2 += r2 * r2
            q3 += r3 * r3
            p0 += s0 * s0
            p1 += s1 * s1
            p2 += s2 * s2
            p3 += s3 * s3
            m0 = abs(r0) if abs(r0) > m0 else m0
            m1 = abs(r1) if abs(r1) > m1 else m1
            m2 = abs(r2) if abs(r2) > m2 else m2
            m3 = abs(r3) if abs(r3) > m3 else m3
            n0 = s0 if s0 > n0 else n0
            n1 = s1 if s1 > n1 else n1
            n2 = s2 if s2 > n2 else n2
            n3 = s3 if s3 > n3 else n3
        partials[column, 0] = q0
        partials[column, 1] = q1
        partials[column, 2] = q2
        partials[column, 3] = q3
        partials[column, 4] = p0
        partials[column, 5] = p1
        partials[column, 6] = p2
        partials[column, 7] = p3
        partials[column, 8] = m0
        partials[column, 9] = m1
        partials[column, 10] = m2
        partials[column, 11] = m3
        partials[column, 12] = n0
        partials[column, 13] = n1
        partials[column, 14] = n2
        partials[column, 15] = n3
