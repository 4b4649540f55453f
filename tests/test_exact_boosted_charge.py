"""Tests of emsource.exact.boosted_gaussian_charge: a Gaussian ball of charge in uniform motion.

Sources: Gauss's law for a spherical charge distribution (Jackson, Classical Electrodynamics,
3rd ed. (1999), sec. 1.3-1.4), checked by integrating the density in sympy; the Lorentz
transformation of the fields and the field of a uniformly moving point charge (Jackson
sec. 11.10, eq. 11.154, equation number from memory), checked against a sympy Lorentz boost of
the rest-frame 4-potential; the 3+1 Maxwell equations in maxwell_3p1_reference.py (Baumgarte &
Shapiro, Numerical Relativity (2010), sec. 11.1).
"""

import dataclasses
import math

import mpmath
import numpy as np
import pytest
import sympy as sp

from emsource.exact import boosted_gaussian_charge, gaussian_sphere_field_factors
from emsource.grid import UniformGrid
from maxwell_3p1_reference import normalised_max_residuals, residual_convergence, time_derivative_errors
from sympy_fields_reference import faraday, normal_observer_fields, pull_back

Q, SIGMA = 1.7, 0.3
VELOCITY = np.array([0.4, 0.2, -0.4])  # |v| = 0.6, Lorentz factor 5/4 (rational, keeps sympy fast)
CENTER = np.array([-0.2, -0.1, 0.05])


def box(n):
    # About [-1, 1] x [-1.3, 1.3] x [-0.8, 0.8]: the ball (sigma 0.3) well inside, sides unequal.
    return UniformGrid((n, n, n), (-1.0, -1.3, -0.8), (2.0 / n, 2.6 / n, 1.6 / n))


def moving_ball(grid, t, **kw):
    return boosted_gaussian_charge(grid, t, charge=Q, width=SIGMA, velocity=VELOCITY, center=CENTER, **kw)


@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
@pytest.mark.parametrize("order", [2, 4, 6])
def test_satisfies_3p1_maxwell_with_sources_at_stencil_order(order, units):
    """div E = kappa rho_e, div B = 0 and both evolution equations with the current
    (kappa = 4 pi Gaussian, 1 Heaviside-Lorentz) converge at the stencil order (equations in the
    helper's docstring). Round-off of the normalised residual ~ 1e-14; require 1e-10 (trap 2)."""
    result = residual_convergence(lambda n: moving_ball(box(n), 0.37, units=units), order)
    for name, (errors, orders) in result.items():
        assert errors[-1] > 1e-10, (name, errors)
        assert abs(orders[-1] - order) < 0.3, (name, errors, orders)


def test_dropping_the_current_breaks_ampere():
    """Negative control: without j = rho_e v the Ampere-Maxwell law fails by O(1), not shrinking."""
    errors = []
    for n in (12, 24):
        data = moving_ball(box(n), 0.37)
        wrong = dataclasses.replace(data, current_density=np.zeros_like(data.current_density))
        errors.append(normalised_max_residuals(wrong, 4)["ampere"])
    assert min(errors) > 0.1
    assert abs(math.log2(errors[0] / errors[1])) < 0.3


def test_time_derivatives_match_time_differences():
    """dt_E, dt_B agree with centred time differences at order 2 (dt = 2e-3, 1e-3: error
    ~ dt^2 |v|^3 |d^3 E| / 6 ~ 1e-6 relative; round-off ~ 1e-13)."""
    errs = time_derivative_errors(lambda t: moving_ball(box(8), t), 0.37)
    for name in ("E", "B"):
        (e1, e2), scale = errs[name]
        assert e1 / scale < 1e-3
        assert abs(math.log2(e1 / e2) - 2.0) < 0.3, (name, e1, e2)
    assert errs["gamma"][0] == [0.0, 0.0]


@pytest.mark.parametrize("radius_over_sigma", [1e-4, 0.3, 1.41, 1.42, 3.0, 7.0])
def test_rest_frame_field_obeys_gauss_law(radius_over_sigma):
    """E'(R) R^2 = Q_enc(R) = integral_0^R 4 pi r^2 rho'(r) dr (sympy's integral, evaluated with
    30 digits), on both sides of the series / closed-form switch at R = sqrt(2) sigma; and
    h = g'/r against sympy's derivative of g = Q_enc / R^3. The float64 result is good to a few
    ulp: rtol 1e-14 for g, 1e-13 for h (a difference of terms in the closed form)."""
    r, R = sp.symbols("r R", positive=True)
    sigma = sp.Rational(3, 10)
    rho = sp.exp(-r**2 / (2 * sigma**2)) / ((2 * sp.pi) ** sp.Rational(3, 2) * sigma**3)  # unit q
    q_enclosed = sp.integrate(4 * sp.pi * r**2 * rho, (r, 0, R))
    g_sym = q_enclosed / R**3
    h_sym = sp.diff(g_sym, R) / R
    R0 = radius_over_sigma * 0.3
    g, h = gaussian_sphere_field_factors(np.array([R0]), 0.3)
    R_exact = sp.Float(R0, 30)  # the float64 radius, exactly
    assert g[0] == pytest.approx(float(g_sym.evalf(30, subs={R: R_exact})), rel=1e-14)
    assert h[0] == pytest.approx(float(h_sym.evalf(30, subs={R: R_exact})), rel=1e-13)
    # The field of the generator at rest, at distance R0 on an oblique ray, is q g R0 along the ray.
    direction = np.array([1.0, -2.0, 2.0]) / 3.0
    grid = UniformGrid((1, 1, 1), tuple(direction * R0), (1.0, 1.0, 1.0))
    data = boosted_gaussian_charge(grid, 0.0, charge=2.0, width=0.3, velocity=(0, 0, 0))
    np.testing.assert_allclose(data.E[:, 0, 0, 0], 2.0 * g[0] * R0 * direction, rtol=1e-14)
    assert np.all(data.B == 0.0)


def test_lab_fields_match_sympy_lorentz_boost():
    """Boost the rest-frame potential A'_M = (-phi', 0, 0, 0), phi' = q erf(r'/(sqrt 2 sigma))/r',
    to the lab in sympy (x' = Lambda (x - x_c(t)), Lambda the general pure boost with velocity v),
    form F = dA and project E, B on the lab observer by the conventions' definitions. Compare E,
    B, d_t E, d_t B, and rho_e = div E / (4 pi), j = (curl B - d_t E) / (4 pi) computed in sympy
    from those fields, with the generator at points inside and outside the ball."""
    t, x, y, z = sp.symbols("t x y z", real=True)
    q, sigma = sp.Rational(17, 10), sp.Rational(3, 10)
    v = sp.Matrix([sp.Rational(2, 5), sp.Rational(1, 5), sp.Rational(-2, 5)])
    c = sp.Matrix([sp.Rational(-1, 5), sp.Rational(-1, 10), sp.Rational(1, 20)])
    v2 = (v.T * v)[0]
    lorentz = 1 / sp.sqrt(1 - v2)
    # Pure boost (e.g. Jackson sec. 11.3, eq. 11.19, from memory): t' = g (t - v.x),
    # x' = x + ((g - 1)/v^2 (v.x) - g t) v.
    lam = sp.zeros(4, 4)
    lam[0, 0] = lorentz
    for i in range(3):
        lam[0, i + 1] = lam[i + 1, 0] = -lorentz * v[i]
        for j in range(3):
            lam[i + 1, j + 1] = sp.KroneckerDelta(i, j) + (lorentz - 1) * v[i] * v[j] / v2
    lab = sp.Matrix([t, x - c[0], y - c[1], z - c[2]])
    rest = lam * lab
    r_rest = sp.sqrt(rest[1] ** 2 + rest[2] ** 2 + rest[3] ** 2)
    phi = q * sp.erf(r_rest / (sp.sqrt(2) * sigma)) / r_rest
    coords = [t, x, y, z]
    potential = pull_back([-phi, 0, 0, 0], lam)  # A_a = Lambda^M_a A'_M (Lambda is constant)
    eta = sp.diag(-1, 1, 1, 1)
    E_sym, B_sym = normal_observer_fields(faraday(potential, coords), eta)

    div_E = sum(sp.diff(E_sym[i], coords[i + 1]) for i in range(3))
    curl_B = [sp.diff(B_sym[(i + 2) % 3], coords[(i + 1) % 3 + 1])
              - sp.diff(B_sym[(i + 1) % 3], coords[(i + 2) % 3 + 1]) for i in range(3)]
    dt_E_sym = [sp.diff(E_sym[i], t) for i in range(3)]
    dt_B_sym = [sp.diff(B_sym[i], t) for i in range(3)]
    current = [(curl_B[i] - dt_E_sym[i]) / (4 * sp.pi) for i in range(3)]
    # mpmath at 30 digits: the reference is exact to far below float64 round-off.
    evaluate = sp.lambdify(coords, [E_sym, B_sym, dt_E_sym, dt_B_sym, div_E / (4 * sp.pi), current], "mpmath", cse=True)

    grid = UniformGrid((2, 2, 2), (-0.35, 0.2, -0.3), (0.5, 0.4, 0.45))
    tv = 0.37
    data = moving_ball(grid, tv)
    X0, Y0, Z0 = grid.coordinates()
    with mpmath.workdps(30):
        for idx in [(0, 0, 0), (1, 0, 1), (0, 1, 1), (1, 1, 0)]:
            E, B, dt_E, dt_B, rho, j = evaluate(tv, X0[idx], Y0[idx], Z0[idx])
            for i in range(3):
                # Fields ~ 1 to 20 at these points; float64 agreement to ~ 1e-13 relative.
                assert data.E[(i, *idx)] == pytest.approx(float(E[i]), rel=1e-12, abs=1e-12)
                assert data.B[(i, *idx)] == pytest.approx(float(B[i]), rel=1e-12, abs=1e-12)
                assert data.dt_E[(i, *idx)] == pytest.approx(float(dt_E[i]), rel=1e-12, abs=1e-12)
                assert data.dt_B[(i, *idx)] == pytest.approx(float(dt_B[i]), rel=1e-12, abs=1e-12)
                assert data.current_density[(i, *idx)] == pytest.approx(float(j[i]), rel=1e-11, abs=1e-12)
            assert data.charge_density[idx] == pytest.approx(float(rho), rel=1e-12, abs=1e-12)


def test_far_field_is_the_moving_point_charge_field():
    """Beyond a few sigma the ball's field is that of a point charge in uniform motion,
    E = q (1 - v^2) R / (R^3 (1 - v^2 sin^2 psi)^(3/2)), B = v x E (Jackson sec. 11.10), R from the
    present position, psi the angle between R and v. The Gaussian tail falls like
    exp(-r'^2 / (2 sigma^2)): relative difference above 1e-6 at r' ~ 1.5 sigma... and below 1e-13
    beyond r' = 8 sigma."""
    rng = np.random.default_rng(20261202)
    directions = rng.normal(size=(3, 40))
    directions /= np.linalg.norm(directions, axis=0)
    speed2 = float(VELOCITY @ VELOCITY)
    for distance, close in ((8.5 * SIGMA, True), (11.0 * SIGMA, True), (1.5 * SIGMA, False)):
        R = distance * directions
        points = CENTER[:, None] + R  # at t = 0 the centre is at CENTER
        cos_psi = (VELOCITY @ R) / (np.linalg.norm(VELOCITY) * distance)
        sin2 = 1.0 - cos_psi**2
        point_field = Q * (1 - speed2) * R / (distance**3 * (1 - speed2 * sin2) ** 1.5)
        E = np.empty_like(R)
        for m in range(R.shape[1]):
            grid = UniformGrid((1, 1, 1), tuple(points[:, m]), (1.0, 1.0, 1.0))
            E[:, m] = moving_ball(grid, 0.0).E[:, 0, 0, 0]
        relative = np.max(np.linalg.norm(E - point_field, axis=0) / np.linalg.norm(point_field, axis=0))
        if close:
            # r' >= distance > 8 sigma: tail ~ sqrt(2/pi) (r'/sigma) exp(-32) ~ 1e-13; round-off 1e-15.
            assert relative < 1e-12
        else:
            assert relative > 1e-3  # inside the charge's extent the fields differ: not trivial


def test_static_limit_and_heaviside_lorentz_scaling():
    grid = UniformGrid((3, 3, 3), (-0.5, -0.5, -0.5), (0.5, 0.5, 0.5))
    rest = boosted_gaussian_charge(grid, 0.7, charge=Q, width=SIGMA, velocity=(0, 0, 0), center=CENTER)
    assert np.all(rest.B == 0) and np.all(rest.dt_E == 0) and np.all(rest.current_density == 0)
    # Density at the centre of a unit-normalised 3D Gaussian: q / ((2 pi)^(3/2) sigma^3).
    centred = boosted_gaussian_charge(grid, 0.0, charge=Q, width=SIGMA, velocity=(0, 0, 0))
    assert centred.charge_density[1, 1, 1] == pytest.approx(Q / ((2 * np.pi) ** 1.5 * SIGMA**3), rel=1e-15)
    np.testing.assert_array_equal(centred.E[:, 1, 1, 1], 0.0)
    gauss = moving_ball(grid, 0.1)
    hl = moving_ball(grid, 0.1, units="heaviside_lorentz")
    root = math.sqrt(4 * math.pi)
    np.testing.assert_allclose(hl.E * root, gauss.E, rtol=1e-15, atol=1e-15)
    np.testing.assert_allclose(hl.charge_density / root, gauss.charge_density, rtol=1e-15)
    np.testing.assert_allclose(hl.current_density / root, gauss.current_density, rtol=1e-15, atol=1e-15)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(velocity=(0.8, 0.6, 0.0)), r"\|v\| < 1"),
        (dict(velocity=(0.8, 0.6)), "velocity"),
        (dict(width=-1.0), "width"),
        (dict(center=(0.0, np.inf, 0.0)), "center"),
        (dict(units="natural"), "units"),
    ],
)
def test_bad_arguments_are_named(kwargs, message):
    args = dict(charge=1.0, width=0.3, velocity=(0.1, 0.0, 0.0))
    args.update(kwargs)
    with pytest.raises(ValueError, match=message):
        boosted_gaussian_charge(box(4), 0.0, **args)


def test_sphere_factors_reject_bad_input():
    with pytest.raises(ValueError, match=r"r must be finite and >= 0, found -1.0 at index \(1,\)"):
        gaussian_sphere_field_factors(np.array([0.5, -1.0]), 0.3)
    with pytest.raises(ValueError, match="sigma must be positive"):
        gaussian_sphere_field_factors(np.array([0.5]), 0.0)
