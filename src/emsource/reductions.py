r"""Mergeable reductions: partial results per piece of a grid, an explicit combine and finalise.

Every integral, norm and balance of the package is computed in three steps:

1. each piece of the grid (a slab of a snapshot file, a patch of a domain decomposition, a
   block of an array library's task graph) gives an immutable *partial* result;
2. :func:`combine` merges two partials into one, without changing either; it is associative
   and commutative, so an MPI allreduce or a tree reduction only has to call it;
3. ``finalise()`` turns the partial of the whole grid into the user-facing result.

What the partials hold:

- :class:`Sum`: a sum of terms (energies, momenta, face fluxes, luminosity node sums, time
  integrals) and the sum of the terms' absolute values (the size against which its round-off
  is measured: a sum with cancellation has an error relative to that, not to its value);
- :class:`NormPartial`: point count, sums of squares and maxima of a residual and of its scale
  (L2 and max norms, :class:`ResidualNorms`);
- :class:`LevelPartial`: the integrals of one snapshot time level (:mod:`emsource.integrals`);
- :class:`SpherePartial`: the quadrature sums of the radiation on extraction spheres over the
  nodes seen so far (:mod:`emsource.radiation`);
- :class:`BalancePartial`: the box totals, face outflows and volume sources of every time level
  of a global energy-momentum balance (:mod:`emsource.conservation`); the time integrals are
  taken in ``finalise``.

Round-off of a combine. Each piece sums its own terms with :func:`accurate_sum` (pairwise
summation accumulated in extended precision where the platform has it, then rounded once to
float64), so a piece's value is its exact sum to within about one float64 rounding,
0.5 eps of its magnitude (eps = 2^-52). Combining n pieces adds n - 1 float64 roundings. A
single-piece result and an n-piece one therefore agree to about (n + 1) eps of the sum of the
absolute values of the terms: for like-signed terms (energies, squares) that is (n + 1) eps
relative, for sums with cancellation (a net flux) it is relative to :attr:`Sum.magnitude`.
Maxima and counts are exact in any order.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import reduce
from typing import NamedTuple

import numpy as np

from ._deprecated_names import renamed_attribute, warn_renamed

__all__ = [
    "accurate_sum",
    "combine",
    "combine_all",
    "Sum",
    "ResidualNorms",
    "NormPartial",
    "LevelPartial",
    "BalanceTerms",
    "GlobalBalance",
    "BalancePartial",
    "SpherePartial",
]

#: Accumulator of :func:`accurate_sum`: extended precision where the platform has it (x86:
#: 64-bit mantissa); elsewhere it is float64 and the sums are NumPy's pairwise float64 sums.
_ACCUMULATOR = np.longdouble


def accurate_sum(terms, axis=None) -> np.ndarray:
    """Sum of ``terms`` along ``axis`` (default all), accumulated in extended precision.

    NumPy's pairwise summation in long double has a relative error bound of order
    log2(N) eps_long (eps_long = 2^-63 on x86), negligible next to the one final rounding to
    float64: the result is the exact sum to within about 0.5 float64 eps of the sum of |terms|.
    """
    return np.asarray(np.sum(terms, axis=axis, dtype=_ACCUMULATOR), dtype=np.float64)


def _frozen(a) -> np.ndarray:
    a = np.array(a, dtype=np.float64)
    a.setflags(write=False)
    return a


def combine(a, b):
    """The partial result of the union of the pieces of ``a`` and ``b`` (neither is changed)."""
    return a.combine(b)


def combine_all(partials):
    """:func:`combine` over an iterable of partials (at least one), left to right."""
    return reduce(combine, partials)


@dataclass(frozen=True)
class Sum:
    """A partial sum: ``value`` = sum of the terms, ``magnitude`` = sum of their |values|.

    Both are read-only float64 arrays of one shape (0-d for a scalar sum).
    """

    value: np.ndarray
    magnitude: np.ndarray

    def __post_init__(self):
        object.__setattr__(self, "value", _frozen(self.value))
        object.__setattr__(self, "magnitude", _frozen(self.magnitude))
        if self.value.shape != self.magnitude.shape:
            raise ValueError(f"Sum: value shape {self.value.shape} != magnitude shape "
                             f"{self.magnitude.shape}")

    @classmethod
    def of(cls, terms, axis=None) -> "Sum":
        """The sum of ``terms`` along ``axis`` (default: all axes)."""
        terms = np.asarray(terms, dtype=np.float64)
        return cls(accurate_sum(terms, axis), accurate_sum(np.abs(terms), axis))

    @classmethod
    def zero(cls, shape=()) -> "Sum":
        return cls(np.zeros(shape), np.zeros(shape))

    def combine(self, other: "Sum") -> "Sum":
        if self.value.shape != other.value.shape:
            raise ValueError(f"Sum.combine: shapes {self.value.shape} and {other.value.shape} differ")
        return Sum(self.value + other.value, self.magnitude + other.magnitude)

    def finalise(self):
        """The sum: a float for a scalar sum, else a float64 array."""
        return float(self.value) if self.value.ndim == 0 else np.array(self.value)


class ResidualNorms(NamedTuple):
    """Norms of a residual over the points where it is evaluated.

    Attributes
    ----------
    l2 : float or (3,) ndarray
        Root mean square over the points, sqrt(mean R^2) (a discrete L2 norm divided by the
        square root of the volume, so that it does not grow with the box).
    max : float or (3,) ndarray
        Largest absolute value over the points.
    normalised_l2 : float or (3,) ndarray
        l2 of the residual over l2 of the pointwise scale (the largest term of the equation).
    normalised_max : float or (3,) ndarray
        max of the residual over max of the scale.
    scale_l2, scale_max : float or (3,) ndarray
        RMS and largest value of the scale itself. Where these are at round-off level (an
        equation whose every term vanishes) the normalised norms compare round-off with
        round-off and mean nothing.

    Scalar equations give floats, vector equations one entry per component.
    """

    l2: object
    max: object
    normalised_l2: object
    normalised_max: object
    scale_l2: object
    scale_max: object


@dataclass(frozen=True)
class NormPartial:
    """Partial L2 and max norms of a residual with ``ncomp`` components and of its scale.

    Attributes
    ----------
    count : int
        Points summed.
    square_sum, scale_square_sum : (ncomp,) ndarray
        Sums of R_c^2 and of scale_c^2 over the points.
    maximum, scale_maximum : (ncomp,) ndarray
        Largest |R_c| and scale_c (0 for no points; NaN if a value was NaN).
    """

    count: int
    square_sum: np.ndarray
    maximum: np.ndarray
    scale_square_sum: np.ndarray
    scale_maximum: np.ndarray

    def __post_init__(self):
        for name in ("square_sum", "maximum", "scale_square_sum", "scale_maximum"):
            object.__setattr__(self, name, _frozen(np.atleast_1d(getattr(self, name))))
        object.__setattr__(self, "count", int(self.count))

    @classmethod
    def of_points(cls, residual, scale) -> "NormPartial":
        """From (ncomp, npoints) arrays of the residual and its scale at the chosen points."""
        r = np.asarray(residual, dtype=np.float64)
        s = np.asarray(scale, dtype=np.float64)
        if r.shape[1] == 0:
            return cls.empty(r.shape[0])
        return cls(r.shape[1], accurate_sum(r * r, axis=1), np.max(np.abs(r), axis=1),
                   accurate_sum(s * s, axis=1), np.max(np.abs(s), axis=1))

    @classmethod
    def of_column_sums(cls, count, square_sums, maxima, scale_square_sums, scale_maxima):
        """From per-column (ncolumns, ncomp) sums and maxima (the kernels' partial output)."""
        if np.shape(square_sums)[0] == 0:
            return cls.empty(np.shape(square_sums)[1])
        return cls(count, accurate_sum(square_sums, axis=0),
                   np.max(np.asarray(maxima, np.float64), axis=0),
                   accurate_sum(scale_square_sums, axis=0),
                   np.max(np.asarray(scale_maxima, np.float64), axis=0))

    @classmethod
    def empty(cls, ncomp) -> "NormPartial":
        zero = np.zeros(ncomp)
        return cls(0, zero, zero, zero, zero)

    def combine(self, other: "NormPartial") -> "NormPartial":
        if self.square_sum.shape != other.square_sum.shape:
            raise ValueError("NormPartial.combine: different numbers of components "
                             f"({self.square_sum.size}, {other.square_sum.size})")
        return NormPartial(self.count + other.count,
                           self.square_sum + other.square_sum,
                           np.maximum(self.maximum, other.maximum),
                           self.scale_square_sum + other.scale_square_sum,
                           np.maximum(self.scale_maximum, other.scale_maximum))

    @property
    def finite(self) -> bool:
        """True if every residual value summed was finite."""
        return bool(np.isfinite(self.square_sum).all() and np.isfinite(self.maximum).all())

    def finalise(self, index=slice(None), *, zero_scale=0.0) -> ResidualNorms:
        """:class:`ResidualNorms` of the components ``index`` (an int gives floats).

        ``zero_scale`` is the normalised norm reported where the scale is zero (every term of
        the equation vanishes). Without points every norm is NaN.
        """
        with np.errstate(invalid="ignore", divide="ignore"):
            if self.count == 0:
                nan = np.full(self.square_sum.shape, np.nan)
                l2 = mx = nl2 = nmx = sl2 = smx = nan
            else:
                l2 = np.sqrt(self.square_sum / self.count)
                sl2 = np.sqrt(self.scale_square_sum / self.count)
                mx, smx = self.maximum, self.scale_maximum
                nl2 = np.where(sl2 > 0, l2 / np.where(sl2 > 0, sl2, 1.0), zero_scale)
                nmx = np.where(smx > 0, mx / np.where(smx > 0, smx, 1.0), zero_scale)
        values = [np.asarray(v, np.float64)[index] for v in (l2, mx, nl2, nmx, sl2, smx)]
        if np.ndim(values[0]) == 0:
            values = [float(v) for v in values]
        else:
            values = [np.array(v) for v in values]
        return ResidualNorms(*values)

    def total_l2(self) -> tuple:
        """(RMS of the Euclidean norm over the components, the same of the scale)."""
        if self.count == 0:
            return math.nan, math.nan
        return (math.sqrt(float(np.sum(self.square_sum)) / self.count),
                math.sqrt(float(np.sum(self.scale_square_sum)) / self.count))


@dataclass(frozen=True)
class LevelPartial:
    """Partial integrals of one snapshot time level (see :mod:`emsource.integrals`).

    Attributes
    ----------
    energy : Sum
        Of the trapezoid-weighted sqrt(gamma) rho at the valid points.
    momentum : Sum, shape (3,)
        Of the weighted sqrt(gamma) S_i.
    face_flux : Sum, shape (6,)
        Outward energy flux through each face, in the order of :data:`emsource.integrals.FACES`.
    luminosity : Sum, shape (nradii,)
        Quadrature-weighted normal flux over the sphere nodes this piece owns.
    points, excised_points : int
        Valid points summed, and excised points (valid_mask = 0) left out.
    max_electric_field, max_magnetic_field : float
        Largest sqrt(gamma_ij E^i E^j), sqrt(gamma_ij B^i B^j) over the valid points (0 if none).
    """

    energy: Sum
    momentum: Sum
    face_flux: Sum
    luminosity: Sum
    points: int
    excised_points: int
    max_electric_field: float
    max_magnetic_field: float

    excluded_points = renamed_attribute("excluded_points", "excised_points")

    @classmethod
    def zero(cls, nradii) -> "LevelPartial":
        return cls(Sum.zero(), Sum.zero(3), Sum.zero(6), Sum.zero(nradii), 0, 0, 0.0, 0.0)

    def combine(self, other: "LevelPartial") -> "LevelPartial":
        return LevelPartial(self.energy.combine(other.energy),
                            self.momentum.combine(other.momentum),
                            self.face_flux.combine(other.face_flux),
                            self.luminosity.combine(other.luminosity),
                            self.points + other.points,
                            self.excised_points + other.excised_points,
                            max(self.max_electric_field, other.max_electric_field),
                            max(self.max_magnetic_field, other.max_magnetic_field))


class BalanceTerms(NamedTuple):
    """One conservation law integrated over the box and over time.

    ``change + outflow - source`` is zero for exact data; ``mismatch`` is that sum,
    ``absolute_mismatch`` its absolute value and ``relative_mismatch`` = |mismatch| / ``scale``
    with ``scale`` the largest field energy in the box over the time levels (for the momentum too:
    |S_i|_gamma <= rho for the electromagnetic field, so the box energy bounds every momentum
    component's total; a closed box whose energy drifts by 1 % shows 0.01). Floats for the
    energy, (3,) arrays for the momentum (covariant components).
    """

    change: object
    outflow: object
    source: object
    mismatch: object
    relative_mismatch: object
    absolute_mismatch: object
    scale: float


@dataclass(frozen=True)
class GlobalBalance:
    """Energy and momentum in a box against the flux through its faces and the volume sources.

    Attributes
    ----------
    times : (n,) ndarray
        Times of the time levels.
    totals : (n, 4) ndarray
        Integral of sqrt(gamma) rho and sqrt(gamma) S_j over the box (coordinate volume d^3x).
    outflow_rates : (n, 4) ndarray
        Net flux through the faces, sum over faces of the outward flux integral.
    source_rates : (n, 4) ndarray
        Integral over the box of the right-hand sides of the two equations.
    energy, momentum : BalanceTerms
        The time-integrated balance from times[0] to times[-1].
    box : tuple of slice
        Grid index ranges of the box (the interior: boundary width = stencil radius).
    """

    times: np.ndarray
    totals: np.ndarray
    outflow_rates: np.ndarray
    source_rates: np.ndarray
    energy: BalanceTerms
    momentum: BalanceTerms
    box: tuple


@dataclass(frozen=True)
class BalancePartial:
    """Partial box totals, face outflow rates and source rates of every time level of a balance.

    A piece of level k contributes to row k only; the rows of the other levels are zero, so
    pieces of different levels and of different places combine by the same addition.

    Attributes
    ----------
    times : tuple of float
        Times of all time levels of the balance (the same in every partial).
    totals, outflow_rates, source_rates : Sum, shape (n, 4)
        Energy and the three momentum components per time level.
    """

    times: tuple
    totals: Sum
    outflow_rates: Sum
    source_rates: Sum

    @classmethod
    def of_level(cls, times, k, totals: Sum, outflow: Sum, source: Sum) -> "BalancePartial":
        """The contribution of one piece of time level ``k``: (4,) sums placed in row k."""
        n = len(times)

        def row(s):
            value, magnitude = np.zeros((n, 4)), np.zeros((n, 4))
            value[k], magnitude[k] = s.value, s.magnitude
            return Sum(value, magnitude)

        return cls(tuple(float(t) for t in times), row(totals), row(outflow), row(source))

    @classmethod
    def of_slice(cls, times, k, totals: Sum, outflow: Sum, source: Sum) -> "BalancePartial":
        """Deprecated spelling of :meth:`of_level`."""
        warn_renamed("BalancePartial", "of_slice", "of_level")
        return cls.of_level(times, k, totals, outflow, source)

    def combine(self, other: "BalancePartial") -> "BalancePartial":
        if self.times != other.times:
            raise ValueError("BalancePartial.combine: partials of different time series")
        return BalancePartial(self.times, self.totals.combine(other.totals),
                              self.outflow_rates.combine(other.outflow_rates),
                              self.source_rates.combine(other.source_rates))

    def finalise(self, box=None) -> GlobalBalance:
        """Time integrals (trapezoid rule over the times of the levels) and the mismatch."""
        times = np.array(self.times)
        totals = self.totals.finalise()
        outflows = self.outflow_rates.finalise()
        sources = self.source_rates.finalise()
        change = totals[-1] - totals[0]
        outflow = np.trapezoid(outflows, times, axis=0)
        source = np.trapezoid(sources, times, axis=0)
        mismatch = change + outflow - source
        absolute = np.abs(mismatch)
        scale = float(np.max(np.abs(totals[:, 0])))
        with np.errstate(invalid="ignore", divide="ignore"):
            relative = absolute / scale if scale > 0 else np.where(absolute > 0, np.inf, 0.0)
        relative = np.asarray(relative, dtype=float)
        energy = BalanceTerms(float(change[0]), float(outflow[0]), float(source[0]),
                              float(mismatch[0]), float(relative[0]), float(absolute[0]), scale)
        momentum = BalanceTerms(change[1:], outflow[1:], source[1:], mismatch[1:], relative[1:],
                                absolute[1:], scale)
        return GlobalBalance(times, totals, outflows, sources, energy, momentum, box)


@dataclass(frozen=True)
class SpherePartial:
    """Quadrature sums over some of the nodes of extraction spheres (:mod:`emsource.radiation`).

    Each node belongs to one piece (the slab or block its interpolation stencil starts in), so
    the pieces' partials add up to the sums over every node; ``nodes`` counts them, so that
    ``finalise`` can check that every node was seen exactly once.

    Attributes
    ----------
    nodes : tuple of int
        Nodes summed, per sphere.
    fluxes : Sum
        (spheres, 2): the sums of w |Phi_2|^2 and of w (|Phi_2|^2 - |Phi_0|^2) over the nodes
        (w the solid-angle weights).
    modes : tuple of Sum
        Per scalar (Phi_0, Phi_1, Phi_2), (spheres, 2, modes): the real and imaginary parts of
        the sums of w conj(sY_lm) Phi.
    """

    nodes: tuple
    fluxes: Sum
    modes: tuple

    def combine(self, other: "SpherePartial") -> "SpherePartial":
        if len(self.nodes) != len(other.nodes) or len(self.modes) != len(other.modes):
            raise ValueError("SpherePartial.combine: partials of different spheres")
        return SpherePartial(tuple(a + b for a, b in zip(self.nodes, other.nodes)),
                             self.fluxes.combine(other.fluxes),
                             tuple(a.combine(b) for a, b in zip(self.modes, other.modes)))
