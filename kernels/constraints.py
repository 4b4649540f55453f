"""Kernel of the ADM Hamiltonian and momentum constraints with matter sources.

Equations (signature -+++, G = c = 1, K_ij with K = -nabla_a n^a, sources rho = n_a n_b T^ab
and S_i = -gamma_i^a n^b T_ab):

    H   = R + K^2 - K_ij K^ij - 16 pi rho
    M_i = D_j K^j_i - D_i K - 8 pi S_i  =  gamma^jk (D_j K_ki - D_i K_jk) - 8 pi S_i

with the Ricci tensor of gamma written through metric derivatives,

    R_ij = 1/2 gamma^kl (d_k d_j g_il + d_i d_l g_kj - d_k d_l g_ij - d_i d_j g_kl)
           + gamma^kl (Gamma^m_il Gamma_mkj - Gamma^m_ij Gamma_mkl),
    Gamma_kij = 1/2 (d_i g_kj + d_j g_ki - d_k g_ij),   Gamma^m_ij = gamma^mk Gamma_kij,
    D_c K_ab  = d_c K_ab - Gamma^m_ca K_mb - Gamma^m_cb K_am.

References: E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), ch. 4 (constraints; from memory);
T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), ch. 2 (constraints, from memory; the Ricci
formula above is quoted from memory, and ``tests/test_constraints.py`` checks it against sympy).

Every derivative goes through :mod:`emsource.kernels.stencils` (centred, order 2, 4 or 6 as
the weights say). Arrays are float64: ``gamma`` and ``K`` (6, nx, ny, nz) packed
(xx, xy, xz, yy, yz, zz), ``rho`` (nx, ny, nz), ``S`` (3, nx, ny, nz) covariant, ``interior``
uint8 (nx, ny, nz), 1 where the whole stencil lies on valid data (the caller guarantees it
stays ``radius`` points away from the faces). Outputs are written at every point: the residuals
and the absolute value of their largest term (R, K^2, K_ij K^ij, 16 pi rho for H; D_j K^j_i,
D_i K, 8 pi S_i for M_i) where ``interior`` is 1, NaN elsewhere.

How the kernel is laid out (why: see :func:`adm_constraints_grid`). Each grid column (i, j) is
done in strips of up to ``_STRIP`` points along z, with one (``_ROWS``, ``_ROW_LENGTH``) buffer
per thread on its stack (:func:`emsource.kernels.strip_buffers.strip_buffer`): first the 72
derivatives and 16 point values the equations need are written to rows of the buffer (one
stencil loop along the strip per few rows), then every step of the algebra is one
loop along the strip that reads rows and writes rows, so that LLVM vectorises it across points.
The buffer rows are listed at ``_ROWS`` below (p: packed component (xx, xy, xz, yy, yz, zz);
q, s: derivative axes; ``_pair(a, b)``: the packed index of a symmetric pair).

The mixed second derivatives of the metric are derivatives of first derivatives (the
tensor-product stencil is the product of the 1-D ones, so only rounding differs): a parallel
task takes one x index and a band of ``_BAND`` columns along y and walks them in order; a ring
buffer (``_RING_ROWS``, ``_SPAN``, on the stack too) keeps d_x g and d_xx g of the columns
j - r..j + r on the strip widened by r points at each end in z, each column entering it once;
then d_xz g = d_z (d_x g) and d_xy g = d_y (d_x g) come from the ring, d_yz g = d_z (d_y g)
from d_y g on the widened strip (:func:`emsource.kernels.stencils.d1_row`,
:func:`emsource.kernels.stencils.d1_ring`). Per metric component that is 16 loads from the
grid and 16 from the stack buffers per point at order 4 instead of 63 from the grid, and 9
grid columns touched instead of 25.
"""


from __future__ import annotations

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function
from .strip_buffers import strip_buffer
from .metric import inverse_metric, metric_factors
from .stencils import d1_axes_column, d1_d2_column, d1_ring, d1_row, value_column

#: Points along z per strip (the row length of the per-column buffer). A literal, so that LLVM
#: sees the buffer's row stride as a constant and can prove that rows do not overlap.
_STRIP = 64

# Rows of the per-column buffer (module docstring). Inputs of the algebra:
_G = 0      # gamma_p                                   6 rows
_KL = 6     # K_p                                       6
_DG = 12    # d_q gamma_p at 12 + 6 q + p               18
_DK = 30    # d_q K_p at 30 + 6 q + p                   18
_DDG = 48   # d_q d_s gamma_p at 48 + 6 pair(q, s) + p  36
_RHO = 84   # rho                                       1
_SRC = 85   # S_i                                       3
# Its intermediate results:
_GI = 88    # gamma^p                                   6
_G1 = 94    # Gamma_{c (ab)} at 94 + 6 c + pair(a, b)   18
_G2 = 112   # Gamma^m_(ab) at 112 + 6 m + pair(a, b)    18
_T = 130    # T^d_{mb} = gamma^dc Gamma_mcb at 130 + 9 m + 3 d + b: 27
_V = 157    # V_m = gamma^cd Gamma_mcd                  3
_W = 160    # W^m = gamma^cd Gamma^m_cd                 3
_KM = 163   # K_a^b = K_ac gamma^cb at 163 + 3 a + b    9
_RIC = 172  # R_p                                       6
_OUT = 178  # H, H scale, M_x, M_y, M_z, their three scales: 8
_ROWS = 186
#: Row stride of the buffer in doubles: a strip and one cache line, so that rows do not lie a
#: power of two apart (see the measurement in DEVELOPERS.md, "Strip kernels").
_ROW_LENGTH = _STRIP + 8

#: Columns along y per parallel task (one x index and a band of y): the task walks them in
#: order, so each column's d_x g is computed once and kept for the mixed derivatives.
_BAND = 64
#: Row length of the ring buffer: a strip widened by the largest stencil radius (3) at each end.
_SPAN = 72
# Rows of the ring buffer: slot s (grid column j = s mod (2 r + 1)) holds d_x g_p at
# _RING_STEP s + p and d_xx g_p at _RING_STEP s + 6 + p, on the strip widened by r in z;
# after the 7 slots of order 6, d_y g_p at _SIDE + p and d_yy g_p at _SIDE + 6 + p (column j).
_RING_STEP = 12
_SIDE = 7 * _RING_STEP
_RING_ROWS = _SIDE + 12


@point_function
def _pair(a, b):
    """Packed index of the symmetric pair (a, b): xx 0, xy 1, xz 2, yy 3, yz 4, zz 5.

    Called with literal indices (or indices of loops LLVM unrolls), it folds to a constant,
    so every buffer row below is a compile-time constant."""
    lo = min(a, b)
    hi = max(a, b)
    return lo * (5 - lo) // 2 + hi


@point_function
def _sym_contraction(buf, n, s, t, two):
    """s^ab t_ab for two packed symmetric tensors at rows s..s+5 and t..t+5."""
    return (buf[s, n] * buf[t, n] + buf[s + 3, n] * buf[t + 3, n] + buf[s + 5, n] * buf[t + 5, n]
            + two * (buf[s + 1, n] * buf[t + 1, n] + buf[s + 2, n] * buf[t + 2, n]
                     + buf[s + 4, n] * buf[t + 4, n]))


@point_function
def _inverse_metric_rows(buf, count, one):
    """gamma^ij from gamma_ij (rows _G) into rows _GI, by the factorisation of metric.py."""
    for n in range(count):
        d1, d2, d3, l21, l31, l32 = metric_factors(buf[_G, n], buf[_G + 1, n], buf[_G + 2, n],
                                                   buf[_G + 3, n], buf[_G + 4, n],
                                                   buf[_G + 5, n], one)
        ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
        buf[_GI, n] = ixx
        buf[_GI + 1, n] = ixy
        buf[_GI + 2, n] = ixz
        buf[_GI + 3, n] = iyy
        buf[_GI + 4, n] = iyz
        buf[_GI + 5, n] = izz


@point_function
def _christoffel_rows(buf, count, half):
    """Gamma_cab = 1/2 (d_a g_cb + d_b g_ca - d_c g_ab) for the 18 (c, pair(a, b)), rows _G1."""
    for n in range(count):
        for c in range(3):
            for a in range(3):
                for b in range(a, 3):
                    buf[_G1 + 6 * c + _pair(a, b), n] = half * (
                        buf[_DG + 6 * a + _pair(c, b), n] + buf[_DG + 6 * b + _pair(c, a), n]
                        - buf[_DG + 6 * c + _pair(a, b), n])


@point_function
def _raised_christoffel_rows(buf, count):
    """Gamma^m_ab = gamma^mc Gamma_cab for the 18 (m, pair(a, b)), rows _G2."""
    for n in range(count):
        for m in range(3):
            for a in range(3):
                for b in range(a, 3):
                    buf[_G2 + 6 * m + _pair(a, b), n] = (
                        buf[_GI + _pair(m, 0), n] * buf[_G1 + _pair(a, b), n]
                        + buf[_GI + _pair(m, 1), n] * buf[_G1 + 6 + _pair(a, b), n]
                        + buf[_GI + _pair(m, 2), n] * buf[_G1 + 12 + _pair(a, b), n])


@point_function
def _christoffel_contractions(buf, count, two):
    """T^d_mb = gamma^dc Gamma_mcb (rows _T), V_m = gamma^cd Gamma_mcd, W^m = gamma^cd
    Gamma^m_cd (rows _V, _W)."""
    for n in range(count):
        for m in range(3):
            for d in range(3):
                for b in range(3):
                    buf[_T + 9 * m + 3 * d + b, n] = (
                        buf[_GI + _pair(d, 0), n] * buf[_G1 + 6 * m + _pair(0, b), n]
                        + buf[_GI + _pair(d, 1), n] * buf[_G1 + 6 * m + _pair(1, b), n]
                        + buf[_GI + _pair(d, 2), n] * buf[_G1 + 6 * m + _pair(2, b), n])
    for n in range(count):
        for m in range(3):
            buf[_V + m, n] = _sym_contraction(buf, n, _GI, _G1 + 6 * m, two)
            buf[_W + m, n] = _sym_contraction(buf, n, _GI, _G2 + 6 * m, two)


@point_function
def _mixed_curvature_rows(buf, count):
    """K_m^b = K_mc gamma^cb, rows _KM + 3 m + b."""
    for n in range(count):
        for m in range(3):
            for b in range(3):
                buf[_KM + 3 * m + b, n] = (
                    buf[_KL + _pair(m, 0), n] * buf[_GI + _pair(0, b), n]
                    + buf[_KL + _pair(m, 1), n] * buf[_GI + _pair(1, b), n]
                    + buf[_KL + _pair(m, 2), n] * buf[_GI + _pair(2, b), n])


@point_function
def _ricci_row(buf, count, a, b, half):
    """R_ab = gamma^cd [1/2 (d_c d_b g_ad + d_a d_d g_cb - d_c d_d g_ab - d_a d_b g_cd)
    + Gamma^m_ad Gamma_mcb - Gamma^m_ab Gamma_mcd]  (module docstring)
    = 1/2 gamma^cd (...) + Gamma^m_ad T^d_mb - Gamma^m_ab V_m, row _RIC + pair(a, b)."""
    for n in range(count):
        second = 0.0
        for c in range(3):
            for d in range(3):
                second += buf[_GI + _pair(c, d), n] * (
                    buf[_DDG + 6 * _pair(c, b) + _pair(a, d), n]
                    + buf[_DDG + 6 * _pair(a, d) + _pair(c, b), n]
                    - buf[_DDG + 6 * _pair(c, d) + _pair(a, b), n]
                    - buf[_DDG + 6 * _pair(a, b) + _pair(c, d), n])
        quad = 0.0
        for m in range(3):
            quad += (buf[_G2 + 6 * m + _pair(a, 0), n] * buf[_T + 9 * m + b, n]
                     + buf[_G2 + 6 * m + _pair(a, 1), n] * buf[_T + 9 * m + 3 + b, n]
                     + buf[_G2 + 6 * m + _pair(a, 2), n] * buf[_T + 9 * m + 6 + b, n]
                     - buf[_G2 + 6 * m + _pair(a, b), n] * buf[_V + m, n])
        buf[_RIC + _pair(a, b), n] = half * second + quad


@point_function
def _hamiltonian_rows(buf, count, sixteen_pi, two):
    """H = R + K^2 - K_ij K^ij - 16 pi rho and its largest term, rows _OUT, _OUT + 1, with
    K = K_a^a and K_ij K^ij = K_a^b K_b^a."""
    for n in range(count):
        ricci = _sym_contraction(buf, n, _GI, _RIC, two)
        trace_k = buf[_KM, n] + buf[_KM + 4, n] + buf[_KM + 8, n]
        k_sq = (buf[_KM, n] * buf[_KM, n] + buf[_KM + 4, n] * buf[_KM + 4, n]
                + buf[_KM + 8, n] * buf[_KM + 8, n]
                + two * (buf[_KM + 1, n] * buf[_KM + 3, n] + buf[_KM + 2, n] * buf[_KM + 6, n]
                         + buf[_KM + 5, n] * buf[_KM + 7, n]))
        matter = sixteen_pi * buf[_RHO, n]
        buf[_OUT, n] = ricci + trace_k * trace_k - k_sq - matter
        buf[_OUT + 1, n] = max(max(abs(ricci), trace_k * trace_k), max(k_sq, abs(matter)))


@point_function
def _momentum_rows(buf, count, a, eight_pi, two):
    """M_a = gamma^bc (D_b K_ca - D_a K_bc) - 8 pi S_a and its largest term, rows _OUT + 2 + a
    and _OUT + 5 + a. With D_c K_ab = d_c K_ab - Gamma^m_ca K_mb - Gamma^m_cb K_am and
    X_a = Gamma^m_ab K_m^b:  gamma^bc D_b K_ca = gamma^bc d_b K_ca - W^m K_ma - X_a and
    gamma^bc D_a K_bc = gamma^bc d_a K_bc - 2 X_a."""
    for n in range(count):
        x_a = 0.0
        div_k = 0.0
        for m in range(3):
            x_a += (buf[_G2 + 6 * m + _pair(a, 0), n] * buf[_KM + 3 * m, n]
                    + buf[_G2 + 6 * m + _pair(a, 1), n] * buf[_KM + 3 * m + 1, n]
                    + buf[_G2 + 6 * m + _pair(a, 2), n] * buf[_KM + 3 * m + 2, n])
            div_k += (buf[_GI + _pair(m, 0), n] * buf[_DK + 6 * m + _pair(0, a), n]
                      + buf[_GI + _pair(m, 1), n] * buf[_DK + 6 * m + _pair(1, a), n]
                      + buf[_GI + _pair(m, 2), n] * buf[_DK + 6 * m + _pair(2, a), n]
                      - buf[_W + m, n] * buf[_KL + _pair(m, a), n])
        div_k -= x_a
        grad_k = _sym_contraction(buf, n, _GI, _DK + 6 * a, two) - two * x_a
        source = eight_pi * buf[_SRC + a, n]
        buf[_OUT + 2 + a, n] = div_k - grad_k - source
        buf[_OUT + 5 + a, n] = max(max(abs(div_k), abs(grad_k)), abs(source))


@point_function
def _enter_ring(gamma, i, column, start, span, r, w1, w2, inv_hx, ring, slot):
    """d_x g_p and d_xx g_p of grid column (i, ``column``) on the strip start - r..start + span
    - r - 1 (the strip widened by r in z) into ring slot ``slot`` (rows at _RING_STEP slot)."""
    for p in range(6):
        d1_d2_column(gamma, p, i, column, start - r, span, 0, r, w1, w2, inv_hx, ring,
                     _RING_STEP * slot + p, _RING_STEP * slot + 6 + p)


@point_function
def _strip_inputs(gamma, K, rho, S, i, j, start, count, span, r, w1, w2, inv_h, ring, centre,
                  period, buf):
    """The 72 derivatives and 16 values of the strip (i, j, start..start + count - 1) into the
    rows _G.._SRC of ``buf``, with d_x g and d_xx g from ring slot ``centre`` (= j mod
    ``period``) and the slots of columns j +- 1..r beside it."""
    u = np.uint64
    base = u(start)
    for p in range(6):
        value_column(gamma, p, i, j, start, count, buf, _G + p)
        value_column(K, p, i, j, start, count, buf, _KL + p)
        d1_d2_column(gamma, p, i, j, start, count, 2, r, w1, w2, inv_h[2], buf,
                     _DG + 12 + p, _DDG + 6 * _pair(2, 2) + p)
        d1_d2_column(gamma, p, i, j, start - r, span, 1, r, w1, w2, inv_h[1], ring,
                     _SIDE + p, _SIDE + 6 + p)
        # d_x g, d_xx g and d_xz g = d_z (d_x g) from the ring's centre slot.
        d1_row(ring, _RING_STEP * centre + p, _RING_STEP * centre + 6 + p, r, count,
               r, w1, inv_h[2], buf, _DG + p, _DDG + 6 * _pair(0, 0) + p,
               _DDG + 6 * _pair(0, 2) + p)
        # d_y g, d_yy g and d_yz g = d_z (d_y g).
        d1_row(ring, _SIDE + p, _SIDE + 6 + p, r, count, r, w1, inv_h[2], buf,
               _DG + 6 + p, _DDG + 6 * _pair(1, 1) + p, _DDG + 6 * _pair(1, 2) + p)
        # d_xy g = d_y (d_x g) across the ring's slots.
        d1_ring(ring, p, _RING_STEP, period, centre, r, count, r, w1, inv_h[1], buf,
                _DDG + 6 * _pair(0, 1) + p)
        d1_axes_column(K, p, i, j, start, count, r, 1, 1, 1, w1, inv_h[0], inv_h[1],
                       inv_h[2], buf, _DK + p, _DK + 6 + p, _DK + 12 + p)
    for n in range(count):
        buf[_RHO, n] = rho[i, j, base + u(n)]
    for a in range(3):
        value_column(S, a, i, j, start, count, buf, _SRC + a)


@grid_kernel
def adm_constraints_grid(gamma, K, rho, S, interior, w1, w2, inv_h, sixteen_pi, eight_pi,
                         H, M, H_scale, M_scale):
    """H, M_i and the size of their largest term; see the module docstring.

    Points within ``radius`` = len(w1) of a face are NaN whatever ``interior`` says there
    (the caller's interior points never lie there).

    Why strips (measured, bench_constraints.py): the point-at-a-time form of this kernel, with
    per-point 3x3 scratch arrays, compiled to scalar code only. Here every loop along a strip
    touches one buffer whose row stride is a compile-time constant and whose rows are
    compile-time constants (the algebra's point functions are called with literal indices),
    so LLVM can prove that its stores do not overlap its loads and vectorises it. The stencil
    loops copy from one grid array (or the ring buffer) into the buffer, as in
    :func:`emsource.kernels.stencils.d1_column`. Why the ring of first derivatives: the
    tensor-product stencils of the mixed derivatives were most of the loads of the kernel
    (DEVELOPERS.md, "Strip kernels").
    """
    u = np.uint64
    nx, ny, nz = rho.shape
    r = w1.shape[0]
    half = 0.5
    two = 2.0
    nan = np.nan
    period = 2 * r + 1  # ring slots: the columns j - r..j + r
    bands = (ny + _BAND - 1) // _BAND
    for task in prange(nx * bands):
        i = task // bands
        band = task - i * bands
        low = band * _BAND
        high = min(ny, low + _BAND)
        edge_i = (i < r) | (i >= nx - r)
        for j in range(low, high):
            edge = edge_i | (j < r) | (j >= ny - r)
            for k in range(nz):
                if edge | (k < r) | (k >= nz - r):
                    H[i, j, k] = nan
                    H_scale[i, j, k] = nan
                    for a in range(3):
                        M[a, i, j, k] = nan
                        M_scale[a, i, j, k] = nan
        first = max(low, r)
        last = min(high, ny - r)
        if edge_i | (first >= last):
            continue
        # On the thread's stack (see strip_buffers: no run-time overlap checks).
        buf = strip_buffer(_ROWS, _ROW_LENGTH, H)
        ring = strip_buffer(_RING_ROWS, _SPAN, H)
        for start in range(r, nz - r, _STRIP):
            count = min(_STRIP, nz - r - start)
            span = count + 2 * r
            base = u(start)
            # Walk the band's columns in order along y; column j + r enters the ring of d_x g,
            # d_xx g (on the strip widened by r in z), then column j is done.
            for entering in range(first - r, last + r):
                _enter_ring(gamma, i, entering, start, span, r, w1, w2, inv_h[0], ring,
                            entering % period)
                j = entering - r
                if j < first:
                    continue
                _strip_inputs(gamma, K, rho, S, i, j, start, count, span, r, w1, w2, inv_h,
                              ring, j % period, period, buf)
                # The algebra, one loop along the strip per call; literal indices (docstring).
                _inverse_metric_rows(buf, count, half + half)
                _christoffel_rows(buf, count, half)
                _raised_christoffel_rows(buf, count)
                _christoffel_contractions(buf, count, two)
                _mixed_curvature_rows(buf, count)
                _ricci_row(buf, count, 0, 0, half)
                _ricci_row(buf, count, 0, 1, half)
                _ricci_row(buf, count, 0, 2, half)
                _ricci_row(buf, count, 1, 1, half)
                _ricci_row(buf, count, 1, 2, half)
                _ricci_row(buf, count, 2, 2, half)
                _hamiltonian_rows(buf, count, sixteen_pi, two)
                _momentum_rows(buf, count, 0, eight_pi, two)
                _momentum_rows(buf, count, 1, eight_pi, two)
                _momentum_rows(buf, count, 2, eight_pi, two)
                for n in range(count):
                    k = base + u(n)
                    inside = interior[i, j, k] != 0
                    H[i, j, k] = buf[_OUT, n] if inside else nan
                    H_scale[i, j, k] = buf[_OUT + 1, n] if inside else nan
                for a in range(3):
                    for n in range(count):
                        k = base + u(n)
                        inside = interior[i, j, k] != 0
                        M[a, i, j, k] = buf[_OUT + 2 + a, n] if inside else nan
                        M_scale[a, i, j, k] = buf[_OUT + 5 + a, n] if inside else nan
