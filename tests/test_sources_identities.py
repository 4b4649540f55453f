"""Identities every electromagnetic source field must satisfy, on random curved data.

- S = gamma^ij S_ij = rho: T^ab of the electromagnetic field is traceless (MTW eq. 22.19a;
  Gourgoulhon 2012, sec. 5.2 gives S = gamma^ij S_ij, and -rho + S = T^a_a = 0).
- Dominant energy condition rho >= |S|_gamma, equality for null fields (E perpendicular to B,
  |E| = |B|): Gourgoulhon (2012) sec. 5.2; for E and B it is (E^2 + B^2)/2 >= |E x B|.
- S_ij symmetric and T_ab consistent with T^ab through g_ab (common practice).
- Under a linear change of spatial coordinates x' = M x (det M > 0): rho is a scalar, S_i a
  covector, S_ij a covariant 2-tensor (common practice: tensor transformation laws).
- Gaussian and Heaviside-Lorentz differ by exactly 4 pi (Jackson, appendix on units).
"""

import math

import numpy as np

import emsource
from conftest import assert_same_arithmetic, random_curved_data, unpack_symmetric, unpack_symmetric4

GRID = (4, 3, 5)
PACKED3 = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
EPS = np.finfo(np.float64).eps


def test_trace_equals_energy_density(rng):
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    src = emsource.adm_sources(gamma, E, B)
    gamma_inv = np.linalg.inv(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1)))
    trace = np.einsum("...ij,ij...->...", gamma_inv, unpack_symmetric(src.S_ij))
    np.testing.assert_allclose(trace, src.rho, rtol=1e-12)
    np.testing.assert_array_equal(src.S, src.rho)


def _norm_gamma(gamma, covector):
    gamma_inv = np.linalg.inv(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1)))
    return np.sqrt(np.einsum("...ij,i...,j...->...", gamma_inv, covector, covector))


def test_dominant_energy_condition(rng):
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    src = emsource.adm_sources(gamma, E, B)
    assert np.all(src.rho >= _norm_gamma(gamma, src.S_i) * (1 - 1e-12))
    # And strictly: random E, B are not null.
    assert np.all(src.rho > _norm_gamma(gamma, src.S_i) * (1 + 1e-6))


def test_null_fields_saturate_the_energy_condition(rng):
    _, _, gamma, _, _ = random_curved_data(rng, GRID)
    # An orthonormal frame of gamma at every point: columns of L^-T with gamma = L L^T.
    full = np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))
    frame = np.linalg.inv(np.linalg.cholesky(full)).swapaxes(-1, -2)   # e_a^i in columns
    amplitude = rng.uniform(0.5, 2.0, GRID)
    E = np.moveaxis(frame[..., :, 0], -1, 0) * amplitude
    B = np.moveaxis(frame[..., :, 1], -1, 0) * amplitude
    src = emsource.adm_sources(gamma, E, B)
    np.testing.assert_allclose(_norm_gamma(gamma, src.S_i), src.rho, rtol=1e-12)


def test_lower_and_upper_4d_components_are_one_symmetric_tensor(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    T_low = unpack_symmetric4(emsource.stress_energy_4d(alpha, beta, gamma, E, B))
    T_up = unpack_symmetric4(emsource.stress_energy_4d(alpha, beta, gamma, E, B, index="upper"))
    g3 = unpack_symmetric(gamma)
    beta_low = np.einsum("ij...,j...->i...", g3, beta)
    g = np.empty((4, 4) + GRID)
    g[0, 0] = -alpha**2 + np.sum(beta_low * beta, axis=0)
    g[0, 1:] = g[1:, 0] = beta_low
    g[1:, 1:] = g3
    lowered = np.einsum("ac...,cd...,db...->ab...", g, T_up, g)
    np.testing.assert_allclose(lowered, T_low, rtol=0, atol=1e-12 * np.max(np.abs(T_low)))
    # The 3+1 parts: T_ij = S_ij, and -n^b T_ib = S_i with n^b = (1, -beta)/alpha.
    src = emsource.adm_sources(gamma, E, B)
    assert_same_arithmetic(T_low[1:, 1:], unpack_symmetric(src.S_ij))
    n_up = np.concatenate([np.ones((1,) + GRID), -beta]) / alpha
    np.testing.assert_allclose(-np.einsum("ib...,b...->i...", T_low[1:, :], n_up), src.S_i,
                               rtol=0, atol=1e-12 * np.max(np.abs(src.S_i)))


def test_covariance_under_linear_coordinate_change(rng):
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    M = np.eye(3) + 0.4 * rng.standard_normal((3, 3))
    if np.linalg.det(M) < 0:
        M[0] *= -1  # keep the coordinates right-handed: [xyz] = +1 in both systems
    M_inv = np.linalg.inv(M)
    g3 = unpack_symmetric(gamma)
    gamma_new_full = np.einsum("ki,kl...,lj->ij...", M_inv, g3, M_inv)       # gamma'_ij
    gamma_new = np.stack([gamma_new_full[a, b] for a, b in PACKED3])
    E_new = np.einsum("ij,j...->i...", M, E)                                  # E'^i = M^i_j E^j
    B_new = np.einsum("ij,j...->i...", M, B)
    old = emsource.adm_sources(gamma, E, B)
    new = emsource.adm_sources(gamma_new, E_new, B_new)
    np.testing.assert_allclose(new.rho, old.rho, rtol=1e-12)
    np.testing.assert_allclose(new.S_i, np.einsum("ji,j...->i...", M_inv, old.S_i),
                               rtol=0, atol=1e-12 * np.max(np.abs(old.S_i)))
    S_new_full = np.einsum("ki,kl...,lj->ij...", M_inv, unpack_symmetric(old.S_ij), M_inv)
    np.testing.assert_allclose(new.S_ij, np.stack([S_new_full[a, b] for a, b in PACKED3]),
                               rtol=0, atol=1e-12 * np.max(np.abs(S_new_full)))


def test_gaussian_and_heaviside_lorentz_differ_by_four_pi(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    gaussian = emsource.adm_sources(gamma, E, B, units="gaussian")
    hl = emsource.adm_sources(gamma, E, B, units="heaviside_lorentz")
    # One multiplication by 1/(4 pi) in a different place: at most a few epsilons apart.
    for a, b in zip(gaussian, hl):
        np.testing.assert_allclose(a * (4 * math.pi), b, rtol=8 * EPS, atol=0)
    T_g = emsource.stress_energy_4d(alpha, beta, gamma, E, B, units="gaussian")
    T_hl = emsource.stress_energy_4d(alpha, beta, gamma, E, B, units="heaviside_lorentz")
    np.testing.assert_allclose(T_g * (4 * math.pi), T_hl, rtol=8 * EPS, atol=1e-15 * np.max(np.abs(T_hl)))
