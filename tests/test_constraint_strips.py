"""The strip form of the constraint kernel against a slow reference written here, point by point.

The kernel (``emsource.kernels.constraints``) computes the first derivatives of a z-strip into a
buffer, contracts the second derivatives into the scalar curvature as it forms them, and
evaluates the rest in contracted forms (X_m = Gamma_m gamma^-1, Y = gamma^-1 K) so that it
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
(``magnitude=True``). The kernel evaluates contracted forms of the same sums (R without R_ij,
see its module docstring; the identities are checked exactly at the end of this file), which
expand into the same products of weights, values, inverse-metric entries and Christoffel
symbols as the reference's R_ij route, so the same sum of absolute values bounds both. The
longest chain of roundings any one product sees: a mixed derivative of order 6 (two nested sums
of 6 terms, d_z (d_x g), d_y (d_x g), d_z (d_y g), about 14 roundings with the weights), then
D_p b_p and a_p . (D_p b_p) (6), the trace term and the factor m_p (3), the accumulation over
the six components p (6) and H (about 4): about 35; the Gamma-Gamma part (Christoffel symbol
3, X_m 3, tr(X_m X_n) 9, the 6 weighted pairs 8, H 4) and the momentum sums are shorter.
N <= 256 covers it with a wide margin (fast-math lets LLVM reassociate and fuse the sums,
which changes the order but not the products), so the check is
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


@pytest.mark.parametrize("nz", ("short", 120))
@pytest.mark.parametrize("order", (2, 4, 6))
def test_bands_of_columns_along_y_match_the_reference(rng, order, nz):
    # The kernel walks the columns of an x index in bands along y (_band_width: _BAND columns,
    # fewer for long z columns), filling its ring of d_x gamma afresh at the start of each band:
    # a y extent of two whole bands and a partial third one puts interior points on every band
    # edge. 120 points along z give bands of 16 (orders 2, 4) and 8 (order 6) columns. Same
    # reference and tolerance as above.
    r = order // 2
    nz = 2 * r + 3 if nz == "short" else nz
    width = strip_kernel._band_width.py_func(nz, r)
    assert width == (strip_kernel._BAND if nz < 100 else (16 if r < 3 else 8))
    shape = (2 * r + 1, 2 * width + 5, nz)
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
    band_edges = {j % width for j in points[1]}
    assert {0, width - 1} <= band_edges  # first and last column of a band
    for out in (H, H_scale, M[0], M[1], M[2], M_scale[1]):
        assert np.array_equal(np.isnan(out), ~interior)
    expected = reference_constraints(gamma, K, rho, S, points, spacing, order)
    bounds = reference_constraints(gamma, K, rho, S, points, spacing, order, magnitude=True)
    found = (H[interior], H_scale[interior], M[:, interior], M_scale[:, interior])
    for name, value, reference, magnitude in zip(("H", "H scale", "M", "M scale"), found,
                                                  expected, bounds):
        error = np.abs(value - reference.astype(np.float64))
        assert np.all(error <= 256 * EPS * magnitude.astype(np.float64)), name


def test_contracted_forms_of_the_kernel_equal_the_textbook_ones_exactly():
    # The kernel never forms R_ij, Gamma^m_ij or D_c K_ab: it evaluates the contracted forms of
    # its module docstring. Here both sides are computed in exact rational arithmetic (sympy)
    # from random rational gamma_ij (positive definite), d_k g_ij, d_q d_s g_kl, K_ij and
    # d_c K_ij with the symmetries of the true quantities, so any wrong index or factor in the
    # contraction shows as a non-zero rational difference (no tolerance needed). Textbook side:
    # R_ij and D_c K_ab as in the module docstring (E. Gourgoulhon, 3+1 Formalism in General
    # Relativity (2012), ch. 4, from memory; checked against sympy in test_constraints.py).
    rng = np.random.default_rng(7)

    def rational(scale=1):
        return sp.Rational(int(rng.integers(-9, 10)) * scale, 10)

    r3 = range(3)
    g = sp.Matrix(3, 3, lambda a, b: 0)
    for a in r3:
        for b in range(a, 3):
            g[a, b] = g[b, a] = (2 if a == b else 0) + rational()
    assert all(g[:k, :k].det() > 0 for k in (1, 2, 3))  # positive definite (Sylvester)
    gi = g.inv()
    A = [[[None] * 3 for _ in r3] for _ in r3]  # A[k][i][j] = d_k g_ij
    dK = [[[None] * 3 for _ in r3] for _ in r3]  # dK[c][a][b] = d_c K_ab
    for k in r3:
        for i in r3:
            for j in range(i, 3):
                A[k][i][j] = A[k][j][i] = rational()
                dK[k][i][j] = dK[k][j][i] = rational()
    Kl = sp.Matrix(3, 3, lambda a, b: 0)
    for a in r3:
        for b in range(a, 3):
            Kl[a, b] = Kl[b, a] = rational()
    D = {}  # D[q, s, k, l] = d_q d_s g_kl
    for q in r3:
        for s in range(q, 3):
            for k in r3:
                for l in range(k, 3):
                    value = rational()
                    for key in ((q, s, k, l), (s, q, k, l), (q, s, l, k), (s, q, l, k)):
                        D[key] = value

    # Textbook side.
    low = [[[sp.Rational(1, 2) * (A[i][k][j] + A[j][k][i] - A[k][i][j]) for j in r3]
            for i in r3] for k in r3]  # low[k][i][j] = Gamma_kij
    up = [[[sum(gi[m, k] * low[k][i][j] for k in r3) for j in r3] for i in r3] for m in r3]
    ricci = sp.Matrix(3, 3, lambda a, b: sum(
        gi[c, d] * (sp.Rational(1, 2) * (D[c, b, a, d] + D[a, d, c, b] - D[c, d, a, b]
                                         - D[a, b, c, d])
                    + sum(up[m][a][d] * low[m][c][b] - up[m][a][b] * low[m][c][d] for m in r3))
        for c in r3 for d in r3))
    scalar = sum(gi[a, b] * ricci[a, b] for a in r3 for b in r3)
    cov_dk = [[[dK[c][a][b] - sum(up[m][c][a] * Kl[m, b] + up[m][c][b] * Kl[a, m] for m in r3)
                for b in r3] for a in r3] for c in r3]  # cov_dk[c][a][b] = D_c K_ab
    div_k = [sum(gi[b, c] * cov_dk[b][c][a] for b in r3 for c in r3) for a in r3]
    grad_k = [sum(gi[b, c] * cov_dk[a][b][c] for b in r3 for c in r3) for a in r3]
    trace_k = sum(gi[a, b] * Kl[a, b] for a in r3 for b in r3)
    k_sq = sum(gi[a, c] * gi[b, d] * Kl[c, d] * Kl[a, b] for a in r3 for b in r3 for c in r3
               for d in r3)

    # The kernel's contracted forms (module docstring of kernels/constraints.py).
    packed = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    r_2 = 0
    for k, l in packed:
        Dp = sp.Matrix(3, 3, lambda q, s: D[q, s, k, l])
        along = (gi[k, :] * Dp * gi[:, l])[0, 0]
        r_2 += (1 if k == l else 2) * (along - gi[k, l] * (gi * Dp).trace())
    X = [sp.Matrix(3, 3, lambda a, c: low[m][a][c]) * gi for m in r3]
    V = [x.trace() for x in X]
    r_g = sum(gi[m, n] * ((X[m] * X[n]).trace() - V[m] * V[n]) for m in r3 for n in r3)
    Y = gi * Kl
    Z = [sum(X[m][a, c] * Y[m, c] for m in r3 for c in r3) for a in r3]
    div_new = [sum(gi[b, c] * dK[b][c][a] for b in r3 for c in r3)
               - sum(V[m] * Y[m, a] for m in r3) - Z[a] for a in r3]
    grad_new = [sum(gi[b, c] * dK[a][b][c] for b in r3 for c in r3) - 2 * Z[a] for a in r3]

    assert scalar != 0 and r_2 != 0 and r_g != 0  # the check is not trivially 0 = 0
    assert r_2 + r_g == scalar
    assert div_new == div_k and grad_new == grad_k
    assert Y.trace() == trace_k and (Y * Y).trace() == k_sq
