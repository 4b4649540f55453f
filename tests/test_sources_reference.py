"""adm_sources and stress_energy_4d against an independent route on random curved data.

The route (``reference_stress_energy.py``) builds g_ab, n^a, F^ab and T^ab from lapse, shift,
metric and fields by brute-force contraction; a second check does the same in exact sympy
arithmetic at a few points.

Tolerances: float64 results pass through an inverse and ~20 products of order-one numbers on
metrics with condition number below ~10, so the error is a few hundred float64 epsilons
(2.2e-16) of the largest component at most: 1e-12 relative to max|component| is derived with
margin. float32 kernels compute in float32 (epsilon 1.2e-7), the same argument gives 1e-5.
"""

import math

import numpy as np
import pytest
import sympy as sp

import emsource
from conftest import random_curved_data, unpack_symmetric
from reference_stress_energy import grid_reference, point_faraday, point_geometry

GRID = (3, 4, 5)


def relative_error(value, reference):
    return np.max(np.abs(value - reference)) / np.max(np.abs(reference))


@pytest.mark.parametrize("units, prefactor", [("gaussian", 1 / (4 * math.pi)), ("heaviside_lorentz", 1.0)])
def test_adm_sources_match_brute_force_contraction(rng, units, prefactor):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    rho, S_i, S_ij, _, _ = grid_reference(alpha, beta, gamma, E, B, prefactor)
    src = emsource.adm_sources(gamma, E, B, units=units)
    assert relative_error(src.rho, rho) < 1e-12
    assert relative_error(src.S_i, S_i) < 1e-12
    assert relative_error(src.S_ij, S_ij) < 1e-12
    # S = gamma^ij S_ij, computed here from the reference stress.
    gamma_inv = np.linalg.inv(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1)))
    trace = np.einsum("...ij,ij...->...", gamma_inv, unpack_symmetric(S_ij))
    assert relative_error(src.S, trace) < 1e-12


@pytest.mark.parametrize("index", ["lower", "upper"])
def test_stress_energy_4d_matches_brute_force_contraction(rng, index):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    _, _, _, T_low, T_up = grid_reference(alpha, beta, gamma, E, B, 1 / (4 * math.pi))
    T = emsource.stress_energy_4d(alpha, beta, gamma, E, B, index=index)
    assert relative_error(T, T_low if index == "lower" else T_up) < 1e-12


def test_float32_matches_float64_reference(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    rho, S_i, S_ij, T_low, T_up = grid_reference(alpha, beta, gamma, E, B, 1 / (4 * math.pi))
    single = [a.astype(np.float32) for a in (alpha, beta, gamma, E, B)]
    src = emsource.adm_sources(*single[2:])
    assert src.rho.dtype == np.float32 and src.S_ij.dtype == np.float32
    # The float32 inputs are themselves rounded (relative 6e-8), which the bound includes.
    assert relative_error(src.rho, rho) < 1e-5
    assert relative_error(src.S_i, S_i) < 1e-5
    assert relative_error(src.S_ij, S_ij) < 1e-5
    for index, reference in (("lower", T_low), ("upper", T_up)):
        T = emsource.stress_energy_4d(*single, index=index)
        assert T.dtype == np.float32
        assert relative_error(T, reference) < 1e-5


def test_covariant_field_input_gives_the_same_sources(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    full = unpack_symmetric(gamma)
    E_low = np.einsum("ij...,j...->i...", full, E)
    B_low = np.einsum("ij...,j...->i...", full, B)
    upper = emsource.adm_sources(gamma, E, B)
    lower = emsource.adm_sources(gamma, E_low, B_low, field_index="lower")
    for a, b in zip(upper, lower):
        assert relative_error(b, a) < 1e-12
    T_upper = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    T_lower = emsource.stress_energy_4d(alpha, beta, gamma, E_low, B_low, field_index="lower")
    assert relative_error(T_lower, T_upper) < 1e-12


def test_reference_field_decomposition_recovers_the_definitions(rng):
    """The reference's F^ab gives back E^a = F^ab n_b and B^a = -(1/2) eps^abcd n_b F_cd.

    These are the definitions on the conventions page (MTW sec. 22.4 / Gourgoulhon eq. 5.x
    style 3+1 split of F); checking them keeps the reference honest about its own signs.
    """
    alpha, beta, gamma, E, B = random_curved_data(rng, (1,))
    a, b3, g3 = float(alpha[0]), beta[:, 0], unpack_symmetric(gamma)[:, :, 0]
    e, b = E[:, 0], B[:, 0]
    g, g_inv, n_up, n_low, eps_up = point_geometry(a, b3, g3)
    F_up = point_faraday(a, b3, g3, e, b)
    F_low = g @ F_up @ g
    E_rec = F_up @ n_low
    B_rec = -0.5 * np.einsum("abcd,b,cd->a", eps_up, n_low, F_low)
    np.testing.assert_allclose(E_rec, np.concatenate([[0.0], e]), atol=1e-12)
    np.testing.assert_allclose(B_rec, np.concatenate([[0.0], b]), atol=1e-12)


def _sympy_projections(alpha, beta, gamma, E, B):
    """Exact rho, S_i, S_ij, T_ab from rational inputs, by the 4D route in sympy."""
    beta = sp.Matrix(beta)
    gamma = sp.Matrix(gamma)
    beta_low = gamma * beta
    g = sp.zeros(4, 4)
    g[0, 0] = -alpha**2 + (beta_low.T * beta)[0]
    for i in range(3):
        g[0, i + 1] = g[i + 1, 0] = beta_low[i]
        for j in range(3):
            g[i + 1, j + 1] = gamma[i, j]
    g_inv = g.inv()
    sqrt_minus_g = sp.sqrt(-g.det())
    n_up = sp.Matrix([1, -beta[0], -beta[1], -beta[2]]) / alpha
    n_low = sp.Matrix([-alpha, 0, 0, 0])
    E4 = sp.Matrix([0] + list(E))
    B4_low = g * sp.Matrix([0] + list(B))
    idx = range(4)
    eps_low = {(a, b, c, d): sqrt_minus_g * sp.LeviCivita(a, b, c, d)
               for a in idx for b in idx for c in idx for d in idx}
    # eps^abcd n_c B_d with all indices of eps raised: contract lower indices first.
    v = [[sum(g_inv[c, cc] * n_low[cc] for cc in idx) for c in idx]]  # n^c
    w = [sum(g_inv[d, dd] * B4_low[dd] for dd in idx) for d in idx]  # B^d
    eps_n_b_low = sp.zeros(4, 4)  # eps_ab cd n^c B^d, then raise a, b
    for a in idx:
        for b in idx:
            eps_n_b_low[a, b] = sum(eps_low[(a, b, c, d)] * v[0][c] * w[d] for c in idx for d in idx)
    F_up = n_up * E4.T - E4 * n_up.T + g_inv * eps_n_b_low * g_inv
    F_low = g * F_up * g
    invariant = sum(F_low[c, d] * F_up[c, d] for c in idx for d in idx)
    T_up = (F_up * g * F_up.T - sp.Rational(1, 4) * g_inv * invariant) / (4 * sp.pi)
    T_low = g * T_up * g
    rho = (n_low.T * T_up * n_low)[0]
    S_i = [-(T_low[i + 1, :] * n_up)[0] for i in range(3)]
    S_ij = [T_low[i + 1, j + 1] for i, j in ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))]
    return rho, S_i, S_ij, T_low


@pytest.mark.parametrize("point", [0, 1])
def test_symbolic_values_at_rational_points(point):
    """Exact sympy values (sympy's own linear algebra and LeviCivita) at two rational points."""
    R = sp.Rational
    data = [
        (R(3, 2), [R(1, 5), R(-1, 3), R(1, 7)],
         [[R(6, 5), R(1, 10), R(-1, 5)], [R(1, 10), R(9, 10), R(1, 20)], [R(-1, 5), R(1, 20), R(4, 3)]],
         [R(1, 2), R(-2, 3), R(3, 4)], [R(-1, 3), R(1, 5), R(2, 7)]),
        (R(7, 10), [R(-2, 5), R(0), R(3, 10)],
         [[R(2), R(-1, 2), R(0)], [R(-1, 2), R(1), R(1, 3)], [R(0), R(1, 3), R(3, 2)]],
         [R(0), R(1), R(-1, 2)], [R(2, 3), R(0), R(1, 4)]),
    ][point]
    alpha, beta, gamma, E, B = data
    rho, S_i, S_ij, T_low = _sympy_projections(alpha, beta, gamma, E, B)

    def arr(x):
        return np.array(x, dtype=float).reshape(-1, 1)

    gamma_packed = arr([gamma[0][0], gamma[0][1], gamma[0][2], gamma[1][1], gamma[1][2], gamma[2][2]])
    src = emsource.adm_sources(gamma_packed, arr(E), arr(B))
    exact = lambda xs: np.array([float(sp.N(x, 30)) for x in xs])  # noqa: E731
    np.testing.assert_allclose(src.rho[0], float(sp.N(rho, 30)), rtol=1e-13)
    np.testing.assert_allclose(src.S_i[:, 0], exact(S_i), rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(src.S_ij[:, 0], exact(S_ij), rtol=1e-12, atol=1e-14)
    T = emsource.stress_energy_4d(np.array([float(alpha)]), arr(beta), gamma_packed, arr(E), arr(B))
    packed = [(0, 0), (0, 1), (0, 2), (0, 3), (1, 1), (1, 2), (1, 3), (2, 2), (2, 3), (3, 3)]
    np.testing.assert_allclose(T[:, 0], exact([T_low[a, b] for a, b in packed]), rtol=1e-12, atol=1e-14)
