"""Finite-difference weights and stencil point functions against an independent derivation.

The weights in kernels/stencils.py are quoted from B. Fornberg, "Generation of finite difference
formulas on arbitrarily spaced grids", Math. Comp. 51, 699 (1988), Table 1 (from memory). Here
they are derived again with sympy from Taylor series: the centred stencil of order p is the one
whose Taylor expansion matches the derivative through order p (a Vandermonde system, common
practice). The compiled point functions must then differentiate polynomials of degree p (first
derivative) and p + 1 (second, by symmetry) exactly, up to float64 round-off of the sums.
"""

import numpy as np
import pytest
import sympy as sp

from emsource.kernels import stencils
from emsource.kernels._compile import search_kernel
from emsource.kernels.strip_buffers import strip_buffer


def taylor_weights(order, derivative):
    """Weights c_m, m = -r..r, with sum_m c_m f(m h) = h^d f^(d)(0) + O(h^(order + d))."""
    r = order // 2
    offsets = list(range(-r, r + 1))
    c = sp.symbols(f"c0:{len(offsets)}")
    equations = [sum(ci * sp.Integer(m) ** q for ci, m in zip(c, offsets)) - (sp.factorial(derivative) if q == derivative else 0)
                 for q in range(len(offsets))]
    solution = sp.solve(equations, c)
    return {m: solution[ci] for ci, m in zip(c, offsets)}


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_weights_match_a_taylor_series_derivation(order):
    first = taylor_weights(order, 1)
    second = taylor_weights(order, 2)
    r = order // 2
    np.testing.assert_allclose(stencils.first_derivative_weights(order),
                               [float(first[m]) for m in range(1, r + 1)], rtol=1e-15)
    np.testing.assert_allclose(stencils.second_derivative_weights(order),
                               [float(second[0])] + [float(second[m]) for m in range(1, r + 1)],
                               rtol=1e-15)
    # Antisymmetry / symmetry that the point functions rely on.
    assert all(first[-m] == -first[m] for m in range(1, r + 1))
    assert all(second[-m] == second[m] for m in range(1, r + 1))


@pytest.mark.parametrize("order", stencils.STAGGERED_ORDERS)
def test_staggered_weights_match_a_taylor_series_derivation(order):
    # Points at half-integer offsets +-1/2, +-3/2, ... around the evaluation point: the weights
    # that reproduce f'(0) h through order p (a Vandermonde system in the offsets, common
    # practice), antisymmetric, so s_m is the weight of offset m - 1/2.
    r = order // 2
    offsets = [sp.Rational(2 * m - 1, 2) for m in range(1, r + 1)]
    offsets = [-o for o in reversed(offsets)] + offsets
    c = sp.symbols(f"c0:{len(offsets)}")
    equations = [sum(ci * o**q for ci, o in zip(c, offsets)) - (1 if q == 1 else 0)
                 for q in range(len(offsets))]
    solution = sp.solve(equations, c)
    derived = [float(solution[c[r + m]]) for m in range(r)]
    np.testing.assert_allclose(stencils.staggered_derivative_weights(order), derived, rtol=1e-15)
    with pytest.raises(ValueError, match=r"staggered finite-difference order must be one of"):
        stencils.staggered_derivative_weights(6)


def test_unsupported_order_is_rejected():
    with pytest.raises(ValueError, match=r"order must be one of \(2, 4, 6\), found 3"):
        stencils.first_derivative_weights(3)


@search_kernel
def _apply_all(f, w1, w2, inv_h, i, j, k):
    out = np.empty((3, 3))
    for a in range(3):
        out[a, 0] = stencils.d1(f, 0, i, j, k, a, w1, inv_h[a])
        out[a, 1] = stencils.d2(f, 0, i, j, k, a, w2, inv_h[a] * inv_h[a])
        b = (a + 1) % 3
        out[a, 2] = stencils.d11(f, 0, i, j, k, a, b, w1, inv_h[a], inv_h[b])
    return out


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_point_functions_are_exact_on_polynomials(order):
    h = np.array([0.11, 0.07, 0.13])
    shape = (9, 10, 11)
    x, y, z = np.meshgrid(*(0.3 + h[a] * np.arange(shape[a]) for a in range(3)), indexing="ij")
    p = order
    X, Y, Z = sp.symbols("X Y Z")
    symbols = (X, Y, Z)
    # First and mixed derivatives are exact up to degree p in each variable (error ~ h^p
    # f^(p+1)); the symmetric second derivative up to degree p + 1.
    first_poly = X**p * Y + Y**p - 2 * Z**p * X + X * Y * Z
    second_poly = X ** (p + 1) + Y ** (p + 1) * Z - 3 * Z ** (p + 1) * X
    i, j, k = 4, 5, 5
    point = {X: x[i, j, k], Y: y[i, j, k], Z: z[i, j, k]}
    results = []
    for poly in (first_poly, second_poly):
        f = sp.lambdify(symbols, poly)(x, y, z)[None]
        results.append((poly, float(np.max(np.abs(f))), _apply_all(
            f, stencils.first_derivative_weights(order), stencils.second_derivative_weights(order),
            1.0 / h, i, j, k)))
    (p1, scale1, r1), (p2, scale2, r2) = results
    for a in range(3):
        b = (a + 1) % 3
        # Round-off: sums of O(10) terms of size |f| over h (h^2): 1e-11 |f| / h_min^2 bounds it.
        tolerance = 1e-11 * max(scale1, scale2) / h.min() ** 2
        np.testing.assert_allclose(r1[a, 0], float(sp.diff(p1, symbols[a]).subs(point)), rtol=0, atol=tolerance)
        np.testing.assert_allclose(r1[a, 2], float(sp.diff(p1, symbols[a], symbols[b]).subs(point)),
                                   rtol=0, atol=tolerance)
        np.testing.assert_allclose(r2[a, 1], float(sp.diff(p2, symbols[a], 2).subs(point)), rtol=0, atol=tolerance)
    # And they are not exact one degree higher, so the test can tell the orders apart.
    f = sp.lambdify(symbols, Y ** (p + 1))(x, y, z)[None]
    over = _apply_all(f, stencils.first_derivative_weights(order), stencils.second_derivative_weights(order),
                      1.0 / h, i, j, k)[1, 0]
    assert abs(over - float(sp.diff(Y ** (p + 1), Y).subs(point))) > 1e-6


@search_kernel
def _column(f, c, i, j, k0, count, axis, radius, weights, inv_h):
    out = np.empty((1, count))
    stencils.d1_column(f, c, i, j, k0, count, axis, radius, weights, inv_h, out, 0)
    return out


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_column_derivative_equals_point_derivative(rng, order):
    f = rng.standard_normal((2, 9, 10, 16))
    w = stencils.first_derivative_weights(order)
    r = order // 2
    inv_h = 1.0 / 0.2
    for axis in range(3):
        column = _column(f, 1, 4, 5, r, 16 - 2 * r, axis, r, w, inv_h)[0]
        points = [_apply_all(f[1:], w, stencils.second_derivative_weights(order),
                             np.full(3, inv_h), 4, 5, k)[axis, 0] for k in range(r, 16 - r)]
        np.testing.assert_allclose(column, points, rtol=1e-14, atol=1e-13)


@search_kernel
def _second_columns(f, c, i, j, k0, count, radius, w1, w2, inv_h):
    """Rows 0..2: d2 along x, y, z; rows 3..5: mixed (x, y), (x, z), (y, z); row 6: values."""
    out = np.empty((7, count))
    for axis in range(3):
        stencils.d2_column(f, c, i, j, k0, count, axis, radius, w2, inv_h[axis] * inv_h[axis],
                           out, axis)
    row = 3
    for a in range(2):
        for b in range(a + 1, 3):
            stencils.d11_column(f, c, i, j, k0, count, a, b, radius, w1, inv_h[a], inv_h[b],
                                out, row)
            row += 1
    stencils.value_column(f, c, i, j, k0, count, out, 6)
    return out


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_second_derivative_columns_equal_point_derivatives(rng, order):
    # The column forms used by the constraint kernel's strips against the point functions d2
    # and d11 (checked against sympy above). They sum the same terms in another order (the
    # mixed one multiplies the weights first), so they agree to round-off: the sum of the
    # absolute terms is at most |f| sum|w2| / h^2 <= 4 * 6.1 / 0.04 ~ 600 (|f| <= 4 for these
    # normal samples; sum|w2| = 6.1 at order 6, the largest; h >= 0.2), and summing at most 36
    # terms in two orders moves each result by at most ~36 eps * 600 ~ 5e-12 (Higham,
    # Accuracy and Stability of Numerical Algorithms (2002), sec. 4.2, from memory); 1e-11.
    f = rng.standard_normal((2, 9, 10, 16))
    w1 = stencils.first_derivative_weights(order)
    w2 = stencils.second_derivative_weights(order)
    r = order // 2
    inv_h = np.array([1 / 0.2, 1 / 0.25, 1 / 0.3])
    i, j = 4, 5
    columns = _second_columns(f, 1, i, j, r, 16 - 2 * r, r, w1, w2, inv_h)
    pairs = ((0, 1), (0, 2), (1, 2))
    for n, k in enumerate(range(r, 16 - r)):
        for axis in range(3):
            expected = _second_point(f[1:], w1, w2, inv_h, i, j, k, axis, axis)
            assert abs(columns[axis, n] - expected) <= 1e-11
        for row, (a, b) in enumerate(pairs, start=3):
            expected = _second_point(f[1:], w1, w2, inv_h, i, j, k, a, b)
            assert abs(columns[row, n] - expected) <= 1e-11
        assert columns[6, n] == f[1, i, j, k]


@search_kernel
def _second_point(f, w1, w2, inv_h, i, j, k, a, b):
    if a == b:
        return stencils.d2(f, 0, i, j, k, a, w2, inv_h[a] * inv_h[a])
    return stencils.d11(f, 0, i, j, k, a, b, w1, inv_h[a], inv_h[b])


@search_kernel
def _axes_columns(f, c, i, j, k0, count, radius, sx, sy, sz, weights, inv_h):
    """Rows 0..2 of a stack strip buffer: d1_axes_column along x, y, z; copied out."""
    buf = strip_buffer(3, 16, f)
    stencils.d1_axes_column(f, c, i, j, k0, count, radius, sx, sy, sz, weights, inv_h[0],
                            inv_h[1], inv_h[2], buf, 0, 1, 2)
    out = np.empty((3, count))
    for row in range(3):
        for n in range(count):
            out[row, n] = buf[row, n]
    return out


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_three_axis_column_equals_point_derivatives(rng, order):
    # d1_axes_column (the conservation kernel's fused stencil, writing into a stack buffer)
    # against the point function d1 (checked against sympy above): the same terms summed in the
    # same order, so they agree to the last rounding that FMA contraction may move, 1e-13 on
    # values of order |f| sum|w| / h <= 4 * 1.8 / 0.2 (the bound of the test above).
    f = rng.standard_normal((2, 9, 10, 16))
    w = stencils.first_derivative_weights(order)
    r = order // 2
    inv_h = np.array([1 / 0.2, 1 / 0.25, 1 / 0.3])
    i, j = 4, 5
    columns = _axes_columns(f, 1, i, j, r, 16 - 2 * r, r, 1, 1, 1, w, inv_h)
    for n, k in enumerate(range(r, 16 - r)):
        expected = _apply_all(f[1:], w, stencils.second_derivative_weights(order), inv_h, i, j,
                              k)[:, 0]
        np.testing.assert_allclose(columns[:, n], expected, rtol=0, atol=1e-13)
    # An axis without extent (step 0, as a length-1 axis of a 2D grid) gives exactly 0.
    flat = _axes_columns(f, 1, i, j, r, 16 - 2 * r, r, 1, 0, 1, w, inv_h)
    assert np.all(flat[1] == 0.0)
    np.testing.assert_array_equal(flat[[0, 2]], columns[[0, 2]])


@search_kernel
def _nested_mixed_columns(f, c, i, j, k0, count, radius, w1, w2, inv_h, period, shift):
    """d_xz f and d_xy f at (i, j, k0..k0 + count - 1) the way the constraint kernel takes them:
    d_x f of the columns j - r..j + r on the strip widened by r in z, in ring slots
    (column + ``shift``) mod ``period`` of 2 rows each (d_x f, d_xx f), then d1_row along the
    centre slot and d1_ring across the slots. Rows 0..3 of the result: d_x f, d_xx f, d_xz f,
    d_xy f; rows 4..6: d_y f, its copy and d_yz f from a d1_row call on a plain row of d_y f."""
    ring = strip_buffer(16, 24, f)
    buf = strip_buffer(7, 16, f)
    span = count + 2 * radius
    for column in range(j - radius, j + radius + 1):
        slot = (column + shift) % period
        stencils.d1_d2_column(f, c, i, column, k0 - radius, span, 0, radius, w1, w2, inv_h[0],
                              ring, 2 * slot, 2 * slot + 1)
    centre = (j + shift) % period
    stencils.d1_row(ring, 2 * centre, 2 * centre + 1, radius, count, radius, w1, inv_h[2], buf,
                    0, 1, 2)
    stencils.d1_ring(ring, 0, 2, period, centre, radius, count, radius, w1, inv_h[1], buf, 3)
    stencils.d1_column(f, c, i, j, k0 - radius, span, 1, radius, w1, inv_h[1], ring, 15)
    stencils.d1_row(ring, 15, 15, radius, count, radius, w1, inv_h[2], buf, 4, 5, 6)
    out = np.empty((7, count))
    for row in range(7):
        for n in range(count):
            out[row, n] = buf[row, n]
    return out


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_mixed_derivatives_as_derivatives_of_first_derivatives(rng, order):
    # d_z (d_x f) and d_y (d_x f) from the ring of first derivatives (d1_row, d1_ring: the
    # constraint kernel's route) against the point function d11, the tensor-product stencil
    # (checked against sympy above). The tensor product of two 1-D stencils is the 1-D stencil
    # applied twice, so they differ only in rounding: the same products w_m w_q f / (h_a h_b),
    # grouped and summed in another order. The sum of their absolute values is at most
    # |f| (2 sum|w1|)^2 / (h_a h_b) <= 4 * 1.84^2 / (0.2 * 0.25) ~ 270 (|f| <= 4 for these
    # normal samples, sum|w1| = 0.92 at order 6, the largest), and at most 36 terms summed in
    # two orders move a result by at most ~36 eps * 270 ~ 2e-12 (Higham, Accuracy and Stability
    # of Numerical Algorithms (2002), sec. 4.2, from memory): 1e-11, as for d11_column above.
    # A wrong slot, offset or weight gives an error of the size of the derivative itself.
    f = rng.standard_normal((2, 9, 10, 16))
    w1 = stencils.first_derivative_weights(order)
    w2 = stencils.second_derivative_weights(order)
    r = order // 2
    inv_h = np.array([1 / 0.2, 1 / 0.25, 1 / 0.3])
    i, j = 4, 5
    count = 16 - 4 * r  # the widened strip k0 - r..k0 + count + r - 1 stays in the array
    for period, shift in ((2 * r + 1, 0), (7, 3)):  # slots in order, and rotated in a larger ring
        columns = _nested_mixed_columns(f, 1, i, j, 2 * r, count, r, w1, w2, inv_h, period,
                                        shift)
        for n, k in enumerate(range(2 * r, 2 * r + count)):
            # First derivatives: the same sums in the same order (1e-13, as above).
            first = _apply_all(f[1:], w1, w2, inv_h, i, j, k)[:, 0]
            assert abs(columns[0, n] - first[0]) <= 1e-13
            assert abs(columns[1, n] - _second_point(f[1:], w1, w2, inv_h, i, j, k, 0, 0)) <= 1e-11
            assert abs(columns[2, n] - _second_point(f[1:], w1, w2, inv_h, i, j, k, 0, 2)) <= 1e-11
            assert abs(columns[3, n] - _second_point(f[1:], w1, w2, inv_h, i, j, k, 0, 1)) <= 1e-11
            assert abs(columns[4, n] - first[1]) <= 1e-13
            assert columns[5, n] == columns[4, n]
            assert abs(columns[6, n] - _second_point(f[1:], w1, w2, inv_h, i, j, k, 1, 2)) <= 1e-11


@search_kernel
def _direction_columns(f, c, i, j, k0, count, radius, step_x, step_y, step_z, weights, inv_h):
    """Rows 0..2 of a stack strip buffer: d1_directions_column along x, y, z; copied out."""
    buf = strip_buffer(3, 256, f)
    stencils.d1_directions_column(f, c, i, j, k0, count, radius, step_x, step_y, step_z, weights,
                                  inv_h[0], inv_h[1], inv_h[2], buf, 0, 1, 2)
    out = np.empty((3, count))
    for row in range(3):
        for n in range(count):
            out[row, n] = buf[row, n]
    return out


@search_kernel
def _divergence_columns(f, i, j, k0, count, radius, step_x, step_y, step_z, weights, inv_h):
    """divergence_column of the vector (f[0], f[1], f[2]): its sum and largest term, copied out."""
    buf = strip_buffer(2, 256, f)
    stencils.divergence_column(f, 0, 1, 2, i, j, k0, count, radius, step_x, step_y, step_z,
                               weights, inv_h[0], inv_h[1], inv_h[2], buf, 0, 1)
    out = np.empty((2, count))
    for row in range(2):
        for n in range(count):
            out[row, n] = buf[row, n]
    return out


@pytest.mark.parametrize("order", stencils.SUPPORTED_ORDERS)
def test_direction_columns_equal_point_derivatives(rng, order):
    # d1_directions_column and divergence_column (the conservation kernel's stencils) against
    # the point function d1 (checked against sympy above), on two arrangements of the same
    # values: an x-plane of a C-ordered (3, nx, ny, nz) array seen as one line (3, nx, 1,
    # ny * nz), whose strip runs through every interior column of the plane (y-neighbours nz
    # apart), and the values stored z, y, x (array axes reversed). Same terms, same order, so
    # they agree to the last rounding FMA contraction may move: 1e-13 on values of order
    # |f| sum|w| / h <= 4 * 1.8 / 0.2 (as above), 3e-13 for the sum of three.
    nx, ny, nz = 9, 10, 16
    f = rng.standard_normal((3, nx, ny, nz))
    w = stencils.first_derivative_weights(order)
    r = order // 2
    inv_h = np.array([1 / 0.2, 1 / 0.25, 1 / 0.3])
    i = 4
    u = np.uint64
    expected = np.array([[[[stencils.d1(f, c, i, j, k, a, w, inv_h[a]) for k in range(nz)]
                           for j in range(ny)] for a in range(3)] for c in range(3)])
    plane_line = f.reshape(3, nx, 1, ny * nz)
    start, stop = r * nz + r, (ny - r) * nz - r
    steps = ((1, 0, u(0)), (0, 0, u(nz)), (0, 0, u(1)))
    lines = _direction_columns(plane_line, 1, i, 0, start, stop - start, r, *steps, w, inv_h)
    div = _divergence_columns(plane_line, i, 0, start, stop - start, r, *steps, w, inv_h)
    interior = [(j, k) for j in range(r, ny - r) for k in range(r, nz - r)]
    at = [j * nz + k - start for j, k in interior]
    got = lines[:, at]
    want = np.array([[expected[1, a, j, k] for j, k in interior] for a in range(3)])
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-13)
    terms = np.array([[expected[a, a, j, k] for j, k in interior] for a in range(3)])
    np.testing.assert_allclose(div[0, at], terms.sum(axis=0), rtol=0, atol=3e-13)
    np.testing.assert_allclose(div[1, at], np.abs(terms).max(axis=0), rtol=0, atol=1e-13)
    # Stored z, y, x: array axes (c, z, y, x), the line along x; z's step is the first axis.
    stored = np.ascontiguousarray(np.moveaxis(f, (1, 3), (3, 1)))
    zyx_steps = ((0, 0, u(1)), (0, 1, 0 * u(1)), (1, 0, u(0)))
    for k in range(r, nz - r):
        for j in range(r, ny - r):
            column = _direction_columns(stored, 1, k, j, r, nx - 2 * r, r, *zyx_steps, w, inv_h)
            np.testing.assert_allclose(column[:, i - r], expected[1, :, j, k], rtol=0, atol=1e-13)
    # A direction without extent (step 0, as a length-1 axis of a 2D grid) gives exactly 0.
    flat = _direction_columns(plane_line, 1, i, 0, start, stop - start, r, steps[0],
                              (0, 0, u(0)), steps[2], w, inv_h)
    assert np.all(flat[1] == 0.0)
    np.testing.assert_array_equal(flat[[0, 2]], lines[[0, 2]])
