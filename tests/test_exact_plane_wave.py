"""Tests of emsource.exact.plane_wave: the vacuum plane wave in flat spacetime.

Sources: the plane-wave solution E = f(k.x - omega t) e_hat, B = k_hat x E of Jackson, Classical
Electrodynamics, 3rd ed. (1999), sec. 7.1; the energy density and Poynting vector of sec. 6.7;
the 3+1 Maxwell equations as written in maxwell_3p1_reference.py (Baumgarte & Shapiro,
Numerical Relativity (2010), sec. 11.1, re-derived from nabla_b F^ab = 4 pi J^a).
"""

import dataclasses
import math

import numpy as np
import pytest

from emsource.exact import periodic_wave_vector, plane_wave
from emsource.grid import UniformGrid
from maxwell_3p1_reference import normalised_max_residuals, residual_convergence, time_derivative_errors

MODES = (1, 2, 1)  # oblique in all three axes, so every derivative term of the equations works


# A wave vector with unrelated components on a box with unequal sides. If k_i h_i is the same on
# two axes (a commensurate wave with equal mode numbers, say), the centred differences of f along
# those axes are identical and the discrete div E = sum_i e_i D_i f cancels exactly.
WAVE_VECTOR = np.array([3.1, 5.3, -2.2])


def box(n):
    return UniformGrid((n, n, n), (0.1, -0.3, 0.2), (1.0 / n, 1.3 / n, 0.8 / n))


def oblique_wave(grid, t, k=WAVE_VECTOR, **kw):
    return plane_wave(grid, t, wave_vector=k, polarization=np.cross(k, (1.0, 0.0, 0.0)), **kw)


@pytest.mark.parametrize("order", [2, 4, 6])
@pytest.mark.parametrize("profile", ["sine", "periodic_gaussian"])
def test_satisfies_3p1_maxwell_at_stencil_order(order, profile):
    """All four 3+1 Maxwell equations (divergence and evolution halves; see the helper's
    docstring for the equations) hold to the truncation error of a centred difference of `order`.

    The exact d_t E, d_t B are used, so no time difference enters (trap 1 of the testing notes
    does not apply); the residual is normalised by the largest term of each equation.
    """
    result = residual_convergence(lambda n: oblique_wave(box(n), 0.37, profile=profile, width=1.0), order)
    for name, (errors, orders) in result.items():
        # Trap 2: read an order only above round-off. Round-off of a normalised centred
        # difference is ~ eps / (h |k|) ~ 1e-14 here; require 1e-10, four decades above it.
        assert errors[-1] > 1e-10, (name, errors)
        assert abs(orders[-1] - order) < 0.3, (name, errors, orders)


@pytest.mark.parametrize("profile", ["sine", "periodic_gaussian", "gaussian"])
def test_time_derivatives_match_time_differences(profile):
    """dt_E, dt_B (and dt_gamma = 0) agree with centred differences in t, converging at order 2,
    for each built-in profile (so each analytic f' is the derivative of its f).

    dt is 2e-3 and 1e-3, far from h (trap 1), and the error dt^2 omega^2 |dt_E| / 6 ~ 1e-4
    relative sits far above the round-off eps |E| / dt ~ 1e-13.
    """
    grid = box(8)
    errs = time_derivative_errors(lambda t: oblique_wave(grid, t, profile=profile, width=0.7), 0.37)
    for name in ("E", "B"):
        (e1, e2), scale = errs[name]
        assert e1 / scale < 1e-3
        assert abs(math.log2(e1 / e2) - 2.0) < 0.3, (name, e1, e2)
    assert errs["gamma"][0] == [0.0, 0.0]


def test_reference_sees_a_static_divergence_error():
    """Negative control of the reference residual (trap 4 of the testing notes): B_x += 0.3 x is
    static and curl-free, so both evolution equations still hold, but div B = 0.3 fails at every
    resolution."""
    errors = []
    for n in (12, 24):
        data = oblique_wave(box(n), 0.37)
        B = data.B.copy()
        B[0] += 0.3 * box(n).coordinates()[0]
        wrong = normalised_max_residuals(dataclasses.replace(data, B=B), 4)
        errors.append(wrong["div_B"])
        right = normalised_max_residuals(data, 4)
        # The centred curl of a linear field is exact, so the evolution residuals do not change
        # (up to the renormalisation by the largest term): the error is invisible to them.
        assert wrong["ampere"] == pytest.approx(right["ampere"], rel=1e-6)
        assert wrong["faraday"] == pytest.approx(right["faraday"], rel=1e-6)
    assert min(errors) > 0.01
    assert abs(math.log2(errors[0] / errors[1])) < 0.3


def test_null_field_energy_and_poynting_flux():
    """A plane wave is a null field: |E| = |B|, E.B = 0, |S| = rho with S along k_hat.

    rho = (E^2 + B^2) / (8 pi), S = E x B / (4 pi) (Gaussian; Jackson sec. 6.7). Agreement is to
    float64 round-off of products of O(1) numbers: 1e-14 absolute.
    """
    grid = box(6)
    k = periodic_wave_vector(grid, MODES)
    data = plane_wave(grid, 0.2, wave_vector=k, polarization=np.cross(k, (1.0, 0.0, 0.0)), amplitude=2.5)
    E, B = data.E, data.B
    rho = (np.sum(E * E, axis=0) + np.sum(B * B, axis=0)) / (8 * np.pi)
    S = np.cross(E, B, axis=0) / (4 * np.pi)
    assert np.max(np.abs(np.sum(E * E, 0) - np.sum(B * B, 0))) < 1e-13
    assert np.max(np.abs(np.sum(E * B, 0))) < 1e-13
    assert np.max(np.abs(np.linalg.norm(S, axis=0) - rho)) < 1e-14
    k_hat = k / np.linalg.norm(k)
    np.testing.assert_allclose(S, k_hat[:, None, None, None] * rho, atol=1e-14)
    assert rho.max() > 0.1  # the field is not zero everywhere


def test_periodic_wave_vector_makes_box_periodic():
    """With k from periodic_wave_vector the field at x + N h e_i equals the field at x.

    The grid is vertex-centred: the period is N h, one spacing past the last point. Phase values
    reach ~ 2 pi * 4, so sin is accurate to ~ 1e-14.
    """
    grid = UniformGrid((6, 5, 4), (0.0, 0.5, -1.0), (0.2, 0.3, 0.25))
    k = periodic_wave_vector(grid, (1, -2, 3))
    np.testing.assert_allclose(k, 2 * np.pi * np.array([1 / 1.2, -2 / 1.5, 3 / 1.0]))
    ref = plane_wave(grid, 0.3, wave_vector=k, polarization=np.cross(k, (0, 0, 1)))
    for axis in range(3):
        origin = list(grid.origin)
        origin[axis] += grid.shape[axis] * grid.spacing[axis]
        shifted = UniformGrid(grid.shape, tuple(origin), grid.spacing)
        other = plane_wave(shifted, 0.3, wave_vector=k, polarization=np.cross(k, (0, 0, 1)))
        np.testing.assert_allclose(other.E, ref.E, atol=1e-13)
    # The last point is NOT the image of the first (one h short), so these differ:
    assert np.max(np.abs(ref.E[:, -1] - ref.E[:, 0])) > 0.1


def test_periodic_wave_vector_lower_dimensional_grid():
    grid = UniformGrid((8, 8), (0.0, 0.0), (0.25, 0.25))
    np.testing.assert_allclose(periodic_wave_vector(grid, (1, 2)), [np.pi, 2 * np.pi, 0.0])
    data = plane_wave(grid, 0.0, wave_vector=(np.pi, 0, 0), polarization=(0, 1, 0))
    assert data.E.shape == (3, 8, 8)
    np.testing.assert_allclose(data.E[1, :, 0], np.sin(np.pi * grid.axis(0)), atol=1e-15)


def test_custom_profile_and_phase():
    """A caller's (f, f_prime) pair and the phase are honoured: E = a f(s) e, d_t E = -omega a f'(s) e."""
    grid = UniformGrid((7,), (0.0,), (0.1,))
    f = (lambda s: np.tanh(s), lambda s: 1.0 / np.cosh(s) ** 2)
    data = plane_wave(grid, 0.25, wave_vector=(2.0, 0, 0), polarization=(0, 0, 3.0),
                      profile=f, amplitude=1.5, phase=0.1)
    s = 2.0 * grid.axis(0) - 2.0 * 0.25 + 0.1
    np.testing.assert_allclose(data.E[2], 1.5 * np.tanh(s), rtol=1e-15)
    np.testing.assert_allclose(data.B[1], -1.5 * np.tanh(s), rtol=1e-15)  # x_hat x z_hat = -y_hat
    np.testing.assert_allclose(data.dt_E[2], -2.0 * 1.5 / np.cosh(s) ** 2, rtol=1e-15)


def test_heaviside_lorentz_keeps_stress_energy():
    """Heaviside-Lorentz fields are the Gaussian ones over sqrt(4 pi) (same energy density:
    E_G^2/(8 pi) = E_HL^2/2; Jackson, appendix on units, from memory)."""
    grid = box(4)
    gauss = oblique_wave(grid, 0.1)
    hl = oblique_wave(grid, 0.1, units="heaviside_lorentz")
    assert hl.units == "heaviside_lorentz"
    np.testing.assert_allclose(hl.E * math.sqrt(4 * math.pi), gauss.E, rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(hl.dt_B * math.sqrt(4 * math.pi), gauss.dt_B, rtol=1e-15, atol=1e-14)
    np.testing.assert_allclose(np.sum(hl.E**2, 0) / 2, np.sum(gauss.E**2, 0) / (8 * np.pi), atol=1e-15)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(wave_vector=(1, 0, 0), polarization=(1, 1, 0)), "orthogonal"),
        (dict(wave_vector=(0, 0, 0), polarization=(0, 1, 0)), "wave_vector must be nonzero"),
        (dict(wave_vector=(1, 0), polarization=(0, 1, 0)), r"wave_vector must have shape \(3,\)"),
        (dict(wave_vector=(1, 0, 0), polarization=(0, 1, 0), profile="square"), "profile"),
        (dict(wave_vector=(1, 0, 0), polarization=(0, 1, 0), profile="gaussian", width=0.0), "width"),
        (dict(wave_vector=(1, 0, 0), polarization=(0, 1, 0), units="si"), "units"),
        (dict(wave_vector=(np.nan, 0, 0), polarization=(0, 1, 0)), "finite"),
    ],
)
def test_bad_arguments_are_named(kwargs, message):
    with pytest.raises(ValueError, match=message):
        plane_wave(box(4), 0.0, **kwargs)


def test_bad_modes_are_named():
    with pytest.raises(ValueError, match="modes"):
        periodic_wave_vector(box(4), (1, 2))
    with pytest.raises(ValueError, match="whole numbers"):
        periodic_wave_vector(box(4), (1, 2, 0.5))
