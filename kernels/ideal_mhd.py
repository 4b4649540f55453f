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

from numba import prange

from ._compile import grid_kernel, point_function
from .electromagnetic import fields_both_indices, point_is_valid, sqrt_determinant
from .metric import contract_index, metric_at, metric_factors

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


@grid_kernel
def ideal_mhd_grid(alpha, beta, gamma, gidx, B, V, E, U, b, form, kind, pivot_floor, one):
    """E^i (3), u^a (4) and b^a (4) over strided (ncomp, nx, ny, nz) arrays; returns the count
    of bad points (metric, lapse, non-finite input or output, velocity not below light)."""
    nx, ny, nz = alpha.shape
    bad = 0
    zero = one - one
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            gxx, gxy, gxz, gyy, gyz, gzz = metric_at(gamma, gidx, i, j, k)
            d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
            sg = sqrt_determinant(d1, d2, d3)
            (_ex, _ey, _ez, _exl, _eyl, _ezl, bx, by, bz, bxl, byl, bzl) = fields_both_indices(
                form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32, zero, zero, zero,
                B[0, i, j, k], B[1, i, j, k], B[2, i, j, k], one)
            a = alpha[i, j, k]
            s1 = beta[0, i, j, k]
            s2 = beta[1, i, j, k]
            s3 = beta[2, i, j, k]
            v1, v2, v3, vl1, vl2, vl3, lorentz = eulerian_velocity(
                kind, a, s1, s2, s3, gxx, gxy, gxz, gyy, gyz, gzz,
                V[0, i, j, k], V[1, i, j, k], V[2, i, j, k], one)
            # E^i = -epsilon^ijk v_j B_k = -[ijk] v_j B_k / sg
            isg = one / sg
            E[0, i, j, k] = -(vl2 * bzl - vl3 * byl) * isg
            E[1, i, j, k] = -(vl3 * bxl - vl1 * bzl) * isg
            E[2, i, j, k] = -(vl1 * byl - vl2 * bxl) * isg
            ia = one / a
            ut = lorentz * ia
            u1 = lorentz * (v1 - s1 * ia)
            u2 = lorentz * (v2 - s2 * ia)
            u3 = lorentz * (v3 - s3 * ia)
            U[0, i, j, k] = ut
            U[1, i, j, k] = u1
            U[2, i, j, k] = u2
            U[3, i, j, k] = u3
            # b^a = B^a / W + (B_i v^i) u^a
            bv = bxl * v1 + byl * v2 + bzl * v3
            il = one / lorentz
            b[0, i, j, k] = bv * ut
            b[1, i, j, k] = bx * il + bv * u1
            b[2, i, j, k] = by * il + bv * u2
            b[3, i, j, k] = bz * il + bv * u3
            ok = (point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz),
                                 bv * ut + u1 + u2 + u3 + E[0, i, j, k] + E[1, i, j, k]
                                 + E[2, i, j, k] + bx + by + bz) & (a > zero))
            count += 0 if ok else 1
        bad += count
    return bad
