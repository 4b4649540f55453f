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

H needs only the scalar R = gamma^ij R_ij, so the kernel never forms R_ij. Contracted (the
first two and the last two second-derivative terms are equal after renaming indices;
``tests/test_constraint_strips.py`` checks every identity below exactly in rational arithmetic
with sympy, and the kernel against a long-double R_ij route):

    R   = R_2 + R_G,
    R_2 = sum_(k,l) sum_(q,s) (gamma^kq gamma^ls - gamma^kl gamma^qs) d_q d_s g_kl
        = sum_p m_p [a_p . (D_p b_p) - gamma^p tr(gamma^-1 D_p)],
    R_G = Gamma_kij Gamma^kij - V_m V^m = sum_mn gamma^mn [tr(X_m X_n) - tr X_m tr X_n],

with p = (k, l) packed, m_p = 1 for k = l and 2 otherwise, D_p the 3x3 matrix d_q d_s g_kl,
(a_p)_q = gamma^kq, (b_p)_s = gamma^ls, X_m = Gamma_m gamma^-1 (the 3x3 matrix
(X_m)_a^b = Gamma_mac gamma^cb) and V_m = gamma^ij Gamma_mij = tr X_m. The momentum
constraint, with Y = gamma^-1 K (Y^m_c = gamma^ma K_ac) and Z_a = Gamma^m_ab K_m^b
= (X_m)_a^c Y^m_c:

    gamma^bc D_b K_ca = gamma^bc d_b K_ca - V_m Y^m_a - Z_a,
    gamma^bc D_a K_bc = gamma^bc d_a K_bc - 2 Z_a,
    K = tr Y,   K_ij K^ij = tr(Y Y).

Every derivative goes through :mod:`emsource.kernels.stencils` (centred, order 2, 4 or 6 as
the weights say). Arrays are float64: ``gamma`` and ``K`` (6, nx, ny, nz) packed
(xx, xy, xz, yy, yz, zz), ``rho`` (nx, ny, nz), ``S`` (3, nx, ny, nz) covariant, ``interior``
uint8 (nx, ny, nz), 1 where the whole stencil lies on valid data (the caller guarantees it
stays ``radius`` points away from the faces). Outputs are written at every point: the residuals
and the absolute value of their largest term (R, K^2, K_ij K^ij, 16 pi rho for H; D_j K^j_i,
D_i K, 8 pi S_i for M_i) where ``interior`` is 1, NaN elsewhere.

How the kernel is laid out (why: see :func:`adm_constraints_grid`; measurements in
DEVELOPERS.md, "Strip kernels"). A parallel task is one x index and a band of columns along
y (:func:`_band_width`: 32, fewer for long columns along z); the tasks are ordered band by
band, so a thread walks every x index of one band and the 2 r + 1 x-planes its stencils read
stay in L2. Each grid column (i, j) is done in
strips of up to ``_STRIP`` points along z, with small buffers per thread on its stack
(:func:`emsource.kernels.strip_buffers.strip_buffer`): gamma^ij of the strip (``_INV_ROWS``
rows, read from the grid and inverted first), the 36 first derivatives of gamma and K
(``_ROWS`` rows) and one accumulator row of R_2 (``_SUM_ROWS``). The 36 second derivatives of
the metric are never stored: each component's six are contracted into R_2 in the loop that
forms its mixed ones (:func:`_mixed_derivatives_contracted`; only d_zz g passes through one
row). Then one loop along the strip (:func:`_constraint_rows`) does all the algebra, reading K,
rho and S_i from the grid, and writes H, M_i and their scales to the grid. Every loop runs
along the strip with rows fixed outside it, so that LLVM vectorises it across points; the rows
are listed at ``_ROWS`` below (p: packed component (xx, xy, xz, yy, yz, zz); q, s: derivative
axes; ``_pair(a, b)``: the packed index of a symmetric pair).

The mixed second derivatives of the metric are derivatives of first derivatives (the
tensor-product stencil is the product of the 1-D ones, so only rounding differs): a task walks
its band's columns in order; a ring buffer (``_RING_ROWS``, ``_SPAN``, on the stack too) keeps
d_x g and d_xx g of the columns j - r..j + r on the strip widened by r points at each end in
z, each column entering it once; then d_xz g = d_z (d_x g) and d_xy g = d_y (d_x g) come from
the ring, d_yz g = d_z (d_y g) from d_y g on the widened strip (the stencils of
:func:`emsource.kernels.stencils.d1_row` and :func:`emsource.kernels.stencils.d1_ring`, term
by term). Per metric component that is 16 loads from the grid and 16 from the stack buffers
per point at order 4 instead of 63 from the grid, and 9 grid columns touched instead of 25.

Measured (``benchmarks/bench_constraints.py``, README "Speed"): see DEVELOPERS.md, "Strip
kernels", for the time against main's kernel that built R_ij, what bounds it and what was
tried and not kept.
"""


from __future__ import annotations

import numpy as np
from numba import prange

from ._compile import grid_kernel, point_function, prefer_512_bit_vectors
from .strip_buffers import strip_buffer
from .metric import inverse_metric, metric_factors
from .stencils import d1_axes_column, d1_d2_column

#: Points along z per strip (the row length of the per-column buffer). A literal, so that LLVM
#: sees the buffer's row stride as a constant and can prove that rows do not overlap.
_STRIP = 64

# Rows of the per-column buffer (module docstring).
_DG = 0     # d_q gamma_p at 6 q + p                    18 rows
_DK = 18    # d_q K_p at 18 + 6 q + p                   18
_DZZ = 36   # d_z d_z gamma_p of ONE p (rewritten for each p)  1
_ROWS = 37
# Rows of the buffer of the inverse metric (a stack slot of its own: the loops that read
# gamma^ij at rows chosen at run time (by p) write rows of the first buffer chosen at run time
# too, and LLVM could not prove those apart; in two slots it knows they are).
_GI = 0     # gamma^p                                   6
_INV_ROWS = 6
#: Row stride of the buffer in doubles: a strip and one cache line, so that rows do not lie a
#: power of two apart (see the measurement in DEVELOPERS.md, "Strip kernels").
_ROW_LENGTH = _STRIP + 8

# The second, one-row buffer (a stack slot of its own, so that LLVM knows that the
# contraction's stores into it overlap none of the rows it reads from the first one and from
# the ring): the second-derivative part of R, summed over the components p.
_R2 = 0
_SUM_ROWS = 1

#: Columns along y per parallel task (one x index and a band of y), at most: the task walks them
#: in order, so each column's d_x g is computed once and kept for the mixed derivatives.
_BAND = 32
#: Grid points per x-plane of a band that the 2 r + 1 x-planes of its stencils may hold, so
#: that the planes a thread's next task (the next x index) reads again stay in a 2 MiB L2:
#: 12 components of 8 bytes each, about 1 MiB in all (measured, see :func:`_band_width`).
_BAND_PLANE_POINTS = 2**20 // 96
#: Columns per band, at least: each band's walk enters 2 r columns into the ring before its own.
_BAND_LEAST = 8


@point_function
def _band_width(nz, r):
    """Columns along y per task: :data:`_BAND`, halved while the task's 2 r + 1 x-planes of the
    band (``nz`` points per column) would hold more than :data:`_BAND_PLANE_POINTS` points;
    :data:`_BAND` again where not even :data:`_BAND_LEAST` columns fit (the planes cannot stay
    in L2, and the widest band enters the fewest extra columns into its ring). Powers of two, so
    that bands divide the 2^k grids evenly (widths that leave a short band were slower,
    measured). Measured against a fixed band of 32 at 64^3-256^3 (two threads; DEVELOPERS.md
    "Strip kernels")."""
    width = _BAND
    while width * (2 * r + 1) * nz > _BAND_PLANE_POINTS:
        if width <= _BAND_LEAST:
            return _BAND
        width //= 2
    return width


#: Row length of the ring buffer: a strip widened by the largest stencil radius (3) at each end.
_SPAN = 72
# Rows of the ring buffer: slot s (grid column j = s mod (2 r + 1)) holds d_x g_p at
# _RING_STEP s + p and d_xx g_p at _RING_STEP s + 6 + p, on the strip widened by r in z;
# after the 7 slots of order 6, d_y g_p at _SIDE and d_yy g_p at _SIDE + 1 (column j, the
# component p being worked on).
_RING_STEP = 12
_SIDE = 7 * _RING_STEP
_RING_ROWS = _SIDE + 2


@point_function
def _pair(a, b):
    """Packed index of the symmetric pair (a, b): xx 0, xy 1, xz 2, yy 3, yz 4, zz 5.

    Called with literal indices (or indices of loops LLVM unrolls), it folds to a constant,
    so every buffer row below is a compile-time constant."""
    lo = min(a, b)
    hi = max(a, b)
    return lo * (5 - lo) // 2 + hi


@point_function
def _inverse_metric_rows(gamma, i, j, start, count, buf, one):
    """gamma^ij of the strip (i, j, start..start + count - 1) into rows _GI, read from the grid
    and inverted by the factorisation of metric.py."""
    u = np.uint64
    base = u(start)
    for n in range(count):
        k = base + u(n)
        d1, d2, d3, l21, l31, l32 = metric_factors(gamma[0, i, j, k], gamma[1, i, j, k],
                                                   gamma[2, i, j, k], gamma[3, i, j, k],
                                                   gamma[4, i, j, k], gamma[5, i, j, k], one)
        ixx, ixy, ixz, iyy, iyz, izz = inverse_metric(d1, d2, d3, l21, l31, l32, one)
        buf[_GI, n] = ixx
        buf[_GI + 1, n] = ixy
        buf[_GI + 2, n] = ixz
        buf[_GI + 3, n] = iyy
        buf[_GI + 4, n] = iyz
        buf[_GI + 5, n] = izz


@point_function
def _contracted_second_derivatives(buf, sums, n, ka, kb, kc, la, lb, lc, kl, mult, dxx, dxy,
                                   dxz, dyy, dyz, dzz, two):
    """sums[_R2, n] += m_kl (gamma^kq gamma^ls - gamma^kl gamma^qs) d_q d_s g_kl, summed over
    q, s, for one component p = (k, l) with the six second derivatives d_q d_s g_kl given
    (m_kl = ``mult`` = 1 for k = l, else 2: the packed component stands for g_kl and g_lk).

    Summed over p this is the second-derivative part of R (module docstring), written as
    m_kl (a . (D b) - gamma^kl tr(gamma^-1 D)) with D the 3x3 matrix d_q d_s g_kl and
    a_q = gamma^kq, b_s = gamma^ls at rows ``ka``, ``kb``, ``kc`` and ``la``, ``lb``,
    ``lc``, gamma^kl at row ``kl``."""
    b0 = buf[la, n]
    b1 = buf[lb, n]
    b2 = buf[lc, n]
    along = (buf[ka, n] * (dxx * b0 + dxy * b1 + dxz * b2)
             + buf[kb, n] * (dxy * b0 + dyy * b1 + dyz * b2)
             + buf[kc, n] * (dxz * b0 + dyz * b1 + dzz * b2))
    trace = (buf[_GI, n] * dxx + buf[_GI + 3, n] * dyy + buf[_GI + 5, n] * dzz
             + two * (buf[_GI + 1, n] * dxy + buf[_GI + 2, n] * dxz + buf[_GI + 4, n] * dyz))
    sums[_R2, n] += mult * (along - buf[kl, n] * trace)


@point_function
def _mixed_derivatives_contracted(ring, p, centre, period, r, count, w1, inv_hy, inv_hz, buf,
                                  inv, sums, two):
    """For the component p = (k, l), in one loop along the strip: copy d_x g_p and d_y g_p
    (ring slot ``centre`` and the side rows, on the strip widened by r) to rows _DG + p and
    _DG + 6 + p, form d_xz g = d_z (d_x g), d_yz g = d_z (d_y g) and d_xy g = d_y (d_x g)
    (across the ring's slots; the stencils of :func:`emsource.kernels.stencils.d1_row` and
    :func:`emsource.kernels.stencils.d1_ring`, term by term) and contract them at once with
    d_xx g, d_yy g (ring) and d_zz g (row _DZZ) into row _R2 of ``sums``
    (:func:`_contracted_second_derivatives`): the six second derivatives never reach a buffer
    row of their own. Rows resolved once, outside the loop; ``radius`` 1 to 3."""
    u = np.uint64
    k = 0 if p < 3 else (1 if p < 5 else 2)
    l = p - k * (5 - k) // 2
    mult = 1.0 if k == l else two
    ka = _GI + _pair(k, 0)
    kb = _GI + _pair(k, 1)
    kc = _GI + _pair(k, 2)
    la = _GI + _pair(l, 0)
    lb = _GI + _pair(l, 1)
    lc = _GI + _pair(l, 2)
    kl = _GI + p
    cx = _RING_STEP * centre + p
    cxx = cx + 6
    base = u(r)
    z1 = w1[0] * inv_hz
    y1 = w1[0] * inv_hy
    p1 = p + _RING_STEP * ((centre + 1) % period)
    m1 = p + _RING_STEP * ((centre + period - 1) % period)
    if r == 1:
        for n in range(count):
            q = base + u(n)
            dx = ring[cx, q]
            dy = ring[_SIDE, q]
            buf[_DG + p, n] = dx
            buf[_DG + 6 + p, n] = dy
            dxz = z1 * (ring[cx, q + u(1)] - ring[cx, q - u(1)])
            dyz = z1 * (ring[_SIDE, q + u(1)] - ring[_SIDE, q - u(1)])
            dxy = y1 * (ring[p1, q] - ring[m1, q])
            _contracted_second_derivatives(inv, sums, n, ka, kb, kc, la, lb, lc, kl, mult,
                                           ring[cxx, q], dxy, dxz, ring[_SIDE + 1, q], dyz,
                                           buf[_DZZ, n], two)
    elif r == 2:
        z2 = w1[1] * inv_hz
        y2 = w1[1] * inv_hy
        p2 = p + _RING_STEP * ((centre + 2) % period)
        m2 = p + _RING_STEP * ((centre + period - 2) % period)
        for n in range(count):
            q = base + u(n)
            dx = ring[cx, q]
            dy = ring[_SIDE, q]
            buf[_DG + p, n] = dx
            buf[_DG + 6 + p, n] = dy
            dxz = (z1 * (ring[cx, q + u(1)] - ring[cx, q - u(1)])
                   + z2 * (ring[cx, q + u(2)] - ring[cx, q - u(2)]))
            dyz = (z1 * (ring[_SIDE, q + u(1)] - ring[_SIDE, q - u(1)])
                   + z2 * (ring[_SIDE, q + u(2)] - ring[_SIDE, q - u(2)]))
            dxy = y1 * (ring[p1, q] - ring[m1, q]) + y2 * (ring[p2, q] - ring[m2, q])
            _contracted_second_derivatives(inv, sums, n, ka, kb, kc, la, lb, lc, kl, mult,
                                           ring[cxx, q], dxy, dxz, ring[_SIDE + 1, q], dyz,
                                           buf[_DZZ, n], two)
    else:
        z2 = w1[1] * inv_hz
        y2 = w1[1] * inv_hy
        z3 = w1[2] * inv_hz
        y3 = w1[2] * inv_hy
        p2 = p + _RING_STEP * ((centre + 2) % period)
        m2 = p + _RING_STEP * ((centre + period - 2) % period)
        p3 = p + _RING_STEP * ((centre + 3) % period)
        m3 = p + _RING_STEP * ((centre + period - 3) % period)
        for n in range(count):
            q = base + u(n)
            dx = ring[cx, q]
            dy = ring[_SIDE, q]
            buf[_DG + p, n] = dx
            buf[_DG + 6 + p, n] = dy
            dxz = (z1 * (ring[cx, q + u(1)] - ring[cx, q - u(1)])
                   + z2 * (ring[cx, q + u(2)] - ring[cx, q - u(2)])
                   + z3 * (ring[cx, q + u(3)] - ring[cx, q - u(3)]))
            dyz = (z1 * (ring[_SIDE, q + u(1)] - ring[_SIDE, q - u(1)])
                   + z2 * (ring[_SIDE, q + u(2)] - ring[_SIDE, q - u(2)])
                   + z3 * (ring[_SIDE, q + u(3)] - ring[_SIDE, q - u(3)]))
            dxy = (y1 * (ring[p1, q] - ring[m1, q]) + y2 * (ring[p2, q] - ring[m2, q])
                   + y3 * (ring[p3, q] - ring[m3, q]))
            _contracted_second_derivatives(inv, sums, n, ka, kb, kc, la, lb, lc, kl, mult,
                                           ring[cxx, q], dxy, dxz, ring[_SIDE + 1, q], dyz,
                                           buf[_DZZ, n], two)


@point_function
def _christoffel_times_inverse(buf, inv, n, m, half):
    """X_m = Gamma_m gamma^-1 at point n, as 9 values (X_m)_a^b = Gamma_mac gamma^cb in the
    order (a, b) = (0, 0), (0, 1), ..., (2, 2), with the lowered Christoffel symbols
    Gamma_mac = 1/2 (d_a g_mc + d_c g_ma - d_m g_ac) of the first index ``m`` (a literal)."""
    c00 = buf[_DG + _pair(m, 0), n] - half * buf[_DG + 6 * m, n]
    c11 = buf[_DG + 6 + _pair(m, 1), n] - half * buf[_DG + 6 * m + 3, n]
    c22 = buf[_DG + 12 + _pair(m, 2), n] - half * buf[_DG + 6 * m + 5, n]
    c01 = half * (buf[_DG + _pair(m, 1), n] + buf[_DG + 6 + _pair(m, 0), n]
                  - buf[_DG + 6 * m + 1, n])
    c02 = half * (buf[_DG + _pair(m, 2), n] + buf[_DG + 12 + _pair(m, 0), n]
                  - buf[_DG + 6 * m + 2, n])
    c12 = half * (buf[_DG + 6 + _pair(m, 2), n] + buf[_DG + 12 + _pair(m, 1), n]
                  - buf[_DG + 6 * m + 4, n])
    i00 = inv[_GI, n]
    i01 = inv[_GI + 1, n]
    i02 = inv[_GI + 2, n]
    i11 = inv[_GI + 3, n]
    i12 = inv[_GI + 4, n]
    i22 = inv[_GI + 5, n]
    return (c00 * i00 + c01 * i01 + c02 * i02,
            c00 * i01 + c01 * i11 + c02 * i12,
            c00 * i02 + c01 * i12 + c02 * i22,
            c01 * i00 + c11 * i01 + c12 * i02,
            c01 * i01 + c11 * i11 + c12 * i12,
            c01 * i02 + c11 * i12 + c12 * i22,
            c02 * i00 + c12 * i01 + c22 * i02,
            c02 * i01 + c12 * i11 + c22 * i12,
            c02 * i02 + c12 * i12 + c22 * i22)


@point_function
def _trace_of_product(x, y):
    """tr(X Y) = X_a^b Y_b^a for two 3x3 matrices given as 9 values in row order."""
    return (x[0] * y[0] + x[1] * y[3] + x[2] * y[6]
            + x[3] * y[1] + x[4] * y[4] + x[5] * y[7]
            + x[6] * y[2] + x[7] * y[5] + x[8] * y[8])


@point_function
def _raised_curvature(buf, n, K, i, j, k):
    """Y = gamma^-1 K at point n of the strip (grid point (i, j, k)): Y^m_c = gamma^ma K_ac,
    9 values in the order (m, c)."""
    i00 = buf[_GI, n]
    i01 = buf[_GI + 1, n]
    i02 = buf[_GI + 2, n]
    i11 = buf[_GI + 3, n]
    i12 = buf[_GI + 4, n]
    i22 = buf[_GI + 5, n]
    k00 = K[0, i, j, k]
    k01 = K[1, i, j, k]
    k02 = K[2, i, j, k]
    k11 = K[3, i, j, k]
    k12 = K[4, i, j, k]
    k22 = K[5, i, j, k]
    return (i00 * k00 + i01 * k01 + i02 * k02,
            i00 * k01 + i01 * k11 + i02 * k12,
            i00 * k02 + i01 * k12 + i02 * k22,
            i01 * k00 + i11 * k01 + i12 * k02,
            i01 * k01 + i11 * k11 + i12 * k12,
            i01 * k02 + i11 * k12 + i12 * k22,
            i02 * k00 + i12 * k01 + i22 * k02,
            i02 * k01 + i12 * k11 + i22 * k12,
            i02 * k02 + i12 * k12 + i22 * k22)


@point_function
def _momentum_terms(buf, inv, n, a, x0, x1, x2, v0, v1, v2, y, two):
    """(gamma^bc D_b K_ca, gamma^bc D_a K_bc) at point n for the literal index ``a``.

    With D_c K_ab = d_c K_ab - Gamma^m_ca K_mb - Gamma^m_cb K_am, V_m = tr X_m,
    Y = gamma^-1 K and Z_a = Gamma^m_ab K_m^b = (X_m)_a^c Y^m_c (X_m of
    :func:`_christoffel_times_inverse`):
    gamma^bc D_b K_ca = gamma^bc d_b K_ca - V_m Y^m_a - Z_a and
    gamma^bc D_a K_bc = gamma^bc d_a K_bc - 2 Z_a."""
    z = (x0[3 * a] * y[0] + x0[3 * a + 1] * y[1] + x0[3 * a + 2] * y[2]
         + x1[3 * a] * y[3] + x1[3 * a + 1] * y[4] + x1[3 * a + 2] * y[5]
         + x2[3 * a] * y[6] + x2[3 * a + 1] * y[7] + x2[3 * a + 2] * y[8])
    i00 = inv[_GI, n]
    i01 = inv[_GI + 1, n]
    i02 = inv[_GI + 2, n]
    i11 = inv[_GI + 3, n]
    i12 = inv[_GI + 4, n]
    i22 = inv[_GI + 5, n]
    div_k = (i00 * buf[_DK + _pair(0, a), n] + i01 * buf[_DK + _pair(1, a), n]
             + i02 * buf[_DK + _pair(2, a), n]
             + i01 * buf[_DK + 6 + _pair(0, a), n] + i11 * buf[_DK + 6 + _pair(1, a), n]
             + i12 * buf[_DK + 6 + _pair(2, a), n]
             + i02 * buf[_DK + 12 + _pair(0, a), n] + i12 * buf[_DK + 12 + _pair(1, a), n]
             + i22 * buf[_DK + 12 + _pair(2, a), n]
             - (v0 * y[a] + v1 * y[3 + a] + v2 * y[6 + a]) - z)
    grad_k = (i00 * buf[_DK + 6 * a, n] + i11 * buf[_DK + 6 * a + 3, n]
              + i22 * buf[_DK + 6 * a + 5, n]
              + two * (i01 * buf[_DK + 6 * a + 1, n] + i02 * buf[_DK + 6 * a + 2, n]
                       + i12 * buf[_DK + 6 * a + 4, n] - z))
    return div_k, grad_k


@point_function
def _constraint_rows(K, rho, S, interior, i, j, start, buf, inv, sums, count, sixteen_pi, eight_pi,
                     half, two, H, M, H_scale, M_scale):
    """H, M_a and their largest terms into ``H``, ``M``, ``H_scale``, ``M_scale`` (NaN where
    ``interior`` is 0), one loop along the strip (module docstring):

        R = R_2 + sum_mn gamma^mn (tr(X_m X_n) - tr X_m tr X_n),   X_m = Gamma_m gamma^-1,
        K = tr Y,  K_ij K^ij = tr(Y Y),  Y = gamma^-1 K,

    with R_2 (row _R2 of ``sums``) summed by :func:`_mixed_derivatives_contracted`; K_ij,
    rho and S_i are read from the grid (the strip (i, j, start..start + count - 1))."""
    u = np.uint64
    base = u(start)
    nan = np.nan
    for n in range(count):
        k = base + u(n)
        inside = interior[i, j, k] != 0
        x0 = _christoffel_times_inverse(buf, inv, n, 0, half)
        x1 = _christoffel_times_inverse(buf, inv, n, 1, half)
        x2 = _christoffel_times_inverse(buf, inv, n, 2, half)
        v0 = x0[0] + x0[4] + x0[8]
        v1 = x1[0] + x1[4] + x1[8]
        v2 = x2[0] + x2[4] + x2[8]
        quad = (inv[_GI, n] * (_trace_of_product(x0, x0) - v0 * v0)
                + inv[_GI + 3, n] * (_trace_of_product(x1, x1) - v1 * v1)
                + inv[_GI + 5, n] * (_trace_of_product(x2, x2) - v2 * v2)
                + two * (inv[_GI + 1, n] * (_trace_of_product(x0, x1) - v0 * v1)
                         + inv[_GI + 2, n] * (_trace_of_product(x0, x2) - v0 * v2)
                         + inv[_GI + 4, n] * (_trace_of_product(x1, x2) - v1 * v2)))
        ricci = sums[_R2, n] + quad
        y = _raised_curvature(inv, n, K, i, j, k)
        trace_k = y[0] + y[4] + y[8]
        k_sq = _trace_of_product(y, y)
        matter = sixteen_pi * rho[i, j, k]
        H[i, j, k] = ricci + trace_k * trace_k - k_sq - matter if inside else nan
        H_scale[i, j, k] = (max(max(abs(ricci), trace_k * trace_k), max(k_sq, abs(matter)))
                            if inside else nan)
        div_x, grad_x = _momentum_terms(buf, inv, n, 0, x0, x1, x2, v0, v1, v2, y, two)
        div_y, grad_y = _momentum_terms(buf, inv, n, 1, x0, x1, x2, v0, v1, v2, y, two)
        div_z, grad_z = _momentum_terms(buf, inv, n, 2, x0, x1, x2, v0, v1, v2, y, two)
        source_x = eight_pi * S[0, i, j, k]
        source_y = eight_pi * S[1, i, j, k]
        source_z = eight_pi * S[2, i, j, k]
        M[0, i, j, k] = div_x - grad_x - source_x if inside else nan
        M[1, i, j, k] = div_y - grad_y - source_y if inside else nan
        M[2, i, j, k] = div_z - grad_z - source_z if inside else nan
        M_scale[0, i, j, k] = max(max(abs(div_x), abs(grad_x)), abs(source_x)) if inside else nan
        M_scale[1, i, j, k] = max(max(abs(div_y), abs(grad_y)), abs(source_y)) if inside else nan
        M_scale[2, i, j, k] = max(max(abs(div_z), abs(grad_z)), abs(source_z)) if inside else nan


@point_function
def _fill_nan(H, M, H_scale, M_scale, i, j, k0, k1, nan):
    """NaN into every output at the points (i, j, k0..k1 - 1)."""
    for k in range(k0, k1):
        H[i, j, k] = nan
        H_scale[i, j, k] = nan
        for a in range(3):
            M[a, i, j, k] = nan
            M_scale[a, i, j, k] = nan


@point_function
def _enter_ring(gamma, i, column, start, span, r, w1, w2, inv_hx, ring, slot):
    """d_x g_p and d_xx g_p of grid column (i, ``column``) on the strip start - r..start + span
    - r - 1 (the strip widened by r in z) into ring slot ``slot`` (rows at _RING_STEP slot)."""
    for p in range(6):
        d1_d2_column(gamma, p, i, column, start - r, span, 0, r, w1, w2, inv_hx, ring,
                     _RING_STEP * slot + p, _RING_STEP * slot + 6 + p)


@point_function
def _strip_inputs(gamma, K, i, j, start, count, span, r, w1, w2, inv_h, ring, centre, period,
                  buf, inv, sums, one, two):
    """gamma^ij of the strip (i, j, start..start + count - 1) into ``inv``, the 36 first
    derivatives of gamma and K into rows _DG, _DK of ``buf``, and the second-derivative part R_2
    of R into row _R2 of ``sums``: each component's six second derivatives are contracted as
    they are formed (:func:`_mixed_derivatives_contracted`), with d_x g and d_xx g from ring
    slot ``centre`` (= j mod ``period``) and the slots of columns j +- 1..r beside it."""
    _inverse_metric_rows(gamma, i, j, start, count, inv, one)
    for n in range(count):
        sums[_R2, n] = 0.0
    for p in range(6):
        d1_d2_column(gamma, p, i, j, start, count, 2, r, w1, w2, inv_h[2], buf,
                     _DG + 12 + p, _DZZ)
        d1_d2_column(gamma, p, i, j, start - r, span, 1, r, w1, w2, inv_h[1], ring,
                     _SIDE, _SIDE + 1)
        _mixed_derivatives_contracted(ring, p, centre, period, r, count, w1, inv_h[1],
                                      inv_h[2], buf, inv, sums, two)
        d1_axes_column(K, p, i, j, start, count, r, 1, 1, 1, w1, inv_h[0], inv_h[1],
                       inv_h[2], buf, _DK + p, _DK + 6 + p, _DK + 12 + p)


@grid_kernel
def adm_constraints_grid(gamma, K, rho, S, interior, w1, w2, inv_h, sixteen_pi, eight_pi,
                         H, M, H_scale, M_scale):
    """H, M_i and the size of their largest term; see the module docstring.

    Points within ``radius`` = len(w1) of a face are NaN whatever ``interior`` says there
    (the caller's interior points never lie there).

    Why strips (measured, bench_constraints.py): the point-at-a-time form of this kernel, with
    per-point 3x3 scratch arrays, compiled to scalar code only. Here every loop along a strip
    touches stack buffers whose row strides are compile-time constants, and the gamma^ij rows a
    loop picks at run time (by the component p) lie in a buffer it does not write, so LLVM can
    prove that its stores do not overlap its loads and vectorises it. The stencil loops copy
    from one grid array (or the ring buffer) into the buffer, as in
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
    width = _band_width(nz, r)
    bands = (ny + width - 1) // width
    for task in prange(nx * bands):
        # 512-bit vectors: 0.92-0.98 / 0.93-1.02 / 0.86-0.97 of the 256-bit time at orders
        # 2 / 4 / 6 (64^3 and 128^3, one and two threads, interleaved in one process;
        # bench_constraints.py, DEVELOPERS.md "Strip kernels").
        prefer_512_bit_vectors()
        band = task // nx
        i = task - band * nx
        low = band * width
        high = min(ny, low + width)
        edge_i = (i < r) | (i >= nx - r)
        for j in range(low, high):
            # NaN within r of a face: whole columns at the x and y faces, r points at each end
            # of the others, instead of a test at every point of the band (same bits; time
            # 0.96-1.00 / 0.97-0.98 / 0.99-1.02 at orders 2 / 4 / 6, 64^3 and 128^3, one and
            # two threads, interleaved).
            if edge_i | (j < r) | (j >= ny - r):
                _fill_nan(H, M, H_scale, M_scale, i, j, 0, nz, nan)
            else:
                _fill_nan(H, M, H_scale, M_scale, i, j, 0, r, nan)
                _fill_nan(H, M, H_scale, M_scale, i, j, nz - r, nz, nan)
        first = max(low, r)
        last = min(high, ny - r)
        if edge_i | (first >= last):
            continue
        # On the thread's stack (see strip_buffers: no run-time overlap checks).
        buf = strip_buffer(_ROWS, _ROW_LENGTH, H)
        ring = strip_buffer(_RING_ROWS, _SPAN, H)
        inv = strip_buffer(_INV_ROWS, _ROW_LENGTH, H)
        sums = strip_buffer(_SUM_ROWS, _ROW_LENGTH, H)
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
                _strip_inputs(gamma, K, i, j, start, count, span, r, w1, w2, inv_h, ring,
                              j % period, period, buf, inv, sums, half + half, two)
                _constraint_rows(K, rho, S, interior, i, j, start, buf, inv, sums, count,
                                 sixteen_pi, eight_pi, half, two, H, M, H_scale, M_scale)
