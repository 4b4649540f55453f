"""The strip form of the constraint kernel against a slow reference written here, point by point.

The kernel (``emsource.kernels.constraints``) computes every derivative of a z-strip into a
buffer and regroups the algebra (contracted Christoffel symbols, mixed K_a^b) so that it
vectorises. This file recomputes H, M_i and their scales from the textbook formulas with an
independent route: stencil weights from sympy's ``finite_diff_weights`` (B. Fornberg, "Generation
of finite difference formulas on arbitrarily spaced grids", Math. Comp. 51, 699 (1988), the
algorithm sympy implements), differences by NumPy slicing, the Ricci tensor from metric
derivatives with full 3x3(x3x3) arrays (E. Gourgoulhon, 3+1 Formalism in General Relativity
(2012), ch. 4, from memory; the formula itself is checked against sympy in test_constraints.py),
the inverse metric by the adjugate, all in long double.

Tolerance, derived: each output is a sum of products of stencil values, inverse-metric entries
and Christoffel symbols; rounding in any order of summation and association of the same products
moves it by at most gamma_N = N eps / (1 - N eps) times the same sum with every term replaced by
its absolute value (N. J. Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed. (2002),
sec. 3.1 and 4.2, from memory). The reference computes that sum of absolute values too
(``magnitude=True``). The longest chain of roundings is a mixed derivative of order 6 (36 terms;
the kernel takes it as d_z (d_x g), d_y (d_x g), d_z (d_y g), two nested sums of 6 terms over
the same products of weights and values as the tensor-product stencil summed here, so fewer
roundings per term than one sum of 36)
feeding the Ricci tensor (9 x 4 second-derivative terms plus 9 x 3 x 2 products, contracted
with 9 inverse-metric entries) and H (about 10 more): N <= 256 covers it, so the check is
|kernel - reference| <= 256 eps * magnitude. A wrong index or sign gives an error of the size
of the terms themselves (relative 1), far above it.
"""

import math

import numpy as np
import pytest
import sympy as sp

from emsource.constraints import interior_points
from emsource.kernels import constraints as strip_kernel
from emsource.kernels.stencils import first_derivative_weights, second_derivative_weights

from conftest import unpack_symmetric

LD = np.longdouble
EPS = np.finfo(np.float64).eps


def _weights(order, derivative):
    """Centred weights on offsets -r..r from sympy (Fornberg's algorithm)."""
    r = order // 2
    offsets = list(range(-r, r + 1))
    table = sp.calculus.finite_diff.finite_diff_weights(derivative, offsets, 0)
    return np.array([float(w) for w in table[derivative][-1]], dtype=LD)


def _derivatives(f, points, spacing, order, magnitude):
    """d_c f, d_c d_d f of every component of f (ncomp, nx, ny, nz) at ``points`` (3, P):
    first (ncomp, 3, P) and second (ncomp, 3, 3, P). With ``magnitude`` every weight and value
    enters with its absolute value."""
    r = order // 2
    w1, w2 = _weights(order, 1), _weights(order, 2)
    if magnitude:
        f, w1, w2 = np.abs(f), np.abs(w1), np.abs(w2)
    f = f.astype(LD)
    h = np.asarray(spacing, dtype=LD)

    def at(shift):
        idx = points + np.asarray(shift)[:, None]
        return f[:, idx[0], idx[1], idx[2]]

    unit = np.eye(3, dtype=int)
    first = np.stack([sum(w1[m + r] * at(m * unit[a]) for m in range(-r, r + 1)) / h[a]
                      for a in range(3)], axis=1)
    second = np.empty(f.shape[:1] + (3, 3, points.shape[1]), dtype=LD)
    for a in range(3):
        second[:, a, a] = sum(w2[m + r] * at(m * unit[a]) for m in range(-r, r + 1)) / h[a] ** 2
        for b in range(a + 1, 3):
            mixed = sum(w1[m + r] * w1[q + r] * at(m * unit[a] + q * unit[b])
                        for m in range(-r, r + 1) for q in range(-r, r + 1)) / (h[a] * h[b])
            second[:, a, b] = second[:, b, a] = mixed
    return first, second


def _inverse(g):
    """Inverse of symmetric (3, 3, P) matrices by the adjugate (cofactors / determinant)."""
    cof = np.empty_like(g)
    for i in range(3):
        for j in range(3):
            rows = [r for r in range(3) if r != j]
            cols = [c for c in range(3) if c != i]
            minor = (g[rows[0], cols[0]] * g[rows[1], cols[1]]
                     - g[rows[0], cols[1]] * g[rows[1], cols[0]])
            cof[i, j] = (-1) ** (i + j) * minor
    det = np.einsum("i...,i...->...", g[0], cof[:, 0])
    return cof / det


def reference_constraints(gamma, K, rho, S, points, spacing, order, magnitude=False):
    """H, max term of H, M_i, max term of M_i at ``points``; with ``magnitude`` the same sums
    with every term's absolute value (the gamma_N bound of the module docstring)."""
    pm = 1 if magnitude else -1  # the sign of every subtraction
    fix = np.abs if magnitude else (lambda x: x)
    g = unpack_symmetric(gamma[:, points[0], points[1], points[2]].astype(LD))
    kl = fix(unpack_symmetric(K[:, points[0], points[1], points[2]].astype(LD)))
    gi = fix(_inverse(g))
    d_g, dd_g = _derivatives(gamma, points, spacing, order, magnitude)
    d_k, _ = _derivatives(K, points, spacing, order, magnitude)
    dg = unpack_symmetric(d_g)  # dg[a, b, c] = d_c g_ab
    ddg = unpack_symmetric(dd_g)  # ddg[a, b, c, d] = d_c d_d g_ab
    dk = unpack_symmetric(d_k)
    # Gamma_cab = 1/2 (d_a g_cb + d_b g_ca - d_c g_ab); Gamma^m_ab = gamma^mc Gamma_cab
    gam1 = 0.5 * (np.einsum("cba...->cab...", dg) + dg + pm * np.einsum("abc...->cab...", dg))
    gam2 = np.einsum("mc...,cab...->mab...", gi, gam1)
    second = (np.einsum("adcb...->abcd...", ddg) + np.einsum("cbad...->abcd...", ddg)
              + pm * ddg + pm * np.einsum("cdab...->abcd...", ddg))
    quad = (np.einsum("mad...,mcb...->abcd...", gam2, gam1)
            + pm * np.einsum("mab...,mcd...->abcd...", gam2, gam1))
    ricci_tensor = np.einsum("cd...,abcd...->ab...", gi, 0.5 * second + quad)
    ricci = np.einsum("ab...,ab...->...", gi, ricci_tensor)
    trace_k = np.einsum("ab...,ab...->...", gi, kl)
    k_sq = np.einsum("ac...,bd...,cd...,ab...->...", gi, gi, kl, kl)
    matter = 16 * math.pi * fix(rho[points[0], points[1], points[2]].astype(LD))
    H = ricci + trace_k**2 + pm * k_sq + pm * matter
    H_scale = np.maximum(np.maximum(np.abs(ricci), trace_k**2), np.maximum(k_sq, np.abs(matter)))
    # D_c K_ab = d_c K_ab - Gamma^m_ca K_mb - Gamma^m_cb K_am, stored as DK[c, a, b]
    DK = (np.einsum("abc...->cab...", dk) + pm * np.einsum("mca...,mb...->cab...", gam2, kl)
          + pm * np.einsum("mcb...,am...->cab...", gam2, kl))
    div_k = np.einsum("bc...,bca...->a...", gi, DK)
    grad_k = np.einsum("bc...,abc...->a...", gi, DK)
    source = 8 * math.pi * fix(S[:, points[0], points[1], points[2]].astype(LD))
    M = div_k + pm * grad_k + pm * source
    M_scale = np.maximum(np.maximum(np.abs(div_k), np.abs(grad_k)), np.abs(source))
    return H, H_scale, M, M_scale


@pytest.mark.parametrize("order", (2, 4, 6))
def test_strip_kernel_matches_the_pointwise_reference(rng, order):
    r = order // 2
    # z long enough for two whole strips of the kernel and a partial third one.
    shape = (2 * r + 3, 2 * r + 2, 2 * strip_kernel._STRIP + 2 * r + 5)
    spacing = (0.3, 0.4, 0.5)
    noise = rng.standard_normal((6,) + shape)
    gamma = np.array([1, 0, 0, 1, 0, 1.0])[:, None, None, None] + 0.1 * noise  # pos. definite
    K = rng.standard_normal((6,) + shape)
    rho = rng.standard_normal(shape)
    S = rng.standard_normal((3,) + shape)
    valid = rng.random(shape) > 0.01
    interior = interior_points(valid, order)
    inputs = tuple(a.copy() for a in (gamma, K, rho, S))
    H = np.empty(shape)
    M = np.empty((3,) + shape)
    H_scale = np.empty(shape)
    M_scale = np.empty((3,) + shape)
    strip_kernel.adm_constraints_grid(gamma, K, rho, S, interior.view(np.uint8),
                                      first_derivative_weights(order),
                                      second_derivative_weights(order), 1.0 / np.array(spacing),
                                      16 * math.pi, 8 * math.pi, H, M, H_scale, M_scale)
    for before, after in zip(inputs, (gamma, K, rho, S)):
        assert np.array_equal(before, after)  # inputs untouched
    points = np.array(np.nonzero(interior))
    assert points.shape[1] > 100
    # NaN exactly where the stencil leaves the valid points or the grid.
    for out in (H, H_scale, M[0], M[1], M[2], M_scale[0], M_scale[2]):
        assert np.array_equal(np.isnan(out), ~interior)
    expected = reference_constraints(gamma, K, rho, S, points, spacing, order)
    bounds = reference_constraints(gamma, K, rho, S, points, spacing, order, magnitude=True)
    found = (H[interior], H_scale[interior], M[:, interior], M_scale[:, interior])
    for name, value, reference, magnitude in zip(("H", "H scale", "M", "M scale"), found,
                                                  expected, bounds):
        error = np.abs(value - reference.astype(np.float64))
        limit = 256 * EPS * magnitude.astype(np.float64)
        assert np.all(error <= limit), (name, float(np.max(error / limit)))
        # The data are far from a solution: the residuals are of the size of their terms, so a
        # wrong term would show at relative size one.
        assert np.median(np.abs(reference)) > 1e-3 * np.median(magnitude), name


@pytest.mark.parametrize("order", (2, 4, 6))
def test_bands_of_columns_along_y_match_the_reference(rng, order):
    # The kernel walks the columns of an x index in bands of _BAND along y, filling its ring of
    # d_x gamma afresh at the start of each band: a y extent of two whole bands and a partial
    # third one puts interior points on every band edge. Same reference and tolerance as above.
    r = order // 2
    shape = (2 * r + 1, 2 * strip_kernel._BAND + 5, 2 * r + 3)
    spacing = (0.3, 0.4, 0.5)
    gamma = (np.array([1, 0, 0, 1, 0, 1.0])[:, None, None, None]
             + 0.1 * rng.standard_normal((6,) + shape))
    K, S = rng.standard_normal((6,) + shape), rng.standard_normal((3,) + shape)
    rho = rng.standard_normal(shape)
    interior = interior_points(np.ones(shape, dtype=bool), order)
    H, H_scale = np.empty(shape), np.empty(shape)
    M, M_scale = np.empty((3,) + shape), np.empty((3,) + shape)
    strip_kernel.adm_constraints_grid(gamma, K, rho, S, interior.view(np.uint8),
                                      first_derivative_weights(order),
                                      second_derivative_weights(order), 1.0 / np.array(spacing),
                                      16 * math.pi, 8 * math.pi, H, M, H_scale, M_scale)
    points = np.array(np.nonzero(interior))
    band_edges = {j % strip_kernel._BAND for j in points[1]}
    assert {0, strip_kernel._BAND - 1} <= band_edges  # first and last column of a band
    for out in (H, H_scale, M[0], M[1], M[2], M_scale[1]):
        assert np.array_equal(np.isnan(out), ~interior)
    expected = reference_constraints(gamma, K, rho, S, points, spacing, order)
    bounds = reference_constraints(gamma, K, rho, S, points, spacing, order, magnitude=True)
    found = (H[interior], H_scale[interior], M[:, interior], M_scale[:, interior])
    for name, value, reference, magnitude in zip(("H", "H scale", "M", "M scale"), found,
                                                  expected, bounds):
        error = np.abs(value - reference.astype(np.float64))
        assert np.all(error <= 256 * EPS * magnitude.astype(np.float64)), name
