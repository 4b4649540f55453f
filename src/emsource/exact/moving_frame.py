"""The vacuum plane wave in spatial coordinates that move uniformly through flat spacetime."""

from __future__ import annotations

import numpy as np

from . import _common
from .plane_wave import plane_wave_pattern
from .time_level_fields import TimeLevelFields

__all__ = ["plane_wave_moving_frame"]


def plane_wave_moving_frame(grid, t, *, frame_velocity, wave_vector, polarization, amplitude=1.0,
                            profile="sine", width=0.5, phase=0.0, units="gaussian") -> TimeLevelFields:
    """The plane wave of :func:`plane_wave` in coordinates x' = x - V t that drift with velocity V.

    Coordinates (t, x') with x = x' + V t, t unchanged (a Galilean relabelling of the spatial
    points, not a boost: the slices t = const are the inertial ones). Putting dx = dx' + V dt into
    ds^2 = -dt^2 + dx.dx gives

        ds^2 = -dt^2 + delta_ij (dx'^i + V^i dt)(dx'^j + V^j dt),

    and comparing with the line element -alpha^2 dt^2 + gamma_ij (dx^i + beta^i dt)(dx^j + beta^j dt)
    of the package's conventions: alpha = 1, beta^i = +V^i, gamma_ij = delta_ij, and K_ij = 0
    (constant shift, static flat metric). The normal observer, n^a = (1, -beta^i)/alpha, has
    dx'/dtau = -V, i.e. dx/dtau = 0: it is the inertial observer at rest, so E and B are the
    inertial fields, and since d/dx'^i = d/dx^i on a slice their components are unchanged:

        E'(t, x') = E(t, x' + V t),   B'(t, x') = B(t, x' + V t).

    The returned time derivatives are at fixed x' (the coordinates of this slicing):
    d_t E' = (d_t + V.grad) E = amplitude (k.V - omega) f'(s) e_hat, with s = k.(x' + V t) - omega t
    + phase. A wave that is periodic in x stays periodic in x' with the same box.

    Parameters
    ----------
    grid : UniformGrid
        Where to sample, in the drifting coordinates x'.
    t : float
        Coordinate time.
    frame_velocity : (3,) array_like
        V, the coordinate velocity of the drifting points through the inertial frame; any finite
        value (the shift may exceed 1; the slicing stays the inertial one).
    wave_vector, polarization, amplitude, profile, width, phase, units
        As for :func:`plane_wave` (the wave in the inertial coordinates x).

    Returns
    -------
    TimeLevelFields
        alpha = 1, beta = V, flat metric, K = 0, no charge; dt_E, dt_B and dt_gamma (zero) set.

    References
    ----------
    E. Gourgoulhon, 3+1 Formalism in General Relativity, Lecture Notes in Physics 846 (2012),
    ch. 4 (lapse and shift read off the 3+1 line element; chapter from memory).
    """
    function = "plane_wave_moving_frame"
    grid = _common.check_grid(grid, function)
    t = _common.check_time(t, function)
    units = _common.check_units(units, function)
    V = _common.check_vector(frame_velocity, "frame_velocity", function)
    xp, yp, zp = grid.coordinates()
    E, B, dE, dB, _, omega, k = plane_wave_pattern(
        xp + V[0] * t, yp + V[1] * t, zp + V[2] * t, t, wave_vector=wave_vector,
        polarization=polarization, amplitude=amplitude, profile=profile, width=width, phase=phase,
        function=function,
    )
    scale = _common.field_scale(units)
    rate = float(np.dot(k, V)) - omega  # ds/dt at fixed x'
    beta = np.empty((3, *grid.shape))
    for i in range(3):
        beta[i] = V[i]
    return _common.flat_slice(
        grid, t, scale * E, scale * B, units=units, beta=beta,
        dt_E=(rate * scale) * dE, dt_B=(rate * scale) * dB,
    )
