"""The vacuum plane wave on the gauge-wave slicing of flat spacetime."""

from __future__ import annotations

import math

import numpy as np

from . import _common
from .plane_wave import plane_wave_pattern
from .time_level_fields import TimeLevelFields

__all__ = ["plane_wave_gauge_wave"]


def plane_wave_gauge_wave(grid, t, *, gauge_amplitude=0.1, gauge_wavelength=1.0, wave_vector=None,
                          polarization=None, amplitude=1.0, profile="sine", width=0.5, phase=0.0,
                          units="gaussian") -> TimeLevelFields:
    """A Minkowski plane wave seen in the gauge-wave coordinates of flat spacetime.

    The gauge-wave testbed (M. Alcubierre et al., "Toward standard testbeds for numerical
    relativity", Class. Quantum Grav. 21, 589 (2004)) writes flat spacetime as

        ds^2 = H (-dt^2 + dx^2) + dy^2 + dz^2,   H = 1 - A sin(2 pi (x - t) / d),

    so alpha = sqrt(H), beta = 0, gamma = diag(H, 1, 1), and from the conventions'
    K_ij = -(d_t gamma_ij - D_i beta_j - D_j beta_i) / (2 alpha):

        K_xx = -d_t H / (2 sqrt(H)) = -(pi A / d) cos(2 pi (x - t) / d) / sqrt(H),  others 0.

    With u = x - t, v = x + t the metric is H(u) du dv + dy^2 + dz^2; Minkowski null coordinates
    U = X - T, V = X + T with dU dV = -dT^2 + dX^2 follow from U = F(u) = integral of H du,
    V = v. Choosing F(0) = 0, F(u) = u + P(u) with the d-periodic

        P(u) = -(A d / (2 pi)) (1 - cos(2 pi u / d)),

    and the inertial coordinates are X = x + P(u)/2, T = t - P(u)/2, Y = y, Z = z. The field is
    the plane wave of :func:`plane_wave` in (T, X, Y, Z), whose Faraday 2-form is pulled back,
    F_ab = (dX^M/dx^a)(dX^N/dx^b) F_MN, and projected on the normal observer of this slicing,
    E^i = F^{ib} n_b and B^i = -(1/2) epsilon^{ibcd} n_b F_cd. With c_pm = (1 +- H)/2 and E_M, B_M
    the Minkowski components at the event:

        E^x = E_X / sqrt(H),   E^y = (c_+ E_Y - c_- B_Z) / sqrt(H),   E^z = (c_+ E_Z + c_- B_Y) / sqrt(H),
        B^x = B_X / sqrt(H),   B^y = (c_- E_Z + c_+ B_Y) / sqrt(H),   B^z = (c_+ B_Z - c_- E_Y) / sqrt(H).

    The phase of the wave is s = k.x - omega t + (k_x + omega) P(x - t)/2 + phase, so the data
    are periodic in a box whose x length is a whole number of gauge wavelengths d and of
    2 pi / k_x (and commensurate in y, z as for :func:`plane_wave`).

    A wave travelling purely along x is trivial here (F = f(u) du ^ dy solves Maxwell's
    equations on this metric for any f), so the default wave is oblique, k = (2 pi / d)(1, 1, 0),
    with polarization (1, -1, 1)/sqrt(3), which makes every component of E and B nonzero.
    Time derivatives d_t E^i, d_t B^i, d_t gamma_ij are exact, at fixed (x, y, z).

    Parameters
    ----------
    grid : UniformGrid
        Where to sample, 1 to 3 axes (missing coordinates are zero).
    t : float
        Coordinate time.
    gauge_amplitude : float
        A, with |A| < 1 so that H > 0.
    gauge_wavelength : float
        d, > 0.
    wave_vector, polarization : (3,) array_like or None
        Of the wave in the inertial coordinates (T, X, Y, Z); both None for the default oblique
        wave above. A wave_vector given without polarization is an error.
    amplitude, profile, width, phase, units
        As for :func:`plane_wave`; `units` keeps the stress-energy fixed (fields divided by
        sqrt(4 pi) for "heaviside_lorentz").

    Returns
    -------
    TimeLevelFields
        With dt_E, dt_B and dt_gamma set; no charge.
    """
    function = "plane_wave_gauge_wave"
    grid = _common.check_grid(grid, function)
    t = _common.check_time(t, function)
    units = _common.check_units(units, function)
    A = _common.check_scalar(gauge_amplitude, "gauge_amplitude", function)
    d = _common.check_scalar(gauge_wavelength, "gauge_wavelength", function, positive=True)
    if not abs(A) < 1.0:
        raise ValueError(f"{function}: gauge_amplitude must satisfy |A| < 1 (so that H > 0), found {A}")
    if wave_vector is None and polarization is None:
        wave_vector = (2.0 * math.pi / d) * np.array([1.0, 1.0, 0.0])
        polarization = np.array([1.0, -1.0, 1.0]) / math.sqrt(3.0)
    elif wave_vector is None or polarization is None:
        raise ValueError(
            f"{function}: give both wave_vector and polarization, or neither for the default oblique "
            f"wave; found wave_vector={wave_vector!r}, polarization={polarization!r}"
        )

    x, y, z = grid.coordinates()
    phase_u = (2.0 * math.pi / d) * (x - t)
    H = 1.0 - A * np.sin(phase_u)
    dt_H = (2.0 * math.pi * A / d) * np.cos(phase_u)
    P = -(A * d / (2.0 * math.pi)) * (1.0 - np.cos(phase_u))
    X = x + 0.5 * P
    T = t - 0.5 * P
    E_M, B_M, dE_M, dB_M, _, omega, k = plane_wave_pattern(
        X, y, z, T, wave_vector=wave_vector, polarization=polarization, amplitude=amplitude,
        profile=profile, width=width, phase=phase, function=function,
    )
    # d_t at fixed x of the phase: dX/dt = (1 - H)/2, dT/dt = (1 + H)/2.
    dt_s = k[0] * 0.5 * (1.0 - H) - omega * 0.5 * (1.0 + H)
    dt_E_M = dE_M * dt_s
    dt_B_M = dB_M * dt_s

    c_plus, c_minus = 0.5 * (1.0 + H), 0.5 * (1.0 - H)
    dt_c_plus, dt_c_minus = 0.5 * dt_H, -0.5 * dt_H
    w = 1.0 / np.sqrt(H)
    dt_w = -0.5 * w * dt_H / H

    EX, EY, EZ = ((E_M[i], dt_E_M[i]) for i in range(3))
    BX, BY, BZ = ((B_M[i], dt_B_M[i]) for i in range(3))
    E = np.empty((3, *grid.shape))
    B = np.empty((3, *grid.shape))
    dt_E = np.empty((3, *grid.shape))
    dt_B = np.empty((3, *grid.shape))
    E[0], dt_E[0] = w * EX[0], dt_w * EX[0] + w * EX[1]
    B[0], dt_B[0] = w * BX[0], dt_w * BX[0] + w * BX[1]
    E[1], dt_E[1] = _mix(w, dt_w, c_plus, dt_c_plus, EY, -1.0, c_minus, dt_c_minus, BZ)
    E[2], dt_E[2] = _mix(w, dt_w, c_plus, dt_c_plus, EZ, +1.0, c_minus, dt_c_minus, BY)
    B[1], dt_B[1] = _mix(w, dt_w, c_plus, dt_c_plus, BY, +1.0, c_minus, dt_c_minus, EZ)
    B[2], dt_B[2] = _mix(w, dt_w, c_plus, dt_c_plus, BZ, -1.0, c_minus, dt_c_minus, EY)

    gamma = np.zeros((6, *grid.shape))
    gamma[0] = H
    gamma[3] = gamma[5] = 1.0
    K = np.zeros((6, *grid.shape))
    K[0] = -0.5 * dt_H * w
    dt_gamma = np.zeros((6, *grid.shape))
    dt_gamma[0] = dt_H

    scale = _common.field_scale(units)
    return _common.flat_slice(
        grid, t, scale * E, scale * B, units=units, dt_E=scale * dt_E, dt_B=scale * dt_B,
        alpha=np.sqrt(H), gamma=gamma, K=K, dt_gamma=dt_gamma,
    )


def _mix(w, dt_w, c1, dt_c1, first, sign, c2, dt_c2, second):
    """Value and d_t of w (c1 p + sign c2 q), for (p, d_t p) = first and (q, d_t q) = second."""
    p, dt_p = first
    q, dt_q = second
    inner = c1 * p + sign * c2 * q
    dt_inner = dt_c1 * p + c1 * dt_p + sign * (dt_c2 * q + c2 * dt_q)
    return w * inner, dt_w * inner + w * dt_inner
