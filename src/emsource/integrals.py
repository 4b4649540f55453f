r"""Integrated electromagnetic quantities of snapshot files: energy, momentum, fluxes, luminosity.

Per time level, streamed in slabs like :mod:`emsource.snapshot.sources_pipeline` (bounded memory):

- total energy and momentum, with the trapezoidal rule on the vertex-centred grid
  (second order in the spacing),

  .. math:: \mathcal{E} = \int \rho\,\sqrt{\gamma}\,d^3x, \qquad
            P_i = \int S_i\,\sqrt{\gamma}\,d^3x ;

- the energy flux out through each face of the box, and the luminosity through a coordinate
  sphere of radius R centred on the origin,

  .. math:: F^i = \sqrt{\gamma}\,(\alpha\,S^i - \rho\,\beta^i), \qquad
            L(R) = \oint F^i\,\hat n_i\,R^2\,d\Omega, \quad \hat n_i = x^i / R,

  the coordinate flux density of the energy balance
  :math:`\partial_t(\sqrt{\gamma}\rho) + \partial_i F^i = \sqrt{\gamma}(\alpha K_{ij}S^{ij}
  - S^i \partial_i \alpha)` (E. Gourgoulhon, 3+1 Formalism in General Relativity (2012),
  sec. 6.3, energy conservation; the form is from memory). In flat space
  :math:`F^i` is the Poynting vector. Points outside ``valid_mask`` are neither checked nor
  used (the file may hold any fill value there, NaN included); a sphere whose interpolation
  stencil touches them is an error. At valid points a non-finite input, a metric that is not
  positive definite or a lapse that is not positive is an error naming the grid index.

Every level is the combination of per-slab partial results (:mod:`emsource.reductions`);
:func:`level_partial` computes one.

Luminosity quadrature: Gauss-Legendre in cos(theta) with ``theta_points`` nodes times the
uniform rule with ``2 theta_points`` points in phi, both spectrally accurate for smooth
integrands (the uniform rule is exact for trigonometric polynomials of degree < 2 theta_points;
Gauss-Legendre for polynomials of degree < 2 theta_points in cos(theta)). F^i is interpolated to the nodes by tensor-
product Lagrange interpolation through ``interpolation_points`` (even, default 4: cubic, error
O(h^4)) grid points per axis.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import _arguments as args
from ._deprecated_names import renamed_attribute, renamed_keywords
from .energy_flux import energy_fluxes
from .patches import global_partial, local_arrays, patch_of, require_patch
from .reductions import LevelPartial, Sum, combine
from .snapshot import CHUNK_CACHE_BYTES, SnapshotError, SnapshotFile, open_snapshot
from .snapshot.slabs import (CONVERSION_BUFFER_BYTES, DEFAULT_MEMORY_LIMIT, SlabBuffers,
                             neutralise_excised,
                             progress_bar, slab_rows, slabs)
from .sources import GridPointError

__all__ = ["LevelIntegrals", "integrate_snapshot", "integrate_open_snapshot",
           "integrate_level_arrays", "level_partial", "slab_partial", "level_spheres",
           "sphere_quadrature", "lagrange_weights", "CoordinateSphere", "FACES"]

FACES = ("x_lower", "x_upper", "y_lower", "y_upper", "z_lower", "z_upper")
#: Values per grid point the integration holds at once, an upper bound: 16 inputs + valid_mask,
#: the 7 densities and fluxes of one kernel pass, up to 16 copies where masked points are
#: replaced, and about 16 for the unit lapse and zero shift of a file without them, the cell
#: weights and the weighted terms.
INTEGRATION_VALUES_PER_POINT = 56


@dataclass
class LevelIntegrals:
    """Integrated quantities of one time level (code units, G = c = 1, the file's units).

    Attributes
    ----------
    label, time : str, float
    energy : float
        Total electromagnetic energy in the box.
    momentum : (3,) ndarray
        Total momentum P_i.
    face_flux : dict
        Outward energy flux through each face of the box (keys :data:`FACES`).
    luminosity : dict
        Radius -> energy flux out through the coordinate sphere of that radius.
    excised_points : int
        Excised grid points (``valid_mask`` = 0), left out of the volume integrals.
    max_electric_field, max_magnetic_field : float
        Largest sqrt(gamma_ij E^i E^j) and sqrt(gamma_ij B^i B^j) over the valid points.
    """

    label: str
    time: float
    energy: float = 0.0
    momentum: np.ndarray = field(default_factory=lambda: np.zeros(3))
    face_flux: dict = field(default_factory=lambda: {f: 0.0 for f in FACES})
    luminosity: dict = field(default_factory=dict)
    excised_points: int = 0
    max_electric_field: float = 0.0
    max_magnetic_field: float = 0.0

    excluded_points = renamed_attribute("excluded_points", "excised_points")

    @classmethod
    def from_partial(cls, partial: LevelPartial, label, time, radii) -> "LevelIntegrals":
        """Finalise the combined :class:`emsource.reductions.LevelPartial` of a whole level."""
        faces = partial.face_flux.finalise()
        luminosity = partial.luminosity.finalise()
        return cls(str(label), float(time), partial.energy.finalise(), partial.momentum.finalise(),
                   {f: float(v) for f, v in zip(FACES, faces)},
                   {float(r): float(v) for r, v in zip(radii, luminosity)},
                   partial.excised_points, partial.max_electric_field,
                   partial.max_magnetic_field)

    @property
    def net_flux(self) -> float:
        """Sum of the six face fluxes: the energy leaving the box per unit time."""
        return float(sum(self.face_flux.values()))


class _SphereRule:
    """Gauss-Legendre in mu = cos(theta) (``numpy.polynomial.legendre.leggauss``) with
    ``theta_points`` nodes times the uniform rule in phi with 2 theta_points points; nodes
    numbered theta-major, N = 2 theta_points^2. Holds O(theta_points) numbers only."""

    def __init__(self, radius: float, theta_points: int):
        if theta_points < 2:
            raise ValueError(f"theta_points must be at least 2, found {theta_points}")
        self.radius = radius
        self.mu, self.w_mu = np.polynomial.legendre.leggauss(int(theta_points))
        self.n_phi = 2 * int(theta_points)
        self.count = int(theta_points) * self.n_phi

    def nodes(self, first: int, last: int):
        """Points (3, n), unit normals (3, n) and weights (n,) of nodes first:last; the
        weights include the area factor R^2."""
        k = np.arange(first, last)
        it = k // self.n_phi
        phi = 2 * np.pi * (k - it * self.n_phi) / self.n_phi
        mu = self.mu[it]
        sin_theta = np.sqrt(1 - mu**2)
        normals = np.stack([sin_theta * np.cos(phi), sin_theta * np.sin(phi), mu])
        weights = self.w_mu[it] * (2 * np.pi / self.n_phi) * self.radius**2
        return self.radius * normals, normals, weights

    def angles(self):
        """Polar and azimuthal angles (theta, phi) of every node, in node order (radians)."""
        k = np.arange(self.count)
        it = k // self.n_phi
        return np.arccos(self.mu[it]), 2 * np.pi * (k - it * self.n_phi) / self.n_phi


@renamed_keywords(n_theta="theta_points")
def sphere_quadrature(radius: float, theta_points: int):
    """Nodes (3, N), unit normals (3, N) and weights (N,) with sum(w f) ~ the surface integral.

    Gauss-Legendre in mu = cos(theta) with ``theta_points`` nodes times the uniform rule in phi
    with 2 theta_points points, N = 2 theta_points^2; the weights include the area factor R^2.
    """
    rule = _SphereRule(radius, theta_points)
    return rule.nodes(0, rule.count)


def lagrange_weights(s: np.ndarray, npoints: int):
    """Stencil start indices and weights of Lagrange interpolation at fractional indices ``s``.

    For each s, the nodes are i0, ..., i0 + p - 1 with i0 = floor(s) - (p/2 - 1) (s in the middle
    interval), and the weights are l_k(t) = prod_{m != k} (t - m) / (k - m), t = s - i0
    (the Lagrange form of the interpolating polynomial).
    """
    if npoints < 2 or npoints % 2:
        raise ValueError(f"interpolation_points must be even and >= 2, found {npoints}")
    i0 = np.floor(s).astype(np.int64) - (npoints // 2 - 1)
    t = s - i0
    weights = np.ones(s.shape + (npoints,))
    for k in range(npoints):
        for m in range(npoints):
            if m != k:
                weights[..., k] *= (t - m) / (k - m)
    return i0, weights


#: Quadrature nodes whose place is computed at once when a sphere scans its nodes, and nodes
#: interpolated at once (each gathers 3 x p^3 flux values). They bound the spheres' memory
#: whatever ``theta_points`` is (N = 2 theta_points^2 nodes are never held at once).
SPHERE_SCAN_NODES = 16384
SPHERE_GATHER_NODES = 1024


def sphere_working_bytes(interpolation_points: int) -> int:
    """Bytes one sphere evaluation holds at most (:data:`SPHERE_SCAN_NODES` nodes with about
    10 float64 values each, :data:`SPHERE_GATHER_NODES` nodes with their 3 p^3 gathered values,
    the same again for the interpolation's temporaries, and 6 p weights): the integration
    takes it off the memory limit before sizing slabs."""
    p = int(interpolation_points)
    return 8 * (10 * SPHERE_SCAN_NODES + SPHERE_GATHER_NODES * (2 * 3 * p**3 + 6 * p + 16))


class CoordinateSphere:
    """A coordinate sphere's quadrature on the level's grid, node by node in bounded batches.

    Holds only the rule (:class:`_SphereRule`, O(theta_points) numbers): the nodes, their
    normals, weights and interpolation stencils are computed per batch when a slab is summed,
    so memory stays bounded for any ``theta_points``. Immutable after construction:
    :meth:`box_sum` returns a partial sum and changes nothing. Public for the other sphere
    diagnostics (:mod:`emsource.radiation`), which use its rule and interpolation.
    """

    def __init__(self, radius, grid, theta_points, npoints):
        self.radius = args.positive_number("sphere radius", radius)
        self.npoints = npoints
        self.grid = grid
        if npoints < 2 or npoints % 2:
            raise ValueError(f"interpolation_points must be even and >= 2, found {npoints}")
        # Coordinates between which an interpolation stencil stays on the grid, per axis.
        self.bounds = [(grid.origin[a] + (npoints // 2 - 1) * grid.spacing[a],
                        grid.origin[a] + (grid.shape[a] - npoints // 2) * grid.spacing[a])
                       for a in range(3)]
        for a, (lo, hi) in enumerate(self.bounds):
            # Checked before any node is placed, so that a huge radius is a clear error and
            # not an overflow: every node has |x_a| <= R, and the extreme ones nearly R.
            if not (lo < 0 < hi) or self.radius >= max(abs(lo), abs(hi)):
                self._does_not_fit(a, lo, hi)
        self.rule = _SphereRule(self.radius, theta_points)
        self.count = self.rule.count
        for first in range(0, self.count, SPHERE_SCAN_NODES):  # every stencil on the grid
            points, _, _ = self.rule.nodes(first, min(first + SPHERE_SCAN_NODES, self.count))
            for a in range(3):
                i0 = self._starts(points[a], a)
                if i0.min() < 0 or i0.max() + npoints - 1 > grid.shape[a] - 1:
                    self._does_not_fit(a, *self.bounds[a])

    def _does_not_fit(self, a, lo, hi):
        raise SnapshotError(
            f"sphere of radius {self.radius} does not fit in the grid along {'xyz'[a]}: its "
            f"{self.npoints}-point interpolation needs {'xyz'[a]} within [{lo:.6g}, {hi:.6g}] "
            "on both sides of the origin")

    def _starts(self, coordinate, a):
        s = (coordinate - self.grid.origin[a]) / self.grid.spacing[a]
        return np.floor(s).astype(np.int64) - (self.npoints // 2 - 1)

    def box_sum(self, flux, valid, lower, upper, array_start, *, by_position=False) -> Sum:
        """Partial luminosity of the nodes owned by the box ``lower:upper`` (global indices).

        ``flux`` and ``valid`` hold the points from global index ``array_start`` on, with the
        stencils' halo. A node at fractional index s is owned where, on every axis,
        lower <= key < upper, with key = floor(s) (``by_position``: a patch of a domain
        decomposition) or key = its stencil start floor(s) - (p/2 - 1) (a slab of a file,
        which holds the rows above it). Boxes that tile the grid own each node once.
        """
        shift = self.npoints // 2 - 1 if by_position else 0  # key - (stencil start)
        total = Sum.zero()
        for first in range(0, self.count, SPHERE_SCAN_NODES):
            points, normals, weights = self.rule.nodes(first, min(first + SPHERE_SCAN_NODES,
                                                                  self.count))
            owned = np.ones(points.shape[1], bool)
            for a in range(3):
                key = self._starts(points[a], a) + shift
                owned &= (key >= lower[a]) & (key < upper[a])
            chosen = np.nonzero(owned)[0]
            for g in range(0, chosen.size, SPHERE_GATHER_NODES):
                nodes = chosen[g:g + SPHERE_GATHER_NODES]
                total = total.combine(self._interpolated_flux(
                    flux, valid, array_start, points[:, nodes], normals[:, nodes],
                    weights[nodes]))
        return total

    def _interpolated_flux(self, flux, valid, array_start, points, normals, weights) -> Sum:
        """Sum of w F^i n_i over a few nodes, F^i Lagrange-interpolated from the arrays whose
        first point is global index ``array_start``."""
        interpolated = self.interpolate(flux, valid, array_start, points)
        return Sum.of(np.einsum("cn,cn->n", interpolated, normals) * weights)

    def interpolate(self, values, valid, array_start, points) -> np.ndarray:
        """``values`` (ncomp, ...) Lagrange-interpolated to ``points`` (3, n): (ncomp, n).

        ``values`` and ``valid`` hold the points from global index ``array_start`` (three
        integers) on: a slab with its halo, a rank's patch, or the whole grid (0, 0, 0); every
        node's stencil must lie in them. A stencil that reaches a point with ``valid`` False is
        an error (:class:`SnapshotError`).
        """
        p = self.npoints
        offsets = np.arange(p)
        index = []
        stencil = []
        for a in range(3):
            s = (points[a] - self.grid.origin[a]) / self.grid.spacing[a]
            i0, w = lagrange_weights(s, p)
            i = i0[:, None] + offsets - array_start[a]
            shape = [i.shape[0], 1, 1, 1]
            shape[1 + a] = p
            index.append(i.reshape(shape))
            stencil.append(w)
        if valid is not None and not valid[index[0], index[1], index[2]].all():
            raise SnapshotError(f"the interpolation stencil of the sphere of radius {self.radius} "
                                "reaches excised points (valid_mask = 0); choose a larger radius")
        gathered = values[:, index[0], index[1], index[2]]  # (ncomp, n, p, p, p)
        return np.einsum("cnijk,ni,nj,nk->cn", gathered, *stencil)

    def slab_nodes(self, axis, start, stop):
        """Node numbers (ascending) whose interpolation stencil starts in rows start:stop of
        ``axis``, and their points (3, n): the nodes one slab of a streamed level serves."""
        chosen, points = [], []
        for first in range(0, self.count, SPHERE_SCAN_NODES):
            last = min(first + SPHERE_SCAN_NODES, self.count)
            p, _, _ = self.rule.nodes(first, last)
            i0 = self._starts(p[axis], axis)
            here = np.nonzero((i0 >= start) & (i0 < stop))[0]
            chosen.append(here + first)
            points.append(p[:, here])
        return np.concatenate(chosen), np.concatenate(points, axis=1)


def _trapezoid(n, h):
    w = np.full(n, float(h))
    if n > 1:
        w[0] = w[-1] = 0.5 * h
    return w


def _flux_densities(alpha, beta, gamma, E, B, *, units):
    """(sqrt(gamma) rho, sqrt(gamma) S_i, F^i) at every point of a slab (inputs checked here).

    The one place the integrals evaluate the densities, F^i = sqrt(gamma) (alpha S^i - rho
    beta^i), through :func:`emsource.energy_flux.energy_fluxes` (one kernel pass). Raises
    :class:`emsource.GridPointError` for non-finite input, a metric that is not positive
    definite or a lapse that is not positive.
    """
    fluxes = energy_fluxes(alpha, beta, gamma, E, B, units=units)
    return fluxes.energy, fluxes.momentum, fluxes.flux


@renamed_keywords(mask="valid_mask")
def level_partial(grid, gamma, E, B, *, units="gaussian", lapse=None, shift=None, valid_mask=None,
                  spheres=(), axis=0, start=0, stop=None, in_place=False) -> LevelPartial:
    """Partial integrals of the rows ``start:stop`` along ``axis`` of a level on ``grid``.

    The arrays ((x, y, z) order, float64) cover rows ``start`` to ``stop`` plus the halo the
    spheres' interpolation stencils need (``interpolation_points - 1`` rows, where the grid
    has them). Energy, momentum, face fluxes and extreme fields are summed over the rows
    start:stop; each sphere node is counted by the piece that holds its stencil start. The
    partials of pieces that tile the grid combine (:func:`emsource.reductions.combine`) into
    the partial of the level, which :meth:`LevelIntegrals.from_partial` finalises.

    Points where ``valid_mask`` is 0 are neither checked nor used: they are replaced by a flat
    metric, zero field, unit lapse and zero shift before the evaluation (in the arrays
    themselves with ``in_place``, otherwise in copies) and left out of the sums. At valid
    points gamma, E, B, the lapse and the shift must be finite, the metric positive definite
    and the lapse positive (:class:`emsource.GridPointError`, with the index in the whole grid).
    """
    stop = grid.shape[axis] if stop is None else stop
    lower, upper, array_start = [0, 0, 0], list(grid.shape), [0, 0, 0]
    lower[axis], upper[axis], array_start[axis] = start, stop, start
    return _box_partial(grid, gamma, E, B, units=units, lapse=lapse, shift=shift,
                        valid_mask=valid_mask, spheres=spheres, lower=lower, upper=upper,
                        array_start=array_start, in_place=in_place, by_position=False)


def _box_partial(grid, gamma, E, B, *, units, lapse, shift, valid_mask, spheres, lower, upper,
                 array_start, in_place, by_position) -> LevelPartial:
    """Partial integrals of the box of global indices ``lower:upper`` of ``grid``.

    The arrays hold the points from global index ``array_start`` on (the box and the halo of
    the spheres' stencils). A slab of a file (:func:`level_partial`) is a box spanning two axes;
    a patch of a domain decomposition (``by_position`` node ownership) is any box.
    """
    valid = None if valid_mask is None else np.asarray(valid_mask).astype(bool, copy=False)
    shape = gamma.shape[1:]
    try:
        named = {"lapse": lapse, "shift": shift}
        if any(v is not None for v in named.values()):
            args.check_points("integrate", shape, named, valid=valid,
                              lapse="lapse" if lapse is not None else None)
        arrays = neutralise_excised({"spatial_metric": gamma, "electric_field": E, "magnetic_field": B,
                            "lapse": lapse, "shift": shift}, valid, in_place)
        gamma, E, B = (arrays[q] for q in ("spatial_metric", "electric_field", "magnetic_field"))
        alpha = arrays["lapse"] if lapse is not None else np.ones(shape)
        beta = arrays["shift"] if shift is not None else np.zeros((3,) + shape)
        energy, momentum, flux = _flux_densities(alpha, beta, gamma, E, B, units=units)
    except GridPointError as error:
        for a in range(3):
            error = error.relocated(a, array_start[a])
        raise error from None
    own = tuple(slice(lo - s, hi - s) for lo, hi, s in zip(lower, upper, array_start))
    w = [_trapezoid(grid.shape[a], grid.spacing[a])[lower[a]:upper[a]] for a in range(3)]
    cell = (w[0][:, None, None] * w[1][None, :, None]) * w[2][None, None, :]
    density = energy[own]
    momentum = momentum[(slice(None),) + own]
    excised = 0
    valid_own = None
    if valid is not None:
        valid_own = valid[own]
        density = np.where(valid_own, density, 0.0)
        momentum = np.where(valid_own, momentum, 0.0)
        excised = int(valid_own.size - np.count_nonzero(valid_own))
    extremes = []
    for vector in (E, B):
        v = vector[(slice(None),) + own]
        g = gamma[(slice(None),) + own]
        square = (g[0] * v[0] ** 2 + g[3] * v[1] ** 2 + g[5] * v[2] ** 2
                  + 2 * (g[1] * v[0] * v[1] + g[2] * v[0] * v[2] + g[4] * v[1] * v[2]))
        if valid_own is not None:
            square = np.where(valid_own, square, 0.0)
        extremes.append(float(np.sqrt(square.max())) if square.size else 0.0)
    faces = []
    for a in range(3):
        others = [b for b in range(3) if b != a]
        for side in (0, 1):
            row = 0 if side == 0 else grid.shape[a] - 1
            if not lower[a] <= row < upper[a]:
                faces.append(Sum.zero())  # this face lies in another piece
                continue
            index = list(own)
            index[a] = row - array_start[a]
            sheet = flux[a][tuple(index)]
            area = w[others[0]][:, None] * w[others[1]][None, :]
            faces.append(Sum.of((sheet * area) if side == 1 else -(sheet * area)))
    face_flux = Sum(np.array([f.value for f in faces]), np.array([f.magnitude for f in faces]))
    spheres_sum = [sphere.box_sum(flux, valid, lower, upper, array_start,
                                  by_position=by_position) for sphere in spheres]
    luminosity = Sum(np.array([x.value for x in spheres_sum]),
                     np.array([x.magnitude for x in spheres_sum]))
    return LevelPartial(Sum.of(density * cell), Sum.of(momentum * cell, axis=(1, 2, 3)),
                        face_flux, luminosity, density.size - excised, excised, *extremes)


@renamed_keywords(mask="valid_mask", n_theta="theta_points")
def integrate_level_arrays(grid, gamma, E, B, *, units="gaussian", lapse=None, shift=None,
                           valid_mask=None, radii=(), theta_points=32, interpolation_points=4,
                           label="0", time=0.0, comm=None, valid_ghosts=None) -> LevelIntegrals:
    """Integrated quantities of in-memory (x, y, z)-order arrays (one slab: the whole grid).

    ``valid_mask`` (nonzero = valid) leaves points out of the sums and out of the checks; the
    inputs are never modified.

    Under MPI, ``grid`` is the rank's :class:`emsource.patches.PatchGrid`, the arrays cover
    its local array (ghosts included) and ``comm`` is the communicator: every rank gets the
    integrals of the whole grid. A sphere's node is interpolated by the rank that owns it
    (:mod:`emsource.patches`), whose ``interpolation_points / 2`` ghost layers must hold valid
    data; ``valid_ghosts`` says how many do (default all). Errors on any rank are raised on
    every rank (:class:`emsource.patches.PatchError`).
    """
    function = "integrate_level_arrays"
    patch = patch_of(function, grid, comm)
    if patch is None:
        spheres = [CoordinateSphere(r, grid, theta_points, interpolation_points) for r in radii]
        partial = level_partial(grid, gamma, E, B, units=units, lapse=lapse, shift=shift,
                                valid_mask=valid_mask, spheres=spheres)
        return LevelIntegrals.from_partial(partial, label, time, [s.radius for s in spheres])

    def compute():
        patch = require_patch(function, grid)
        whole = patch.global_grid
        spheres = [CoordinateSphere(r, whole, theta_points, interpolation_points) for r in radii]
        needed = interpolation_points // 2 if spheres else 0
        v = patch.require_ghosts(function, valid_ghosts, needed,
                                 f"the {interpolation_points}-point interpolation of the spheres")
        extent = patch.valid_extent(v)
        # Only the valid layers: ghosts beyond them may hold anything (NaN included).
        local = local_arrays(function, patch, extent,
                             {"gamma": gamma, "E": E, "B": B, "lapse": lapse, "shift": shift,
                              "valid_mask": valid_mask})
        start = [o + e.start for o, e in zip(patch.offset, extent)]
        return _box_partial(whole, local["gamma"], local["E"], local["B"], units=units,
                            lapse=local["lapse"], shift=local["shift"],
                            valid_mask=local["valid_mask"], spheres=spheres,
                            lower=patch.owned_start, upper=patch.owned_stop, array_start=start,
                            in_place=False, by_position=True)

    partial = global_partial(function, comm, grid, compute)
    return LevelIntegrals.from_partial(partial, label, time, [args.positive_number("sphere radius", r) for r in radii])


@renamed_keywords(n_theta="theta_points")
def integrate_snapshot(input_file, *, mapping=None, radii=(), theta_points=32,
                       interpolation_points=4, memory_limit=DEFAULT_MEMORY_LIMIT, rows=None,
                       levels=None, progress=False) -> list:
    """Integrated quantities of every time level of a snapshot file, streamed in slabs.

    Opens the file (read-only) and calls :func:`integrate_open_snapshot`; a caller that has the
    snapshot open already passes it to that function instead, and the file is opened once.

    Parameters
    ----------
    input_file, mapping
        The snapshot and its layout mapping, as for :func:`emsource.snapshot.open_snapshot`.
    radii, theta_points, interpolation_points, memory_limit, rows, levels, progress
        As for :func:`integrate_open_snapshot`.

    Returns
    -------
    list of LevelIntegrals
    """
    with open_snapshot(input_file, mapping) as snap:
        return integrate_open_snapshot(snap, radii=radii, theta_points=theta_points,
                                       interpolation_points=interpolation_points,
                                       memory_limit=memory_limit, rows=rows, levels=levels,
                                       progress=progress)


def integrate_open_snapshot(snap: SnapshotFile, *, radii=(), theta_points=32,
                            interpolation_points=4, memory_limit=DEFAULT_MEMORY_LIMIT, rows=None,
                            levels=None, progress=False) -> list:
    """Integrated quantities of the time levels of an open snapshot, streamed in slabs.

    Parameters
    ----------
    snap : emsource.snapshot.SnapshotFile
        From :func:`emsource.snapshot.open_snapshot`; it stays open (the caller closes it).
    memory_limit, rows, levels, progress
        As for :func:`emsource.snapshot.sources_pipeline.compute_sources`.
    radii : sequence of float
        Radii of the coordinate spheres (centred on the origin) for the luminosity.
    theta_points : int
        Gauss-Legendre nodes in theta (2 theta_points points in phi).
    interpolation_points : int
        Lagrange points per axis (even).

    Returns
    -------
    list of LevelIntegrals
        Computed in float64 whatever the stored dtype. Needs spatial_metric, electric_field and
        magnetic_field; lapse and shift are used where present (else alpha = 1, beta = 0), and
        valid_mask where present.
    """
    if not isinstance(snap, SnapshotFile):
        raise TypeError("integrate_open_snapshot: snap must be an emsource.snapshot.SnapshotFile "
                        f"(from open_snapshot), found {type(snap).__name__}; pass a path to "
                        "integrate_snapshot")
    halo = interpolation_points - 1 if radii else 0
    results = []
    chosen = snap.select(levels)
    plans = []
    for level in chosen:
        for q in ("spatial_metric", "electric_field", "magnetic_field"):
            level.dtype(q)
        # Sums over millions of points: always accumulate in float64.
        dtype = np.dtype(np.float64)
        fixed = (CHUNK_CACHE_BYTES * 17 + CONVERSION_BUFFER_BYTES
                 + (sphere_working_bytes(interpolation_points) if radii else 0))
        n = rows or slab_rows(level, INTEGRATION_VALUES_PER_POINT, dtype.itemsize,
                              memory_limit, fixed=fixed, halo=halo)
        spheres = level_spheres(level, radii, theta_points, interpolation_points)
        plans.append((level, dtype, int(min(n, level.storage_shape[0])), spheres))
    bar = progress_bar(sum(len(slabs(lv.storage_shape[0], n)) for lv, _, n, _ in plans),
                       "integrate", progress)
    try:
        for level, dtype, n, spheres in plans:
            results.append(_integrate_level(level, dtype, n, halo, spheres, bar))
    finally:
        bar.close()
    return results


def slab_partial(level, arrays, valid_mask, spheres, start, stop, in_place=False) -> LevelPartial:
    """:func:`level_partial` of the storage rows ``start:stop`` of a snapshot time level.

    ``arrays`` maps quantity names to (x, y, z)-order float64 arrays over rows ``start`` to
    ``stop`` plus the spheres' halo (lapse and shift optional); ``level`` is a
    :class:`emsource.snapshot.TimeLevel` or anything with its ``grid``, ``units``,
    ``slab_axis``, ``where`` and ``label``. Errors name the file, the level and the rows.
    """
    try:
        return level_partial(level.grid, arrays["spatial_metric"], arrays["electric_field"],
                             arrays["magnetic_field"], units=level.units,
                             lapse=arrays.get("lapse"), shift=arrays.get("shift"),
                             valid_mask=valid_mask, spheres=spheres, axis=level.slab_axis,
                             start=start, stop=stop, in_place=in_place)
    except GridPointError as error:  # its index is already in the whole grid
        raise error.relocated(where=f"{level.where}, time level {level.label!r} "
                                    f"({'xyz'[level.slab_axis]} rows {start}:{stop})") from None
    except SnapshotError as error:  # a sphere's stencil reaches excised points
        raise SnapshotError(f"{level.where}, time level {level.label!r}: {error}") from None


def level_spheres(level, radii, theta_points, interpolation_points) -> list:
    """The luminosity spheres of ``radii`` on the level's grid (a message naming the level if
    one does not fit)."""
    try:
        return [CoordinateSphere(r, level.grid, theta_points, interpolation_points) for r in radii]
    except SnapshotError as error:
        raise SnapshotError(f"{level.where}, time level {level.label!r}: {error}") from None


def _integrate_level(level, dtype, rows, halo, spheres, bar):
    wanted = ["spatial_metric", "electric_field", "magnetic_field"]
    optional = [q for q in ("lapse", "shift", "valid_mask") if level.has(q)]
    buffers = SlabBuffers(level, wanted + [q for q in optional if q != "valid_mask"],
                          rows + halo, dtype)
    masks = SlabBuffers(level, ["valid_mask"], rows + halo, np.uint8) if "valid_mask" in optional else None
    n0 = level.storage_shape[0]
    partial = LevelPartial.zero(len(spheres))
    for start, stop in slabs(n0, rows):
        end = min(stop + halo, n0)
        arrays = {q: buffers.read(q, start, end) for q in wanted + optional if q != "valid_mask"}
        valid_mask = masks.read("valid_mask", start, end) if masks else None
        partial = combine(partial, slab_partial(level, arrays, valid_mask, spheres, start, stop,
                                                in_place=True))
        bar.update(1)
    return LevelIntegrals.from_partial(partial, level.label, level.time,
                                       [s.radius for s in spheres])
