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
  :math:`F^i` is the Poynting vector. Points outside ``valid_mask`` are left out of the
  volume integrals; a sphere whose interpolation stencil touches them is an error.

Luminosity quadrature: Gauss-Legendre in cos(theta) with ``n_theta`` nodes times the uniform
rule with ``2 n_theta`` points in phi, both spectrally accurate for smooth integrands (the
uniform rule is exact for trigonometric polynomials of degree < 2 n_theta; Gauss-Legendre for
polynomials of degree < 2 n_theta in cos(theta)). F^i is interpolated to the nodes by tensor-
product Lagrange interpolation through ``interpolation_points`` (even, default 4: cubic, error
O(h^4)) grid points per axis.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from . import adm_sources
from .snapshot import CHUNK_CACHE_BYTES, SnapshotError, open_snapshot
from .snapshot.slabs import (CONVERSION_BUFFER_BYTES, DEFAULT_MEMORY_LIMIT, SlabBuffers,
                             choose_levels, progress_bar, slab_error, slab_rows, slabs)
from .sources import GridPointError

__all__ = ["LevelIntegrals", "integrate_snapshot", "integrate_level_arrays",
           "sphere_quadrature", "lagrange_weights", "FACES"]

FACES = ("x_lower", "x_upper", "y_lower", "y_upper", "z_lower", "z_upper")
#: Values per grid point the integration holds at once: 16 inputs + mask, 11 sources, and about
#: 20 NumPy temporaries for sqrt(gamma), the inverse metric and F^i.
INTEGRATION_VALUES_PER_POINT = 48


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
    excluded_points : int
        Grid points left out of the volume integrals by ``valid_mask``.
    max_electric_field, max_magnetic_field : float
        Largest sqrt(gamma_ij E^i E^j) and sqrt(gamma_ij B^i B^j) over the valid points.
    """

    label: str
    time: float
    energy: float = 0.0
    momentum: np.ndarray = field(default_factory=lambda: np.zeros(3))
    face_flux: dict = field(default_factory=lambda: {f: 0.0 for f in FACES})
    luminosity: dict = field(default_factory=dict)
    excluded_points: int = 0
    max_electric_field: float = 0.0
    max_magnetic_field: float = 0.0

    @property
    def net_flux(self) -> float:
        """Sum of the six face fluxes: the energy leaving the box per unit time."""
        return float(sum(self.face_flux.values()))


def sphere_quadrature(radius: float, n_theta: int):
    """Nodes (3, N), unit normals (3, N) and weights (N,) with sum(w f) ~ the surface integral.

    Gauss-Legendre in mu = cos(theta) (``numpy.polynomial.legendre.leggauss``) times the uniform
    rule in phi with 2 n_theta points; the weights include the area factor R^2.
    """
    if n_theta < 2:
        raise ValueError(f"n_theta must be at least 2, found {n_theta}")
    mu, w_mu = np.polynomial.legendre.leggauss(int(n_theta))
    n_phi = 2 * int(n_theta)
    phi = 2 * np.pi * np.arange(n_phi) / n_phi
    sin_theta = np.sqrt(1 - mu**2)
    normals = np.stack([
        np.outer(sin_theta, np.cos(phi)).ravel(),
        np.outer(sin_theta, np.sin(phi)).ravel(),
        np.repeat(mu, n_phi),
    ])
    weights = np.repeat(w_mu, n_phi) * (2 * np.pi / n_phi) * radius**2
    return radius * normals, normals, weights


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


class _Sphere:
    """Quadrature nodes of one sphere with their interpolation stencils on the level's grid."""

    def __init__(self, radius, grid, n_theta, npoints):
        self.radius = float(radius)
        points, self.normals, self.weights = sphere_quadrature(radius, n_theta)
        self.starts = []
        self.stencil = []
        for a in range(3):
            s = (points[a] - grid.origin[a]) / grid.spacing[a]
            i0, w = lagrange_weights(s, npoints)
            if i0.min() < 0 or i0.max() + npoints - 1 > grid.shape[a] - 1:
                lo = grid.origin[a] + (npoints // 2 - 1) * grid.spacing[a]
                hi = grid.origin[a] + (grid.shape[a] - npoints // 2) * grid.spacing[a]
                raise SnapshotError(
                    f"sphere of radius {radius} does not fit in the grid along {'xyz'[a]}: its "
                    f"{npoints}-point interpolation needs |{'xyz'[a]}| within [{lo:.6g}, {hi:.6g}]")
            self.starts.append(i0)
            self.stencil.append(w)
        self.npoints = npoints
        self.value = 0.0

    def add_slab(self, flux, mask, axis, start, stop):
        """Add the nodes whose stencil starts in rows start:stop of ``axis``."""
        chosen = np.nonzero((self.starts[axis] >= start) & (self.starts[axis] < stop))[0]
        if chosen.size == 0:
            return
        p = self.npoints
        offsets = np.arange(p)
        index = []
        for a in range(3):
            i = self.starts[a][chosen, None] + offsets - (start if a == axis else 0)
            shape = [chosen.size, 1, 1, 1]
            shape[1 + a] = p
            index.append(i.reshape(shape))
        if mask is not None and not mask[index[0], index[1], index[2]].all():
            raise SnapshotError(f"the interpolation stencil of the sphere of radius {self.radius} "
                                "reaches excised points (valid_mask = 0); choose a larger radius")
        values = flux[:, index[0], index[1], index[2]]  # (3, n, p, p, p)
        wx, wy, wz = (w[chosen] for w in self.stencil)
        interpolated = np.einsum("cnijk,ni,nj,nk->cn", values, wx, wy, wz)
        normal_flux = np.einsum("cn,cn->n", interpolated, self.normals[:, chosen])
        self.value += float(normal_flux @ self.weights[chosen])


def _trapezoid(n, h):
    w = np.full(n, float(h))
    if n > 1:
        w[0] = w[-1] = 0.5 * h
    return w


def _geometry(gamma, lapse, shift, rho, S_i):
    """sqrt(gamma) and F^i = sqrt(gamma) (alpha gamma^ij S_j - rho beta^i)."""
    gxx, gxy, gxz, gyy, gyz, gzz = gamma
    cxx = gyy * gzz - gyz * gyz
    cxy = gxz * gyz - gxy * gzz
    cxz = gxy * gyz - gxz * gyy
    det = gxx * cxx + gxy * cxy + gxz * cxz
    cyy = gxx * gzz - gxz * gxz
    cyz = gxy * gxz - gxx * gyz
    czz = gxx * gyy - gxy * gxy
    sqrtg = np.sqrt(det)
    # gamma^ij S_j = cofactor S / det
    up = np.stack([cxx * S_i[0] + cxy * S_i[1] + cxz * S_i[2],
                   cxy * S_i[0] + cyy * S_i[1] + cyz * S_i[2],
                   cxz * S_i[0] + cyz * S_i[1] + czz * S_i[2]]) / det
    if lapse is not None:
        up *= lapse
    if shift is not None:
        up -= rho * shift
    up *= sqrtg
    return sqrtg, up


def integrate_level_arrays(grid, gamma, E, B, *, units="gaussian", lapse=None, shift=None,
                           mask=None, radii=(), n_theta=32, interpolation_points=4,
                           label="0", time=0.0) -> LevelIntegrals:
    """Integrated quantities of in-memory (x, y, z)-order arrays (one slab: the whole grid)."""
    result = LevelIntegrals(label, float(time))
    spheres = [_Sphere(r, grid, n_theta, interpolation_points) for r in radii]
    _accumulate(result, spheres, grid, 0, grid.shape[0], grid.shape[0], gamma, E, B, lapse,
                shift, mask, units)
    result.luminosity = {s.radius: s.value for s in spheres}
    return result


def _accumulate(result, spheres, grid, start, stop, n_axis, gamma, E, B, lapse, shift, mask,
                units, axis=0, halo_stop=None):
    """Add the contribution of rows start:stop along ``axis`` (arrays cover start:halo_stop)."""
    src = adm_sources(gamma, E, B, units=units)
    sqrtg, flux = _geometry(gamma, lapse, shift, src.rho, src.S_i)
    own = [slice(None)] * 3
    own[axis] = slice(0, stop - start)
    own = tuple(own)
    w = [_trapezoid(grid.shape[a], grid.spacing[a]) for a in range(3)]
    w[axis] = w[axis][start:stop]
    density = src.rho[own] * sqrtg[own]
    momentum = src.S_i[(slice(None),) + own] * sqrtg[own]
    if mask is not None:
        valid = mask[own].astype(bool)
        density = np.where(valid, density, 0.0)
        momentum = np.where(valid, momentum, 0.0)
        result.excluded_points += int(valid.size - np.count_nonzero(valid))
    for name, vector in (("max_electric_field", E), ("max_magnetic_field", B)):
        v = vector[(slice(None),) + own]
        g = gamma[(slice(None),) + own]
        square = (g[0] * v[0] ** 2 + g[3] * v[1] ** 2 + g[5] * v[2] ** 2
                  + 2 * (g[1] * v[0] * v[1] + g[2] * v[0] * v[2] + g[4] * v[1] * v[2]))
        if mask is not None:
            square = np.where(valid, square, 0.0)
        setattr(result, name, max(getattr(result, name), float(np.sqrt(square.max()))))
    result.energy += float(np.einsum("ijk,i,j,k->", density, *w))
    result.momentum = result.momentum + np.einsum("cijk,i,j,k->c", momentum, *w)
    for a in range(3):
        others = [b for b in range(3) if b != a]
        for side, face in ((0, f"{'xyz'[a]}_lower"), (1, f"{'xyz'[a]}_upper")):
            if a == axis:
                row = 0 if side == 0 else stop - start - 1
                global_row = start + row
                if global_row != (0 if side == 0 else n_axis - 1):
                    continue
            else:
                row = 0 if side == 0 else grid.shape[a] - 1
            index = [slice(None)] * 3
            index[axis] = slice(0, stop - start)
            index[a] = row
            sheet = flux[a][tuple(index)]
            value = float(np.einsum("ij,i,j->", sheet, w[others[0]], w[others[1]]))
            result.face_flux[face] += value if side == 1 else -value
    for sphere in spheres:
        sphere.add_slab(flux, mask, axis, start, stop)


def integrate_snapshot(input_file, *, mapping=None, radii=(), n_theta=32, interpolation_points=4,
                       memory_limit=DEFAULT_MEMORY_LIMIT, rows=None, levels=None,
                       progress=False) -> list:
    """Integrated quantities of every time level of a snapshot file, streamed in slabs.

    Parameters
    ----------
    input_file, mapping, memory_limit, rows, levels, progress
        As for :func:`emsource.snapshot.sources_pipeline.compute_sources`.
    radii : sequence of float
        Radii of the coordinate spheres (centred on the origin) for the luminosity.
    n_theta : int
        Gauss-Legendre nodes in theta (2 n_theta points in phi).
    interpolation_points : int
        Lagrange points per axis (even).

    Returns
    -------
    list of LevelIntegrals
        Computed in float64 whatever the stored dtype. Needs spatial_metric, electric_field and magnetic_field; lapse and shift are used where
        present (else alpha = 1, beta = 0), and valid_mask where present.
    """
    halo = interpolation_points - 1 if radii else 0
    results = []
    with open_snapshot(input_file, mapping) as snap:
        chosen = choose_levels(snap.levels, levels)
        plans = []
        for level in chosen:
            for q in ("spatial_metric", "electric_field", "magnetic_field"):
                level.dtype(q)
            # Sums over millions of points: always accumulate in float64.
            dtype = np.dtype(np.float64)
            fixed = CHUNK_CACHE_BYTES * 17 + CONVERSION_BUFFER_BYTES
            n = rows or slab_rows(level, INTEGRATION_VALUES_PER_POINT, dtype.itemsize,
                                  memory_limit, fixed=fixed, halo=halo)
            spheres = [_Sphere(r, level.grid, n_theta, interpolation_points) for r in radii]
            plans.append((level, dtype, int(min(n, level.storage_shape[0])), spheres))
        bar = progress_bar(sum(len(slabs(lv.storage_shape[0], n)) for lv, _, n, _ in plans),
                           "integrate", progress)
        try:
            for level, dtype, n, spheres in plans:
                results.append(_integrate_level(level, dtype, n, halo, spheres, bar))
        finally:
            bar.close()
    return results


def _integrate_level(level, dtype, rows, halo, spheres, bar):
    result = LevelIntegrals(level.label, level.time)
    wanted = ["spatial_metric", "electric_field", "magnetic_field"]
    optional = [q for q in ("lapse", "shift", "valid_mask") if level.has(q)]
    buffers = SlabBuffers(level, wanted + [q for q in optional if q != "valid_mask"],
                          rows + halo, dtype)
    masks = SlabBuffers(level, ["valid_mask"], rows + halo, np.uint8) if "valid_mask" in optional else None
    n0 = level.storage_shape[0]
    for start, stop in slabs(n0, rows):
        end = min(stop + halo, n0)
        arrays = {q: buffers.read(q, start, end) for q in wanted + optional if q != "valid_mask"}
        mask = masks.read("valid_mask", start, end) if masks else None
        try:
            _accumulate(result, spheres, level.grid, start, stop, n0, arrays["spatial_metric"],
                        arrays["electric_field"], arrays["magnetic_field"], arrays.get("lapse"),
                        arrays.get("shift"), mask, level.units, axis=level.slab_axis)
        except GridPointError as error:
            raise slab_error(error, level, start, end) from None
        bar.update(1)
    result.luminosity = {s.radius: s.value for s in spheres}
    return result
