"""adm_sources in flat space against textbook closed forms.

Plane waves: J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 7.1 (E = E0 eps
cos(k.x - omega t), B = k_hat x E), sec. 6.7 (energy density u = (E^2 + B^2)/(8 pi), Poynting
vector S = (c/4 pi) E x B, momentum density g = S/c^2) and sec. 6.8 (Maxwell stress tensor
T_ij = (1/4 pi)[E_i E_j + B_i B_j - (1/2) delta_ij (E^2 + B^2)]; the 3+1 stress is S_ij = -T_ij).
Uniformly moving point charge: Jackson sec. 11.10, eq. (11.154): E = q (1 - beta^2) R /
[R^3 (1 - beta^2 sin^2 psi)^(3/2)], B = beta x E, with R from the present position of the charge.

Tolerance: these are the same algebra in another arrangement, evaluated in float64 on order-one
numbers, so agreement is at a few float64 epsilons relative: 1e-13 leaves margin.
"""

import math

import numpy as np
import pytest

import emsource

def flat_metric(grid):
    gamma = np.zeros((6,) + grid)
    gamma[[0, 3, 5]] = 1.0
    return gamma


def random_unit(rng):
    v = rng.standard_normal(3)
    return v / np.linalg.norm(v)


@pytest.mark.parametrize("trial", range(4))
def test_plane_wave_any_direction_and_polarization(rng, trial):
    grid = (6, 5, 4)
    x = np.stack(np.meshgrid(*(np.linspace(0, 1, n) for n in grid), indexing="ij"))
    k_hat = random_unit(rng)
    # Elliptical polarisation: two orthogonal linear polarisations with a phase shift.
    e1 = np.cross(k_hat, random_unit(rng))
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(k_hat, e1)
    amp1, amp2, delta = rng.uniform(0.2, 2.0), rng.uniform(0.0, 2.0), rng.uniform(0, 2 * math.pi)
    omega, t = 2 * math.pi * 1.3, 0.37
    phase = omega * (np.einsum("i,i...->...", k_hat, x) - t)
    E = (amp1 * np.cos(phase) * e1[:, None, None, None]
         + amp2 * np.cos(phase + delta) * e2[:, None, None, None])
    B = np.cross(k_hat[:, None, None, None], E, axis=0)
    src = emsource.adm_sources(flat_metric(grid), E, B)

    E2 = np.sum(E * E, axis=0)
    B2 = np.sum(B * B, axis=0)
    u = (E2 + B2) / (8 * math.pi)                            # Jackson (6.106)
    poynting = np.cross(E, B, axis=0) / (4 * math.pi)         # Jackson (6.109), c = 1
    maxwell = (np.einsum("i...,j...->ij...", E, E) + np.einsum("i...,j...->ij...", B, B)
               - 0.5 * np.eye(3)[:, :, None, None, None] * (E2 + B2)) / (4 * math.pi)  # (6.120)
    packed = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    np.testing.assert_allclose(src.rho, u, rtol=1e-13)
    np.testing.assert_allclose(src.S_i, poynting, rtol=1e-13, atol=1e-15)
    np.testing.assert_allclose(src.S_ij, np.stack([-maxwell[a, b] for a, b in packed]),
                               rtol=1e-13, atol=1e-15)
    # A plane wave is a null field: momentum density u k_hat, radiation pressure u k_hat k_hat.
    np.testing.assert_allclose(src.S_i, u * k_hat[:, None, None, None], rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(
        src.S_ij, np.stack([u * k_hat[a] * k_hat[b] for a, b in packed]), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("speed", [0.1, 0.6, 0.95])
def test_uniformly_moving_point_charge(rng, speed):
    q = 1.7
    v = speed * random_unit(rng)
    grid = (7, 6, 5)
    points = np.stack(np.meshgrid(*(np.linspace(0.3, 2.0, n) for n in grid), indexing="ij"))
    t = 0.25
    R = points - (v * t)[:, None, None, None]                 # charge at v t, present position
    R_norm = np.sqrt(np.sum(R * R, axis=0))
    cos_psi = np.einsum("i,i...->...", v, R) / (speed * R_norm)
    sin2_psi = 1 - cos_psi**2
    E = q * (1 - speed**2) * R / (R_norm**3 * (1 - speed**2 * sin2_psi) ** 1.5)  # Jackson (11.154)
    B = np.cross(v[:, None, None, None], E, axis=0)
    src = emsource.adm_sources(flat_metric(grid), E, B)

    E2 = q**2 * (1 - speed**2) ** 2 / (R_norm**4 * (1 - speed**2 * sin2_psi) ** 3)
    u = E2 * (1 + speed**2 * sin2_psi) / (8 * math.pi)         # |B| = beta |E| sin psi
    # g = E x (v x E) / (4 pi) = (v E^2 - E (E.v)) / (4 pi)
    e_dot_v = np.einsum("i,i...->...", v, E)
    g = (v[:, None, None, None] * E2 - E * e_dot_v) / (4 * math.pi)
    np.testing.assert_allclose(src.rho, u, rtol=1e-12)
    np.testing.assert_allclose(src.S_i, g, rtol=1e-12, atol=1e-14 * np.max(np.abs(g)))
    # Energy flows along v on average: g . v >= 0 everywhere, zero only on the axis.
    assert np.all(np.einsum("i,i...->...", v, src.S_i) >= -1e-15)
