"""emsource.ideal_mhd against independent routes on random curved states.

- E^i: the brute-force F_ab of tests/reference_stress_energy.py, built from that E and B,
  must satisfy the ideal-MHD condition F_ab u^b = 0 with u^a = W (n^a + v^a) built here.
- b^a: equal to -(1/2) eps^abcd u_b F_cd by brute-force contraction (its definition), to the
  round-off of that contraction (derived beside the check).
- T^ab: the comoving form k (b^2 u^a u^b + (1/2) b^2 g^ab - b^a b^b) (T. W. Baumgarte and
  S. L. Shapiro, Numerical Relativity (2010), sec. 5.2, from memory), evaluated here with
  NumPy from the returned u^a, b^a and the reference g^ab, equals emsource.stress_energy_4d
  (index="upper") of (E from ideal_mhd_fields, B).
- The two velocity kinds agree: u^i from the Eulerian run, fed back as "four_velocity".

Tolerance for T^ab, from float64 epsilon and the magnitudes: each component is a sum of
at most ~20 products of terms bounded by k b^2 |u|^2 (and the 3+1 route's terms bounded by
k (E^2 + B^2) |n|^2 (1 + |beta|)^2); each route rounds to at most ~20 eps of its largest term
(plus eps kappa from inverting the metric, kappa < ~100 here), so
    |difference| <= 2 * 20 * 100 * eps * M,  M = k max(b^2 |u^a|^2, (E^2 + B^2) |n^a|^2)
is ~1e-11 M; a wrong sign of E (E -> -E changes S_i and T^ti by order one) fails it.
"""

import numpy as np
import pytest

import emsource
from emsource import GridPointError
from emsource.ideal_mhd import ideal_mhd_fields
from conftest import assert_computed_in_float32, random_curved_data, unpack_symmetric, unpack_symmetric4
from reference_stress_energy import point_faraday, point_geometry

GRID = (2, 3, 2)
EPS = np.finfo(np.float64).eps


def _state(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    beta = 0.3 * beta  # |beta|_gamma < alpha, so that u^i fixes u^t (the four_velocity kind)
    full = unpack_symmetric(gamma)
    direction = rng.standard_normal((3,) + GRID)
    norm = np.sqrt(np.einsum("ij...,i...,j...->...", full, direction, direction))
    speed = rng.uniform(0.1, 0.95, GRID)
    return alpha, beta, gamma, B, speed * direction / norm


def test_ideal_mhd_against_the_4d_route(rng):
    alpha, beta, gamma, B, v = _state(rng)
    f = ideal_mhd_fields(alpha, beta, gamma, B, v)
    T = emsource.stress_energy_4d(alpha, beta, gamma, f.E, B, index="upper")
    full = unpack_symmetric(gamma)
    for index in np.ndindex(GRID):
        s = (slice(None),) + index
        g3 = full[(slice(None), slice(None)) + index]
        g, g_inv, n_up, _, eps_up = point_geometry(alpha[index], beta[s], g3)
        W = 1 / np.sqrt(1 - v[s] @ g3 @ v[s])
        u = W * (n_up + np.concatenate([[0.0], v[s]]))
        np.testing.assert_allclose(f.u[s], u, rtol=1e-13, atol=1e-13 * np.abs(u).max())
        F_up = point_faraday(alpha[index], beta[s], g3, f.E[s], B[s])
        F_low = g @ F_up @ g
        # The reference F_ab is g F^ab g (16 products per component) with F^ab from eps^abcd of
        # four inverted 4-metrics (kappa ~ 100 here): 24 * 100 eps of its largest term.
        scale = np.abs(g).max() ** 2 * np.abs(F_up).max() * np.abs(u).max()
        assert np.abs(F_low @ u).max() < 2400 * EPS * scale, "F_ab u^b = 0 fails"
        b_ref = -0.5 * np.einsum("abcd,b,cd->a", eps_up, g @ u, F_low)
        # 24 nonzero terms of the contraction, eps^abcd from four inverted 4-metrics (kappa of
        # order 100 here): 24 * 100 eps of the largest term bounds the reference's error.
        terms = np.abs(eps_up).max() * np.abs(g @ u).max() * np.abs(F_low).max()
        np.testing.assert_allclose(f.b[s], b_ref, rtol=0, atol=2400 * EPS * terms)
        b = f.b[s]
        b2 = b @ g @ b
        comoving = (b2 * np.outer(u, u) + 0.5 * b2 * g_inv - np.outer(b, b)) / (4 * np.pi)
        E2B2 = f.E[s] @ g3 @ f.E[s] + B[s] @ g3 @ B[s]
        M = max(b2 * np.abs(u).max() ** 2, E2B2 * np.abs(n_up).max() ** 2) / (4 * np.pi)
        found = unpack_symmetric4(T)[(slice(None), slice(None)) + index]
        assert np.abs(found - comoving).max() <= 2 * 20 * 100 * EPS * M, (found - comoving)
    # The check is not vacuous: the opposite sign of E gives a different T^ab.
    wrong = emsource.stress_energy_4d(alpha, beta, gamma, -f.E, B, index="upper")
    assert np.abs(wrong - T).max() > 1e-3 * np.abs(T).max()


def test_four_velocity_kind_equals_eulerian(rng):
    alpha, beta, gamma, B, v = _state(rng)
    f = ideal_mhd_fields(alpha, beta, gamma, B, v)
    g = ideal_mhd_fields(alpha, beta, gamma, B, np.ascontiguousarray(f.u[1:]),
                         velocity_kind="four_velocity")
    for a, b in zip(g, f):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-12 * np.abs(b).max())


def test_bad_velocity_and_arguments(rng):
    alpha, beta, gamma, B, v = _state(rng)
    fast = v.copy()

    fast[:, 1, 2, 0] = 10 * v[:, 1, 2, 0] / np.linalg.norm(v[:, 1, 2, 0])
    with pytest.raises(GridPointError, match=r"grid index \(1, 2, 0\).*speed of light"):
        ideal_mhd_fields(alpha, beta, gamma, B, fast)
    with pytest.raises(GridPointError, match=r"is not below alpha"):
        ideal_mhd_fields(alpha, 10 * beta, gamma, B, v, velocity_kind="four_velocity")
    with pytest.raises(ValueError, match=r"velocity_kind must be one of \('eulerian', "
                                         r"'four_velocity'\), found 'coordinate'"):
        ideal_mhd_fields(alpha, beta, gamma, B, v, velocity_kind="coordinate")
    with pytest.raises(ValueError, match=r"ideal_mhd_fields: velocity must have shape"):
        ideal_mhd_fields(alpha, beta, gamma, B, v[:2])


def test_float32_arithmetic_against_float64(rng):
    """float32 input is computed in float32, for both velocity kinds: E^i, u^a, b^a within
    400 eps32 of the float64 result of the same rounded input (the Lorentz factor of speeds up to
    0.95, W ~ 3, amplifies the roundings of v_i v^i by W^2 ~ 10 over the ~40 of the other
    steps), and a difference beyond half an ulp somewhere (``assert_computed_in_float32``).
    Measured: that last part alone does not catch a kernel that mixes float32 and float64 steps
    (the previous kernel, which had float64 literals in some steps only, passed it); the
    conformal and Faraday tests' controls did fail on their float64-literal kernels."""
    alpha, beta, gamma, B, v = (a.astype(np.float32) for a in _state(rng))
    for kind in ("eulerian", "four_velocity"):
        if kind == "four_velocity":
            v = np.ascontiguousarray(
                ideal_mhd_fields(*(a.astype(np.float64) for a in (alpha, beta, gamma, B, v))
                                 ).u[1:].astype(np.float32))
        single = ideal_mhd_fields(alpha, beta, gamma, B, v, velocity_kind=kind)
        double = ideal_mhd_fields(*(a.astype(np.float64) for a in (alpha, beta, gamma, B, v)),
                                  velocity_kind=kind)
        assert_computed_in_float32(list(zip(single, double)), roundings=400)
