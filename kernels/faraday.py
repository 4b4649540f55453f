"""Kernels of the Faraday tensor: F_ab or F^ab from E, B; E^i, B^i from F; the two invariants.

Conventions (see the package README): signature -+++, n_a = (-alpha, 0, 0, 0),
n^a = (1, -beta^i) / alpha, epsilon_0123 = +sqrt(-g) = alpha sg, sg = sqrt(det gamma_ij),
epsilon_ijk = n^a epsilon_aijk = sg [ijk], E^a = F^ab n_b, B^a = -(1/2) epsilon^abcd n_b F_cd, so
that F^ab = n^a E^b - E^a n^b + epsilon^abcd n_c B_d and, lowering every index,
F_ab = n_a E_b - E_a n_b + epsilon_abcd n^c B^d. Written out in coordinates (derivation in
``tests/test_faraday.py``'s docstring):

    F_ti = -alpha E_i + sg [ijk] B^j beta^k,            F_ij = sg [ijk] B^k
    F^ti = E^i / alpha,   F^ij = (E^i beta^j - beta^i E^j) / alpha + [ijk] B_k / sg

and back, E_i = (sg [ijk] B^j beta^k - F_ti) / alpha, B^i = (1/2) [ijk] F_jk / sg from F_ab;
E^i = alpha F^ti, B_i = (1/2) sg [ijk] (F^jk - (E^j beta^k - beta^j E^k) / alpha) from F^ab.

Invariants: F_ab F^ab = 2 (B^2 - E^2); with *F^ab = (1/2) epsilon^abcd F_cd and
epsilon^0123 = -1 / sqrt(-g), F_ab *F^ab = 4 E_i B^i (the sign follows from epsilon_0123 > 0;
the often quoted -4 E.B belongs to the opposite orientation).

Packed antisymmetric 4x4 order: (tx, ty, tz, xy, xz, yz), the six components above the diagonal.
"""

from __future__ import annotations

from numba import prange

from ._compile import grid_kernel, point_function
from .electromagnetic import fields_both_indices, point_is_valid, sqrt_determinant
from .metric import contract_index, inverse_metric, metric_at, metric_factors


@point_function
def faraday_components(alpha, b1, b2, b3, sg, fields, upper, one):
    """F_ab (``upper`` False) or F^ab, packed (tx, ty, tz, xy, xz, yz), at one point."""
    ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl = fields
    if upper:
        ia = one / alpha
        isg = one / sg
        return (ex * ia, ey * ia, ez * ia,
                (ex * b2 - b1 * ey) * ia + bzl * isg,
                (ex * b3 - b1 * ez) * ia - byl * isg,
                (ey * b3 - b2 * ez) * ia + bxl * isg)
    return (-alpha * exl + sg * (by * b3 - bz * b2),
            -alpha * eyl + sg * (bz * b1 - bx * b3),
            -alpha * ezl + sg * (bx * b2 - by * b1),
            sg * bz, -sg * by, sg * bx)


@point_function
def fields_from_components(alpha, b1, b2, b3, gxx, gxy, gxz, gyy, gyz, gzz, sg,
                           ixx, ixy, ixz, iyy, iyz, izz, f0, f1, f2, f3, f4, f5, upper, one):
    """Contravariant (E^x, E^y, E^z, B^x, B^y, B^z) from packed F_ab or F^ab at one point."""
    ia = one / alpha
    if upper:
        ex, ey, ez = alpha * f0, alpha * f1, alpha * f2
        # G^ij = F^ij - (E^i beta^j - beta^i E^j) / alpha = [ijk] B_k / sg
        gxy_ = f3 - (ex * b2 - b1 * ey) * ia
        gxz_ = f4 - (ex * b3 - b1 * ez) * ia
        gyz_ = f5 - (ey * b3 - b2 * ez) * ia
        bx, by, bz = contract_index(ixx, ixy, ixz, iyy, iyz, izz,
                                    sg * gyz_, -sg * gxz_, sg * gxy_)
    else:
        isg = one / sg
        bx, by, bz = f5 * isg, -f4 * isg, f3 * isg
        exl = (sg * (by * b3 - bz * b2) - f0) * ia
        eyl = (sg * (bz * b1 - bx * b3) - f1) * ia
        ezl = (sg * (bx * b2 - by * b1) - f2) * ia
        ex, ey, ez = contract_index(ixx, ixy, ixz, iyy, iyz, izz, exl, eyl, ezl)
    return ex, ey, ez, bx, by, bz


@grid_kernel
def faraday_grid(alpha, beta, gamma, gidx, E, B, F, form, upper, pivot_floor, one):
    """Packed F_ab or F^ab over strided (ncomp, nx, ny, nz) arrays; returns the bad-point count
    (metric not positive definite, lapse not positive, non-finite input or output)."""
    nx, ny, nz = alpha.shape
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            gxx, gxy, gxz, gyy, gyz, gzz = metric_at(gamma, gidx, i, j, k)
            d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
            sg = sqrt_determinant(d1, d2, d3)
            fields = fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3,
                                         l21, l31, l32, E[0, i, j, k], E[1, i, j, k],
                                         E[2, i, j, k], B[0, i, j, k], B[1, i, j, k],
                                         B[2, i, j, k], one)
            a = alpha[i, j, k]
            f = faraday_components(a, beta[0, i, j, k], beta[1, i, j, k], beta[2, i, j, k], sg,
                                   fields, upper, one)
            total = one - one
            for c in range(6):
                F[c, i, j, k] = f[c]
                total += f[c]
            ok = (point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz),
                                 total + fields[0] + fields[3]) & (a > 0))
            count += 0 if ok else 1
        bad += count
    return bad


@grid_kernel
def fields_from_faraday_grid(alpha, beta, gamma, gidx, F, E, B, upper, pivot_floor, one):
    """Contravariant E^i, B^i from packed F_ab or F^ab over strided arrays; returns the
    bad-point count (as :func:`faraday_grid`)."""
    nx, ny, nz = alpha.shape
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            gxx, gxy, gxz, gyy, gyz, gzz = metric_at(gamma, gidx, i, j, k)
            d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
            sg = sqrt_determinant(d1, d2, d3)
            ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
            a = alpha[i, j, k]
            ex, ey, ez, bx, by, bz = fields_from_components(
                a, beta[0, i, j, k], beta[1, i, j, k], beta[2, i, j, k],
                gxx, gxy, gxz, gyy, gyz, gzz, sg, ixx, ixy, ixz, iyy, iyz, izz,
                F[0, i, j, k], F[1, i, j, k], F[2, i, j, k], F[3, i, j, k], F[4, i, j, k],
                F[5, i, j, k], upper, one)
            E[0, i, j, k] = ex
            E[1, i, j, k] = ey
            E[2, i, j, k] = ez
            B[0, i, j, k] = bx
            B[1, i, j, k] = by
            B[2, i, j, k] = bz
            ok = (point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz),
                                 ex + ey + ez + bx + by + bz) & (a > 0))
            count += 0 if ok else 1
        bad += count
    return bad


@grid_kernel
def invariants_grid(gamma, gidx, E, B, out, form, pivot_floor, one):
    """out[0] = F_ab F^ab = 2 (B^2 - E^2), out[1] = F_ab *F^ab = 4 E_i B^i over strided
    arrays; returns the bad-point count (metric, non-finite input or output)."""
    nx, ny, nz = out.shape[1:]
    bad = 0
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            gxx, gxy, gxz, gyy, gyz, gzz = metric_at(gamma, gidx, i, j, k)
            d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
            ex, ey, ez, exl, eyl, ezl, bx, by, bz, bxl, byl, bzl = fields_both_indices(
                form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3, l21, l31, l32,
                E[0, i, j, k], E[1, i, j, k], E[2, i, j, k], B[0, i, j, k], B[1, i, j, k],
                B[2, i, j, k], one)
            e2 = ex * exl + ey * eyl + ez * ezl
            b2 = bx * bxl + by * byl + bz * bzl
            first = (one + one) * (b2 - e2)
            second = (one + one + one + one) * (exl * bx + eyl * by + ezl * bz)
            out[0, i, j, k] = first
            out[1, i, j, k] = second
            ok = point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz), e2 + b2 + second)
            count += 0 if ok else 1
        bad += count
    return bad
