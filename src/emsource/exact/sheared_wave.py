"""A circularly polarised plane wave in flat space, seen in sheared and stretched coordinates."""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

__all__ = ["ShearedWave", "sheared_circular_wave"]

#: The coordinate map x^i = M^i_j X^j from Cartesian X to the sheared coordinates x.
SHEAR = np.array([[1.0, 0.3, 0.0], [0.0, 1.2, -0.2], [0.1, 0.0, 0.9]])


class ShearedWave(NamedTuple):
    """Fields and exact values of :func:`sheared_circular_wave`.

    Attributes
    ----------
    gamma : (6, n, n, n) ndarray
        The constant metric gamma_ij = (M^-T M^-1)_ij in the sheared coordinates, packed.
    E, B : (3, n, n, n) ndarray
        Contravariant field components in the sheared coordinates.
    metric : (3, 3) ndarray
        gamma_ij as a full matrix.
    wave_covector : (3,) ndarray
        The unit propagation direction as a covector k_i in the sheared coordinates.
    volume_factor : float
        sqrt(det gamma) = |det M^-1|: the proper volume of the coordinate cube [0, 1]^3.
    """

    gamma: np.ndarray
    E: np.ndarray
    B: np.ndarray
    metric: np.ndarray
    wave_covector: np.ndarray
    volume_factor: float


def sheared_circular_wave(points: int, *, dtype=np.float64) -> ShearedWave:
    """A unit-amplitude circularly polarised plane wave in flat space, sheared coordinates.

    In Cartesian coordinates X the wave travels along k_hat = (1, 2, 2)/3 with wavenumber
    2 pi 3, E = cos(s) e1 + sin(s) e2 and B = k_hat x E, s = 2 pi 3 k_hat.X (J. D. Jackson,
    Classical Electrodynamics, 3rd ed., sec. 7.2, section from memory: a circularly polarised
    vacuum wave, |E| = |B| = 1, E.B = 0). It is sampled on ``points``^3 points of the coordinate cube x in [0, 1]^3 of the
    sheared, stretched coordinates x = M X (:data:`SHEAR`, a constant non-diagonal metric);
    contravariant components transform with M, the covector k_i with M^-T.

    Exact values (Gaussian units): rho = (E^2 + B^2)/(8 pi) = 1/(4 pi) everywhere,
    S_i = rho k_i (the null field carries its energy along k), |S|_gamma = rho, S = rho, and
    the energy in the coordinate cube is rho times ``volume_factor``.

    Parameters
    ----------
    points : int
        Points per axis (at least 2).
    dtype : float32 or float64
        Of the returned arrays (``metric`` and ``wave_covector`` are float64).

    Examples
    --------
    >>> w = sheared_circular_wave(4)
    >>> w.E.shape, round(w.volume_factor, 6)
    ((3, 4, 4, 4), 0.931099)
    """
    points = int(points)
    if points < 2:
        raise ValueError(f"sheared_circular_wave: points must be at least 2, found {points}")
    M_inv = np.linalg.inv(SHEAR)
    metric = M_inv.T @ M_inv
    x = np.stack(np.meshgrid(*(np.linspace(0.0, 1.0, points),) * 3, indexing="ij"))
    X = np.einsum("ij,j...->i...", M_inv, x)
    k_hat = np.array([1.0, 2.0, 2.0]) / 3.0
    e1 = np.cross(k_hat, [0.0, 0.0, 1.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(k_hat, e1)
    phase = 2 * math.pi * 3.0 * np.einsum("i,i...->...", k_hat, X)
    E_cart = np.cos(phase) * e1[:, None, None, None] + np.sin(phase) * e2[:, None, None, None]
    B_cart = np.cross(k_hat[:, None, None, None], E_cart, axis=0)
    E = np.einsum("ij,j...->i...", SHEAR, E_cart)
    B = np.einsum("ij,j...->i...", SHEAR, B_cart)
    packed = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    gamma = np.broadcast_to(np.array([metric[a, b] for a, b in packed])[:, None, None, None],
                            (6, points, points, points))
    return ShearedWave(np.ascontiguousarray(gamma, dtype=dtype), E.astype(dtype), B.astype(dtype),
                       metric, M_inv.T @ k_hat, float(abs(np.linalg.det(M_inv))))
