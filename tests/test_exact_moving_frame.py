"""Tests of emsource.exact.plane_wave_moving_frame: the plane wave in drifting coordinates.

Sources: the plane wave of Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 7.1; the 3+1
line element and the definitions of E, B of the conventions page, evaluated symbolically with
sympy (Gourgoulhon, 3+1 Formalism in General Relativity (2012), ch. 4, for reading lapse and shift
off g^ab, from memory); the 3+1 Maxwell equations in maxwell_3p1_reference.py (Baumgarte &
Shapiro, Numerical Relativity (2010), sec. 11.1).
"""

import dataclasses
import math

import numpy as np
import pytest
import sympy as sp

from emsource.exact import plane_wave, plane_wave_moving_frame
from emsource.grid import UniformGrid
from maxwell_3p1_reference import normalised_max_residuals, residual_convergence, time_derivative_errors
from sympy_fields_reference import faraday, lapse_shift, normal_observer_fields, pull_back, pull_back_metric

WAVE_VECTOR = np.array([3.1, 5.3, -2.2])
POLARIZATION = np.cross(WAVE_VECTOR, (1.0, 0.0, 0.0))
FRAME_VELOCITY = np.array([0.3, -0.45, 0.2])


def box(n):
    return UniformGrid((n, n, n), (0.1, -0.3, 0.2), (1.0 / n, 1.3 / n, 0.8 / n))


def drifting_wave(grid, t, **kw):
    return plane_wave_moving_frame(grid, t, frame_velocity=FRAME_VELOCITY, wave_vector=WAVE_VECTOR,
                                   polarization=POLARIZATION, **kw)


@pytest.mark.parametrize("order", [2, 4, 6])
def test_satisfies_3p1_maxwell_with_shift_at_stencil_order(order):
    """Both halves of the 3+1 Maxwell equations, with the shift-flux terms
    d_j[sqrt(gamma)(beta^j E^i - beta^i E^j)], converge at the stencil order (helper docstring
    has the equations). Round-off of the normalised residual is ~ 1e-14; require 1e-10 (trap 2)."""
    result = residual_convergence(lambda n: drifting_wave(box(n), 0.37), order)
    for name, (errors, orders) in result.items():
        assert errors[-1] > 1e-10, (name, errors)
        assert abs(orders[-1] - order) < 0.3, (name, errors, orders)


def test_dropping_the_shift_breaks_the_equations():
    """Negative control: the same fields with beta set to 0 violate the evolution equations by
    an O(|V| |k| |E|) amount that does not shrink with h (residual ~ 0.3 at both resolutions)."""
    errors = []
    for n in (12, 24):
        data = drifting_wave(box(n), 0.37)
        wrong = dataclasses.replace(data, beta=np.zeros_like(data.beta))
        errors.append(normalised_max_residuals(wrong, 4)["ampere"])
    assert min(errors) > 0.05
    assert abs(math.log2(errors[0] / errors[1])) < 0.3  # observed order near 0


def test_time_derivatives_at_fixed_drifting_point():
    """dt_E, dt_B are d/dt at fixed x' (centred time differences of the data agree at order 2;
    dt = 2e-3, 1e-3, error ~ dt^2 (k.V - omega)^2 / 6 ~ 1e-5 relative, round-off ~ 1e-13)."""
    errs = time_derivative_errors(lambda t: drifting_wave(box(6), t), 0.37)
    for name in ("E", "B"):
        (e1, e2), scale = errs[name]
        assert e1 / scale < 1e-3
        assert abs(math.log2(e1 / e2) - 2.0) < 0.3, (name, e1, e2)
    assert errs["gamma"][0] == [0.0, 0.0]


def test_equals_inertial_wave_at_displaced_points():
    """E'(t, x') = E(t, x' + V t): the same arrays as plane_wave on the grid moved by V t
    (to round-off of phases ~ 10: 1e-14)."""
    grid = box(5)
    t = 0.8
    moved = UniformGrid(grid.shape, tuple(np.add(grid.origin, FRAME_VELOCITY * t)), grid.spacing)
    inertial = plane_wave(moved, t, wave_vector=WAVE_VECTOR, polarization=POLARIZATION)
    data = drifting_wave(grid, t)
    np.testing.assert_allclose(data.E, inertial.E, atol=1e-14)
    np.testing.assert_allclose(data.B, inertial.B, atol=1e-14)
    np.testing.assert_array_equal(data.beta, np.broadcast_to(FRAME_VELOCITY[:, None, None, None], data.beta.shape))
    assert np.all(data.alpha == 1.0) and np.all(data.K == 0.0)


def test_lapse_shift_and_fields_from_sympy_pull_back():
    """Pull the Minkowski metric and the wave's 4-potential back to (t, x') with x = x' + V t in
    sympy; read alpha and beta off g^ab, and E, B from the conventions' definitions
    (E^a = F^ab n_b, B^a = -(1/2) eps^abcd n_b F_cd). This fixes the sign beta = +V."""
    t, x, y, z = sp.symbols("t x y z", real=True)
    V = [sp.Rational(3, 10), sp.Rational(-9, 20), sp.Rational(1, 5)]
    k = [sp.Rational(31, 10), sp.Rational(53, 10), sp.Rational(-11, 5)]
    e = sp.Matrix(k).cross(sp.Matrix([1, 0, 0]))
    e = e / e.norm()
    omega = sp.Matrix(k).norm()
    # Inertial coordinates of the event, and the Jacobian dX^M/dx^a.
    X = [t, x + V[0] * t, y + V[1] * t, z + V[2] * t]
    coords = [t, x, y, z]
    jac = sp.Matrix(4, 4, lambda M, a: sp.diff(X[M], coords[a]))
    eta = sp.diag(-1, 1, 1, 1)
    g = pull_back_metric(eta, jac)
    alpha, beta = lapse_shift(g)
    assert sp.simplify(alpha - 1) == 0
    assert [sp.simplify(b - v) for b, v in zip(beta, V)] == [0, 0, 0]
    # Potential with E = -d_T A = sin(s) e, B = curl A = k_hat x E: A_M = (0, -(1/omega) cos(s) e).
    s_phase = sum(k[i] * X[i + 1] for i in range(3)) - omega * X[0]
    A_inertial = [0] + [-(e[i] / omega) * sp.cos(s_phase) for i in range(3)]
    F = faraday(pull_back(A_inertial, jac), coords)
    E_sym, B_sym = normal_observer_fields(F, g)
    dt_E_sym = [sp.diff(c, t) for c in E_sym]

    grid = UniformGrid((2, 2, 2), (0.1, -0.3, 0.2), (0.37, 0.29, 0.41))
    tv = 0.63
    data = drifting_wave(grid, tv)
    X0, Y0, Z0 = grid.coordinates()
    for idx in [(0, 0, 0), (1, 0, 1), (0, 1, 1), (1, 1, 0)]:
        point = {t: tv, x: X0[idx], y: Y0[idx], z: Z0[idx]}
        for i in range(3):
            # float64 evaluation of O(1) values with phases ~ 5: agreement to 1e-13.
            assert abs(float(E_sym[i].evalf(subs=point)) - data.E[(i, *idx)]) < 1e-13
            assert abs(float(B_sym[i].evalf(subs=point)) - data.B[(i, *idx)]) < 1e-13
            assert abs(float(dt_E_sym[i].evalf(subs=point)) - data.dt_E[(i, *idx)]) < 1e-12


def test_bad_frame_velocity_is_named():
    with pytest.raises(ValueError, match="frame_velocity"):
        plane_wave_moving_frame(box(4), 0.0, frame_velocity=(0.1, 0.2), wave_vector=WAVE_VECTOR,
                                polarization=POLARIZATION)
