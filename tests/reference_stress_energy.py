"""A slow, independent route to T^ab and its 3+1 projections, for tests only.

Built from the covariant objects by brute-force contraction, point by point, with nothing
shared with the package's kernels:

    g_ab from (alpha, beta, gamma):  g_tt = -alpha^2 + beta_k beta^k, g_ti = beta_i, g_ij = gamma_ij
    n^a = (1, -beta^i)/alpha,  n_a = (-alpha, 0, 0, 0)
    eps_abcd = sqrt(-g) [abcd],  [txyz] = +1, all four indices raised with g^ab
    F^ab = n^a E^b - E^a n^b + eps^abcd n_c B_d        (E^a = (0, E^i), B^a = (0, B^i))
    T^ab = k (F^ac F^b_c - (1/4) g^ab F_cd F^cd),  k = 1/(4 pi) Gaussian, 1 Heaviside-Lorentz
    rho = n_a n_b T^ab,  S_i = -n^b T_ib,  S_ij = T_ij

References: C. W. Misner, K. S. Thorne, J. A. Wheeler, Gravitation (1973), eq. (22.19a)
(electromagnetic stress-energy) and ex. 3.7 / sec. 3.5 (Levi-Civita tensor); E. Gourgoulhon,
3+1 Formalism in General Relativity (2012), sec. 5.1-5.2 (projections) and 3.3 (n^a).
The decomposition of F^ab is checked in ``test_reference_field_decomposition`` by recovering
E^a = F^ab n_b and B^a = -(1/2) eps^abcd n_b F_cd, the definitions of the conventions page.
"""

import itertools
import math

import numpy as np


def levi_civita_symbol4():
    eps = np.zeros((4, 4, 4, 4))
    for perm in itertools.permutations(range(4)):
        inversions = sum(1 for i in range(4) for j in range(i + 1, 4) if perm[i] > perm[j])
        eps[perm] = -1.0 if inversions % 2 else 1.0
    return eps


_SYMBOL = levi_civita_symbol4()


def point_geometry(alpha, beta, gamma3):
    """g_ab, g^ab, n^a, n_a, eps^abcd at one point (gamma3 a full 3x3 matrix)."""
    beta_low = gamma3 @ beta
    g = np.empty((4, 4))
    g[0, 0] = -alpha**2 + beta_low @ beta
    g[0, 1:] = g[1:, 0] = beta_low
    g[1:, 1:] = gamma3
    g_inv = np.linalg.inv(g)
    n_up = np.concatenate([[1.0], -beta]) / alpha
    n_low = np.array([-alpha, 0.0, 0.0, 0.0])
    eps_low = math.sqrt(-np.linalg.det(g)) * _SYMBOL
    eps_up = np.einsum("abcd,ae,bf,cg,dh->efgh", eps_low, g_inv, g_inv, g_inv, g_inv)
    return g, g_inv, n_up, n_low, eps_up


def point_faraday(alpha, beta, gamma3, E, B):
    """F^ab at one point from contravariant E^i, B^i."""
    g, g_inv, n_up, n_low, eps_up = point_geometry(alpha, beta, gamma3)
    E4 = np.concatenate([[0.0], E])
    B4_low = g @ np.concatenate([[0.0], B])
    return (np.outer(n_up, E4) - np.outer(E4, n_up)
            + np.einsum("abcd,c,d->ab", eps_up, n_low, B4_low))


def point_stress_energy(alpha, beta, gamma3, E, B, prefactor):
    """T^ab, T_ab, rho, S_i, S_ij (full 3x3) at one point."""
    g, g_inv, n_up, n_low, _ = point_geometry(alpha, beta, gamma3)
    F_up = point_faraday(alpha, beta, gamma3, E, B)
    F_mixed = F_up @ g  # F^a_c
    F_low = g @ F_up @ g
    invariant = np.einsum("cd,cd->", F_low, F_up)
    T_up = prefactor * (F_mixed @ F_up.T - 0.25 * g_inv * invariant)  # F^ac F^b_c
    T_low = g @ T_up @ g
    rho = n_low @ T_up @ n_low
    S_i = -(T_low[1:, :] @ n_up)
    S_ij = T_low[1:, 1:]
    return T_up, T_low, rho, S_i, S_ij


def grid_reference(alpha, beta, gamma_packed, E, B, prefactor):
    """Loop :func:`point_stress_energy` over a grid; packed outputs like the package's."""
    from conftest import unpack_symmetric

    gamma_full = unpack_symmetric(gamma_packed.astype(np.float64))
    grid = alpha.shape
    rho = np.empty(grid)
    S_i = np.empty((3,) + grid)
    S_ij = np.empty((6,) + grid)
    T_low = np.empty((10,) + grid)
    T_up = np.empty((10,) + grid)
    packed4 = [(0, 0), (0, 1), (0, 2), (0, 3), (1, 1), (1, 2), (1, 3), (2, 2), (2, 3), (3, 3)]
    packed3 = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    for index in np.ndindex(grid):
        sl = (slice(None),) + index
        tu, tl, r, si, sij = point_stress_energy(
            float(alpha[index]), beta[sl].astype(float), gamma_full[(slice(None), slice(None)) + index],
            E[sl].astype(float), B[sl].astype(float), prefactor)
        rho[index] = r
        S_i[sl] = si
        S_ij[sl] = [sij[a, b] for a, b in packed3]
        T_low[sl] = [tl[a, b] for a, b in packed4]
        T_up[sl] = [tu[a, b] for a, b in packed4]
    return rho, S_i, S_ij, T_low, T_up
