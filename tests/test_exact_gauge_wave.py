"""Tests of emsource.exact.plane_wave_gauge_wave: a plane wave on the gauge-wave slicing.

Sources: the gauge-wave metric of M. Alcubierre et al., "Toward standard testbeds for numerical
relativity", Class. Quantum Grav. 21, 589 (2004); the plane wave of Jackson, Classical
Electrodynamics, 3rd ed. (1999), sec. 7.1, pulled back to the gauge-wave coordinates with sympy;
the 3+1 Maxwell equations in maxwell_3p1_reference.py (Baumgarte & Shapiro, Numerical Relativity
(2010), sec. 11.1); K_ij from its definition on the conventions page.
"""

import dataclasses
import math

import numpy as np
import pytest
import sympy as sp

from emsource.exact import plane_wave, plane_wave_gauge_wave
from emsource.grid import UniformGrid
from maxwell_3p1_reference import (extrinsic_curvature_residual, normalised_max_residuals,
                                   residual_convergence, time_derivative_errors)
from sympy_fields_reference import faraday, normal_observer_fields, pull_back, pull_back_metric

A, D = 0.3, 1.0  # a large gauge amplitude so the metric terms are far from negligible
OBLIQUE = dict(wave_vector=(3.1, 5.3, -2.2), polarization=tuple(np.cross((3.1, 5.3, -2.2), (1.0, 0.0, 0.0))))


def box(n):
    # One gauge wavelength along x (periodic), unequal sides so no two axes share k_i h_i.
    return UniformGrid((n, n, n), (0.0, -0.3, 0.2), (D / n, 1.3 / n, 0.8 / n))


@pytest.mark.parametrize("order", [2, 4, 6])
@pytest.mark.parametrize("wave", ["default", "oblique"])
def test_satisfies_3p1_maxwell_on_gauge_wave_at_stencil_order(order, wave):
    """Both halves of the 3+1 Maxwell equations with lapse sqrt(H), gamma_xx = H and
    d_t sqrt(gamma) != 0 converge at the stencil order (equations in the helper's docstring).
    Round-off of the normalised residual ~ 1e-14; require 1e-10 (trap 2)."""
    kw = {} if wave == "default" else OBLIQUE
    result = residual_convergence(
        lambda n: plane_wave_gauge_wave(box(n), 0.37, gauge_amplitude=A, gauge_wavelength=D, **kw), order)
    for name, (errors, orders) in result.items():
        assert errors[-1] > 1e-10, (name, errors)
        assert abs(orders[-1] - order) < 0.3, (name, errors, orders)


def test_untransformed_wave_is_not_a_solution():
    """Negative control (trap 3 of the testing notes): the inertial-coordinate plane wave put on the
    gauge-wave metric unchanged violates the equations by O(A) at every resolution."""
    errors = []
    for n in (12, 24):
        data = plane_wave_gauge_wave(box(n), 0.37, gauge_amplitude=A, gauge_wavelength=D)
        flat = plane_wave(box(n), 0.37, wave_vector=(2 * np.pi, 2 * np.pi, 0),
                          polarization=(1, -1, 1))
        wrong = dataclasses.replace(data, E=flat.E, B=flat.B, dt_E=flat.dt_E, dt_B=flat.dt_B)
        errors.append(max(normalised_max_residuals(wrong, 4).values()))
    assert min(errors) > 0.02
    assert abs(math.log2(errors[0] / errors[1])) < 0.3  # no convergence


def test_wave_along_x_is_trivial_here():
    """Why the default wave is oblique: F = f(x - t) dx^dy solves Maxwell on this metric for any f
    (trap 3). Put the untransformed x-wave E = sin(k(x - t)) y_hat on the slicing, with E^y, B^z
    rescaled by the metric as E^y = F_yt/alpha, B^z = F_xy/sqrt(gamma): residual at the stencil
    order although nothing was transformed."""
    errors = []
    for n in (12, 24, 48):
        data = plane_wave_gauge_wave(box(n), 0.37, gauge_amplitude=A, gauge_wavelength=D)
        x, _, _ = box(n).coordinates()
        H = data.gamma[0]
        f = np.sin(2 * np.pi * (x - 0.37))
        dt_f = -2 * np.pi * np.cos(2 * np.pi * (x - 0.37))
        E = np.zeros_like(data.E)
        B = np.zeros_like(data.B)
        E[1] = f / np.sqrt(H)
        B[2] = f / np.sqrt(H)
        dt_H = data.dt_gamma[0]
        dt = np.zeros_like(E)
        dt[1] = dt_f / np.sqrt(H) - 0.5 * f * dt_H / H**1.5
        dtB = np.zeros_like(B)
        dtB[2] = dt[1]
        trivial = dataclasses.replace(data, E=E, B=B, dt_E=dt, dt_B=dtB)
        res = normalised_max_residuals(trivial, 4)
        # Both divergences vanish identically (E^y, B^z depend on x only): only the evolution
        # equations carry a truncation error to read an order from.
        assert res["div_E"] == 0.0 and res["div_B"] == 0.0
        errors.append(max(res["ampere"], res["faraday"]))
    orders = np.log2(np.array(errors[:-1]) / np.array(errors[1:]))
    assert abs(orders[-1] - 4) < 0.3, (errors, orders)


def test_time_derivatives_and_extrinsic_curvature():
    """dt_E, dt_B, dt_gamma agree with centred time differences (order 2, dt = 2e-3, 1e-3, error
    ~ dt^2 omega^2 / 6 ~ 1e-5 relative, round-off 1e-13), and K_ij equals
    -(d_t gamma_ij - D_i beta_j - D_j beta_i) / (2 alpha) from the conventions page (beta = 0 here,
    so the check is algebraic: round-off, 1e-14 of |K| ~ 1)."""
    grid = box(6)
    errs = time_derivative_errors(
        lambda t: plane_wave_gauge_wave(grid, t, gauge_amplitude=A, gauge_wavelength=D, **OBLIQUE), 0.37)
    for name in ("E", "B", "gamma"):
        (e1, e2), scale = errs[name]
        assert scale > 0.1
        assert e1 / scale < 1e-3
        assert abs(math.log2(e1 / e2) - 2.0) < 0.3, (name, e1, e2)
    data = plane_wave_gauge_wave(grid, 0.37, gauge_amplitude=A, gauge_wavelength=D)
    assert np.max(np.abs(extrinsic_curvature_residual(data, 2))) < 1e-14
    # Closed form quoted from the testbed paper (from memory): K_xx = -(pi A / d) cos(2 pi (x - t)/d) / sqrt(H).
    x = grid.coordinates()[0]
    H = 1 - A * np.sin(2 * np.pi * (x - 0.37) / D)
    np.testing.assert_allclose(data.K[0], -(np.pi * A / D) * np.cos(2 * np.pi * (x - 0.37) / D) / np.sqrt(H),
                               rtol=1e-14, atol=1e-15)
    np.testing.assert_allclose(data.alpha, np.sqrt(H), rtol=1e-15)


def test_fields_from_sympy_pull_back():
    """In sympy: U = integral_0^u H du' (sympy's own integral), X = (U + v)/2, T = (v - U)/2;
    check that eta pulls back to the gauge-wave metric, pull back the wave's 4-potential
    A_M = (0, -(1/omega) cos(s) e), and project E, B on the normal observer by the conventions'
    definitions. Compare E, B, d_t E and d_t B with the generator at a few points."""
    t, x, y, z, w = sp.symbols("t x y z w", real=True)
    Asym, Dsym = sp.Rational(3, 10), sp.Integer(1)
    Hfun = lambda arg: 1 - Asym * sp.sin(2 * sp.pi * arg / Dsym)  # noqa: E731
    u = x - t
    U = sp.integrate(Hfun(w), (w, 0, u))
    Vn = x + t
    X = [(Vn - U) / 2, (Vn + U) / 2, y, z]  # (T, X, Y, Z)
    coords = [t, x, y, z]
    jac = sp.Matrix(4, 4, lambda M, a: sp.diff(X[M], coords[a]))
    g = pull_back_metric(sp.diag(-1, 1, 1, 1), jac)
    expected = sp.diag(-Hfun(u), Hfun(u), 1, 1)
    assert (g - expected).applyfunc(sp.simplify) == sp.zeros(4, 4)

    k = [sp.Rational(31, 10), sp.Rational(53, 10), sp.Rational(-11, 5)]
    e = sp.Matrix(k).cross(sp.Matrix([1, 0, 0]))
    e = e / e.norm()
    omega = sp.Matrix(k).norm()
    s_phase = sum(k[i] * X[i + 1] for i in range(3)) - omega * X[0]
    A_inertial = [0] + [-(e[i] / omega) * sp.cos(s_phase) for i in range(3)]
    F = faraday(pull_back(A_inertial, jac), coords)
    E_sym, B_sym = normal_observer_fields(F, expected)
    dt_E_sym = [sp.diff(c, t) for c in E_sym]
    dt_B_sym = [sp.diff(c, t) for c in B_sym]

    grid = UniformGrid((2, 2, 2), (0.13, -0.3, 0.2), (0.37, 0.29, 0.41))
    tv = 0.63
    data = plane_wave_gauge_wave(grid, tv, gauge_amplitude=0.3, gauge_wavelength=1.0, **OBLIQUE)
    X0, Y0, Z0 = grid.coordinates()
    for idx in [(0, 0, 0), (1, 0, 1), (0, 1, 1), (1, 1, 0)]:
        point = {t: tv, x: X0[idx], y: Y0[idx], z: Z0[idx]}
        for i in range(3):
            # O(1) values, phases ~ 10, derivatives ~ |k| ~ 6.5: float64 agreement to 1e-13, 1e-12.
            assert abs(float(E_sym[i].evalf(subs=point)) - data.E[(i, *idx)]) < 1e-13
            assert abs(float(B_sym[i].evalf(subs=point)) - data.B[(i, *idx)]) < 1e-13
            assert abs(float(dt_E_sym[i].evalf(subs=point)) - data.dt_E[(i, *idx)]) < 1e-12
            assert abs(float(dt_B_sym[i].evalf(subs=point)) - data.dt_B[(i, *idx)]) < 1e-12


def test_periodic_over_a_gauge_wavelength_and_flat_limit():
    """Default data are periodic in x with period d (box of N points: period N h, vertex-centred),
    and with A = 0 they are the inertial plane wave."""
    grid = UniformGrid((6, 6, 3), (0.0, 0.0, 0.0), (1 / 6, 1 / 6, 1 / 3))
    shifted = UniformGrid(grid.shape, (1.0, 0.0, 0.0), grid.spacing)
    a = plane_wave_gauge_wave(grid, 0.2)
    b = plane_wave_gauge_wave(shifted, 0.2)
    np.testing.assert_allclose(b.E, a.E, atol=1e-13)
    np.testing.assert_allclose(b.K, a.K, atol=1e-13)
    flat = plane_wave_gauge_wave(grid, 0.2, gauge_amplitude=0.0)
    inertial = plane_wave(grid, 0.2, wave_vector=(2 * np.pi, 2 * np.pi, 0), polarization=(1, -1, 1))
    np.testing.assert_allclose(flat.E, inertial.E, atol=1e-15)
    np.testing.assert_allclose(flat.dt_B, inertial.dt_B, atol=1e-14)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(gauge_amplitude=1.0), "gauge_amplitude"),
        (dict(gauge_wavelength=0.0), "gauge_wavelength"),
        (dict(wave_vector=(1.0, 0, 0)), "polarization"),
        (dict(units="cgs"), "units"),
    ],
)
def test_bad_arguments_are_named(kwargs, message):
    with pytest.raises(ValueError, match=message):
        plane_wave_gauge_wave(box(4), 0.0, **kwargs)
