"""Kernels of the conformal decompositions: the physical metric at a point, and the sources in
the forms the conformal right-hand sides use (equations in :mod:`emsource.conformal`).

Decompositions (codes of :mod:`emsource.metric_forms`), with tilde-gamma_ij the conformal metric:

    DECOMPOSITION_CHI: gamma_ij = tilde-gamma_ij / chi,        rescale = chi
    DECOMPOSITION_W:   gamma_ij = tilde-gamma_ij / W^2,        rescale = W^2    (W = sqrt(chi))
    DECOMPOSITION_PHI: gamma_ij = e^{4 phi} tilde-gamma_ij,    rescale = e^{-4 phi}
"""

from __future__ import annotations

import math

from numba import prange

from ._compile import grid_kernel, point_function
from .electromagnetic import fields_both_indices, point_is_valid, projections, sqrt_determinant
from .metric import metric_at, metric_factors

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


@grid_kernel
def conformal_sources_grid(factor, tgamma, gidx, E, B, rho, S_i, S, A, decomposition, form,
                           coef, pivot_floor, one):
    """rho, S_i, S and A_ij = c (S_ij - gamma_ij S / 3) = c S_ij - tilde-gamma_ij S / 3 over
    strided (ncomp, nx, ny, nz) arrays; returns the count of bad points (conformal factor,
    metric not positive definite, non-finite input or output)."""
    nx, ny, nz = rho.shape
    bad = 0
    third = one / (one + one + one)
    half = one / (one + one)
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        count = 0
        for k in range(nz):
            c = conformal_rescale(decomposition, factor[i, j, k], one)
            ic = one / c
            txx, txy, txz, tyy, tyz, tzz = metric_at(tgamma, gidx, i, j, k)
            gxx, gxy, gxz = txx * ic, txy * ic, txz * ic
            gyy, gyz, gzz = tyy * ic, tyz * ic, tzz * ic
            d1, d2, d3, l21, l31, l32 = metric_factors(gxx, gxy, gxz, gyy, gyz, gzz, one)
            sg = sqrt_determinant(d1, d2, d3)
            fields = fields_both_indices(form, gxx, gxy, gxz, gyy, gyz, gzz, d1, d2, d3,
                                         l21, l31, l32, E[0, i, j, k], E[1, i, j, k],
                                         E[2, i, j, k], B[0, i, j, k], B[1, i, j, k],
                                         B[2, i, j, k], one)
            r, sx, sy, sz, sxx, sxy, sxz, syy, syz, szz, _e2 = projections(
                gxx, gxy, gxz, gyy, gyz, gzz, sg, fields, coef, half)
            rho[i, j, k] = r
            S[i, j, k] = r  # the electromagnetic stress-energy is traceless: S = rho
            S_i[0, i, j, k] = sx
            S_i[1, i, j, k] = sy
            S_i[2, i, j, k] = sz
            trace = third * r
            A[0, i, j, k] = c * sxx - trace * txx
            A[1, i, j, k] = c * sxy - trace * txy
            A[2, i, j, k] = c * sxz - trace * txz
            A[3, i, j, k] = c * syy - trace * tyy
            A[4, i, j, k] = c * syz - trace * tyz
            A[5, i, j, k] = c * szz - trace * tzz
            ok = point_is_valid(d1, d2, d3, pivot_floor * (gxx + gyy + gzz),
                                r * (one + gxx + gyy + gzz) + c + sx)
            count += 0 if ok else 1
        bad += count
    return bad
