"""Vacuum plane electromagnetic waves in flat spacetime, Cartesian inertial coordinates."""

from __future__ import annotations

import math

import numpy as np

from . import _common
from .time_level_fields import TimeLevelFields

__all__ = ["plane_wave", "plane_wave_pattern", "periodic_wave_vector"]


def periodic_wave_vector(grid, modes) -> np.ndarray:
    """Wave vector that makes a plane wave periodic in the box of `grid`.

    The grid is vertex-centred: along an axis with N points and spacing h the points sit at
    ``origin + (0 .. N-1) h``, and a periodic box of N points has period L = N h, so the image of
    the first point, ``origin + N h``, is one spacing beyond the last point and is not stored.
    The returned vector is

        k_i = 2 pi m_i / (N_i h_i),

    so ``exp(i k.x)`` takes the same value at x and x + L_i e_i.

    Parameters
    ----------
    grid : UniformGrid
        The box, 1 to 3 axes.
    modes : sequence of int, one per grid axis
        Whole number of wavelengths m_i across the box on each axis. Axes the grid lacks (z of a
        2D grid) get k = 0.

    Returns
    -------
    (3,) ndarray
        The wave vector (k_x, k_y, k_z), in radians per code length unit.

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> grid = UniformGrid((8, 8), (0.0, 0.0), (0.25, 0.25))
    >>> periodic_wave_vector(grid, (1, 2)) / np.pi
    array([1., 2., 0.])
    """
    function = "periodic_wave_vector"
    grid = _common.check_grid(grid, function)
    try:
        m = np.asarray(modes, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"{function}: modes must be a sequence of integers, found {modes!r}") from None
    if m.shape != (grid.ndim,):
        raise ValueError(
            f"{function}: modes must hold one integer per grid axis, {grid.ndim} here, found shape {m.shape}"
        )
    if not np.all(np.isfinite(m) & (m == np.round(m))):
        raise ValueError(f"{function}: modes must be whole numbers, found {tuple(m.tolist())}")
    k = np.zeros(3)
    for i in range(grid.ndim):
        k[i] = 2.0 * math.pi * float(m[i]) / (grid.shape[i] * grid.spacing[i])
    return k


def plane_wave_pattern(x, y, z, t, *, wave_vector, polarization, amplitude, profile, width, phase, function):
    """Minkowski plane wave at events (t, x, y, z): E, B and their derivatives along the phase.

    Returns (E, B, dE_ds, dB_ds, s, omega, k) with E, B of shape (3, *x.shape); d/ds is the
    derivative with respect to the phase s = k.x - omega t + phase. Shared by the three
    plane-wave cases so they sample one and the same solution.
    """
    k, omega, e_hat, b_hat = _common.wave_basis(wave_vector, polarization, function)
    amplitude = _common.check_scalar(amplitude, "amplitude", function)
    phase = _common.check_scalar(phase, "phase", function)
    f, f_prime = _common.make_profile(profile, width, function)
    s = k[0] * x + k[1] * y + k[2] * z - omega * t + phase
    fs = _common.evaluate_profile(f, s, "f", function)
    dfs = _common.evaluate_profile(f_prime, s, "f_prime", function)
    E = amplitude * e_hat[:, None] * fs.reshape(1, -1)
    B = amplitude * b_hat[:, None] * fs.reshape(1, -1)
    dE = amplitude * e_hat[:, None] * dfs.reshape(1, -1)
    dB = amplitude * b_hat[:, None] * dfs.reshape(1, -1)
    shape = (3, *np.shape(s))
    return (E.reshape(shape), B.reshape(shape), dE.reshape(shape), dB.reshape(shape), s, omega, k)


def plane_wave(grid, t, *, wave_vector, polarization, amplitude=1.0, profile="sine", width=0.5,
               phase=0.0, units="gaussian") -> TimeLevelFields:
    """A vacuum plane wave in flat spacetime, Cartesian inertial coordinates.

    With s = k.x - omega t + phase and omega = |k| (c = 1),

        E = amplitude f(s) e_hat,    B = k_hat x E,

    the transverse, null solution of the vacuum Maxwell equations (Jackson, Classical
    Electrodynamics, 3rd ed., sec. 7.1). Lapse 1, shift 0, metric delta_ij, K_ij = 0, no charge.
    Time derivatives are exact: d_t E = -omega amplitude f'(s) e_hat, d_t B = k_hat x d_t E.

    Parameters
    ----------
    grid : UniformGrid
        Where to sample, 1 to 3 axes (missing coordinates are zero).
    t : float
        Coordinate time.
    wave_vector : (3,) array_like
        k, radians per code length; nonzero. Use :func:`periodic_wave_vector` for a wave that is
        periodic in the box.
    polarization : (3,) array_like
        Direction of E, orthogonal to k; normalised here.
    amplitude : float
        Peak field strength, in Gaussian units whatever `units` is (see below).
    profile : {"sine", "periodic_gaussian", "gaussian"} or (f, f_prime)
        Shape f of the wave as a function of the phase s: sin(s); exp((cos s - 1)/width^2), a
        smooth 2 pi-periodic pulse train; exp(-s^2/(2 width^2)), a single pulse (not periodic);
        or a pair of vectorised callables, the profile and its exact derivative.
    width : float
        Width of the Gaussian profiles, in radians of phase (a length width/|k|).
    phase : float
        Constant added to the phase, radians.
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of the returned fields. What is kept fixed is the physical field, i.e. the
        stress-energy: `amplitude` is read in Gaussian units and with "heaviside_lorentz" the
        returned E, B (and their time derivatives) are divided by sqrt(4 pi), so rho = E^2/(8 pi)
        in Gaussian units equals E^2/2 in Heaviside-Lorentz units.

    Returns
    -------
    TimeLevelFields
        With dt_E, dt_B and dt_gamma (zero) set.

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> grid = UniformGrid((16, 16), (0.0, 0.0), (1 / 16, 1 / 16))
    >>> k = periodic_wave_vector(grid, (1, 1))
    >>> data = plane_wave(grid, 0.0, wave_vector=k, polarization=(0, 0, 1))
    >>> data.E.shape
    (3, 16, 16)
    """
    function = "plane_wave"
    grid = _common.check_grid(grid, function)
    t = _common.check_time(t, function)
    units = _common.check_units(units, function)
    x, y, z = grid.coordinates()
    E, B, dE, dB, _, omega, _ = plane_wave_pattern(
        x, y, z, t, wave_vector=wave_vector, polarization=polarization, amplitude=amplitude,
        profile=profile, width=width, phase=phase, function=function,
    )
    scale = _common.field_scale(units)
    # d_t at fixed x: ds/dt = -omega.
    return _common.flat_slice(
        grid, t, scale * E, scale * B, units=units,
        dt_E=(-omega * scale) * dE, dt_B=(-omega * scale) * dB,
    )
