"""Spin-weighted spherical harmonics against independent routes.

- s = 0 against scipy's ordinary Y_lm (Condon-Shortley phase, the same convention);
- s = +1 and s = -1 against the spin-raising and -lowering operators applied to sympy's Y_lm,
  differentiated symbolically: _{+1}Y_lm = eth Y_lm / sqrt(l (l+1)) and
  _{-1}Y_lm = -ethbar Y_lm / sqrt(l (l+1)) (J. N. Goldberg et al., J. Math. Phys. 8, 2155
  (1967); from memory), with eth, ethbar as in the module docstring;
- orthonormality by the Gauss-Legendre x uniform rule, which is exact for these products.
"""

import math

import numpy as np
import pytest
import scipy.special
import sympy

from emsource.spin_harmonics import (MAX_DEGREE, harmonic_table, mode_indices,
                                     spin_weighted_harmonic)

EPS = np.finfo(float).eps


def _scipy_ylm(l, m, theta, phi):
    if hasattr(scipy.special, "sph_harm_y"):  # scipy >= 1.15
        return scipy.special.sph_harm_y(l, m, theta, phi)
    return scipy.special.sph_harm(m, l, phi, theta)


def _angles(rng, n=40):
    # away from the poles, where scipy and the sum are both regular anyway
    return rng.uniform(0.05, np.pi - 0.05, n), rng.uniform(0, 2 * np.pi, n)


def test_spin_zero_is_scipys_harmonic(rng):
    theta, phi = _angles(rng)
    for l in range(0, 13):
        for m in range(-l, l + 1):
            ours = spin_weighted_harmonic(0, l, m, theta, phi)
            # round-off of the alternating sum ~ 2^l eps (module docstring), relative to O(1)
            np.testing.assert_allclose(ours, _scipy_ylm(l, m, theta, phi),
                                       atol=8 * 2.0**l * EPS + 1e-14)


@pytest.mark.parametrize("spin", [1, -1])
def test_spin_one_from_the_eth_operators_on_sympys_harmonic(rng, spin):
    t, p = sympy.symbols("theta phi", real=True)
    theta, phi = _angles(rng, 12)
    for l in range(1, 4):
        for m in range(-l, l + 1):
            y = sympy.expand_func(sympy.Ynm(l, m, t, p))
            sign = 1 if spin == 1 else -1  # eth for +1, ethbar for -1 (s = 0 in both)
            eth = -(sympy.diff(y, t) + sign * sympy.I / sympy.sin(t) * sympy.diff(y, p))
            expected_expr = (eth if spin == 1 else -eth) / sympy.sqrt(l * (l + 1))
            expected = sympy.lambdify((t, p), expected_expr, "numpy")(theta, phi)
            np.testing.assert_allclose(spin_weighted_harmonic(spin, l, m, theta, phi),
                                       expected, atol=1e-13, err_msg=f"s={spin} l={l} m={m}")


def test_known_closed_forms():
    # _{-1}Y_{1,+-1} from the eth route by hand: -(1 +- cos theta) e^{+-i phi} sqrt(3/(16 pi))
    # up to sign; |.| is sign-free: sqrt(3/(16 pi)) (1 +- cos theta) (from memory)
    theta = np.linspace(0.1, 3.0, 5)
    for m, sign in ((1, 1), (-1, -1)):
        value = spin_weighted_harmonic(-1, 1, m, theta, 0.3)
        np.testing.assert_allclose(np.abs(value),
                                   math.sqrt(3 / (16 * math.pi)) * (1 + sign * np.cos(theta)),
                                   rtol=1e-14, atol=4 * EPS)  # 1 - cos(theta) cancels


@pytest.mark.parametrize("spin", [-1, 0, 1])
def test_orthonormal_by_quadrature(spin):
    # Products of equal s, m are polynomials of degree l + l' <= 2 MAX_DEGREE in cos theta:
    # Gauss-Legendre with MAX_DEGREE + 1 nodes is exact; phi needs > 2 MAX_DEGREE points.
    n = MAX_DEGREE + 1
    mu, w = np.polynomial.legendre.leggauss(n)
    phi = 2 * np.pi * np.arange(2 * n) / (2 * n)
    theta, phi = np.meshgrid(np.arccos(mu), phi, indexing="ij")
    weights = (w[:, None] * np.full(2 * n, 2 * np.pi / (2 * n))).ravel()
    table = harmonic_table(spin, MAX_DEGREE, theta, phi).reshape(-1, theta.size)
    gram = (table.conj() * weights) @ table.T
    degree = np.array([l for l, _ in mode_indices(MAX_DEGREE, spin)])
    # round-off: each harmonic carries ~2^l eps relative (alternating sum), the sum ~ sqrt(N) eps
    tolerance = 8 * 2.0 ** np.maximum.outer(degree, degree) * EPS + 1e-13
    error = np.abs(gram - np.eye(len(gram)))
    assert np.all(error <= tolerance), float((error / tolerance).max())


def test_bad_indices():
    with pytest.raises(ValueError, match="s = 2, l = 1"):
        spin_weighted_harmonic(2, 1, 0, 0.5, 0.5)
    with pytest.raises(ValueError, match="m = 3"):
        spin_weighted_harmonic(0, 2, 3, 0.5, 0.5)
    with pytest.raises(ValueError, match=f"l <= {MAX_DEGREE}"):
        spin_weighted_harmonic(0, MAX_DEGREE + 1, 0, 0.5, 0.5)
    with pytest.raises(TypeError, match="l must be an integer"):
        spin_weighted_harmonic(0, 1.5, 0, 0.5, 0.5)
