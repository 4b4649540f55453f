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

from numba import prange

from ._compile import grid_kernel, point_function
from .stencils import d1


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
def _max3(a, b, c):
    m = a if a > b else b
    return m if m > c else c


@grid_kernel
def residuals(alpha, beta, gamma, gidx, K, kidx, E, B, charge, current, work,
              weights, inv_hx, inv_hy, inv_hz, rx, ry, rz, coef, half,
              residual, scale, sources, write_sources):
    """Residuals of the energy (component 0) and momentum (1..3) equations.

    ``residual`` and ``scale`` are (4, nx, ny, nz); points within ``rx``, ``ry``, ``rz`` of a face
    get NaN. ``scale`` is the largest absolute value among the terms of each equation at the
    point (time term, each d_i of the flux, each source term). With ``write_sources`` the right-
    hand sides are written to ``sources`` (4, nx, ny, nz) too (else ``sources`` is not touched).

    Each stencil is one call site of :func:`stencils.d1` inside a loop over axes and components
    (not one call per derivative): Numba inlines at the IR level, and 24 inlined copies took
    over a minute to compile (measured), a few copies take seconds.
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
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        edge = (i < rx) | (i >= nx - rx) | (j < ry) | (j >= ny - ry)
        for k in range(nz):
            if edge | (k < rz) | (k >= nz - rz):
                for c in range(4):
                    residual[c, i, j, k] = nan
                    scale[c, i, j, k] = nan
                    if write_sources:
                        sources[c, i, j, k] = nan
                continue
            # Point values.
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
            # Per component of the momentum equation q: coefficients in homogeneous tuples, so
            # that one stencil call site serves every component.
            e_low = (exl, eyl, ezl)
            s_low = (sx, sy, sz)
            # epsilon_qkl j^k B^l = sg [qkl] j^k B^l.
            lorentz_b = (sg * (jy * bz - jz * by), sg * (jz * bx - jx * bz), sg * (jx * by - jy * bx))
            # S^ik d gamma_ik = coef (-E^i E^k dg_ik - B^i B^k dg_ik + 1/2 (E^2 + B^2) gamma^ik dg_ik),
            # summed over packed components with the off-diagonal ones counted twice.
            packed_weight = (sg * half * a * coef * (half * energy2 * ixx - (ex * ex + bx * bx)),
                             sg * half * a * coef * (energy2 * ixy - two * (ex * ey + bx * by)),
                             sg * half * a * coef * (energy2 * ixz - two * (ex * ez + bx * bz)),
                             sg * half * a * coef * (half * energy2 * iyy - (ey * ey + by * by)),
                             sg * half * a * coef * (energy2 * iyz - two * (ey * ez + by * bz)),
                             sg * half * a * coef * (half * energy2 * izz - (ez * ez + bz * bz)))
            u_up = (ux, uy, uz)
            # Energy equation: time term, d_i F^i, and sources
            # sg [alpha K_ij S^ij - S^i d_i alpha - alpha j^i E_i], with
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
            work_e = -sg * a * (jx * exl + jy * eyl + jz * ezl)
            dt_e = work[12, i, j, k]
            div_e = zero
            lapse_e = zero
            big_e = _max3(abs(dt_e), abs(curvature), abs(work_e))
            for axis in range(3):
                if radius[axis] == 0:
                    continue
                term = d1(work, axis, i, j, k, axis, weights, inv_hs[axis])
                div_e += term
                big_e = big_e if big_e > abs(term) else abs(term)
                lapse_e -= sg * u_up[axis] * d1(alpha, 0, i, j, k, axis, weights, inv_hs[axis])
            big_e = big_e if big_e > abs(lapse_e) else abs(lapse_e)
            src_e = curvature + lapse_e + work_e
            residual[0, i, j, k] = dt_e + div_e - src_e
            scale[0, i, j, k] = big_e
            if write_sources:
                sources[0, i, j, k] = src_e
            # Momentum equation q: time term, d_i M^i_q, and sources
            # sg [(alpha/2) S^ik d_q gamma_ik + S_i d_q beta^i - rho d_q alpha
            #     - alpha (rho_e E_q + epsilon_qkl j^k B^l)].
            for q in range(3):
                dt_m = work[13 + q, i, j, k]
                charge_q = -sg * a * rho_e * e_low[q]
                current_q = -sg * a * lorentz_b[q]
                big = _max3(abs(dt_m), abs(charge_q), abs(current_q))
                div_m = zero
                for axis in range(3):
                    if radius[axis] == 0:
                        continue
                    term = d1(work, 3 + 3 * axis + q, i, j, k, axis, weights, inv_hs[axis])
                    div_m += term
                    big = big if big > abs(term) else abs(term)
                metric_q = zero
                shift_q = zero
                lapse_q = zero
                if radius[q] > 0:
                    inv_h = inv_hs[q]
                    for c in range(6):
                        metric_q += packed_weight[c] * d1(gamma, gidx[c], i, j, k, q, weights, inv_h)
                    for c in range(3):
                        shift_q += s_low[c] * d1(beta, c, i, j, k, q, weights, inv_h)
                    shift_q *= sg
                    lapse_q = -sg * rho * d1(alpha, 0, i, j, k, q, weights, inv_h)
                big = _max3(big, _max3(abs(metric_q), abs(shift_q), abs(lapse_q)), zero)
                src_q = metric_q + shift_q + lapse_q + charge_q + current_q
                residual[1 + q, i, j, k] = dt_m + div_m - src_q
                scale[1 + q, i, j, k] = big
                if write_sources:
                    sources[1 + q, i, j, k] = src_q
