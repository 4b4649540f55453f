"""Coordinate-independent checks of all four flat-spacetime exact cases.

The two invariants of the Faraday tensor, F_ab F^ab = 2 (B^2 - E^2) and *F_ab F^ab ~ E.B (with
E^2 = gamma_ij E^i E^j, measured by any observer), are the same in every frame and coordinate
system (Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 11.10 and problem 11.14, from
memory; MTW, Gravitation (1973), exercise 3.17, from memory). A plane wave is null: both vanish,
and then the energy and momentum densities measured by any observer satisfy S_i S^i = rho^2
(common practice). For the charge, E^2 - B^2 equals the rest-frame E'^2 and E.B = 0.
The energy and momentum densities come from the package's own emsource.adm_sources.
"""

import numpy as np
import pytest

import emsource
from emsource.exact import (boosted_gaussian_charge, gaussian_sphere_field_factors, plane_wave,
                            plane_wave_gauge_wave, plane_wave_moving_frame)
from emsource.grid import UniformGrid
from maxwell_3p1_reference import unpack

GRID = UniformGrid((5, 6, 4), (0.05, -0.3, 0.2), (0.21, 0.17, 0.23))
K = (3.1, 5.3, -2.2)
POL = tuple(np.cross(K, (1.0, 0.0, 0.0)))

NULL_CASES = {
    "plane_wave": lambda: plane_wave(GRID, 0.4, wave_vector=K, polarization=POL, profile="periodic_gaussian"),
    "moving_frame": lambda: plane_wave_moving_frame(GRID, 0.4, frame_velocity=(0.3, -0.45, 0.2),
                                                    wave_vector=K, polarization=POL),
    "gauge_wave": lambda: plane_wave_gauge_wave(GRID, 0.4, gauge_amplitude=0.5),
    "gauge_wave_oblique": lambda: plane_wave_gauge_wave(GRID, 0.4, gauge_amplitude=0.5, wave_vector=K,
                                                        polarization=POL, units="heaviside_lorentz"),
}


def dot(gamma, a, b):
    return np.einsum("ij...,i...,j...->...", unpack(gamma), a, b)


@pytest.mark.parametrize("case", sorted(NULL_CASES))
def test_plane_waves_are_null_in_every_slicing(case):
    """E^2 = B^2, E.B = 0 with the slice metric, and S_i S^i = rho^2 from adm_sources.
    Values are O(1); float64 round-off of these sums is ~ 1e-15, bound 1e-13."""
    data = NULL_CASES[case]()
    E2, B2, EB = dot(data.gamma, data.E, data.E), dot(data.gamma, data.B, data.B), dot(data.gamma, data.E, data.B)
    assert E2.max() > 0.01  # not a vanishing field (HL fields are 1/sqrt(4 pi) of Gaussian)
    np.testing.assert_allclose(E2, B2, atol=1e-13)
    np.testing.assert_allclose(EB, 0.0, atol=1e-13)
    src = emsource.adm_sources(data.gamma, data.E, data.B, units=data.units)
    g_inv = np.moveaxis(np.linalg.inv(np.moveaxis(unpack(data.gamma), (0, 1), (-2, -1))), (-2, -1), (0, 1))
    S2 = np.einsum("ij...,i...,j...->...", g_inv, src.S_i, src.S_i)
    np.testing.assert_allclose(np.sqrt(S2), src.rho, atol=1e-13 * src.rho.max())


def test_boosted_charge_invariants():
    """E^2 - B^2 = |E'|^2 = (q g(r') r')^2 and E.B = 0 (relative round-off ~ 1e-15, bound 1e-13)."""
    q, sigma, v, c = 1.7, 0.3, np.array([0.4, 0.2, -0.4]), np.array([-0.2, 0.1, 0.3])
    data = boosted_gaussian_charge(GRID, 0.4, charge=q, width=sigma, velocity=v, center=c)
    x = np.stack(GRID.coordinates())
    d = x - (c + v * 0.4)[:, None, None, None]
    lorentz = 1 / np.sqrt(1 - v @ v)
    r_rest = np.sqrt(np.sum(d * d, 0) + lorentz**2 * np.einsum("i,i...->...", v, d) ** 2)
    g, _ = gaussian_sphere_field_factors(r_rest, sigma)
    rest_E2 = (q * g * r_rest) ** 2
    E, B = data.E, data.B
    np.testing.assert_allclose(np.sum(E * E, 0) - np.sum(B * B, 0), rest_E2, rtol=1e-13)
    np.testing.assert_allclose(np.sum(E * B, 0), 0.0, atol=1e-13 * rest_E2.max())
