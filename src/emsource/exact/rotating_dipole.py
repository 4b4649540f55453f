"""The vacuum field of a rotating point magnetic dipole in flat space (all zones, exact).

A compact star that spins with angular velocity omega about z, with its magnetic moment m
inclined by chi to the spin axis, is modelled by a point dipole at the origin,

    m(t) = m (sin chi cos(omega t), sin chi sin(omega t), cos chi).

With n = x / r, retarded time u = t - r and m, m', m'' evaluated at u (Gaussian units, c = 1),
the exact fields of an arbitrary time-dependent point magnetic dipole are

    B = [3 n (n.m) - m] / r^3 + [3 n (n.m') - m'] / r^2 + [n x (n x m'')] / r
    E = [n x m'] / r^2 + [n x m''] / r

(the electric-dipole fields of J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999),
sec. 9.2 and 9.3, under the duality p -> m, E -> B, B -> -E; harmonic case: Jackson eq. (9.36);
the general-time form is from memory and checked in ``tests/test_rotating_dipole.py`` against
Maxwell's equations by finite differences). The radiated luminosity is

    L = (2/3) |m''|^2 = (2/3) m^2 omega^4 sin^2 chi        (Jackson sec. 9.3, magnetic dipole),

and since the field pattern rotates rigidly, the same energy flux crosses every sphere
centred on the star, near zone included.
"""

from __future__ import annotations

import numpy as np

from ..grid import UniformGrid
from .time_level_fields import TimeLevelFields

__all__ = ["rotating_dipole", "rotating_dipole_fields", "rotating_dipole_luminosity"]


def _moment_derivatives(u, moment, omega, inclination, order):
    """d^order m / dt^order at times ``u`` (array), shape (3, *u.shape)."""
    perp = moment * np.sin(inclination) * omega**order
    phase = omega * u + order * np.pi / 2
    out = np.empty((3,) + u.shape)
    out[0] = perp * np.cos(phase)
    out[1] = perp * np.sin(phase)
    out[2] = moment * np.cos(inclination) if order == 0 else 0.0
    return out


def _dot(a, b):
    return a[0] * b[0] + a[1] * b[1] + a[2] * b[2]


def _cross(a, b):
    return np.stack([a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2],
                     a[0] * b[1] - a[1] * b[0]])


def _fields(n, r, derivatives):
    """B and E from the moment's derivatives (m, m', m'', ...) at retarded time."""
    m0, m1, m2 = derivatives[:3]
    B = ((3 * n * _dot(n, m0) - m0) / r**3 + (3 * n * _dot(n, m1) - m1) / r**2
         + (n * _dot(n, m2) - m2) / r)  # n x (n x a) = n (n.a) - a
    E = _cross(n, m1) / r**2 + _cross(n, m2) / r
    return E, B


def rotating_dipole(grid: UniformGrid, t: float, *, moment: float = 1.0, omega: float = 1.0,
                    inclination: float = np.pi / 4, excision_radius: float = 0.1) -> TimeLevelFields:
    """Exact electric and magnetic fields of a rotating point magnetic dipole on ``grid``.

    Parameters
    ----------
    grid : UniformGrid
        3D grid (code units, G = c = 1).
    t : float
        Coordinate time of the time level.
    moment : float
        Magnetic dipole moment |m| (Gaussian units).
    omega : float
        Angular velocity of the rotation about the z axis.
    inclination : float
        Angle chi between m and the z axis, radians.
    excision_radius : float
        Points with r < excision_radius get E = B = 0 and ``valid_mask`` False (the fields are
        singular at r = 0).

    Returns
    -------
    TimeLevelFields
        Flat slice (alpha = 1, beta = 0, gamma = delta, K = 0), vacuum (no charge, no current),
        Gaussian units, exact ``dt_E`` and ``dt_B`` (time derivatives at fixed x), ``dt_gamma``
        zero, ``valid_mask`` True outside the excised ball.

    References
    ----------
    J. D. Jackson, Classical Electrodynamics, 3rd ed. (1999), sec. 9.3 (magnetic dipole fields
    and radiation); see the module docstring for the formulas.
    """
    if grid.ndim != 3:
        raise ValueError(f"rotating_dipole: grid must be 3D, found shape {grid.shape}")
    if not excision_radius > 0:
        raise ValueError(f"rotating_dipole: excision_radius must be positive, found {excision_radius}")
    x = np.stack(grid.coordinates())
    mask = np.sqrt(_dot(x, x)) >= excision_radius
    # excised points are evaluated at a harmless stand-in position and zeroed below
    x = np.where(mask, x, np.array([excision_radius, 0.0, 0.0]).reshape(3, 1, 1, 1))
    E, B, dt_E, dt_B = rotating_dipole_fields(x, t, moment=moment, omega=omega,
                                              inclination=inclination, derivatives=True)
    for a in (E, B, dt_E, dt_B):
        a[:, ~mask] = 0.0
    shape = grid.shape
    gamma = np.zeros((6,) + shape)
    gamma[[0, 3, 5]] = 1.0
    return TimeLevelFields(
        grid=grid, t=float(t), alpha=np.ones(shape), beta=np.zeros((3,) + shape), gamma=gamma,
        K=np.zeros((6,) + shape), E=E, B=B, charge_density=np.zeros(shape),
        current_density=np.zeros((3,) + shape), units="gaussian", dt_E=dt_E, dt_B=dt_B,
        dt_gamma=np.zeros((6,) + shape), valid_mask=mask,
    )


def rotating_dipole_fields(points, t, *, moment=1.0, omega=1.0, inclination=np.pi / 4,
                           derivatives=False):
    """E and B (and with ``derivatives`` also d_t E, d_t B) at arbitrary points (3, ...), r > 0.

    The formulas of the module docstring, without a grid: for quadratures at given nodes.
    """
    x = np.asarray(points, dtype=float)
    r = np.sqrt(_dot(x, x))
    if np.any(r == 0):
        raise ValueError("rotating_dipole_fields: the fields are singular at r = 0")
    n = x / r
    u = t - r
    d = [_moment_derivatives(u, moment, omega, inclination, k) for k in range(4)]
    E, B = _fields(n, r, d[:3])
    if not derivatives:
        return E, B
    # d/dt at fixed x shifts every derivative by one order (u = t - r).
    dt_E, dt_B = _fields(n, r, d[1:4])
    return E, B, dt_E, dt_B


def rotating_dipole_luminosity(*, moment: float = 1.0, omega: float = 1.0,
                               inclination: float = np.pi / 4) -> float:
    """L = (2/3) m^2 omega^4 sin^2(chi), Gaussian units, c = 1 (Jackson sec. 9.3)."""
    return 2.0 / 3.0 * moment**2 * omega**4 * np.sin(inclination) ** 2
