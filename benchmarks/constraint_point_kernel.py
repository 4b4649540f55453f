"""The constraint kernel as it was before the strip rewrite: one grid point at a time.

Kept here, beside the benchmarks, as the "before" of ``bench_constraints.py`` (both kernels
timed in one run) and for the floating-point count of ``constraint_flops.py``. It computes the
same H, M_i and scales as ``emsource.kernels.constraints.adm_constraints_grid`` (equal to
round-off; the equations are in that module's docstring) with per-point 3x3 scratch arrays,
which LLVM compiles to scalar code. Not part of the package.
"""


from __future__ import annotations

import math

import numpy as np
from numba import prange

from emsource.kernels._compile import grid_kernel
from emsource.kernels.metric import inverse_metric, metric_factors
from emsource.kernels.stencils import d1, d2, d11

#: Packed component of the index pair (a, b) of a symmetric 3x3 tensor.
SYM = np.array([[0, 1, 2], [1, 3, 4], [2, 4, 5]], dtype=np.int64)


@grid_kernel
def point_at_a_time_constraints(gamma, K, rho, S, interior, w1, w2, inv_h, sym, sixteen_pi,
                                eight_pi, H, M, H_scale, M_scale):
    """H, M_i and the size of their largest term; see the module docstring."""
    nx, ny, nz = rho.shape
    hx = inv_h[0]
    hy = inv_h[1]
    hz = inv_h[2]
    for column in prange(nx * ny):
        i = column // ny
        j = column - i * ny
        # Per-column scratch: one allocation per column, reused along it.
        g = np.empty((3, 3))
        gi = np.empty((3, 3))
        kl = np.empty((3, 3))
        ku = np.empty((3, 3))
        dg = np.empty((3, 3, 3))  # dg[a, b, c] = d_c g_ab
        ddg = np.empty((3, 3, 3, 3))  # ddg[a, b, c, d] = d_c d_d g_ab
        dk = np.empty((3, 3, 3))  # dk[a, b, c] = d_c K_ab
        gam1 = np.empty((3, 3, 3))  # Gamma_kij
        gam2 = np.empty((3, 3, 3))  # Gamma^k_ij
        ric = np.empty((3, 3))
        for k in range(nz):
            if interior[i, j, k] == 0:
                H[i, j, k] = math.nan
                H_scale[i, j, k] = math.nan
                for a in range(3):
                    M[a, i, j, k] = math.nan
                    M_scale[a, i, j, k] = math.nan
                continue
            for a in range(3):
                for b in range(a, 3):
                    c = sym[a, b]
                    g[a, b] = gamma[c, i, j, k]
                    g[b, a] = g[a, b]
                    kl[a, b] = K[c, i, j, k]
                    kl[b, a] = kl[a, b]
                    # Literal axes: the inlined stencils then resolve their axis branch at
                    # compile time (a loop variable axis made the kernel ~2x slower).
                    gx = d1(gamma, c, i, j, k, 0, w1, hx)
                    gy = d1(gamma, c, i, j, k, 1, w1, hy)
                    gz = d1(gamma, c, i, j, k, 2, w1, hz)
                    dg[a, b, 0] = gx
                    dg[a, b, 1] = gy
                    dg[a, b, 2] = gz
                    dg[b, a, 0] = gx
                    dg[b, a, 1] = gy
                    dg[b, a, 2] = gz
                    kx = d1(K, c, i, j, k, 0, w1, hx)
                    ky = d1(K, c, i, j, k, 1, w1, hy)
                    kz = d1(K, c, i, j, k, 2, w1, hz)
                    dk[a, b, 0] = kx
                    dk[a, b, 1] = ky
                    dk[a, b, 2] = kz
                    dk[b, a, 0] = kx
                    dk[b, a, 1] = ky
                    dk[b, a, 2] = kz
                    gxx = d2(gamma, c, i, j, k, 0, w2, hx * hx)
                    gyy = d2(gamma, c, i, j, k, 1, w2, hy * hy)
                    gzz = d2(gamma, c, i, j, k, 2, w2, hz * hz)
                    gxy = d11(gamma, c, i, j, k, 0, 1, w1, hx, hy)
                    gxz = d11(gamma, c, i, j, k, 0, 2, w1, hx, hz)
                    gyz = d11(gamma, c, i, j, k, 1, 2, w1, hy, hz)
                    ddg[a, b, 0, 0] = gxx
                    ddg[a, b, 1, 1] = gyy
                    ddg[a, b, 2, 2] = gzz
                    ddg[a, b, 0, 1] = gxy
                    ddg[a, b, 1, 0] = gxy
                    ddg[a, b, 0, 2] = gxz
                    ddg[a, b, 2, 0] = gxz
                    ddg[a, b, 1, 2] = gyz
                    ddg[a, b, 2, 1] = gyz
                    for e in range(3):
                        for f in range(3):
                            ddg[b, a, e, f] = ddg[a, b, e, f]
            factors = metric_factors(g[0, 0], g[0, 1], g[0, 2], g[1, 1], g[1, 2], g[2, 2], 1.0)
            ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(factors[0], factors[1], factors[2],
                                                          factors[3], factors[4], factors[5], 1.0)
            gi[0, 0] = ixx
            gi[0, 1] = ixy
            gi[0, 2] = ixz
            gi[1, 1] = iyy
            gi[1, 2] = iyz
            gi[2, 2] = izz
            gi[1, 0] = ixy
            gi[2, 0] = ixz
            gi[2, 1] = iyz
            for c in range(3):
                for a in range(3):
                    for b in range(3):
                        gam1[c, a, b] = 0.5 * (dg[c, b, a] + dg[c, a, b] - dg[a, b, c])
            for m in range(3):
                for a in range(3):
                    for b in range(3):
                        s = 0.0
                        for c in range(3):
                            s += gi[m, c] * gam1[c, a, b]
                        gam2[m, a, b] = s
            for a in range(3):
                for b in range(a, 3):
                    s = 0.0
                    for c in range(3):
                        for d in range(3):
                            second = (ddg[a, d, c, b] + ddg[c, b, a, d]
                                      - ddg[a, b, c, d] - ddg[c, d, a, b])
                            quad = 0.0
                            for m in range(3):
                                quad += gam2[m, a, d] * gam1[m, c, b] - gam2[m, a, b] * gam1[m, c, d]
                            s += gi[c, d] * (0.5 * second + quad)
                    ric[a, b] = s
                    ric[b, a] = s
            ricci = 0.0
            trace_k = 0.0
            for a in range(3):
                for b in range(3):
                    ricci += gi[a, b] * ric[a, b]
                    trace_k += gi[a, b] * kl[a, b]
            for a in range(3):
                for b in range(3):
                    s = 0.0
                    for c in range(3):
                        for d in range(3):
                            s += gi[a, c] * gi[b, d] * kl[c, d]
                    ku[a, b] = s
            k_sq = 0.0
            for a in range(3):
                for b in range(3):
                    k_sq += ku[a, b] * kl[a, b]
            matter = sixteen_pi * rho[i, j, k]
            H[i, j, k] = ricci + trace_k * trace_k - k_sq - matter
            H_scale[i, j, k] = max(max(abs(ricci), trace_k * trace_k), max(k_sq, abs(matter)))
            # M_i = gamma^jk D_j K_ki - gamma^jk D_i K_jk - 8 pi S_i
            for a in range(3):
                div_k = 0.0
                grad_k = 0.0
                for b in range(3):
                    for c in range(3):
                        # D_b K_ca and D_a K_bc
                        dbca = dk[c, a, b]
                        dabc = dk[b, c, a]
                        for m in range(3):
                            dbca -= gam2[m, b, c] * kl[m, a] + gam2[m, b, a] * kl[c, m]
                            dabc -= gam2[m, a, b] * kl[m, c] + gam2[m, a, c] * kl[b, m]
                        div_k += gi[b, c] * dbca
                        grad_k += gi[b, c] * dabc
                source = eight_pi * S[a, i, j, k]
                M[a, i, j, k] = div_k - grad_k - source
                M_scale[a, i, j, k] = max(max(abs(div_k), abs(grad_k)), abs(source))
