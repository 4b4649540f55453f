"""Centred finite-difference stencils of order 2, 4 and 6 as inlined point functions.

Weights, for grid spacing h and stencil radius r = order / 2:

    f'(x)  ~ (1/h)   sum_{m=1..r} w_m (f(x + m h) - f(x - m h))
    f''(x) ~ (1/h^2) [ c f(x) + sum_{m=1..r} v_m (f(x + m h) + f(x - m h)) ]

order 2: w = (1/2),            c = -2,      v = (1)
order 4: w = (2/3, -1/12),     c = -5/2,    v = (4/3, -1/12)
order 6: w = (3/4, -3/20, 1/60), c = -49/18, v = (3/2, -3/20, 1/90)

Staggered first derivative at the half point x + h/2, from values at x + (m - 1/2 +- 1/2) h
(used where a quantity sits between the points of another, as on an edge-staggered grid):

    f'(x + h/2) ~ (1/h) sum_{m=1..r} s_m (f(x + m h) - f(x - (m - 1) h))

order 2: s = (1),  order 4: s = (9/8, -1/24)  (staggered orders: :data:`STAGGERED_ORDERS`).

Reference: B. Fornberg, "Generation of finite difference formulas on arbitrarily spaced grids",
Math. Comp. 51, 699 (1988), Table 1 (values from memory; ``tests/test_stencils.py`` derives
them independently from Taylor series with sympy).

The point functions take a (ncomp, nx, ny, nz) array, a component, a grid index and an axis;
weights come as float arrays built once per call by :func:`first_derivative_weights` and
:func:`second_derivative_weights` (Python level, in the data's dtype), so one compiled kernel
serves every order. Callers keep ``radius`` points away from the faces.

:func:`d1_column` is the first derivative for a whole grid column (i, j, k0..k0+count-1) at once,
written so that LLVM vectorises it along z (see its docstring); use it where a kernel needs many
derivatives per point. :func:`d2_column` and :func:`d11_column` are its second and mixed
derivatives, :func:`d1_d2_column` the first and second derivative along one axis in one pass,
:func:`d1_axes_column` the first derivatives along all three axes in one loop, and
:func:`value_column` copies the column's values (the same buffer layout). :func:`d1_row` and
:func:`d1_ring` differentiate rows of a strip buffer that hold first derivatives (along the row,
and across rows that hold neighbouring grid columns), which gives mixed second derivatives with
fewer loads than :func:`d11_column` (the constraint kernel's route).
:func:`d1_directions_column` and :func:`divergence_column` take the array index step of each
grid direction instead of assuming the array's axes are the grid's (strips that run through
several columns, data stored in another axis order).
"""

from __future__ import annotations

import numpy as np

from ._compile import point_function

__all__ = [
    "SUPPORTED_ORDERS",
    "STAGGERED_ORDERS",
    "first_derivative_weights",
    "staggered_derivative_weights",
    "second_derivative_weights",
    "stencil_radius",
    "d1",
    "d2",
    "d11",
    "d1_column",
    "d1_axes_column",
    "d2_column",
    "d11_column",
    "d1_d2_column",
    "d1_row",
    "d1_ring",
    "value_column",
    "d1_staggered",
    "d1_directions_column",
    "divergence_column",
]

SUPPORTED_ORDERS = (2, 4, 6)

_FIRST = {
    2: (1.0 / 2.0,),
    4: (2.0 / 3.0, -1.0 / 12.0),
    6: (3.0 / 4.0, -3.0 / 20.0, 1.0 / 60.0),
}
STAGGERED_ORDERS = (2, 4)

_STAGGERED = {
    2: (1.0,),
    4: (9.0 / 8.0, -1.0 / 24.0),
}
_SECOND = {
    2: (-2.0, (1.0,)),
    4: (-5.0 / 2.0, (4.0 / 3.0, -1.0 / 12.0)),
    6: (-49.0 / 18.0, (3.0 / 2.0, -3.0 / 20.0, 1.0 / 90.0)),
}


def _check_order(order: int) -> int:
    if order not in SUPPORTED_ORDERS:
        raise ValueError(f"finite-difference order must be one of {SUPPORTED_ORDERS}, found {order!r}")
    return order


def stencil_radius(order: int) -> int:
    """Number of points a centred stencil of ``order`` reaches on each side (order / 2)."""
    return _check_order(order) // 2


def first_derivative_weights(order: int, dtype=np.float64) -> np.ndarray:
    """Antisymmetric weights w_1..w_r of the centred first derivative (see module docstring)."""
    return np.array(_FIRST[_check_order(order)], dtype=dtype)


def staggered_derivative_weights(order: int, dtype=np.float64) -> np.ndarray:
    """Weights s_1..s_r of the staggered first derivative at a half point (module docstring)."""
    if order not in STAGGERED_ORDERS:
        raise ValueError(f"staggered finite-difference order must be one of {STAGGERED_ORDERS}, "
                         f"found {order!r}")
    return np.array(_STAGGERED[order], dtype=dtype)


def second_derivative_weights(order: int, dtype=np.float64) -> np.ndarray:
    """Weights (c, v_1..v_r) of the centred second derivative, centre weight first."""
    centre, sides = _SECOND[_check_order(order)]
    return np.array((centre,) + sides, dtype=dtype)


@point_function
def _shift(i, j, k, axis, m):
    if axis == 0:
        return i + m, j, k
    if axis == 1:
        return i, j + m, k
    return i, j, k + m


@point_function
def d1(f, c, i, j, k, axis, weights, inv_h):
    """d f[c] / d x^axis at (i, j, k): centred, of the order that ``weights`` encodes."""
    total = f[c, i, j, k] * 0
    for m in range(1, weights.shape[0] + 1):
        ip, jp, kp = _shift(i, j, k, axis, m)
        im, jm, km = _shift(i, j, k, axis, -m)
        total += weights[m - 1] * (f[c, ip, jp, kp] - f[c, im, jm, km])
    return total * inv_h


@point_function
def d1_staggered(f, c, i, j, k, axis, weights, inv_h):
    """d f[c] / d x^axis half a step beyond (i, j, k) along ``axis`` (at index + 1/2).

    ``weights`` from :func:`staggered_derivative_weights`; reaches indices index - r + 1 to
    index + r along ``axis``. Indices must be signed: a ``prange(n)`` index is unsigned in
    Numba, and unsigned + signed is float64 (an invalid index); start such loops at a signed
    variable (``prange(first, n)``).
    """
    total = f[c, i, j, k] * 0
    for m in range(1, weights.shape[0] + 1):
        ip, jp, kp = _shift(i, j, k, axis, m)
        im, jm, km = _shift(i, j, k, axis, 1 - m)
        total += weights[m - 1] * (f[c, ip, jp, kp] - f[c, im, jm, km])
    return total * inv_h


@point_function
def d2(f, c, i, j, k, axis, weights, inv_h2):
    """d^2 f[c] / (d x^axis)^2 at (i, j, k); ``weights`` from :func:`second_derivative_weights`."""
    total = weights[0] * f[c, i, j, k]
    for m in range(1, weights.shape[0]):
        ip, jp, kp = _shift(i, j, k, axis, m)
        im, jm, km = _shift(i, j, k, axis, -m)
        total += weights[m] * (f[c, ip, jp, kp] + f[c, im, jm, km])
    return total * inv_h2


@point_function
def d11(f, c, i, j, k, axis_a, axis_b, weights, inv_ha, inv_hb):
    """Mixed d^2 f[c] / (d x^a d x^b), a != b: the first-derivative stencil applied twice."""
    total = f[c, i, j, k] * 0
    for m in range(1, weights.shape[0] + 1):
        ip, jp, kp = _shift(i, j, k, axis_a, m)
        im, jm, km = _shift(i, j, k, axis_a, -m)
        inner = f[c, i, j, k] * 0
        for q in range(1, weights.shape[0] + 1):
            ipp, jpp, kpp = _shift(ip, jp, kp, axis_b, q)
            ipm, jpm, kpm = _shift(ip, jp, kp, axis_b, -q)
            imp, jmp, kmp = _shift(im, jm, km, axis_b, q)
            imm, jmm, kmm = _shift(im, jm, km, axis_b, -q)
            inner += weights[q - 1] * ((f[c, ipp, jpp, kpp] - f[c, ipm, jpm, kpm])
                                       - (f[c, imp, jmp, kmp] - f[c, imm, jmm, kmm]))
        total += weights[m - 1] * inner
    return total * inv_ha * inv_hb


@point_function
def d1_column(f, c, i, j, k0, count, axis, radius, weights, inv_h, out, row):
    """out[row, n] = d f[c] / d x^axis at (i, j, k0 + n) for n = 0..count-1; 0 if ``radius`` is 0.

    The centred sum of :func:`d1` (``radius`` = len(weights) points on each side, or 0 for an
    axis without extent), with ``f`` a (ncomp, nx, ny, nz) array and ``out`` a 2D buffer. The
    caller keeps the stencil inside the array: k0 >= radius along z, i and j likewise.

    Why it is written this way (measured on a 128^3 grid, 42 derivatives per point): the index
    along the column is unsigned. Numba adds a negative-index wraparound (a select) to every
    access with a signed index it cannot prove non-negative, such as ``k - m``; with the select
    LLVM reads the column with gathers or not vectorised at all, and the same 42 derivatives
    ran 3x slower. The order (radius) and the axis are resolved once per column, outside the
    loop over k, so the loop body is straight-line code.
    """
    u = np.uint64
    if radius == 0:
        for n in range(count):
            out[row, n] = weights[0] * 0
        return
    oi = 1 if axis == 0 else 0
    oj = 1 if axis == 1 else 0
    ok = u(1) if axis == 2 else u(0)
    base = u(k0)
    w1 = weights[0] * inv_h
    if radius == 1:
        for n in range(count):
            k = base + u(n)
            out[row, n] = w1 * (f[c, i + oi, j + oj, k + ok] - f[c, i - oi, j - oj, k - ok])
    elif radius == 2:
        w2 = weights[1] * inv_h
        ok2 = ok + ok
        for n in range(count):
            k = base + u(n)
            out[row, n] = (w1 * (f[c, i + oi, j + oj, k + ok] - f[c, i - oi, j - oj, k - ok])
                           + w2 * (f[c, i + 2 * oi, j + 2 * oj, k + ok2]
                                   - f[c, i - 2 * oi, j - 2 * oj, k - ok2]))
    else:
        w2 = weights[1] * inv_h
        w3 = weights[2] * inv_h
        ok2 = ok + ok
        ok3 = ok2 + ok
        for n in range(count):
            k = base + u(n)
            out[row, n] = (w1 * (f[c, i + oi, j + oj, k + ok] - f[c, i - oi, j - oj, k - ok])
                           + w2 * (f[c, i + 2 * oi, j + 2 * oj, k + ok2]
                                   - f[c, i - 2 * oi, j - 2 * oj, k - ok2])
                           + w3 * (f[c, i + 3 * oi, j + 3 * oj, k + ok3]
                                   - f[c, i - 3 * oi, j - 3 * oj, k - ok3]))


@point_function
def d1_axes_column(f, c, i, j, k0, count, radius, sx, sy, sz, weights, inv_hx, inv_hy, inv_hz,
                   out, row_x, row_y, row_z):
    """out[row_a, n] = d f[c] / d x^a at (i, j, k0 + n), n = 0..count-1, a = x, y, z, in one loop.

    The centred sums of :func:`d1_column` along the three axes, read from the 9 rows (or 7, 5)
    around the column in one pass: ``radius`` (1 to 3) is the stencil's, and ``sx``, ``sy``,
    ``sz`` are 1 for an axis with extent and 0 for an axis without (a length-1 axis of a 1D or
    2D grid), whose differences f - f are then 0. Use it where the loop's stores cannot overlap
    its loads without run-time checks (``out`` from :func:`emsource.kernels.strip_buffers.
    strip_buffer`): with an ``out`` from ``np.empty`` LLVM would need 9 run-time overlap checks,
    one more than it inserts by default (DEVELOPERS.md, "Adding a kernel"). The same caller
    rules as :func:`d1_column`.
    """
    u = np.uint64
    base = u(k0)
    oz = u(sz)
    wx1 = weights[0] * inv_hx
    wy1 = weights[0] * inv_hy
    wz1 = weights[0] * inv_hz
    if radius == 1:
        for n in range(count):
            k = base + u(n)
            out[row_x, n] = wx1 * (f[c, i + sx, j, k] - f[c, i - sx, j, k])
            out[row_y, n] = wy1 * (f[c, i, j + sy, k] - f[c, i, j - sy, k])
            out[row_z, n] = wz1 * (f[c, i, j, k + oz] - f[c, i, j, k - oz])
    elif radius == 2:
        wx2 = weights[1] * inv_hx
        wy2 = weights[1] * inv_hy
        wz2 = weights[1] * inv_hz
        sx2 = sx + sx
        sy2 = sy + sy
        oz2 = oz + oz
        for n in range(count):
            k = base + u(n)
            out[row_x, n] = (wx1 * (f[c, i + sx, j, k] - f[c, i - sx, j, k])
                             + wx2 * (f[c, i + sx2, j, k] - f[c, i - sx2, j, k]))
            out[row_y, n] = (wy1 * (f[c, i, j + sy, k] - f[c, i, j - sy, k])
                             + wy2 * (f[c, i, j + sy2, k] - f[c, i, j - sy2, k]))
            out[row_z, n] = (wz1 * (f[c, i, j, k + oz] - f[c, i, j, k - oz])
                             + wz2 * (f[c, i, j, k + oz2] - f[c, i, j, k - oz2]))
    else:
        wx2 = weights[1] * inv_hx
        wy2 = weights[1] * inv_hy
        wz2 = weights[1] * inv_hz
        wx3 = weights[2] * inv_hx
        wy3 = weights[2] * inv_hy
        wz3 = weights[2] * inv_hz
        sx2 = sx + sx
        sy2 = sy + sy
        oz2 = oz + oz
        sx3 = sx2 + sx
        sy3 = sy2 + sy
        oz3 = oz2 + oz
        for n in range(count):
            k = base + u(n)
            out[row_x, n] = (wx1 * (f[c, i + sx, j, k] - f[c, i - sx, j, k])
                             + wx2 * (f[c, i + sx2, j, k] - f[c, i - sx2, j, k])
                             + wx3 * (f[c, i + sx3, j, k] - f[c, i - sx3, j, k]))
            out[row_y, n] = (wy1 * (f[c, i, j + sy, k] - f[c, i, j - sy, k])
                             + wy2 * (f[c, i, j + sy2, k] - f[c, i, j - sy2, k])
                             + wy3 * (f[c, i, j + sy3, k] - f[c, i, j - sy3, k]))
            out[row_z, n] = (wz1 * (f[c, i, j, k + oz] - f[c, i, j, k - oz])
                             + wz2 * (f[c, i, j, k + oz2] - f[c, i, j, k - oz2])
                             + wz3 * (f[c, i, j, k + oz3] - f[c, i, j, k - oz3]))


@point_function
def value_column(f, c, i, j, k0, count, out, row):
    """out[row, n] = f[c, i, j, k0 + n] for n = 0..count-1 (unsigned index: see d1_column)."""
    u = np.uint64
    base = u(k0)
    for n in range(count):
        out[row, n] = f[c, i, j, base + u(n)]


@point_function
def d2_column(f, c, i, j, k0, count, axis, radius, weights, inv_h2, out, row):
    """out[row, n] = d^2 f[c] / (d x^axis)^2 at (i, j, k0 + n), n = 0..count-1.

    The centred sum of :func:`d2` with ``weights`` from :func:`second_derivative_weights`
    (``radius`` = len(weights) - 1, 1 to 3) and ``inv_h2`` = 1 / h^2, written as
    :func:`d1_column` (unsigned index along the column, radius and axis resolved outside the
    loop over k); the same caller rules.
    """
    u = np.uint64
    oi = 1 if axis == 0 else 0
    oj = 1 if axis == 1 else 0
    ok = u(1) if axis == 2 else u(0)
    base = u(k0)
    w0 = weights[0] * inv_h2
    w1 = weights[1] * inv_h2
    if radius == 1:
        for n in range(count):
            k = base + u(n)
            out[row, n] = w0 * f[c, i, j, k] + w1 * (f[c, i + oi, j + oj, k + ok]
                                                      + f[c, i - oi, j - oj, k - ok])
    elif radius == 2:
        w2 = weights[2] * inv_h2
        ok2 = ok + ok
        for n in range(count):
            k = base + u(n)
            out[row, n] = (w0 * f[c, i, j, k]
                           + w1 * (f[c, i + oi, j + oj, k + ok] + f[c, i - oi, j - oj, k - ok])
                           + w2 * (f[c, i + 2 * oi, j + 2 * oj, k + ok2]
                                   + f[c, i - 2 * oi, j - 2 * oj, k - ok2]))
    else:
        w2 = weights[2] * inv_h2
        w3 = weights[3] * inv_h2
        ok2 = ok + ok
        ok3 = ok2 + ok
        for n in range(count):
            k = base + u(n)
            out[row, n] = (w0 * f[c, i, j, k]
                           + w1 * (f[c, i + oi, j + oj, k + ok] + f[c, i - oi, j - oj, k - ok])
                           + w2 * (f[c, i + 2 * oi, j + 2 * oj, k + ok2]
                                   + f[c, i - 2 * oi, j - 2 * oj, k - ok2])
                           + w3 * (f[c, i + 3 * oi, j + 3 * oj, k + ok3]
                                   + f[c, i - 3 * oi, j - 3 * oj, k - ok3]))


@point_function
def d11_column(f, c, i, j, k0, count, axis_a, axis_b, radius, weights, inv_ha, inv_hb, out, row):
    """out[row, n] = d^2 f[c] / (d x^a d x^b) at (i, j, k0 + n), ``axis_a`` < ``axis_b``.

    The mixed stencil of :func:`d11` (the first-derivative stencil along a and along b),
    summed as sum_{m,q} w_m w_q / (h_a h_b) [f(+m, +q) - f(+m, -q) - f(-m, +q) + f(-m, -q)]
    (offsets m along a, q along b): one pass over the column per pair (m, q), so that each
    loop over k is straight-line code whatever the order (see :func:`d1_column`). Only
    ``axis_b`` can be z, so the index along the column moves by +-q only. The same caller
    rules as :func:`d1_column`; ``radius`` >= 1.
    """
    u = np.uint64
    base = u(k0)
    for m in range(1, radius + 1):
        ai = m if axis_a == 0 else 0
        aj = m if axis_a == 1 else 0
        for q in range(1, radius + 1):
            bj = q if axis_b == 1 else 0
            bk = u(q) if axis_b == 2 else u(0)
            w = weights[m - 1] * weights[q - 1] * inv_ha * inv_hb
            kp = base + bk
            km = base - bk
            if m == 1 and q == 1:
                for n in range(count):
                    out[row, n] = w * ((f[c, i + ai, j + aj + bj, kp + u(n)]
                                        - f[c, i + ai, j + aj - bj, km + u(n)])
                                       - (f[c, i - ai, j - aj + bj, kp + u(n)]
                                          - f[c, i - ai, j - aj - bj, km + u(n)]))
            else:
                for n in range(count):
                    out[row, n] += w * ((f[c, i + ai, j + aj + bj, kp + u(n)]
                                         - f[c, i + ai, j + aj - bj, km + u(n)])
                                        - (f[c, i - ai, j - aj + bj, kp + u(n)]
                                           - f[c, i - ai, j - aj - bj, km + u(n)]))


@point_function
def d1_d2_column(f, c, i, j, k0, count, axis, radius, w1, w2, inv_h, out, row1, row2):
    """out[row1, n] = d f[c] / d x^axis and out[row2, n] = d^2 f[c] / (d x^axis)^2 at
    (i, j, k0 + n), n = 0..count-1, in one pass over the column.

    The sums of :func:`d1_column` (weights ``w1``) and :func:`d2_column` (weights ``w2``,
    ``inv_h`` squared here), term by term the same; both read f(x +- m h), so one pass loads
    each value once (5 loads per point at radius 2 instead of 4 + 5) and runs one loop instead
    of two. The same caller rules as :func:`d1_column`; ``radius`` 1 to 3.
    """
    u = np.uint64
    oi = 1 if axis == 0 else 0
    oj = 1 if axis == 1 else 0
    ok = u(1) if axis == 2 else u(0)
    base = u(k0)
    inv_h2 = inv_h * inv_h
    a1 = w1[0] * inv_h
    b0 = w2[0] * inv_h2
    b1 = w2[1] * inv_h2
    if radius == 1:
        for n in range(count):
            k = base + u(n)
            p1 = f[c, i + oi, j + oj, k + ok]
            m1 = f[c, i - oi, j - oj, k - ok]
            out[row1, n] = a1 * (p1 - m1)
            out[row2, n] = b0 * f[c, i, j, k] + b1 * (p1 + m1)
    elif radius == 2:
        a2 = w1[1] * inv_h
        b2 = w2[2] * inv_h2
        ok2 = ok + ok
        for n in range(count):
            k = base + u(n)
            p1 = f[c, i + oi, j + oj, k + ok]
            m1 = f[c, i - oi, j - oj, k - ok]
            p2 = f[c, i + 2 * oi, j + 2 * oj, k + ok2]
            m2 = f[c, i - 2 * oi, j - 2 * oj, k - ok2]
            out[row1, n] = a1 * (p1 - m1) + a2 * (p2 - m2)
            out[row2, n] = b0 * f[c, i, j, k] + b1 * (p1 + m1) + b2 * (p2 + m2)
    else:
        a2 = w1[1] * inv_h
        a3 = w1[2] * inv_h
        b2 = w2[2] * inv_h2
        b3 = w2[3] * inv_h2
        ok2 = ok + ok
        ok3 = ok2 + ok
        for n in range(count):
            k = base + u(n)
            p1 = f[c, i + oi, j + oj, k + ok]
            m1 = f[c, i - oi, j - oj, k - ok]
            p2 = f[c, i + 2 * oi, j + 2 * oj, k + ok2]
            m2 = f[c, i - 2 * oi, j - 2 * oj, k - ok2]
            p3 = f[c, i + 3 * oi, j + 3 * oj, k + ok3]
            m3 = f[c, i - 3 * oi, j - 3 * oj, k - ok3]
            out[row1, n] = a1 * (p1 - m1) + a2 * (p2 - m2) + a3 * (p3 - m3)
            out[row2, n] = (b0 * f[c, i, j, k] + b1 * (p1 + m1) + b2 * (p2 + m2)
                            + b3 * (p3 + m3))


@point_function
def d1_row(src, row, second_row, offset, count, radius, weights, inv_h, out, out_value,
           out_second, out_d1):
    """Copy two buffer rows and differentiate the first along itself, in one pass:
    out[out_value, n] = src[row, offset + n], out[out_second, n] = src[second_row, offset + n]
    and out[out_d1, n] = (1/h) sum_{m=1..r} w_m (src[row, offset + n + m]
    - src[row, offset + n - m]) for n = 0..count-1.

    For strip kernels that hold a derivative along x or y on a z-strip widened by ``radius``
    points at each end (``offset`` = ``radius``): the d1 row is then the mixed derivative
    d_z (d_a f), equal to the tensor-product stencil of :func:`d11_column` up to rounding (the
    same products of weights and values, summed in another order). ``radius`` 1 to 3, at most
    ``offset``; ``src`` and ``out`` distinct arrays (strip buffers, see
    :func:`emsource.kernels.strip_buffers.strip_buffer`). Indices along the row are unsigned, as
    in :func:`d1_column`.
    """
    u = np.uint64
    base = u(offset)
    w1 = weights[0] * inv_h
    p1 = u(offset + 1)
    m1 = u(offset - 1)
    if radius == 1:
        for n in range(count):
            out[out_value, n] = src[row, base + u(n)]
            out[out_second, n] = src[second_row, base + u(n)]
            out[out_d1, n] = w1 * (src[row, p1 + u(n)] - src[row, m1 + u(n)])
    elif radius == 2:
        w2 = weights[1] * inv_h
        p2 = u(offset + 2)
        m2 = u(offset - 2)
        for n in range(count):
            out[out_value, n] = src[row, base + u(n)]
            out[out_second, n] = src[second_row, base + u(n)]
            out[out_d1, n] = (w1 * (src[row, p1 + u(n)] - src[row, m1 + u(n)])
                              + w2 * (src[row, p2 + u(n)] - src[row, m2 + u(n)]))
    else:
        w2 = weights[1] * inv_h
        w3 = weights[2] * inv_h
        p2 = u(offset + 2)
        m2 = u(offset - 2)
        p3 = u(offset + 3)
        m3 = u(offset - 3)
        for n in range(count):
            out[out_value, n] = src[row, base + u(n)]
            out[out_second, n] = src[second_row, base + u(n)]
            out[out_d1, n] = (w1 * (src[row, p1 + u(n)] - src[row, m1 + u(n)])
                              + w2 * (src[row, p2 + u(n)] - src[row, m2 + u(n)])
                              + w3 * (src[row, p3 + u(n)] - src[row, m3 + u(n)]))


@point_function
def d1_ring(src, first_row, row_step, period, centre, offset, count, radius, weights, inv_h,
            out, out_row):
    """out[out_row, n] = (1/h) sum_{m=1..r} w_m (F(centre + m)[offset + n] - F(centre - m)[offset
    + n]), n = 0..count-1, where F(s) is the buffer row ``first_row + row_step * (s mod period)``.

    The first derivative across rows that hold neighbouring grid columns in a ring of
    ``period`` (>= 2 ``radius`` + 1) slots of ``row_step`` rows each: with the rows of d_x f
    at columns j - r..j + r along y and ``centre`` = j mod ``period``, it is the mixed
    derivative d_y (d_x f), the tensor-product stencil of :func:`d11_column` up to rounding.
    The rows are resolved once, outside the loop over the strip. ``radius`` 1 to 3; ``src``
    and ``out`` distinct arrays; unsigned indices along the row, as in :func:`d1_column`.
    """
    u = np.uint64
    base = u(offset)
    w1 = weights[0] * inv_h
    p1 = first_row + row_step * ((centre + 1) % period)
    m1 = first_row + row_step * ((centre + period - 1) % period)
    if radius == 1:
        for n in range(count):
            out[out_row, n] = w1 * (src[p1, base + u(n)] - src[m1, base + u(n)])
    elif radius == 2:
        w2 = weights[1] * inv_h
        p2 = first_row + row_step * ((centre + 2) % period)
        m2 = first_row + row_step * ((centre + period - 2) % period)
        for n in range(count):
            out[out_row, n] = (w1 * (src[p1, base + u(n)] - src[m1, base + u(n)])
                               + w2 * (src[p2, base + u(n)] - src[m2, base + u(n)]))
    else:
        w2 = weights[1] * inv_h
        w3 = weights[2] * inv_h
        p2 = first_row + row_step * ((centre + 2) % period)
        m2 = first_row + row_step * ((centre + period - 2) % period)
        p3 = first_row + row_step * ((centre + 3) % period)
        m3 = first_row + row_step * ((centre + period - 3) % period)
        for n in range(count):
            out[out_row, n] = (w1 * (src[p1, base + u(n)] - src[m1, base + u(n)])
                               + w2 * (src[p2, base + u(n)] - src[m2, base + u(n)])
                               + w3 * (src[p3, base + u(n)] - src[m3, base + u(n)]))


@point_function
def _direction_steps(offsets):
    """(i, j, k) index steps of the m-th neighbours, m = 1..3, along one grid direction whose
    neighbour at distance 1 is ``offsets`` = (di, dj, dk) away in the array (dk unsigned)."""
    di, dj, dk = offsets
    return di, dj, dk, di + di, dj + dj, dk + dk, 3 * di, 3 * dj, dk + dk + dk


@point_function
def d1_directions_column(f, c, i, j, k0, count, radius, offsets_x, offsets_y, offsets_z, weights,
                         inv_hx, inv_hy, inv_hz, out, row_x, row_y, row_z):
    """out[row_a, n] = d f[c] / d x^a at array point (i, j, k0 + n), n = 0..count-1, a = x, y, z,
    with the neighbours along each grid direction given as array index steps.

    The centred sums of :func:`d1_axes_column`, in one loop, for an array whose axes need not be
    the grid's: ``offsets_a`` = (di, dj, dk) is the array index step to the next point along grid
    direction a (dk unsigned), e.g. (1, 0, 0), (0, 1, 0), (0, 0, 1) for an (ncomp, nx, ny, nz)
    array; (1, 0, 0), (0, 0, nz), (0, 0, 1) for the same C-ordered array seen as
    (ncomp, nx, 1, ny * nz), whose last axis then runs through all the columns of an x-plane
    (strips longer than a column); (0, 0, 1), (0, 1, 0), (1, 0, 0) for data stored z, y, x; and
    (0, 0, 0) for a direction without extent, whose differences f - f are then 0. The caller
    keeps every stencil inside the array; the same rules as :func:`d1_column` (unsigned index
    along the loop). ``radius`` 1 to 3.
    """
    u = np.uint64
    base = u(k0)
    xi1, xj1, xk1, xi2, xj2, xk2, xi3, xj3, xk3 = _direction_steps(offsets_x)
    yi1, yj1, yk1, yi2, yj2, yk2, yi3, yj3, yk3 = _direction_steps(offsets_y)
    zi1, zj1, zk1, zi2, zj2, zk2, zi3, zj3, zk3 = _direction_steps(offsets_z)
    wx1 = weights[0] * inv_hx
    wy1 = weights[0] * inv_hy
    wz1 = weights[0] * inv_hz
    if radius == 1:
        for n in range(count):
            k = base + u(n)
            out[row_x, n] = wx1 * (f[c, i + xi1, j + xj1, k + xk1]
                                      - f[c, i - xi1, j - xj1, k - xk1])
            out[row_y, n] = wy1 * (f[c, i + yi1, j + yj1, k + yk1]
                                      - f[c, i - yi1, j - yj1, k - yk1])
            out[row_z, n] = wz1 * (f[c, i + zi1, j + zj1, k + zk1]
                                      - f[c, i - zi1, j - zj1, k - zk1])
    elif radius == 2:
        wx2 = weights[1] * inv_hx
        wy2 = weights[1] * inv_hy
        wz2 = weights[1] * inv_hz
        for n in range(count):
            k = base + u(n)
            out[row_x, n] = (
                wx1 * (f[c, i + xi1, j + xj1, k + xk1] - f[c, i - xi1, j - xj1, k - xk1])
                + wx2 * (f[c, i + xi2, j + xj2, k + xk2] - f[c, i - xi2, j - xj2, k - xk2]))
            out[row_y, n] = (
                wy1 * (f[c, i + yi1, j + yj1, k + yk1] - f[c, i - yi1, j - yj1, k - yk1])
                + wy2 * (f[c, i + yi2, j + yj2, k + yk2] - f[c, i - yi2, j - yj2, k - yk2]))
            out[row_z, n] = (
                wz1 * (f[c, i + zi1, j + zj1, k + zk1] - f[c, i - zi1, j - zj1, k - zk1])
                + wz2 * (f[c, i + zi2, j + zj2, k + zk2] - f[c, i - zi2, j - zj2, k - zk2]))
    else:
        wx2 = weights[1] * inv_hx
        wy2 = weights[1] * inv_hy
        wz2 = weights[1] * inv_hz
        wx3 = weights[2] * inv_hx
        wy3 = weights[2] * inv_hy
        wz3 = weights[2] * inv_hz
        for n in range(count):
            k = base + u(n)
            out[row_x, n] = (
                wx1 * (f[c, i + xi1, j + xj1, k + xk1] - f[c, i - xi1, j - xj1, k - xk1])
                + wx2 * (f[c, i + xi2, j + xj2, k + xk2] - f[c, i - xi2, j - xj2, k - xk2])
                + wx3 * (f[c, i + xi3, j + xj3, k + xk3] - f[c, i - xi3, j - xj3, k - xk3]))
            out[row_y, n] = (
                wy1 * (f[c, i + yi1, j + yj1, k + yk1] - f[c, i - yi1, j - yj1, k - yk1])
                + wy2 * (f[c, i + yi2, j + yj2, k + yk2] - f[c, i - yi2, j - yj2, k - yk2])
                + wy3 * (f[c, i + yi3, j + yj3, k + yk3] - f[c, i - yi3, j - yj3, k - yk3]))
            out[row_z, n] = (
                wz1 * (f[c, i + zi1, j + zj1, k + zk1] - f[c, i - zi1, j - zj1, k - zk1])
                + wz2 * (f[c, i + zi2, j + zj2, k + zk2] - f[c, i - zi2, j - zj2, k - zk2])
                + wz3 * (f[c, i + zi3, j + zj3, k + zk3] - f[c, i - zi3, j - zj3, k - zk3]))


@point_function
def _largest_magnitude(a, b, c):
    m = abs(a) if abs(a) > abs(b) else abs(b)
    return m if m > abs(c) else abs(c)


@point_function
def divergence_column(f, cx, cy, cz, i, j, k0, count, radius, offsets_x, offsets_y, offsets_z,
                      weights, inv_hx, inv_hy, inv_hz, out, row_div, row_big):
    """out[row_div, n] = d_x f[cx] + d_y f[cy] + d_z f[cz] (the divergence of the vector whose
    a-th component is f[ca]) and out[row_big, n] = the largest |d_a f[ca]| of the three, at array
    point (i, j, k0 + n), n = 0..count-1, in one loop.

    The centred sums and the direction offsets of :func:`d1_directions_column` (the same caller
    rules), one component per direction, so that a conservation law's flux divergence takes one
    loop and two buffer rows instead of three loops and three rows; the sum is (d_x + d_y) + d_z.
    """
    u = np.uint64
    base = u(k0)
    xi1, xj1, xk1, xi2, xj2, xk2, xi3, xj3, xk3 = _direction_steps(offsets_x)
    yi1, yj1, yk1, yi2, yj2, yk2, yi3, yj3, yk3 = _direction_steps(offsets_y)
    zi1, zj1, zk1, zi2, zj2, zk2, zi3, zj3, zk3 = _direction_steps(offsets_z)
    wx1 = weights[0] * inv_hx
    wy1 = weights[0] * inv_hy
    wz1 = weights[0] * inv_hz
    if radius == 1:
        for n in range(count):
            k = base + u(n)
            ax = wx1 * (f[cx, i + xi1, j + xj1, k + xk1] - f[cx, i - xi1, j - xj1, k - xk1])
            ay = wy1 * (f[cy, i + yi1, j + yj1, k + yk1] - f[cy, i - yi1, j - yj1, k - yk1])
            az = wz1 * (f[cz, i + zi1, j + zj1, k + zk1] - f[cz, i - zi1, j - zj1, k - zk1])
            out[row_div, n] = ax + ay + az
            out[row_big, n] = _largest_magnitude(ax, ay, az)
    elif radius == 2:
        wx2 = weights[1] * inv_hx
        wy2 = weights[1] * inv_hy
        wz2 = weights[1] * inv_hz
        for n in range(count):
            k = base + u(n)
            ax = (wx1 * (f[cx, i + xi1, j + xj1, k + xk1] - f[cx, i - xi1, j - xj1, k - xk1])
                  + wx2 * (f[cx, i + xi2, j + xj2, k + xk2] - f[cx, i - xi2, j - xj2, k - xk2]))
            ay = (wy1 * (f[cy, i + yi1, j + yj1, k + yk1] - f[cy, i - yi1, j - yj1, k - yk1])
                  + wy2 * (f[cy, i + yi2, j + yj2, k + yk2] - f[cy, i - yi2, j - yj2, k - yk2]))
            az = (wz1 * (f[cz, i + zi1, j + zj1, k + zk1] - f[cz, i - zi1, j - zj1, k - zk1])
                  + wz2 * (f[cz, i + zi2, j + zj2, k + zk2] - f[cz, i - zi2, j - zj2, k - zk2]))
            out[row_div, n] = ax + ay + az
            out[row_big, n] = _largest_magnitude(ax, ay, az)
    else:
        wx2 = weights[1] * inv_hx
        wy2 = weights[1] * inv_hy
        wz2 = weights[1] * inv_hz
        wx3 = weights[2] * inv_hx
        wy3 = weights[2] * inv_hy
        wz3 = weights[2] * inv_hz
        for n in range(count):
            k = base + u(n)
            ax = (wx1 * (f[cx, i + xi1, j + xj1, k + xk1] - f[cx, i - xi1, j - xj1, k - xk1])
                  + wx2 * (f[cx, i + xi2, j + xj2, k + xk2] - f[cx, i - xi2, j - xj2, k - xk2])
                  + wx3 * (f[cx, i + xi3, j + xj3, k + xk3] - f[cx, i - xi3, j - xj3, k - xk3]))
            ay = (wy1 * (f[cy, i + yi1, j + yj1, k + yk1] - f[cy, i - yi1, j - yj1, k - yk1])
                  + wy2 * (f[cy, i + yi2, j + yj2, k + yk2] - f[cy, i - yi2, j - yj2, k - yk2])
                  + wy3 * (f[cy, i + yi3, j + yj3, k + yk3] - f[cy, i - yi3, j - yj3, k - yk3]))
            az = (wz1 * (f[cz, i + zi1, j + zj1, k + zk1] - f[cz, i - zi1, j - zj1, k - zk1])
                  + wz2 * (f[cz, i + zi2, j + zj2, k + zk2] - f[cz, i - zi2, j - zj2, k - zk2])
                  + wz3 * (f[cz, i + zi3, j + zj3, k + zk3] - f[cz, i - zi3, j - zj3, k - zk3]))
            out[row_div, n] = ax + ay + az
            out[row_big, n] = _largest_magnitude(ax, ay, az)
