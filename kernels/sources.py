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
and run the same point code on one (ncomp, nz) column view at a time. (Indexing with tuples
built per point, ``a[(c,) + idx]``, is about four times slower: it defeats vectorisation.)

Scalar constants ``coef`` and ``half`` arrive in the dtype of the data so that float32 data are
computed in float32 (a Python literal would promote the arithmetic to float64).

Every driver folds the point checks into its pass and returns the number of bad points
(non-finite input, metric not positive definite, lapse not positive); with ``check=False`` it
returns 0 and checks nothing. Outputs are written at every point, bad or not. Where the count
is not zero, ``first_invalid_*`` finds the first bad point on the error path.
"""

from __future__ import annotations

import math

from numba import prange

from ._compile import grid_kernel, point_function, search_kernel
from .metric import inverse_metric, lower_index
from .point_checks import is_finite


@point_function
def _em_projections(gxx, gxy, gxz, gyy, gyz, gzz, e1, e2, e3, b1, b2, b3, coef, half, fields_lower):
    """rho, S_i, S_ij of one point, and the inverse metric.

    ``e*``, ``b*`` are contravariant components, or covariant when ``fields_lower``.
    """
    ixx, ixy, ixz, iyy, iyz, izz, det = inverse_metric(gxx, gxy, gxz, gyy, gyz, gzz, half + half)
    if fields_lower:
        exl, eyl, ezl = e1, e2, e3
        bxl, byl, bzl = b1, b2, b3
        ex, ey, ez = lower_index(ixx, ixy, ixz, iyy, iyz, izz, e1, e2, e3)  # raised with gamma^ij
        bx, by, bz = lower_index(ixx, ixy, ixz, iyy, iyz, izz, b1, b2, b3)
    else:
        ex, ey, ez = e1, e2, e3
        bx, by, bz = b1, b2, b3
        exl, eyl, ezl = lower_index(gxx, gxy, gxz, gyy, gyz, gzz, e1, e2, e3)
        bxl, byl, bzl = lower_index(gxx, gxy, gxz, gyy, gyz, gzz, b1, b2, b3)
    energy2 = ex * exl + ey * eyl + ez * ezl + bx * bxl + by * byl + bz * bzl
    rho = coef * half * energy2
    # S_i = coef sqrt(gamma) [ijk] E^j B^k: the Levi-Civita tensor carries sqrt(gamma).
    poynting = coef * math.sqrt(det)
    sx = poynting * (ey * bz - ez * by)
    sy = poynting * (ez * bx - ex * bz)
    sz = poynting * (ex * by - ey * bx)
    pressure = half * energy2
    sxx = coef * (pressure * gxx - exl * exl - bxl * bxl)
    sxy = coef * (pressure * gxy - exl * eyl - bxl * byl)
    sxz = coef * (pressure * gxz - exl * ezl - bxl * bzl)
    syy = coef * (pressure * gyy - eyl * eyl - byl * byl)
    syz = coef * (pressure * gyz - eyl * ezl - byl * bzl)
    szz = coef * (pressure * gzz - ezl * ezl - bzl * bzl)
    return (rho, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz,
            ixx, ixy, ixz, iyy, iyz, izz)


@point_function
def _spatial_inputs_valid(n, gamma, gidx, E, B):
    """True where the 12 inputs at point ``n`` are finite and gamma is positive definite.

    Sylvester's criterion: gxx > 0, the leading 2x2 minor > 0 and det > 0 (NaN fails all).
    Kept apart from the physics on purpose: returning the flag from the inlined projection
    function made the whole kernel four times slower (measured; LLVM no longer vectorised it),
    while this separate function re-reads the values at no measurable cost.
    """
    gxx = gamma[gidx[0], n]
    gxy = gamma[gidx[1], n]
    gxz = gamma[gidx[2], n]
    gyy = gamma[gidx[3], n]
    gyz = gamma[gidx[4], n]
    gzz = gamma[gidx[5], n]
    minor = gxx * gyy - gxy * gxy
    det = (gxx * (gyy * gzz - gyz * gyz) + gxy * (gxz * gyz - gxy * gzz)
           + gxz * (gxy * gyz - gxz * gyy))
    # One finiteness test of the sum instead of twelve (twelve cost 4x): NaN and
    # Inf propagate through a sum, which overflows only for inputs above ~1e307 (float32:
    # ~1e37), where the squared fields overflow anyway. Bitwise & avoids branches.
    probe = (gxx + gxy + gxz + gyy + gyz + gzz
             + E[0, n] + E[1, n] + E[2, n] + B[0, n] + B[1, n] + B[2, n])
    return (gxx > 0) & (minor > 0) & (det > 0) & is_finite(probe)


@point_function
def _spacetime_inputs_valid(n, alpha, beta, gamma, gidx, E, B):
    """As :func:`_spatial_inputs_valid`, and the lapse positive, lapse and shift finite."""
    a = alpha[n]
    return (_spatial_inputs_valid(n, gamma, gidx, E, B)
            & (a > 0) & is_finite(a + beta[0, n] + beta[1, n] + beta[2, n]))


@point_function
def _adm_point(n, gamma, gidx, E, B, rho, S_i, S_ij, S, coef, half, fields_lower):
    """Read point ``n`` of (ncomp, npoints) arrays and write its projections."""
    (r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz,
     _ixx, _ixy, _ixz, _iyy, _iyz, _izz) = _em_projections(
        gamma[gidx[0], n], gamma[gidx[1], n], gamma[gidx[2], n],
        gamma[gidx[3], n], gamma[gidx[4], n], gamma[gidx[5], n],
        E[0, n], E[1, n], E[2, n], B[0, n], B[1, n], B[2, n],
        coef, half, fields_lower)
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


@point_function
def _stress_energy_point(n, alpha, beta, gamma, gidx, E, B, T, coef, half, fields_lower, upper):
    """Read point ``n`` of (ncomp, npoints) arrays, write the 10 packed T_ab (or T^ab)."""
    gxx = gamma[gidx[0], n]
    gxy = gamma[gidx[1], n]
    gxz = gamma[gidx[2], n]
    gyy = gamma[gidx[3], n]
    gyz = gamma[gidx[4], n]
    gzz = gamma[gidx[5], n]
    (r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz,
     ixx, ixy, ixz, iyy, iyz, izz) = _em_projections(
        gxx, gxy, gxz, gyy, gyz, gzz,
        E[0, n], E[1, n], E[2, n], B[0, n], B[1, n], B[2, n],
        coef, half, fields_lower)
    a = alpha[n]
    bx = beta[0, n]
    by = beta[1, n]
    bz = beta[2, n]
    if upper:
        one = half + half
        ia = one / a
        # n^a = (1, -beta^i)/alpha; S^i = gamma^ij S_j; S^ij = gamma^ik gamma^jl S_kl.
        nx = -bx * ia
        ny = -by * ia
        nz = -bz * ia
        ux = ixx * sx + ixy * sy + ixz * sz
        uy = ixy * sx + iyy * sy + iyz * sz
        uz = ixz * sx + iyz * sy + izz * sz
        # Rows of gamma^-1 S_kl, then contracted with gamma^-1 again.
        mxx = ixx * sxx + ixy * sxy + ixz * sxz
        mxy = ixx * sxy + ixy * syy + ixz * syz
        mxz = ixx * sxz + ixy * syz + ixz * szz
        myx = ixy * sxx + iyy * sxy + iyz * sxz
        myy = ixy * sxy + iyy * syy + iyz * syz
        myz = ixy * sxz + iyy * syz + iyz * szz
        mzx = ixz * sxx + iyz * sxy + izz * sxz
        mzy = ixz * sxy + iyz * syy + izz * syz
        mzz = ixz * sxz + iyz * syz + izz * szz
        uxx = mxx * ixx + mxy * ixy + mxz * ixz
        uxy = mxx * ixy + mxy * iyy + mxz * iyz
        uxz = mxx * ixz + mxy * iyz + mxz * izz
        uyy = myx * ixy + myy * iyy + myz * iyz
        uyz = myx * ixz + myy * iyz + myz * izz
        uzz = mzx * ixz + mzy * iyz + mzz * izz
        T[0, n] = r * ia * ia
        T[1, n] = ia * (r * nx + ux)
        T[2, n] = ia * (r * ny + uy)
        T[3, n] = ia * (r * nz + uz)
        T[4, n] = r * nx * nx + (nx * ux + nx * ux) + uxx
        T[5, n] = r * nx * ny + (nx * uy + ny * ux) + uxy
        T[6, n] = r * nx * nz + (nx * uz + nz * ux) + uxz
        T[7, n] = r * ny * ny + (ny * uy + ny * uy) + uyy
        T[8, n] = r * ny * nz + (ny * uz + nz * uy) + uyz
        T[9, n] = r * nz * nz + (nz * uz + nz * uz) + uzz
    else:
        # beta^j S_ij, one row per i.
        qx = bx * sxx + by * sxy + bz * sxz
        qy = bx * sxy + by * syy + bz * syz
        qz = bx * sxz + by * syz + bz * szz
        beta_s = bx * sx + by * sy + bz * sz
        T[0, n] = a * a * r - (a * beta_s + a * beta_s) + (bx * qx + by * qy + bz * qz)
        T[1, n] = qx - a * sx
        T[2, n] = qy - a * sy
        T[3, n] = qz - a * sz
        T[4, n] = sxx
        T[5, n] = sxy
        T[6, n] = sxz
        T[7, n] = syy
        T[8, n] = syz
        T[9, n] = szz


@grid_kernel
def adm_sources_flat(gamma, gidx, E, B, rho, S_i, S_ij, S, coef, half, fields_lower, check):
    """rho, S_i, S_ij, S over arrays of shape (ncomp, npoints); returns the bad-point count."""
    bad_count = 0
    for n in prange(rho.shape[0]):
        _adm_point(n, gamma, gidx, E, B, rho, S_i, S_ij, S, coef, half, fields_lower)
        if check:
            bad_count += 0 if _spatial_inputs_valid(n, gamma, gidx, E, B) else 1
    return bad_count


@grid_kernel
def adm_sources_grid(gamma, gidx, E, B, rho, S_i, S_ij, S, coef, half, fields_lower, check):
    """rho, S_i, S_ij, S over strided (ncomp, nx, ny, nz) arrays; returns the bad-point count."""
    nx, ny, nz = rho.shape
    bad_count = 0
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
            _adm_point(k, g_c, gidx, e_c, b_c, rho_c, s_i_c, s_ij_c, s_c,
                       coef, half, fields_lower)
            if check:
                bad_count += 0 if _spatial_inputs_valid(k, g_c, gidx, e_c, b_c) else 1
    return bad_count


@grid_kernel
def stress_energy_flat(alpha, beta, gamma, gidx, E, B, T, coef, half, fields_lower, upper, check):
    """Packed T_ab or T^ab over (ncomp, npoints) arrays; returns the bad-point count."""
    bad_count = 0
    for n in prange(alpha.shape[0]):
        _stress_energy_point(n, alpha, beta, gamma, gidx, E, B, T,
                             coef, half, fields_lower, upper)
        if check:
            bad_count += 0 if _spacetime_inputs_valid(n, alpha, beta, gamma, gidx, E, B) else 1
    return bad_count


@grid_kernel
def stress_energy_grid(alpha, beta, gamma, gidx, E, B, T, coef, half, fields_lower, upper, check):
    """Packed T_ab or T^ab over strided (ncomp, nx, ny, nz) arrays; returns the bad-point count."""
    nx, ny, nz = alpha.shape
    bad_count = 0
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
            _stress_energy_point(k, a_c, beta_c, g_c, gidx, e_c, b_c, t_c,
                                 coef, half, fields_lower, upper)
            if check:
                bad_count += 0 if _spacetime_inputs_valid(k, a_c, beta_c, g_c, gidx, e_c, b_c) else 1
    return bad_count


@search_kernel
def first_invalid_spatial(gamma, gidx, E, B):
    """C-order flat index of the first invalid point of (ncomp, nx, ny, nz) arrays, or -1.

    Run only after a driver reported bad points: a min-reduction folded into the main pass
    made it 2-3 times slower (measured), a separate search on the error path costs nothing.
    """
    nx, ny, nz = gamma.shape[1:]
    for i in range(nx):
        for j in range(ny):
            g_c = gamma[:, i, j]
            e_c = E[:, i, j]
            b_c = B[:, i, j]
            for k in range(nz):
                if not _spatial_inputs_valid(k, g_c, gidx, e_c, b_c):
                    return (i * ny + j) * nz + k
    return -1


@search_kernel
def first_invalid_spacetime(alpha, beta, gamma, gidx, E, B):
    """As :func:`first_invalid_spatial`, with the lapse and shift checked too."""
    nx, ny, nz = alpha.shape
    for i in range(nx):
        for j in range(ny):
            a_c = alpha[i, j]
            beta_c = beta[:, i, j]
            g_c = gamma[:, i, j]
            e_c = E[:, i, j]
            b_c = B[:, i, j]
            for k in range(nz):
                if not _spacetime_inputs_valid(k, a_c, beta_c, g_c, gidx, e_c, b_c):
                    return (i * ny + j) * nz + k
    return -1
