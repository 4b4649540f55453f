"""Test fixtures: small exact solutions of Maxwell's equations in flat spacetime (tests only).

These are written here, independently of the package's exact data, so that the conservation
tests have something outside the code under test to converge to:

- ``plane_wave``: E = A sin(k.x - omega t) e_pol, B = k_hat x E, omega = |k| (flat space,
  Cartesian). Source: J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 7.1.
- ``moving_frame_wave``: the same wave in coordinates x' = x - V t. The line element becomes
  -dt^2 + (dx' + V dt)^2: lapse 1, shift V, flat metric, K = 0; the normal observer is the
  static one, so E and B are the lab fields at x = x' + V t (Gourgoulhon 2012, sec. 4.2 for
  the lapse/shift reading of a line element).
- ``distorted_wave``: the wave in static curvilinear coordinates X = x + eps sin(...) (flat space,
  time-independent map): lapse 1, shift 0, K = 0, gamma_ij = J^a_i J^a_j, E^i = (J^-1)^i_a E^a.
- ``boosted_charge``: a Gaussian charge (total q, rest-frame width sigma) moving at constant v.
  Rest-frame field from Gauss's law, E' = q r' [erf(r'/(sqrt 2 sigma)) - sqrt(2/pi) (r'/sigma)
  exp(-r'^2/(2 sigma^2))] / r'^3; lab fields E_par = E'_par, E_perp = gamma_v E'_perp,
  B = v x E (Jackson sec. 11.10); lab charge density gamma_v rho'(r'), current rho_lab v.
  Exact time derivatives by the complex-step method (J. N. Lyness and C. B. Moler, SIAM J.
  Numer. Anal. 4, 202 (1967), citation from memory): d f/dt = Im f(t + i eps)/eps, exact to
  round-off for analytic f.

All in Gaussian units; arrays component first, metric and K packed (xx, xy, xz, yy, yz, zz).
"""

from __future__ import annotations

import numpy as np
from scipy.special import erf

from emsource.exact import TimeLevelFields
from emsource.grid import UniformGrid

FLAT = np.array([1.0, 0.0, 0.0, 1.0, 0.0, 1.0])


def _flat_geometry(shape, dtype=float):
    alpha = np.ones(shape, dtype)
    beta = np.zeros((3,) + shape, dtype)
    gamma = np.broadcast_to(FLAT.reshape((6,) + (1,) * len(shape)), (6,) + shape).astype(dtype)
    K = np.zeros((6,) + shape, dtype)
    return alpha, beta, gamma, K


def _no_charges(shape):
    return np.zeros(shape), np.zeros((3,) + shape)


def wave_fields(X, Y, Z, t, k, pol, amplitude=1.0):
    """E, B, d_t E, d_t B of the plane wave at Cartesian points (X, Y, Z)."""
    k = np.asarray(k, float)
    omega = np.linalg.norm(k)
    khat = k / omega
    pol = np.asarray(pol, float)
    pol = pol - khat * (pol @ khat)
    pol /= np.linalg.norm(pol)
    phase = k[0] * X + k[1] * Y + k[2] * Z - omega * t
    s = amplitude * np.sin(phase)
    c = amplitude * np.cos(phase)
    b_dir = np.cross(khat, pol)
    E = pol[:, None] * s.reshape(1, -1)
    B = b_dir[:, None] * s.reshape(1, -1)
    dE = -omega * pol[:, None] * c.reshape(1, -1)
    dB = -omega * b_dir[:, None] * c.reshape(1, -1)
    shape = (3,) + X.shape
    return E.reshape(shape), B.reshape(shape), dE.reshape(shape), dB.reshape(shape)


def square_grid(n, ndim=2, length=1.0):
    return UniformGrid.from_bounds((0.0,) * ndim, (length,) * ndim, (n,) * ndim)


# An oblique wave vector (trap 1 of the testing notes: never along a grid axis).
K_OBLIQUE = 2.0 * np.pi * np.array([1.0, 2.0, 0.0])
POL_Z = np.array([0.0, 0.0, 1.0])


def plane_wave(grid, t, k=K_OBLIQUE, pol=POL_Z, amplitude=1.0):
    x, y, z = grid.coordinates()
    E, B, dE, dB = wave_fields(x, y, z, t, k, pol, amplitude)
    alpha, beta, gamma, K = _flat_geometry(grid.shape)
    rho_e, j = _no_charges(grid.shape)
    return TimeLevelFields(grid, t, alpha, beta, gamma, K, E, B, rho_e, j, "gaussian",
                       dE, dB, np.zeros((6,) + grid.shape))


def moving_frame_wave(grid, t, V=(0.3, -0.2, 0.1), k=K_OBLIQUE, pol=POL_Z):
    V = np.asarray(V, float)
    x, y, z = grid.coordinates()
    X, Y, Z = x + V[0] * t, y + V[1] * t, z + V[2] * t
    E, B, dE, dB = wave_fields(X, Y, Z, t, k, pol)
    omega = np.linalg.norm(k)
    # d/dt at fixed x' = (d_t + V.grad) of the lab field: factor (k.V - omega) / (-omega).
    ratio = (np.asarray(k) @ V - omega) / (-omega)
    alpha, beta, gamma, K = _flat_geometry(grid.shape)
    beta[:] = V.reshape((3,) + (1,) * grid.ndim)
    rho_e, j = _no_charges(grid.shape)
    return TimeLevelFields(grid, t, alpha, beta, gamma, K, E, B, rho_e, j, "gaussian",
                       dE * ratio, dB * ratio, np.zeros((6,) + grid.shape))


def distorted_wave(grid, t, eps=0.04, k=K_OBLIQUE, pol=POL_Z):
    """The wave on a static 2D coordinate distortion of flat space (grid spans (x, y))."""
    x, y, z = grid.coordinates()
    w = 2.0 * np.pi
    X = x + eps * np.sin(w * y)
    Y = y + eps * np.sin(w * x) * np.cos(w * y)
    Z = z
    # Jacobian J[a, i] = dX^a / dx^i.
    J = np.zeros((3, 3) + grid.shape)
    J[0, 0] = 1.0
    J[0, 1] = eps * w * np.cos(w * y)
    J[1, 0] = eps * w * np.cos(w * x) * np.cos(w * y)
    J[1, 1] = 1.0 - eps * w * np.sin(w * x) * np.sin(w * y)
    J[2, 2] = 1.0
    g_full = np.einsum("ai...,aj...->ij...", J, J)
    gamma = np.stack([g_full[0, 0], g_full[0, 1], g_full[0, 2], g_full[1, 1], g_full[1, 2],
                      g_full[2, 2]])
    Jm = np.moveaxis(J, (0, 1), (-2, -1))
    Jinv = np.moveaxis(np.linalg.inv(Jm), (-2, -1), (0, 1))
    Ec, Bc, dEc, dBc = wave_fields(X, Y, Z, t, k, pol)
    # C order, like a solver's arrays (einsum may return other strides, which would make the
    # kernels compile a second, strided specialisation).
    to_grid = lambda v: np.ascontiguousarray(np.einsum("ia...,a...->i...", Jinv, v))  # noqa: E731
    alpha = np.ones(grid.shape)
    beta = np.zeros((3,) + grid.shape)
    K = np.zeros((6,) + grid.shape)
    rho_e, j = _no_charges(grid.shape)
    return TimeLevelFields(grid, t, alpha, beta, gamma, K, to_grid(Ec), to_grid(Bc), rho_e, j,
                       "gaussian", to_grid(dEc), to_grid(dBc), np.zeros((6,) + grid.shape))


def _boosted_charge_values(x, y, z, t, q, sigma, v, centre):
    """E, B, rho_e, j of the boosted Gaussian charge; works for complex t (complex step)."""
    v = np.asarray(v, float)
    speed = np.linalg.norm(v)
    gv = 1.0 / np.sqrt(1.0 - speed ** 2)
    n = v / speed
    d = [x - centre[0] - v[0] * t, y - centre[1] - v[1] * t, z - centre[2] - v[2] * t]
    d_par = d[0] * n[0] + d[1] * n[1] + d[2] * n[2]
    # Rest-frame position: the parallel part stretched by gamma_v.
    rp = [d[a] + (gv - 1.0) * d_par * n[a] for a in range(3)]
    r2 = rp[0] ** 2 + rp[1] ** 2 + rp[2] ** 2
    r = np.sqrt(r2)
    g = np.exp(-r2 / (2.0 * sigma ** 2))
    enclosed = erf(r / (np.sqrt(2.0) * sigma)) - np.sqrt(2.0 / np.pi) * (r / sigma) * g
    factor = q * enclosed / (r2 * r)
    Ep = [factor * rp[a] for a in range(3)]
    Ep_par = Ep[0] * n[0] + Ep[1] * n[1] + Ep[2] * n[2]
    # E_par = E'_par, E_perp = gamma_v E'_perp.
    E = [gv * Ep[a] + (1.0 - gv) * Ep_par * n[a] for a in range(3)]
    B = [v[1] * E[2] - v[2] * E[1], v[2] * E[0] - v[0] * E[2], v[0] * E[1] - v[1] * E[0]]
    rho_rest = q * g / ((2.0 * np.pi) ** 1.5 * sigma ** 3)
    rho_lab = gv * rho_rest
    j = [rho_lab * v[a] for a in range(3)]
    return np.array(E), np.array(B), rho_lab, np.array(j)


def boosted_charge(grid, t, q=1.0, sigma=0.35, v=(0.4, 0.3, 0.2), centre=(0.013, -0.021, 0.017)):
    x, y, z = grid.coordinates()
    E, B, rho_e, j = _boosted_charge_values(x, y, z, t, q, sigma, v, centre)
    step = 1e-20
    Ec, Bc, _, _ = _boosted_charge_values(x, y, z, t + 1j * step, q, sigma, v, centre)
    alpha, beta, gamma, K = _flat_geometry(grid.shape)
    return TimeLevelFields(grid, t, alpha, beta, gamma, K, E, B, rho_e, j, "gaussian",
                       Ec.imag / step, Bc.imag / step, np.zeros((6,) + grid.shape))


def cube_grid(n, half_width=1.2):
    return UniformGrid.from_bounds((-half_width,) * 3, (half_width,) * 3, (n,) * 3)
