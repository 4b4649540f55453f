"""B^i = [ijk] d_j A_k / sqrt(gamma) from a stored vector potential, collocated and edge-staggered.

Outside references: the normal observer's B from a 4-potential by the conventions' definition
(sympy, ``tests/sympy_fields_reference.py``); the exact plane wave (Jackson, Classical
Electrodynamics, 3rd ed., sec. 7.1) with its potential A = -(E0/omega) cos(k.x - omega t) e
(temporal gauge, E = -d_t A; from memory); analytic derivatives of trigonometric potentials on a
conformally curved metric; div curl = 0 of staggered differences (the constrained-transport
property of Yee's lattice, K. S. Yee, IEEE Trans. Antennas Propag. 14, 302 (1966); common
practice).
"""

import math

import numpy as np
import pytest
import sympy as sp

from emsource import GridPointError
from emsource.exact import plane_wave
from emsource.grid import UniformGrid
from emsource.kernels.stencils import staggered_derivative_weights
from emsource.potential import (EDGE_OFFSETS, FACE_OFFSETS, curl_interior,
                                magnetic_field_from_edge_potential, magnetic_field_from_potential)

from sympy_fields_reference import faraday, normal_observer_fields

EPS = np.finfo(np.float64).eps

# A smooth potential and a conformally curved, non-diagonal metric gamma_ij = psi^4 M_ij.
M = np.array([[1.2, 0.1, -0.05], [0.1, 0.9, 0.2], [-0.05, 0.2, 1.1]])
WAVE = (1.3, -0.7, 0.9)


def potential(x, y, z):
    return np.stack([np.sin(1.1 * y + 0.3) * np.cos(0.8 * z),
                     np.cos(0.9 * x) * np.sin(0.7 * z - 0.2) + 0.3 * x * y,
                     np.sin(0.6 * x + 1.2 * y) + 0.2 * np.cos(1.3 * z)])


def potential_derivatives(x, y, z):
    """d[j, k] = d_j A_k, by hand from :func:`potential`."""
    d = np.zeros((3, 3) + np.shape(x))
    d[1, 0] = 1.1 * np.cos(1.1 * y + 0.3) * np.cos(0.8 * z)
    d[2, 0] = -0.8 * np.sin(1.1 * y + 0.3) * np.sin(0.8 * z)
    d[0, 1] = -0.9 * np.sin(0.9 * x) * np.sin(0.7 * z - 0.2) + 0.3 * y
    d[1, 1] = 0.3 * x
    d[2, 1] = 0.7 * np.cos(0.9 * x) * np.cos(0.7 * z - 0.2)
    d[0, 2] = 0.6 * np.cos(0.6 * x + 1.2 * y)
    d[1, 2] = 1.2 * np.cos(0.6 * x + 1.2 * y)
    d[2, 2] = -0.26 * np.sin(1.3 * z)
    return d


def conformal_factor(x, y, z):
    return 1.0 + 0.1 * np.sin(0.5 * x) * np.cos(0.4 * y) + 0.05 * np.cos(0.3 * z)


def curved_metric(x, y, z):
    psi4 = conformal_factor(x, y, z) ** 4
    packed = [M[0, 0], M[0, 1], M[0, 2], M[1, 1], M[1, 2], M[2, 2]]
    return np.stack([psi4 * m for m in packed]), np.sqrt(psi4**3 * np.linalg.det(M))


def exact_curl(x, y, z, sqrt_gamma):
    d = potential_derivatives(x, y, z)
    return np.stack([d[1, 2] - d[2, 1], d[2, 0] - d[0, 2], d[0, 1] - d[1, 0]]) / sqrt_gamma


def box(m):
    """Unequal sides and spacings (DEVELOPERS.md: generic boxes against cancellations):
    12, 14 and 13 intervals per 12 of ``m`` (a multiple of 12), so doubling m halves every
    spacing exactly."""
    intervals = np.array([m, 7 * m // 6, 13 * m // 12])
    lengths = np.array([2.0, 2.3, 1.9])
    return UniformGrid(tuple(intervals + 1), (-0.4, 0.1, -0.7), tuple(lengths / intervals))


def curl_error(grid, order):
    x, y, z = grid.coordinates()
    gamma, root = curved_metric(x, y, z)
    B = magnetic_field_from_potential(gamma, potential(x, y, z), grid.spacing, order=order)
    interior = curl_interior(grid.shape, order)
    exact = exact_curl(x, y, z, root)
    assert np.isnan(B[:, ~interior]).all() and np.isfinite(B[:, interior]).all()
    return np.abs(B[:, interior] - exact[:, interior]).max(), np.abs(exact).max()


@pytest.mark.parametrize("order", [2, 4, 6])
def test_design_order_on_a_curved_metric(order):
    # Halving the spacing must divide the error by 2^order; measured order within 0.35 of it.
    coarse, scale = curl_error(box(12), order)
    fine, _ = curl_error(box(24), order)
    # the window: the maximum error moves between grids (the interior shrinks by order/2 points)
    measured = math.log2(coarse / fine)
    assert fine > 1e3 * EPS * scale  # well above round-off (testing notes, trap 2)
    assert abs(measured - order) < 0.35, (order, coarse, fine, measured)


@pytest.mark.parametrize("order", [2, 4, 6])
def test_exact_on_polynomials_of_the_stencil_degree(rng, order):
    # A centred first difference of order p is exact for polynomials of degree p (Fornberg 1988;
    # its Taylor error starts at f^(p+1)). Random degree-p A on a flat metric: round-off only,
    # 100 eps of the largest derivative times the stencil sums.
    grid = UniformGrid((9, 8, 10), (0.2, -0.1, 0.3), (0.25, 0.2, 0.3))
    x, y, z = grid.coordinates()
    coefficients = rng.uniform(-1, 1, (3, 3))
    A = np.stack([sum(coefficients[c, a] * [x, y, z][a] ** order for a in range(3))
                  for c in range(3)])
    dA = np.zeros((3, 3) + grid.shape)  # d[j, k] = d_j A_k
    for k in range(3):
        for j in range(3):
            dA[j, k] = coefficients[k, j] * order * [x, y, z][j] ** (order - 1)
    exact = np.stack([dA[1, 2] - dA[2, 1], dA[2, 0] - dA[0, 2], dA[0, 1] - dA[1, 0]])
    gamma = np.zeros((6,) + grid.shape)
    gamma[[0, 3, 5]] = 1.0
    B = magnetic_field_from_potential(gamma, A, grid.spacing, order=order)
    inside = curl_interior(grid.shape, order)
    bound = 100 * EPS * np.abs(A).max() / min(grid.spacing)
    assert np.abs(B[:, inside] - exact[:, inside]).max() < bound


def test_agrees_with_the_normal_observer_field_of_a_4_potential():
    # The conventions' definition B^a = -(1/2) epsilon^abcd n_b F_cd (sympy, independent of the
    # formula under test) for a 4-potential (phi, A_i) on a spacetime with lapse 1.3, a shift
    # and the constant non-diagonal spatial metric M: B must not depend on phi, alpha or beta.
    t, x, y, z = sp.symbols("t x y z", real=True)
    alpha, beta = sp.Rational(13, 10), [sp.Rational(1, 10), -sp.Rational(1, 5), sp.Rational(1, 20)]
    gamma = sp.Matrix(3, 3, lambda i, j: sp.nsimplify(M[i, j]))
    beta_low = gamma * sp.Matrix(beta)
    g = sp.zeros(4, 4)
    g[0, 0] = -alpha**2 + (sp.Matrix(beta).T * beta_low)[0]
    for i in range(3):
        g[0, i + 1] = g[i + 1, 0] = beta_low[i]
        for j in range(3):
            g[i + 1, j + 1] = gamma[i, j]
    A4 = sp.Matrix([sp.cos(x - t), sp.sin(sp.Rational(11, 10) * y + sp.Rational(3, 10)) * sp.cos(sp.Rational(4, 5) * z),
                    sp.cos(sp.Rational(9, 10) * x) * sp.sin(sp.Rational(7, 10) * z - sp.Rational(1, 5)) + sp.Rational(3, 10) * x * y,
                    sp.sin(sp.Rational(3, 5) * x + sp.Rational(6, 5) * y) + sp.Rational(1, 5) * sp.cos(sp.Rational(13, 10) * z)])
    _, B_sym = normal_observer_fields(faraday(A4, (t, x, y, z)), g)
    exact_B = sp.lambdify((x, y, z), [sp.expand(b) for b in B_sym], "numpy")
    grid = box(24)
    X, Y, Z = grid.coordinates()
    exact = np.stack([np.broadcast_to(b, X.shape) for b in exact_B(X, Y, Z)])
    packed = np.array([M[0, 0], M[0, 1], M[0, 2], M[1, 1], M[1, 2], M[2, 2]])
    gamma_grid = np.broadcast_to(packed[:, None, None, None], (6,) + grid.shape).copy()
    B = magnetic_field_from_potential(gamma_grid, potential(X, Y, Z), grid.spacing, order=6)
    inside = curl_interior(grid.shape, 6)
    # Order-6 truncation on this grid (h ~ 0.1, derivatives ~ 1): (h^6 / 140) |A^(7)| ~ 1e-8.
    assert np.abs(B[:, inside] - exact[:, inside]).max() < 1e-7 * np.abs(exact).max()


def test_plane_wave_potential():
    # Exact plane wave, oblique k: A = -(E0 / omega) cos(k.x - omega t) e_hat has
    # -d_t A = E0 sin(...) e_hat = E and curl A = k_hat x E = B (Jackson sec. 7.1).
    errors = []
    for n in (16, 32):
        grid = UniformGrid((n, n + 3, n - 2), (0.0, 0.0, 0.0), (1.0 / n, 1.1 / n, 0.9 / n))
        k = np.array([2.1, -1.3, 0.8])
        e = np.cross(k, [0.0, 0.0, 1.0])
        e /= np.linalg.norm(e)
        omega, t = np.linalg.norm(k), 0.37
        level = plane_wave(grid, t, wave_vector=k, polarization=e, amplitude=0.8)
        x, y, z = grid.coordinates()
        phase = k[0] * x + k[1] * y + k[2] * z - omega * t
        A = -(0.8 / omega) * np.cos(phase) * e[:, None, None, None]
        B = magnetic_field_from_potential(level.gamma, A, grid.spacing, order=4)
        inside = curl_interior(grid.shape, 4)
        errors.append(np.abs(B[:, inside] - level.B[:, inside]).max())
    assert errors[1] > 1e3 * EPS * 0.8
    assert abs(math.log2(errors[0] / errors[1]) - 4) < 0.3


def test_axis_without_extent():
    # A 2D grid (and a 3D grid with one point along z): derivatives along z are zero, every z
    # "layer" is interior; same values as an x-y-only potential evaluated by hand.
    grid = UniformGrid((12, 11, 1), (0.0, 0.0, 0.0), (0.1, 0.12, 1.0))
    x, y, z = grid.coordinates()
    A = np.stack([np.sin(y), np.cos(2 * x), x * y])
    gamma = np.zeros((6,) + grid.shape)
    gamma[[0, 3, 5]] = 1.0
    B3 = magnetic_field_from_potential(gamma, A, grid.spacing, order=2)
    B2 = magnetic_field_from_potential(gamma[..., 0], A[..., 0], grid.spacing[:2], order=2)
    assert np.array_equal(B3[..., 0], B2, equal_nan=True)
    inside = curl_interior(grid.shape, 2)
    assert inside[1:-1, 1:-1, 0].all() and not inside[0].any()
    # B^z = d_x A_y - d_y A_x = -2 sin(2x) - cos(y): second order, error ~ h^2/6 * 8
    assert np.abs(B3[2, 1:-1, 1:-1, 0] + 2 * np.sin(2 * x[1:-1, 1:-1, 0])
                  + np.cos(y[1:-1, 1:-1, 0])).max() < 0.1 ** 2 * 8 / 6 * 1.5


# ------------------------------------------------------------------ edge-staggered potential

def edge_potential(grid, exact_length=True):
    """A_k sampled at the edge centres (EDGE_OFFSETS) of ``grid``; n - 1 values along k."""
    parts = []
    for c in range(3):
        coords = [grid.origin[a] + (np.arange(grid.shape[a]) + EDGE_OFFSETS[c][a]) * grid.spacing[a]
                  for a in range(3)]
        x, y, z = np.meshgrid(*coords, indexing="ij")
        values = potential(x, y, z)[c]
        if exact_length:
            values = values[tuple(slice(0, -1) if a == c else slice(None) for a in range(3))]
        parts.append(np.ascontiguousarray(values))
    return parts


def face_positions(grid, c):
    coords = [grid.origin[a] + (np.arange(grid.shape[a]) + FACE_OFFSETS[c][a]) * grid.spacing[a]
              for a in range(3)]
    return np.meshgrid(*coords, indexing="ij")


def staggered_error(grid, order):
    field = magnetic_field_from_edge_potential(edge_potential(grid), grid.spacing, order=order)
    worst, scale = 0.0, 0.0
    for c in range(3):
        x, y, z = face_positions(grid, c)
        exact = exact_curl(x, y, z, 1.0)[c]
        ranges = tuple(slice(lo, hi) for lo, hi in field.computed[c].T)
        values = field.values[c]
        assert np.isfinite(values[ranges]).all()
        outside = np.ones(grid.shape, bool)
        outside[ranges] = False
        assert np.isnan(values[outside]).all()
        worst = max(worst, np.abs(values[ranges] - exact[ranges]).max())
        scale = max(scale, np.abs(exact).max())
    return worst, scale, field


@pytest.mark.parametrize("order", [2, 4])
def test_staggered_curl_design_order_and_offsets(order):
    coarse, scale, field = staggered_error(box(12), order)
    fine, _, _ = staggered_error(box(24), order)
    assert field.offsets == ((0.0, 0.5, 0.5), (0.5, 0.0, 0.5), (0.5, 0.5, 0.0))
    assert fine > 1e3 * EPS * scale
    assert abs(math.log2(coarse / fine) - order) < 0.35


def cell_divergence(values, spacing, order):
    """Staggered divergence at the cell centres (i + 1/2, j + 1/2, k + 1/2), same stencil."""
    w = staggered_derivative_weights(order)
    r = len(w)
    n = values.shape[1:]
    # cells whose stencils reach only computed faces: r - 1 .. n - 1 - r (+ the curl's own layer)
    lo, hi = 2 * (r - 1), [m - 2 * r for m in n]
    div = 0.0
    for c in range(3):
        part = 0.0
        for m in range(r):
            upper = [slice(lo, h) for h in hi]
            lower = [slice(lo, h) for h in hi]
            upper[c] = slice(lo + 1 + m, hi[c] + 1 + m)
            lower[c] = slice(lo - m, hi[c] - m)
            part = part + w[m] * (values[c][tuple(upper)] - values[c][tuple(lower)])
        div = div + part / spacing[c]
    return div


@pytest.mark.parametrize("order", [2, 4])
def test_staggered_curl_is_divergence_free_to_round_off(order):
    grid = box(12)
    field = magnetic_field_from_edge_potential(edge_potential(grid), grid.spacing, order=order)
    div = cell_divergence(field.values, grid.spacing, order)
    assert div.size > 0 and np.isfinite(div).all()
    # Each term is ~ |B| / h; the exact cancellation leaves sums of ~ 4 r^2 roundings of
    # |A| / h^2: bound 100 eps max|A| / h^2.
    h = min(grid.spacing)
    assert np.abs(div).max() < 100 * EPS * 2.0 / h**2
    # Negative control: B^x moved by one face along y (a wrong offset) is not divergence-free,
    # so the check above can fail.
    shifted = field.values.copy()
    shifted[0] = np.roll(shifted[0], 1, axis=1)
    assert np.nanmax(np.abs(cell_divergence(shifted, grid.spacing, order))) > 1e-3


def test_staggered_padded_and_list_storage_agree():
    grid = box(12)
    exact_parts = edge_potential(grid)
    padded = np.stack(edge_potential(grid, exact_length=False))
    a = magnetic_field_from_edge_potential(exact_parts, grid.spacing, order=4)
    b = magnetic_field_from_edge_potential(padded, grid.spacing, order=4)
    assert np.array_equal(a.values, b.values, equal_nan=True)
    # sqrt_gamma divides each component at its faces
    root = np.full((3,) + grid.shape, 2.0)
    c = magnetic_field_from_edge_potential(exact_parts, grid.spacing, order=4, sqrt_gamma=root)
    assert np.allclose(c.values, a.values / 2, equal_nan=True, rtol=1e-15, atol=0)


# ------------------------------------------------------------------ bad input

def flat(shape):
    gamma = np.zeros((6,) + shape)
    gamma[[0, 3, 5]] = 1.0
    return gamma


def test_collocated_bad_input():
    f = "magnetic_field_from_potential"
    shape = (6, 7, 8)
    A = np.zeros((3,) + shape)
    with pytest.raises(ValueError, match=f"{f}: order must be one of \\(2, 4, 6\\), found 3"):
        magnetic_field_from_potential(flat(shape), A, 0.1, order=3)
    with pytest.raises(ValueError, match=f"{f}: axis 0 has 6 points; order 6 needs more than 6"):
        magnetic_field_from_potential(flat(shape), A, 0.1, order=6)
    with pytest.raises(ValueError, match=f"{f}: gamma must have shape \\(6, 6, 7, 8\\)"):
        magnetic_field_from_potential(flat((6, 7, 9)), A, 0.1)
    with pytest.raises(TypeError, match=f"{f}: all inputs must share one float dtype"):
        magnetic_field_from_potential(flat(shape), A.astype(np.float32), 0.1)
    with pytest.raises(ValueError, match=f"{f}: spacing must be one positive number"):
        magnetic_field_from_potential(flat(shape), A, -0.1)
    with pytest.raises(ValueError, match=f"{f}: out overlaps input A"):
        magnetic_field_from_potential(flat(shape), A, 0.1, out=A)
    bad = A.copy()
    bad[1, 3, 2, 4] = np.nan
    with pytest.raises(GridPointError, match=r"\(3, 2, 4\).*A\[1\] = nan") as info:
        magnetic_field_from_potential(flat(shape), bad, 0.1)
    assert info.value.first_index == (3, 2, 4)
    gamma = flat(shape)
    gamma[0, 2, 3, 3] = -1.0
    with pytest.raises(GridPointError, match=r"\(2, 3, 3\).*not positive definite"):
        magnetic_field_from_potential(gamma, A, 0.1)
    assert np.isfinite(A).all()  # inputs untouched


def test_staggered_bad_input():
    f = "magnetic_field_from_edge_potential"
    grid = UniformGrid((8, 10, 9), (0.0, 0.0, 0.0), (0.1, 0.1, 0.1))
    parts = edge_potential(grid)
    with pytest.raises(ValueError, match=f"{f}: order must be one of \\(2, 4\\), found 6"):
        magnetic_field_from_edge_potential(parts, grid.spacing, order=6)
    with pytest.raises(ValueError, match=f"{f}: A must hold three components"):
        magnetic_field_from_edge_potential(parts[:2], grid.spacing)
    wrong = [parts[0][:-1], parts[1], parts[2]]
    with pytest.raises(ValueError, match=f"{f}: A\\[0\\] is staggered along axis 0 and must hold "
                                         "7 \\(between the vertices\\) or 8"):
        magnetic_field_from_edge_potential(wrong, grid.spacing)
    wrong = [parts[0], parts[1][:, :, :-1], parts[2]]
    with pytest.raises(ValueError, match=f"{f}: components not staggered along axis 2"):
        magnetic_field_from_edge_potential(wrong, grid.spacing)
    with pytest.raises(ValueError, match=f"{f}: sqrt_gamma must have shape \\(3, 8, 10, 9\\)"):
        magnetic_field_from_edge_potential(parts, grid.spacing, sqrt_gamma=np.ones((3, 8, 10, 8)))
    bad = [p.copy() for p in parts]
    bad[2][4, 5, 3] = np.inf
    with pytest.raises(GridPointError, match="non-finite A"):
        magnetic_field_from_edge_potential(bad, grid.spacing)
