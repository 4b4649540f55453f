"""A Gaussian ball of charge moving at constant velocity through flat spacetime."""

from __future__ import annotations

import math

import numpy as np
from scipy.special import erf

from . import _common
from .time_level_fields import TimeLevelFields

__all__ = ["boosted_gaussian_charge", "gaussian_sphere_field_factors"]

# Below x = r / (sqrt(2) sigma) = 1 the closed forms lose digits (erf(x) - (2/sqrt(pi)) x exp(-x^2)
# is O(x^3), and g'/r is a further O(x^2) difference), so the power series is used there. With
# x < 1 the series alternates with terms below 1/n!, and 30 terms leave a remainder under
# 1/30! ~ 4e-33, far below float64 epsilon.
_SERIES_LIMIT = 1.0
_SERIES_TERMS = 30


def _series_coefficients():
    # erf(x) - (2/sqrt(pi)) x exp(-x^2) = (2/sqrt(pi)) sum_{n>=1} (-1)^(n+1) 2n x^(2n+1) / (n! (2n+1)),
    # from the Taylor series of erf and of exp term by term (Abramowitz & Stegun 7.1.5).
    a = np.array([(-1.0) ** (n + 1) * 2 * n / (math.factorial(n) * (2 * n + 1))
                  for n in range(1, _SERIES_TERMS + 1)])
    # g series in x^2: a_n x^(2n-2), n >= 1; h series: a_n (2n-2) x^(2n-4), n >= 2.
    h = np.array([a[n - 1] * (2 * n - 2) for n in range(2, _SERIES_TERMS + 1)])
    return a, h


_G_SERIES, _H_SERIES = _series_coefficients()


def _horner(coefficients, u):
    out = np.zeros_like(u)
    for c in coefficients[::-1]:
        out = out * u + c
    return out


def gaussian_sphere_field_factors(r, sigma):
    """Radial factors of the field of a unit Gaussian charge at rest, g(r) and g'(r)/r.

    The charge density rho'(r) = q exp(-r^2 / (2 sigma^2)) / ((2 pi)^(3/2) sigma^3) (total charge
    q) has, by Gauss's law, the field E' = q g(r) r_vec with

        g(r) = [erf(r / (sqrt(2) sigma)) - sqrt(2/pi) (r/sigma) exp(-r^2/(2 sigma^2))] / r^3

    (Gaussian units; Jackson, Classical Electrodynamics, 3rd ed., sec. 1.3-1.4, Gauss's law for a
    spherical charge distribution). g is smooth and even, g(0) = sqrt(2/pi) / (3 sigma^3). Also
    returned is h = g'(r)/r = (4 pi rho'/q - 3 g) / r^2, needed for the gradient of E'. Both are
    evaluated from their power series in x = r / (sqrt(2) sigma) for x < 1 (no 0/0 at r = 0).

    Parameters
    ----------
    r : ndarray
        Distances from the centre, >= 0.
    sigma : float
        Width of the Gaussian, > 0.

    Returns
    -------
    g, h : ndarray
        Same shape as r; units 1/length^3 and 1/length^5 (per unit charge).
    """
    function = "gaussian_sphere_field_factors"
    sigma = _common.check_scalar(sigma, "sigma", function, positive=True)
    r = np.asarray(r, dtype=float)
    good = np.isfinite(r) & (r >= 0.0)
    if not np.all(good):
        bad = np.argwhere(~good)[0]
        raise ValueError(f"{function}: r must be finite and >= 0, found {r[tuple(bad)]} at index {tuple(bad.tolist())}")
    x = r / (math.sqrt(2.0) * sigma)
    near = x < _SERIES_LIMIT
    c = 1.0 / (math.sqrt(2.0 * math.pi) * sigma**3)
    g = np.empty_like(r)
    h = np.empty_like(r)
    u = x[near] ** 2
    g[near] = c * _horner(_G_SERIES, u)
    h[near] = (c / (2.0 * sigma**2)) * _horner(_H_SERIES, u)
    far = ~near
    rf = r[far]
    xf = x[far]
    gauss = np.exp(-xf * xf)
    g[far] = (erf(xf) - (2.0 / math.sqrt(math.pi)) * xf * gauss) / rf**3
    density = gauss / ((2.0 * math.pi) ** 1.5 * sigma**3)
    h[far] = (4.0 * math.pi * density - 3.0 * g[far]) / rf**2
    return g, h


def _cross(v, field):
    """v x field for a constant 3-vector v and a (3, *grid) field."""
    return np.stack([
        v[1] * field[2] - v[2] * field[1],
        v[2] * field[0] - v[0] * field[2],
        v[0] * field[1] - v[1] * field[0],
    ])


def boosted_gaussian_charge(grid, t, *, charge, width, velocity, center=(0.0, 0.0, 0.0),
                            units="gaussian") -> TimeLevelFields:
    """A Gaussian charge of total charge q and rest-frame width sigma moving at velocity v.

    Flat spacetime, Cartesian inertial coordinates (lapse 1, shift 0, gamma_ij = delta_ij, K = 0).
    In the rest frame the charge density is rho'(r') = q exp(-r'^2/(2 sigma^2)) / ((2 pi)^(3/2)
    sigma^3) and the field E' = q g(r') r'_vec, B' = 0 (see :func:`gaussian_sphere_field_factors`).
    In the lab, with d = x - center - v t the position relative to the present centre and
    gamma_v = 1 / sqrt(1 - v^2), the rest-frame position is r'_par = gamma_v d_par, r'_perp = d_perp
    (so r'^2 = d^2 + gamma_v^2 (v.d)^2), and the field transformation E_par = E'_par,
    E_perp = gamma_v E'_perp, B = v x E (Jackson, Classical Electrodynamics, 3rd ed., sec. 11.10)
    gives

        E = q gamma_v g(r') d,    B = v x E,
        rho_e = gamma_v rho'(r'),  j = rho_e v.

    The pattern moves rigidly, d_t = -v.grad, so with h = g'(r')/r':

        d_t E = -q gamma_v [ g v + gamma_v^2 h (v.d) d ],   d_t B = v x d_t E.

    Parameters
    ----------
    grid : UniformGrid
        Where to sample, 1 to 3 axes (missing coordinates are zero).
    t : float
        Coordinate time; the centre is at `center` at t = 0.
    charge : float
        Total charge q, in Gaussian units whatever `units` is (see below).
    width : float
        Rest-frame standard deviation sigma of the charge density, > 0.
    velocity : (3,) array_like
        v, with |v| < 1 (c = 1); zero gives the static ball.
    center : (3,) array_like
        Position of the centre at t = 0.
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of the returned arrays. Kept fixed is the physical field and its stress-energy:
        `charge` is read in Gaussian units, and with "heaviside_lorentz" E, B (and time derivatives)
        are divided by sqrt(4 pi) while charge_density and current_density are multiplied by
        sqrt(4 pi), so that div E = rho_e holds in the Heaviside-Lorentz form.

    Returns
    -------
    TimeLevelFields
        With dt_E, dt_B and dt_gamma (zero) set.

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> grid = UniformGrid.from_bounds((-2, -2, -2), (2, 2, 2), (9, 9, 9))
    >>> data = boosted_gaussian_charge(grid, 0.0, charge=1.0, width=0.5, velocity=(0.6, 0, 0))
    >>> float(data.current_density[0, 4, 4, 4] / data.charge_density[4, 4, 4])
    0.6
    """
    function = "boosted_gaussian_charge"
    grid = _common.check_grid(grid, function)
    t = _common.check_time(t, function)
    units = _common.check_units(units, function)
    q = _common.check_scalar(charge, "charge", function)
    sigma = _common.check_scalar(width, "width", function, positive=True)
    v = _common.check_vector(velocity, "velocity", function)
    c0 = _common.check_vector(center, "center", function)
    speed2 = float(np.dot(v, v))
    if not speed2 < 1.0:
        raise ValueError(f"{function}: velocity must have |v| < 1 (c = 1), found |v| = {math.sqrt(speed2)}")
    lorentz = 1.0 / math.sqrt(1.0 - speed2)

    coords = grid.coordinates()
    d = np.stack([coords[i] - c0[i] - v[i] * t for i in range(3)])
    v_dot_d = v[0] * d[0] + v[1] * d[1] + v[2] * d[2]
    r_rest = np.sqrt(d[0] ** 2 + d[1] ** 2 + d[2] ** 2 + lorentz**2 * v_dot_d**2)
    g, h = gaussian_sphere_field_factors(r_rest, sigma)

    E = (q * lorentz) * g * d
    B = _cross(v, E)
    dt_E = -(q * lorentz) * (g * v.reshape((3,) + (1,) * grid.ndim) + lorentz**2 * h * v_dot_d * d)
    dt_B = _cross(v, dt_E)
    density_rest = q * np.exp(-0.5 * (r_rest / sigma) ** 2) / ((2.0 * math.pi) ** 1.5 * sigma**3)
    rho_e = lorentz * density_rest
    j = v.reshape((3,) + (1,) * grid.ndim) * rho_e

    scale = _common.field_scale(units)
    return _common.flat_slice(
        grid, t, scale * E, scale * B, units=units, dt_E=scale * dt_E, dt_B=scale * dt_B,
        charge_density=rho_e / scale, current_density=j / scale,
    )
