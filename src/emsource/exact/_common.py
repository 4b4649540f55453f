"""Shared pieces of the flat-spacetime exact data: argument checks, profiles, unit scaling.

Not API. The exact data are evaluated with NumPy on whole arrays: they are reference data for
tests, sampled once per time level, not a hot path, so they do not go through the Numba kernels.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

from ..grid import UniformGrid
from ..unit_systems import UNIT_SYSTEMS
from .time_level_fields import TimeLevelFields

# Largest |cos| between the polarization and the wave vector accepted as "orthogonal": a few
# hundred float64 epsilons, so vectors typed with 16 digits pass and real mistakes do not.
_ORTHOGONALITY_TOLERANCE = 1e-12


def check_grid(grid, function: str) -> UniformGrid:
    if not isinstance(grid, UniformGrid):
        raise TypeError(f"{function}: grid must be an emsource.grid.UniformGrid, found {type(grid).__name__}")
    return grid


def check_time(t, function: str) -> float:
    try:
        t = float(t)
    except (TypeError, ValueError):
        raise TypeError(f"{function}: t must be a real number, found {t!r}") from None
    if not math.isfinite(t):
        raise ValueError(f"{function}: t must be finite, found {t}")
    return t


def check_vector(value, name: str, function: str) -> np.ndarray:
    """A finite real 3-vector."""
    try:
        vec = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"{function}: {name} must be a sequence of 3 real numbers, found {value!r}") from None
    if vec.shape != (3,):
        raise ValueError(f"{function}: {name} must have shape (3,), found shape {vec.shape}")
    if not np.all(np.isfinite(vec)):
        raise ValueError(f"{function}: {name} must be finite, found {tuple(vec)}")
    return vec


def check_scalar(value, name: str, function: str, *, positive: bool = False) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise TypeError(f"{function}: {name} must be a real number, found {value!r}") from None
    if not math.isfinite(value):
        raise ValueError(f"{function}: {name} must be finite, found {value}")
    if positive and value <= 0:
        raise ValueError(f"{function}: {name} must be positive, found {value}")
    return value


def check_units(units, function: str) -> str:
    if units not in UNIT_SYSTEMS:
        raise ValueError(f"{function}: units must be one of {UNIT_SYSTEMS}, found {units!r}")
    return units


def field_scale(units: str) -> float:
    """Factor from Gaussian to `units` for E and B at fixed stress-energy.

    T_ab is (1/4pi)(F F - ...) in Gaussian units and (F F - ...) in Heaviside-Lorentz units, so the
    same stress-energy needs F_HL = F_G / sqrt(4 pi); Maxwell's equations then need
    rho_HL = sqrt(4 pi) rho_G (div E_HL = rho_HL). Jackson, Classical Electrodynamics, 3rd ed.,
    Appendix on units and dimensions (conversion table, from memory).
    """
    return 1.0 if units == "gaussian" else 1.0 / math.sqrt(4.0 * math.pi)


def wave_basis(wave_vector, polarization, function: str):
    """Wave vector k, frequency |k|, unit polarization e and unit vector k_hat x e."""
    k = check_vector(wave_vector, "wave_vector", function)
    e = check_vector(polarization, "polarization", function)
    k_norm = float(np.linalg.norm(k))
    e_norm = float(np.linalg.norm(e))
    if k_norm == 0.0:
        raise ValueError(f"{function}: wave_vector must be nonzero, found {tuple(k)}")
    if e_norm == 0.0:
        raise ValueError(f"{function}: polarization must be nonzero, found {tuple(e)}")
    e = e / e_norm
    k_hat = k / k_norm
    cosine = float(np.dot(k_hat, e))
    if abs(cosine) > _ORTHOGONALITY_TOLERANCE:
        raise ValueError(
            f"{function}: polarization must be orthogonal to wave_vector (a vacuum wave is transverse), "
            f"found cos(angle) = {cosine:.3e} between {tuple(e)} and {tuple(k_hat)}"
        )
    return k, k_norm, e, np.cross(k_hat, e)


def _sine(s):
    return np.sin(s)


def _sine_derivative(s):
    return np.cos(s)


def make_profile(profile, width, function: str) -> tuple[Callable, Callable]:
    """The profile f of the phase s and its derivative f', both vectorised.

    "sine":              f = sin(s)
    "periodic_gaussian": f = exp((cos(s) - 1) / width^2), a smooth pulse of phase width ~ width,
                         2 pi-periodic in s
    "gaussian":          f = exp(-s^2 / (2 width^2)), one pulse, not periodic
    (f, f_prime):        any pair of vectorised callables given by the caller.
    """
    if isinstance(profile, str):
        if profile == "sine":
            return _sine, _sine_derivative
        if profile in ("gaussian", "periodic_gaussian"):
            w = check_scalar(width, "width", function, positive=True)
            if profile == "gaussian":
                return (
                    lambda s: np.exp(-0.5 * (s / w) ** 2),
                    lambda s: -(s / w**2) * np.exp(-0.5 * (s / w) ** 2),
                )
            return (
                lambda s: np.exp((np.cos(s) - 1.0) / w**2),
                lambda s: -(np.sin(s) / w**2) * np.exp((np.cos(s) - 1.0) / w**2),
            )
        raise ValueError(
            f"{function}: profile must be 'sine', 'gaussian', 'periodic_gaussian' or a pair "
            f"(f, f_prime) of callables, found {profile!r}"
        )
    try:
        f, f_prime = profile
    except (TypeError, ValueError):
        raise TypeError(f"{function}: profile must be a name or a pair (f, f_prime), found {profile!r}") from None
    if not (callable(f) and callable(f_prime)):
        raise TypeError(f"{function}: profile (f, f_prime) must both be callable, found {profile!r}")
    return f, f_prime


def evaluate_profile(func, s: np.ndarray, name: str, function: str) -> np.ndarray:
    """func(s) as a float array of the shape of s; a caller's callable is checked."""
    try:
        out = np.asarray(func(s), dtype=float)
        out = np.broadcast_to(out, s.shape).copy() if out.shape != s.shape else out
    except (TypeError, ValueError) as err:
        raise ValueError(
            f"{function}: profile {name} must map a phase array of shape {s.shape} to real values "
            f"of the same shape ({err})"
        ) from None
    return out


def flat_slice(grid, t, E, B, *, units, dt_E, dt_B, alpha=None, beta=None, gamma=None, K=None,
               dt_gamma=None, charge_density=None, current_density=None) -> TimeLevelFields:
    """Fill a TimeLevelFields, with flat Cartesian defaults for whatever is not given."""
    shape = grid.shape
    if alpha is None:
        alpha = np.ones(shape)
    if beta is None:
        beta = np.zeros((3, *shape))
    if gamma is None:
        gamma = np.zeros((6, *shape))
        gamma[0] = gamma[3] = gamma[5] = 1.0
    if K is None:
        K = np.zeros((6, *shape))
    if dt_gamma is None:
        dt_gamma = np.zeros((6, *shape))
    if charge_density is None:
        charge_density = np.zeros(shape)
    if current_density is None:
        current_density = np.zeros((3, *shape))
    return TimeLevelFields(
        grid=grid, t=t, alpha=alpha, beta=beta, gamma=gamma, K=K, E=E, B=B,
        charge_density=charge_density, current_density=current_density, units=units,
        dt_E=dt_E, dt_B=dt_B, dt_gamma=dt_gamma, valid_mask=None,
    )
