r"""Radiation on extraction spheres: Newman-Penrose scalars, their spin-weighted modes, power.

On coordinate spheres of radius R centred on the origin, the fields E^i, B^i and the metric
gamma_ij are interpolated to the nodes of the luminosity quadrature of
:mod:`emsource.integrals` (Gauss-Legendre in cos theta with ``theta_points`` nodes times
2 ``theta_points`` uniform points in phi; Lagrange interpolation through
``interpolation_points`` grid points per axis), and the scalars Phi_0, Phi_1, Phi_2 are formed
there in the tetrad of :mod:`emsource.newman_penrose`.

Modes. With the spin weights s = +1 (Phi_0), 0 (Phi_1), -1 (Phi_2),

.. math:: \Phi^{lm} = \oint \Phi\;\overline{{}_sY_{lm}}\,d\Omega, \qquad |s| \le l \le l_{max},

by the same quadrature (:mod:`emsource.spin_harmonics`). The product of two harmonics of equal
s and m is a polynomial of degree l + l' in cos theta, so the rule is exact for the projection
of a field with content up to degree L when L + l_max < 2 ``theta_points``; the modes themselves
are orthonormal to round-off when ``theta_points`` > l_max (enforced).

Power. In flat space :math:`|\Phi_2|^2 - |\Phi_0|^2 = \epsilon_{ijk}\hat r^i E^j B^k` at every
point (:mod:`emsource.newman_penrose`), and the Poynting flux is
:math:`\mathbf S = \frac{1}{4\pi}\mathbf E\times\mathbf B` in Gaussian units (J. D. Jackson,
Classical Electrodynamics, 3rd ed. (1999), sec. 6.7) and :math:`\mathbf E\times\mathbf B` in
Heaviside-Lorentz units. Outgoing radiation has :math:`\Phi_0 = O(r^{-3})`,
:math:`\Phi_2 = O(r^{-1})` (peeling), so the radiated power is

.. math:: P = \lim_{r\to\infty} \kappa\, r^2 \oint |\Phi_2|^2\,d\Omega, \qquad
          \kappa = \frac{1}{4\pi}\ \text{(Gaussian)}, \quad \kappa = 1\ \text{(Heaviside-Lorentz)},

:math:`\kappa` being the stress-energy prefactor of :mod:`emsource.unit_systems`. This tetrad has
l and k both scaled by 1/sqrt 2. S. A. Teukolsky, Astrophys. J. 185, 635 (1973), uses the
Kinnersley normalisation, asymptotically :math:`l_K = \sqrt2\,l`, :math:`k_K = k/\sqrt2`, so
:math:`\Phi_2^K = \Phi_2/\sqrt2` and the same power reads
:math:`\lim r^2/(2\pi)\oint|\Phi_2^K|^2 d\Omega` in Gaussian units (his form; from memory) and
:math:`\lim 2 r^2 \oint|\Phi_2^K|^2 d\Omega` in Heaviside-Lorentz units.

Per sphere the results are: ``power`` :math:`\kappa R^2\oint|\Phi_2|^2 d\Omega` (quadrature of
the nodes), ``mode_power`` :math:`\kappa R^2\sum_{l\le l_{max}}|\Phi_2^{lm}|^2` (Parseval,
truncated), and ``net_flux`` :math:`\kappa R^2\oint(|\Phi_2|^2-|\Phi_0|^2)d\Omega`, which is the
Poynting luminosity through the sphere in flat space with unit lapse and zero shift.

At finite radius the power carries corrections in 1/R; :func:`extrapolate_in_inverse_radius`
fits a polynomial in 1/R to the values at several radii. For a point magnetic dipole m(u),
u = t - r, the exact fields (:mod:`emsource.exact.rotating_dipole`) give
:math:`\Phi_2 = -(M_\phi + iM_\theta)/r` with :math:`M = m'' + m'/r + m/(2r^2)`, hence
:math:`P(r) = \tfrac23 |M|^2`; for the rotating dipole :math:`P(r) = \tfrac23 m^2\omega^4\sin^2\chi
+ m^2/(6r^4)`: no 1/r, 1/r^2 or 1/r^3 term (derived here; checked in the tests).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import _arguments as args
from .integrals import SPHERE_GATHER_NODES, CoordinateSphere, sphere_working_bytes
from .newman_penrose import newman_penrose_scalars
from .reductions import Sum, SpherePartial, combine_all
from .snapshot import CHUNK_CACHE_BYTES, SnapshotError, SnapshotFile, open_snapshot
from .snapshot.slabs import (CONVERSION_BUFFER_BYTES, DEFAULT_MEMORY_LIMIT, SlabBuffers,
                             progress_bar, slab_rows, slabs)
from .spin_harmonics import MAX_DEGREE, harmonic_table, mode_indices
from .unit_systems import check_unit_system, stress_energy_prefactor

__all__ = ["SCALARS", "SPIN_WEIGHTS", "SphereRadiation", "LevelRadiation", "ExtractionSpheres",
           "radiation_level_arrays", "radiation_open_snapshot", "radiation_snapshot",
           "extrapolate_in_inverse_radius", "power_prefactor"]

#: The scalars, in order, and their spin weights.
SCALARS = ("phi0", "phi1", "phi2")
SPIN_WEIGHTS = {"phi0": 1, "phi1": 0, "phi2": -1}
#: The quantities read per point: metric (6) and the two fields (3 + 3).
_FIELDS = (("spatial_metric", 6), ("electric_field", 3), ("magnetic_field", 3))
#: Values per grid point held at once while streaming (12 inputs, the mask, the float64
#: conversion of up to 12 inputs), an upper bound.
RADIATION_VALUES_PER_POINT = 26


def power_prefactor(units: str) -> float:
    """kappa of P = kappa r^2 oint |Phi_2|^2 dOmega: 1/(4 pi) Gaussian, 1 Heaviside-Lorentz."""
    return stress_energy_prefactor(units)


@dataclass
class SphereRadiation:
    """Radiation quantities on one sphere at one time level (code units, the data's units).

    Attributes
    ----------
    radius : float
    l_max : int
    modes : dict
        "phi0", "phi1", "phi2" -> complex (modes,) arrays, ordered as
        :func:`emsource.spin_harmonics.mode_indices` (l_max, spin weight).
    power, mode_power, net_flux : float
        See the module docstring.
    """

    radius: float
    l_max: int
    modes: dict
    power: float
    mode_power: float
    net_flux: float

    def mode_indices(self, scalar: str) -> list:
        """(l, m) of each entry of ``modes[scalar]``."""
        return mode_indices(self.l_max, SPIN_WEIGHTS[scalar])

    def mode(self, scalar: str, l: int, m: int) -> complex:
        """The (l, m) mode of ``scalar`` ("phi0", "phi1", "phi2")."""
        try:
            return complex(self.modes[scalar][self.mode_indices(scalar).index((l, m))])
        except (KeyError, ValueError):
            raise KeyError(f"no mode ({l}, {m}) of {scalar!r} with l_max = {self.l_max}") from None


@dataclass
class LevelRadiation:
    """The spheres of one time level: ``spheres[i]`` belongs to ``radii[i]``."""

    label: str
    time: float
    units: str
    spheres: list = field(default_factory=list)

    @property
    def radii(self) -> list:
        return [s.radius for s in self.spheres]

    def extrapolated_power(self, order: int) -> float:
        """``power`` extrapolated to infinite radius (:func:`extrapolate_in_inverse_radius`)."""
        return float(extrapolate_in_inverse_radius(self.radii, [s.power for s in self.spheres],
                                                   order)[0])


def extrapolate_in_inverse_radius(radii, values, order: int = 1) -> np.ndarray:
    """Least-squares fit of values = sum_k c_k / r^k, k = 0..order; returns c (order + 1,).

    c[0] is the value extrapolated to r -> infinity (common practice for finite-radius
    extraction). Needs at least order + 1 distinct radii; with exactly order + 1 the fit
    interpolates.
    """
    r = np.asarray(radii, dtype=float)
    v = np.asarray(values, dtype=float)
    if r.ndim != 1 or v.shape != r.shape:
        raise ValueError(f"extrapolate_in_inverse_radius: radii and values must be 1D of equal "
                         f"length, found shapes {r.shape} and {v.shape}")
    if not isinstance(order, (int, np.integer)) or order < 0:
        raise ValueError(f"extrapolate_in_inverse_radius: order must be a whole number >= 0, "
                         f"found {order!r}")
    if not (np.all(np.isfinite(r)) and np.all(r > 0)):
        raise ValueError(f"extrapolate_in_inverse_radius: radii must be positive and finite, "
                         f"found {r.tolist()}")
    if np.unique(r).size < order + 1:
        raise ValueError(f"extrapolate_in_inverse_radius: order {order} needs at least "
                         f"{order + 1} distinct radii, found {np.unique(r).size}")
    x = 1.0 / r
    scale = x.max()  # columns (x / scale)^k are all of order one: a well-conditioned fit
    matrix = (x[:, None] / scale) ** np.arange(order + 1)
    c, *_ = np.linalg.lstsq(matrix, v, rcond=None)
    return c / scale ** np.arange(order + 1)


def _check_l_max(l_max, theta_points):
    if not isinstance(l_max, (int, np.integer)) or isinstance(l_max, bool) or l_max < 1:
        raise ValueError(f"l_max must be a whole number of at least 1, found {l_max!r}")
    if l_max > MAX_DEGREE:
        raise ValueError(f"l_max must be at most {MAX_DEGREE} (round-off of the harmonics), "
                         f"found {l_max}")
    if not isinstance(theta_points, (int, np.integer)) or theta_points < 2:
        raise ValueError(f"theta_points must be a whole number of at least 2, found "
                         f"{theta_points!r}")
    if theta_points <= l_max:
        raise ValueError(f"l_max = {l_max} needs theta_points >= {l_max + 1} (the quadrature "
                         f"integrates products of harmonics up to degree 2 l_max exactly only "
                         f"then), found theta_points = {theta_points}")


class ExtractionSpheres:
    """Spheres, quadrature and harmonic tables for one grid: build once, measure every step.

    Parameters
    ----------
    grid : UniformGrid
        The 3D grid of the data.
    radii : sequence of float
        Sphere radii (code units), centred on the origin; each sphere with its interpolation
        stencils must lie inside the grid (:class:`emsource.snapshot.SnapshotError` otherwise).
    l_max : int
        Largest degree of the modes, 1 <= l_max <= MAX_DEGREE, < theta_points.
    theta_points : int
        Gauss-Legendre nodes in theta (2 theta_points in phi), as in :mod:`emsource.integrals`.
    interpolation_points : int
        Lagrange points per axis (even; 4 = cubic, error O(h^4)).

    Examples
    --------
    >>> from emsource.grid import UniformGrid
    >>> from emsource.exact import rotating_dipole
    >>> grid = UniformGrid.from_bounds((-2.0,) * 3, (2.0,) * 3, (21,) * 3)
    >>> spheres = ExtractionSpheres(grid, [1.5], l_max=2, theta_points=8)
    >>> data = rotating_dipole(grid, 0.0, excision_radius=0.5)
    >>> level = spheres.measure(data.gamma, data.E, data.B, valid_mask=data.valid_mask)
    >>> round(level.spheres[0].power, 1)   # (2/3) m^2 omega^4 sin^2 chi + m^2 / (6 r^4) = 0.366
    0.4
    """

    def __init__(self, grid, radii, *, l_max=4, theta_points=32, interpolation_points=4):
        if getattr(grid, "ndim", None) != 3:
            raise ValueError(f"ExtractionSpheres: grid must be a 3D UniformGrid, found {grid!r}")
        _check_l_max(l_max, theta_points)
        radii = list(radii) if np.iterable(radii) else [radii]
        if not radii:
            raise ValueError("ExtractionSpheres: radii must name at least one sphere radius")
        self.grid = grid
        self.l_max = int(l_max)
        self.theta_points = int(theta_points)
        self.interpolation_points = int(interpolation_points)
        self.spheres = [CoordinateSphere(r, grid, self.theta_points, self.interpolation_points)
                        for r in radii]
        rule = self.spheres[0].rule
        theta, phi = rule.angles()
        _, _, weights = rule.nodes(0, rule.count)
        self.solid_angle_weights = weights / rule.radius**2
        # Projection rows: conj(sY_lm) times the weight, one table per spin weight.
        self._projection = {name: harmonic_table(SPIN_WEIGHTS[name], self.l_max, theta, phi).conj()
                            * self.solid_angle_weights for name in SCALARS}
        self._points = [s.rule.nodes(0, s.count)[0] for s in self.spheres]

    @property
    def radii(self) -> list:
        return [s.radius for s in self.spheres]

    @property
    def halo(self) -> int:
        """Rows beyond a slab that its nodes' stencils may reach."""
        return self.interpolation_points - 1

    def empty_node_values(self) -> list:
        """Per sphere, a (12, nodes) array for gamma (6), E (3), B (3) at the nodes."""
        return [np.full((12, s.count), np.nan) for s in self.spheres]

    def interpolate_slab(self, node_values, arrays, valid, axis, start, stop) -> list:
        """Fill ``node_values`` (from :meth:`empty_node_values`) at the nodes whose stencil
        starts in rows start:stop of ``axis``; ``arrays`` = (gamma, E, B), ``valid`` cover
        rows ``start:`` with the halo (whole-grid arrays: start 0, stop = the axis length).
        Returns the node numbers filled, per sphere."""
        array_start = [0, 0, 0]
        array_start[axis] = start
        filled = []
        for sphere, values in zip(self.spheres, node_values):
            nodes, points = sphere.slab_nodes(axis, start, stop)
            filled.append(nodes)
            for first in range(0, nodes.size, SPHERE_GATHER_NODES):
                batch = slice(first, first + SPHERE_GATHER_NODES)
                row = 0
                for (quantity, ncomp), array in zip(_FIELDS, arrays):
                    found = sphere.interpolate(array, valid, array_start, points[:, batch])
                    if not np.all(np.isfinite(found)):
                        self._raise_non_finite(sphere, quantity, array, found, points[:, batch],
                                               axis, start)
                    values[row:row + ncomp, nodes[batch]] = found
                    row += ncomp
        return filled

    def slab_partial(self, arrays, valid, axis, start, stop) -> SpherePartial:
        """The :class:`emsource.reductions.SpherePartial` of the nodes whose stencil starts in
        rows start:stop of ``axis`` (arguments as for :meth:`interpolate_slab`): each node is
        interpolated and summed by exactly one slab, so the slabs' partials combine to the
        sums over the whole spheres (:meth:`finalise`)."""
        values = self.empty_node_values()
        nodes = self.interpolate_slab(values, arrays, valid, axis, start, stop)
        return self.node_partial([v[:, n] for v, n in zip(values, nodes)], nodes)

    def _raise_non_finite(self, sphere, quantity, array, found, points, axis, start):
        """Name the first non-finite grid value in the stencil of the first bad node."""
        k = int(np.argmax(~np.all(np.isfinite(found), axis=0)))
        p = self.interpolation_points
        lows = [int(np.floor((points[a, k] - self.grid.origin[a]) / self.grid.spacing[a]))
                - (p // 2 - 1) - (start if a == axis else 0) for a in range(3)]
        block = array[(slice(None),) + tuple(slice(lo, lo + p) for lo in lows)]
        c, i, j, m = np.unravel_index(int(np.argmax(~np.isfinite(block))), block.shape)
        index = [lows[0] + i, lows[1] + j, lows[2] + m]
        index[axis] += start
        raise SnapshotError(
            f"sphere of radius {sphere.radius}: {quantity} component {c} is not finite at grid "
            f"index {tuple(int(v) for v in index)}, inside the interpolation stencil of the node "
            f"at x = {tuple(round(float(v), 6) for v in points[:, k])}")

    def evaluate(self, node_values, *, units="gaussian", label="0", time=0.0) -> LevelRadiation:
        """Scalars, modes and powers from the filled node values of every sphere."""
        every = [np.arange(s.count) for s in self.spheres]
        return self.finalise(self.node_partial(node_values, every), units=units, label=label,
                             time=time)

    def node_partial(self, node_values, nodes) -> SpherePartial:
        """The quadrature sums over the nodes ``nodes[i]`` of sphere i, whose interpolated
        gamma (6), E (3), B (3) are ``node_values[i]`` (12, len(nodes[i])).

        Each sum is accumulated by :meth:`emsource.reductions.Sum.of` (the exact sum to half
        an eps of its magnitude), so a sphere summed in several pieces agrees with one piece to
        the rounding of the combine.
        """
        fluxes, modes = [], {name: [] for name in SCALARS}  # per sphere: Sum over its nodes
        for sphere, values, where, points in zip(self.spheres, node_values, nodes,
                                                 self._points):
            points = points[:, where]
            bad = ~np.all(np.isfinite(values), axis=0)
            if bad.any():
                k = int(np.argmax(bad))
                names = [name for name, rows in (("spatial_metric", slice(0, 6)),
                                                 ("electric_field", slice(6, 9)),
                                                 ("magnetic_field", slice(9, 12)))
                         if not np.all(np.isfinite(values[rows, k]))]
                raise SnapshotError(
                    f"sphere of radius {sphere.radius}: {', '.join(names)} interpolated to the "
                    f"node at x = {tuple(round(float(c), 6) for c in points[:, k])} is not finite "
                    f"(a non-finite value in the grid data near that point; {int(bad.sum())} "
                    "such node(s))")
            if len(where):
                try:
                    scalars = dict(zip(SCALARS, newman_penrose_scalars(
                        points, values[0:6], values[6:9], values[9:12])))
                except ValueError as error:
                    raise SnapshotError(f"sphere of radius {sphere.radius}: {error}") from None
            else:
                scalars = {name: np.zeros(0, complex) for name in SCALARS}
            weights = self.solid_angle_weights[where]
            phi2_sq = np.abs(scalars["phi2"]) ** 2
            fluxes.append(Sum.of(np.stack([weights * phi2_sq, weights * (
                phi2_sq - np.abs(scalars["phi0"]) ** 2)]), axis=-1))
            for name in SCALARS:
                terms = self._projection[name][:, where] * scalars[name]
                modes[name].append(Sum.of(np.stack([terms.real, terms.imag]), axis=-1))
        return SpherePartial(tuple(len(w) for w in nodes), _stacked(fluxes),
                             tuple(_stacked(modes[name]) for name in SCALARS))

    def finalise(self, partial, *, units="gaussian", label="0", time=0.0) -> LevelRadiation:
        """Scalars' modes and powers of every sphere from the partial of all its nodes (one
        piece, or the pieces' partials combined by :func:`emsource.reductions.combine_all`)."""
        if isinstance(partial, (list, tuple)):
            partial = combine_all(partial)
        counts = tuple(s.count for s in self.spheres)
        if tuple(partial.nodes) != counts:
            raise ValueError(f"ExtractionSpheres.finalise: the partial sums {partial.nodes} nodes "
                             f"per sphere, the spheres have {counts} (a node summed twice or "
                             "never)")
        kappa = power_prefactor(units)
        result = LevelRadiation(str(label), float(time), units)
        fluxes = partial.fluxes.finalise()
        mode_sums = [m.finalise() for m in partial.modes]
        for i, sphere in enumerate(self.spheres):
            modes = {name: m[i, 0] + 1j * m[i, 1] for name, m in zip(SCALARS, mode_sums)}
            area = kappa * sphere.radius**2
            result.spheres.append(SphereRadiation(
                sphere.radius, self.l_max, modes,
                power=float(area * fluxes[i, 0]),
                mode_power=float(area * np.sum(np.abs(modes["phi2"]) ** 2)),
                net_flux=float(area * fluxes[i, 1])))
        return result

    def measure(self, gamma, E, B, *, valid_mask=None, units="gaussian", label="0",
                time=0.0) -> LevelRadiation:
        """Radiation of one time level held in memory (for an evolution loop).

        Parameters
        ----------
        gamma : (6, nx, ny, nz) ndarray
            Spatial metric, packed (xx, xy, xz, yy, yz, zz), on the grid of the spheres.
        E, B : (3, nx, ny, nz) ndarray
            Contravariant Eulerian fields.
        valid_mask : (nx, ny, nz) array_like, optional
            Nonzero where the data are valid; a stencil that reaches an invalid point is an
            error. The inputs are never modified.
        units : {"gaussian", "heaviside_lorentz"}
        label, time
            Name and coordinate time of the level, carried into the result.
        """
        function = "ExtractionSpheres.measure"
        check_unit_system(units)
        shape = tuple(self.grid.shape)
        gamma = args.float_array(function, "gamma", gamma)
        if gamma.shape != (6,) + shape:
            raise ValueError(f"{function}: gamma must have shape {(6,) + shape} (packed xx, xy, "
                             f"xz, yy, yz, zz), found {gamma.shape}")
        E = args.vector(function, "E", E, shape, "component_first")
        B = args.vector(function, "B", B, shape, "component_first")
        valid = None
        if valid_mask is not None:
            valid = np.asarray(valid_mask)
            if valid.shape != shape:
                raise ValueError(f"{function}: valid_mask must have shape {shape}, found "
                                 f"{valid.shape}")
            valid = valid.astype(bool)
        values = self.empty_node_values()
        self.interpolate_slab(values, (gamma, E, B), valid, 0, 0, shape[0])
        return self.evaluate(values, units=units, label=label, time=time)


def _stacked(sums) -> Sum:
    """One Sum of the per-sphere Sums, sphere first."""
    return Sum(np.stack([x.value for x in sums]), np.stack([x.magnitude for x in sums]))


def radiation_level_arrays(grid, gamma, E, B, *, radii, l_max=4, theta_points=32,
                           interpolation_points=4, units="gaussian", valid_mask=None, label="0",
                           time=0.0) -> LevelRadiation:
    """One-call form of :class:`ExtractionSpheres` ``(...).measure(...)`` for one time level.

    In a loop build the :class:`ExtractionSpheres` once (the harmonic tables are computed
    there) and call its ``measure`` every step.
    """
    spheres = ExtractionSpheres(grid, radii, l_max=l_max, theta_points=theta_points,
                                interpolation_points=interpolation_points)
    return spheres.measure(gamma, E, B, valid_mask=valid_mask, units=units, label=label,
                           time=time)


def radiation_snapshot(input_file, *, mapping=None, **options) -> list:
    """:func:`radiation_open_snapshot` of a path (opened read-only, closed afterwards)."""
    with open_snapshot(input_file, mapping) as snap:
        return radiation_open_snapshot(snap, **options)


def radiation_open_snapshot(snap: SnapshotFile, *, radii, l_max=4, theta_points=32,
                            interpolation_points=4, memory_limit=DEFAULT_MEMORY_LIMIT, rows=None,
                            levels=None, progress=False) -> list:
    """Radiation of the time levels of an open snapshot, streamed in slabs: a time series.

    Parameters
    ----------
    snap : emsource.snapshot.SnapshotFile
        From :func:`emsource.snapshot.open_snapshot`; it stays open.
    radii, l_max, theta_points, interpolation_points
        As for :class:`ExtractionSpheres`.
    memory_limit, rows, levels, progress
        As for :func:`emsource.integrals.integrate_open_snapshot`.

    Returns
    -------
    list of LevelRadiation
        One per chosen level, in float64. Needs spatial_metric, electric_field and
        magnetic_field; uses valid_mask where present (lapse and shift do not enter).
    """
    if not isinstance(snap, SnapshotFile):
        raise TypeError("radiation_open_snapshot: snap must be an emsource.snapshot.SnapshotFile "
                        f"(from open_snapshot), found {type(snap).__name__}; pass a path to "
                        "radiation_snapshot")
    plans = []
    extractors = {}
    for level in snap.select(levels):
        for quantity, _ in _FIELDS:
            level.dtype(quantity)  # a missing quantity is an error before any work
        key = (level.grid.shape, level.grid.origin, level.grid.spacing)
        try:
            if key not in extractors:
                extractors[key] = ExtractionSpheres(level.grid, radii, l_max=l_max,
                                                    theta_points=theta_points,
                                                    interpolation_points=interpolation_points)
        except SnapshotError as error:
            raise SnapshotError(f"{level.where}, time level {level.label!r}: {error}") from None
        spheres = extractors[key]
        fixed = (CHUNK_CACHE_BYTES * 13 + CONVERSION_BUFFER_BYTES
                 + sphere_working_bytes(interpolation_points)
                 + sum(12 * 8 * s.count for s in spheres.spheres))
        n = rows or slab_rows(level, RADIATION_VALUES_PER_POINT, 8, memory_limit, fixed=fixed,
                              halo=spheres.halo)
        plans.append((level, spheres, int(min(n, level.storage_shape[0]))))
    bar = progress_bar(sum(len(slabs(lv.storage_shape[0], n)) for lv, _, n in plans),
                       "radiation", progress)
    results = []
    try:
        for level, spheres, n in plans:
            results.append(_level_radiation(level, spheres, n, bar))
    finally:
        bar.close()
    return results


def _level_radiation(level, spheres, rows, bar) -> LevelRadiation:
    names = [q for q, _ in _FIELDS]
    halo = spheres.halo
    buffers = SlabBuffers(level, names, rows + halo, np.float64)
    masks = (SlabBuffers(level, ["valid_mask"], rows + halo, np.uint8)
             if level.has("valid_mask") else None)
    n0 = level.storage_shape[0]
    values = spheres.empty_node_values()
    where = f"{level.where}, time level {level.label!r}"
    try:
        for start, stop in slabs(n0, rows):
            end = min(stop + halo, n0)
            arrays = tuple(buffers.read(q, start, end) for q in names)
            valid = masks.read("valid_mask", start, end).astype(bool) if masks else None
            spheres.interpolate_slab(values, arrays, valid, level.slab_axis, start, stop)
            bar.update(1)
        return spheres.evaluate(values, units=level.units, label=level.label, time=level.time)
    except SnapshotError as error:
        raise SnapshotError(f"{where}: {error}") from None


def table_columns(levels, extrapolation_order=None) -> dict:
    """Column name -> list, one row per (time level, radius), for CSV output.

    Columns: level, time, radius, power, mode_power, net_flux, power_extrapolated (NaN where
    the level has too few radii for the order, or no order is given), then for each scalar,
    l and m the real and imaginary parts ``phi2_l1_m-1_re``, ``phi2_l1_m-1_im``, ...
    """
    table = {c: [] for c in ("level", "time", "radius", "power", "mode_power", "net_flux",
                             "power_extrapolated")}
    for level in levels:
        extrapolated = math.nan
        if extrapolation_order is not None and len(set(level.radii)) > extrapolation_order:
            extrapolated = level.extrapolated_power(extrapolation_order)
        for sphere in level.spheres:
            table["level"].append(level.label)
            table["time"].append(level.time)
            table["radius"].append(sphere.radius)
            table["power"].append(sphere.power)
            table["mode_power"].append(sphere.mode_power)
            table["net_flux"].append(sphere.net_flux)
            table["power_extrapolated"].append(extrapolated)
            for name in SCALARS:
                for (l, m), value in zip(sphere.mode_indices(name), sphere.modes[name]):
                    table.setdefault(f"{name}_l{l}_m{m}_re", []).append(float(value.real))
                    table.setdefault(f"{name}_l{l}_m{m}_im", []).append(float(value.imag))
    return table
