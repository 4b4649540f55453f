"""Charged, spinning black holes in Kerr-Schild (horizon-penetrating) Cartesian coordinates.

The Kerr-Newman spacetime of mass M, spin parameter a = J / M (angular momentum along +z) and
charge Q, in geometrized Gaussian units (G = c = 1), in Kerr-Schild form

    g_ab = eta_ab + 2 H l_a l_b,       eta = diag(-1, 1, 1, 1),

    H   = r^2 (M r - Q^2 / 2) / (r^4 + a^2 z^2),
    l_a = (1, (r x + a y) / (r^2 + a^2), (r y - a x) / (r^2 + a^2), z / r),

where the spheroidal radius r > 0 solves (x^2 + y^2) / (r^2 + a^2) + z^2 / r^2 = 1. The vector
potential is

    A_a = -(Q r^3 / (r^4 + a^2 z^2)) l_a,

so A_t -> -Q / r far away (a charge Q > 0 has an outward E). Reissner-Nordstrom is a = 0,
Kerr is Q = 0. This Kerr-Schild form of H, l and A is quoted from memory; the geometry is the
Kerr-Newman one of C. W. Misner, K. S. Thorne, J. A. Wheeler, Gravitation (1973), ch. 33 (given
there in Boyer-Lindquist coordinates, with horizons at r = M +- sqrt(M^2 - a^2 - Q^2) and
charge Q). Because the form is recalled, the tests check the data against physics rather than
against the formula: ``tests/test_constraints.py`` (the Einstein-Maxwell constraints converge to
zero only with the Gaussian stress-energy) and ``tests/test_kerr_schild.py`` (horizon location,
flux of E = 4 pi Q, the field invariants, div E = div B = 0, an independent sympy route).

3+1 split (l is null, so its flat-space norm l_i l_i is 1 and l_t = 1):

    alpha   = 1 / sqrt(1 + 2 H),          beta_i = 2 H l_i,     beta^i = 2 H l_i / (1 + 2 H),
    gamma_ij = delta_ij + 2 H l_i l_j,    gamma^ij = delta_ij - 2 H l_i l_j / (1 + 2 H),
    sqrt(gamma) = sqrt(1 + 2 H) = 1 / alpha,

and, the slices being stationary (d_t gamma_ij = 0), the extrinsic curvature in the sign
convention of the package, K_ij = -(d_t gamma_ij - D_i beta_j - D_j beta_i) / (2 alpha):

    K_ij = (d_i beta_j + d_j beta_i - 2 beta^k Gamma_kij) / (2 alpha),
    Gamma_kij = (d_i gamma_kj + d_j gamma_ki - d_k gamma_ij) / 2.

Eulerian fields (n^a = (1, -beta^i) / alpha, F_ab = d_a A_b - d_b A_a, stationary):

    E_i = F_ia n^a = (F_it - F_ij beta^j) / alpha,   F_it = -d_i P,  P = Q r^3 / (r^4 + a^2 z^2),
    E^i = gamma^ij E_j,     B^i = [ijk] F_jk / (2 sqrt(gamma)).

The closed-form first derivatives that these need (derived with sympy in
``tests/derivations/kerr_newman_kerr_schild.py``, which also checks them) are, with
s = r^2 + a^2 and D = r^4 + a^2 z^2,

    d_i r = (x r^3, y r^3, z r s) / D,
    dH/dr|_z = [(3 M r^2 - Q^2 r) D - 4 r^5 (M r - Q^2/2)] / D^2,
    dH/dz|_r = -2 a^2 z r^2 (M r - Q^2/2) / D^2,
    dP/dr|_z = Q r^2 (3 a^2 z^2 - r^4) / D^2,   dP/dz|_r = -2 a^2 z Q r^3 / D^2.

Everything is evaluated with NumPy; sympy is used only at development time and in tests.
"""

from __future__ import annotations

import math

import numpy as np

from ..grid import UniformGrid
from .._deprecated_names import renamed_keywords
from .time_level_fields import TimeLevelFields

__all__ = [
    "kerr_newman",
    "reissner_nordstrom",
    "kerr",
    "kerr_newman_arrays",
    "kerr_schild_radius",
    "outer_horizon_radius",
    "inner_horizon_radius",
]

_UNITS = ("gaussian", "heaviside_lorentz")
_PACKED = ((0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2))


def _check_parameters(mass, spin, charge):
    mass = float(mass)
    spin = float(spin)
    charge = float(charge)
    if not (math.isfinite(mass) and mass > 0):
        raise ValueError(f"kerr_newman: mass must be finite and positive, found {mass!r}")
    if not (math.isfinite(spin) and math.isfinite(charge)):
        raise ValueError(f"kerr_newman: spin and charge must be finite, found spin={spin!r}, charge={charge!r}")
    if spin * spin + charge * charge > mass * mass:
        raise ValueError(
            "kerr_newman: spin^2 + charge^2 must not exceed mass^2 (no horizon otherwise): found "
            f"mass={mass!r}, spin={spin!r}, charge={charge!r}"
        )
    return mass, spin, charge


def outer_horizon_radius(mass, spin=0.0, charge=0.0) -> float:
    """Outer horizon r+ = M + sqrt(M^2 - a^2 - Q^2) (MTW, Gravitation, ch. 33), code units."""
    mass, spin, charge = _check_parameters(mass, spin, charge)
    return mass + math.sqrt(mass * mass - spin * spin - charge * charge)


def inner_horizon_radius(mass, spin=0.0, charge=0.0) -> float:
    """Inner horizon r- = M - sqrt(M^2 - a^2 - Q^2) (MTW, Gravitation, ch. 33), code units."""
    mass, spin, charge = _check_parameters(mass, spin, charge)
    return mass - math.sqrt(mass * mass - spin * spin - charge * charge)


def kerr_schild_radius(x, y, z, spin):
    """Spheroidal radius r >= 0 with (x^2 + y^2) / (r^2 + a^2) + z^2 / r^2 = 1.

    r^2 = (w + sqrt(w^2 + 4 a^2 z^2)) / 2 with w = x^2 + y^2 + z^2 - a^2; where w < 0 the
    equivalent form 2 a^2 z^2 / (sqrt(w^2 + 4 a^2 z^2) - w) avoids cancellation.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    z = np.asarray(z, dtype=np.float64)
    a2 = float(spin) ** 2
    w = x * x + y * y + z * z - a2
    root = np.sqrt(w * w + 4.0 * a2 * z * z)
    with np.errstate(divide="ignore", invalid="ignore"):
        r2 = np.where(w >= 0, 0.5 * (w + root), 2.0 * a2 * z * z / (root - w))
    return np.sqrt(np.maximum(r2, 0.0))


def kerr_newman_arrays(x, y, z, *, mass, spin=0.0, charge=0.0, units="gaussian"):
    """Lapse, shift, metric, extrinsic curvature and Eulerian fields at arbitrary points.

    Parameters
    ----------
    x, y, z : ndarray
        Kerr-Schild Cartesian coordinates, any common shape ``pts``, code units.
    mass, spin, charge : float
        M > 0, a = J / M along +z, Q (Gaussian geometrized units), with a^2 + Q^2 <= M^2.
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of E and B. Heaviside-Lorentz fields are the Gaussian ones over
        sqrt(4 pi), so that both give the same energy density and the same metric.

    Returns
    -------
    dict
        ``r`` (pts), ``alpha`` (pts), ``beta`` (3, *pts) contravariant, ``gamma`` (6, *pts)
        packed, ``K`` (6, *pts) packed, ``E`` and ``B`` (3, *pts) contravariant, float64.
        At points of the disc r = 0 (the ring singularity) values are not finite.
    """
    mass, spin, charge = _check_parameters(mass, spin, charge)
    if units not in _UNITS:
        raise ValueError(f"kerr_newman: units must be one of {_UNITS}, found {units!r}")
    x, y, z = np.broadcast_arrays(*(np.asarray(c, dtype=np.float64) for c in (x, y, z)))
    a = spin
    a2 = a * a
    q2 = charge * charge
    r = kerr_schild_radius(x, y, z, a)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        s = r * r + a2
        D = r**4 + a2 * z * z
        num = r * r * (mass * r - 0.5 * q2)
        H = num / D
        l = np.stack(((r * x + a * y) / s, (r * y - a * x) / s, z / r))
        dr = np.stack((x * r**3, y * r**3, z * r * s)) / D
        # dH_k = dH/dr dr_k + dH/dz delta_kz
        H_r = ((3.0 * mass * r * r - q2 * r) * D - 4.0 * r**5 * (mass * r - 0.5 * q2)) / D**2
        H_z = -2.0 * a2 * z * num / D**2
        dH = H_r * dr
        dH[2] += H_z
        # dl[i, k] = d_k l_i: explicit dependence on (x, y, z) plus the chain rule through r.
        dl = np.empty((3, 3) + r.shape)
        l_r = np.stack((x / s - 2.0 * r * l[0] / s, y / s - 2.0 * r * l[1] / s, -z / (r * r)))
        for i in range(3):
            for k in range(3):
                dl[i, k] = l_r[i] * dr[k]
        dl[0, 0] += r / s
        dl[0, 1] += a / s
        dl[1, 0] -= a / s
        dl[1, 1] += r / s
        dl[2, 2] += 1.0 / r

        one_2H = 1.0 + 2.0 * H
        alpha = 1.0 / np.sqrt(one_2H)
        beta_low = 2.0 * H * l
        beta_up = beta_low / one_2H
        gamma_full = 2.0 * H * l[:, None] * l[None, :]
        gamma_inv = -2.0 * H / one_2H * l[:, None] * l[None, :]
        for i in range(3):
            gamma_full[i, i] += 1.0
            gamma_inv[i, i] += 1.0
        # d_k gamma_ij = 2 (dH_k l_i l_j + H (dl_ik l_j + l_i dl_jk)), stored as dg[i, j, k].
        dg = 2.0 * (dH[None, None, :] * l[:, None, None] * l[None, :, None]
                    + H * (dl[:, None, :] * l[None, :, None] + l[:, None, None] * dl[None, :, :]))
        # d_k beta_i = 2 (dH_k l_i + H dl_ik), stored as dbeta[i, k].
        dbeta = 2.0 * (l[:, None] * dH[None, :] + H * dl)
        # Gamma_kij = (d_i g_kj + d_j g_ki - d_k g_ij) / 2, contracted with beta^k.
        beta_gamma = 0.5 * (np.einsum("k...,kji...->ij...", beta_up, dg)
                            + np.einsum("k...,kij...->ij...", beta_up, dg)
                            - np.einsum("k...,ijk...->ij...", beta_up, dg))
        K_full = (np.swapaxes(dbeta, 0, 1) + dbeta - 2.0 * beta_gamma) / (2.0 * alpha)

        # Electromagnetic field from A_a = -P l_a.
        P = charge * r**3 / D
        P_r = charge * r * r * (3.0 * a2 * z * z - r**4) / D**2
        P_z = -2.0 * a2 * z * charge * r**3 / D**2
        dP = P_r * dr
        dP[2] += P_z
        # F_ij = d_i A_j - d_j A_i with A_j = -P l_j:  -(dP_i l_j + P dl_ji) + (dP_j l_i + P dl_ij)
        F = (-(dP[:, None] * l[None, :]) - P * np.swapaxes(dl, 0, 1)
             + dP[None, :] * l[:, None] + P * dl)
        F_it = -dP
        E_low = (F_it - np.einsum("ij...,j...->i...", F, beta_up)) / alpha
        E = np.einsum("ij...,j...->i...", gamma_inv, E_low)
        sqrt_gamma = 1.0 / alpha
        B = np.stack((F[1, 2], F[2, 0], F[0, 1])) / sqrt_gamma
        if units == "heaviside_lorentz":
            scale = 1.0 / math.sqrt(4.0 * math.pi)
            E = E * scale
            B = B * scale
    gamma = np.stack([gamma_full[i, j] for i, j in _PACKED])
    K = np.stack([K_full[i, j] for i, j in _PACKED])
    return {"r": r, "alpha": alpha, "beta": beta_up, "gamma": gamma, "K": K, "E": E, "B": B}


@renamed_keywords(mask_radius="excision_radius")
def kerr_newman(grid: UniformGrid, *, mass, spin=0.0, charge=0.0, excision_radius=None,
                units="gaussian", dtype=np.float64) -> TimeLevelFields:
    """Kerr-Newman black hole on a Cartesian grid, Kerr-Schild slicing (stationary).

    Parameters
    ----------
    grid : UniformGrid
        1-3D grid; its coordinates are Kerr-Schild (x, y, z), missing axes at 0. Code units.
    mass, spin, charge : float
        Mass M > 0, spin parameter a = J / M (angular momentum along +z), charge Q in
        Gaussian geometrized units; a^2 + Q^2 <= M^2.
    excision_radius : float or None
        ``valid_mask`` is False where the spheroidal radius r < excision_radius, and wherever a value
        is not finite (grid points on the ring singularity's disc). None means the outer
        horizon r+; pass 0 to keep the horizon-penetrating interior.
    units : {"gaussian", "heaviside_lorentz"}
        Unit system of E and B (Heaviside-Lorentz fields are Gaussian / sqrt(4 pi)).
    dtype : float32 or float64
        Data type of the arrays (computed in float64).

    Returns
    -------
    TimeLevelFields
        Stationary data: dt_E, dt_B and dt_gamma are zero, the charge and current densities
        vanish (electrovacuum). Values at excised points are kept where finite.

    Notes
    -----
    Equations: see the module docstring. References: C. W. Misner, K. S. Thorne,
    J. A. Wheeler, Gravitation (1973), ch. 33; Kerr-Schild form from memory.

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> grid = UniformGrid.from_bounds((2, 2, 2), (4, 4, 4), (8, 8, 8))
    >>> data = kerr_newman(grid, mass=1.0, spin=0.5, charge=0.4)
    >>> data.gamma.shape, bool(data.valid_mask.all())
    ((6, 8, 8, 8), True)
    """
    mass, spin, charge = _check_parameters(mass, spin, charge)
    if not isinstance(grid, UniformGrid):
        raise TypeError(f"kerr_newman: grid must be a UniformGrid, found {type(grid).__name__}")
    dtype = np.dtype(dtype)
    if dtype not in (np.dtype(np.float32), np.dtype(np.float64)):
        raise ValueError(f"kerr_newman: dtype must be float32 or float64, found {dtype}")
    if excision_radius is None:
        excision_radius = outer_horizon_radius(mass, spin, charge)
    excision_radius = float(excision_radius)
    if not (math.isfinite(excision_radius) and excision_radius >= 0):
        raise ValueError(f"kerr_newman: excision_radius must be finite and >= 0, "
                         f"found {excision_radius!r}")
    x, y, z = grid.coordinates(np.float64)
    v = kerr_newman_arrays(x, y, z, mass=mass, spin=spin, charge=charge, units=units)
    finite = np.isfinite(v["alpha"])
    for name in ("beta", "gamma", "K", "E", "B"):
        finite &= np.isfinite(v[name]).all(axis=0)
    valid_mask = finite & (v["r"] >= excision_radius)
    shape = grid.shape

    def cast(a):
        return np.ascontiguousarray(a, dtype=dtype)

    return TimeLevelFields(
        grid=grid,
        t=0.0,
        alpha=cast(v["alpha"]),
        beta=cast(v["beta"]),
        gamma=cast(v["gamma"]),
        K=cast(v["K"]),
        E=cast(v["E"]),
        B=cast(v["B"]),
        charge_density=np.zeros(shape, dtype=dtype),
        current_density=np.zeros((3,) + shape, dtype=dtype),
        units=units,
        dt_E=np.zeros((3,) + shape, dtype=dtype),
        dt_B=np.zeros((3,) + shape, dtype=dtype),
        dt_gamma=np.zeros((6,) + shape, dtype=dtype),
        valid_mask=valid_mask,
    )


@renamed_keywords(mask_radius="excision_radius")
def reissner_nordstrom(grid: UniformGrid, *, mass, charge, excision_radius=None, units="gaussian",
                       dtype=np.float64) -> TimeLevelFields:
    """Reissner-Nordstrom black hole: :func:`kerr_newman` with spin 0 (MTW, ch. 33)."""
    return kerr_newman(grid, mass=mass, spin=0.0, charge=charge, excision_radius=excision_radius,
                       units=units, dtype=dtype)


@renamed_keywords(mask_radius="excision_radius")
def kerr(grid: UniformGrid, *, mass, spin, excision_radius=None,
         dtype=np.float64) -> TimeLevelFields:
    """Kerr black hole: :func:`kerr_newman` with charge 0 (MTW, ch. 33); E = B = 0."""
    return kerr_newman(grid, mass=mass, spin=spin, charge=0.0, excision_radius=excision_radius,
                       dtype=dtype)
