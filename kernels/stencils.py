"""Centred finite-difference stencils of order 2, 4 and 6 as inlined point functions.

Weights, for grid spacing h and stencil radius r = order / 2:

    f'(x)  ~ (1/h)   sum_{m=1..r} w_m (f(x + m h) - f(x - m h))
    f''(x) ~ (1/h^2) [ c f(x) + sum_{m=1..r} v_m (f(x + m h) + f(x - m h)) ]

order 2: w = (1/2),            c = -2,      v = (1)
order 4: w = (2/3, -1/12),     c = -5/2,    v = (4/3, -1/12)
order 6: w = (3/4, -3/20, 1/60), c = -49/18, v = (3/2, -3/20, 1/90)

Reference: B. Fornberg, "Generation of finite difference formulas on arbitrarily spaced grids",
Math. Comp. 51, 699 (1988), Table 1 (values from memory; ``tests/test_stencils.py`` derives
them independently from Taylor series with sympy).

The point functions take a (ncomp, nx, ny, nz) array, a component, a grid index and an axis;
weights come as float arrays built once per call by :func:`first_derivative_weights` and
:func:`second_derivative_weights` (Python level, in the data's dtype), so one compiled kernel
serves every order. Callers keep ``radius`` points away from the faces.
"""

from __future__ import annotations

import numpy as np

from ._compile import point_function

__all__ = [
    "SUPPORTED_ORDERS",
    "first_derivative_weights",
    "second_derivative_weights",
    "stencil_radius",
    "d1",
    "d2",
    "d11",
]

SUPPORTED_ORDERS = (2, 4, 6)

_FIRST = {
    2: (1.0 / 2.0,),
    4: (2.0 / 3.0, -1.0 / 12.0),
    6: (3.0 / 4.0, -3.0 / 20.0, 1.0 / 60.0),
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
