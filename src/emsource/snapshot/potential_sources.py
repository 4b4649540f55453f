"""B^i derived from a stored vector potential A_i, slab by slab (the mapping key ``vector_potential``).

A mapping that names ``[quantities.vector_potential]`` (and no magnetic_field) gets two derived
sources per time level (see ``levels.DataSource``):

- ``magnetic_field``: B^i = [ijk] d_j A_k / sqrt(gamma) by :func:`emsource.potential.magnetic_field_from_potential`
  (centred differences of ``curl_order``, the metric of the level). A slab read covers the rows
  the stencils need beyond it (order / 2 on each side, the halo), so the result does not depend
  on the slab size.
- ``valid_mask``: the points where B has a value, :func:`emsource.potential.curl_interior`: the
  interior of the grid (the boundary layer of order / 2 points next to each face has no centred
  stencil and is marked 0, as excised points are), and, where the file stores a valid_mask,
  only points whose whole stencil is valid. Every command then leaves the boundary layer out
  (``sources`` writes NaN there, ``integrate`` leaves it out of the integrals).

Excised points (stored valid_mask = 0) may hold anything: A is read as 0 and the metric as flat
there before differencing, and every point whose stencil touches them is marked invalid.
"""

from __future__ import annotations

import numpy as np

from ..potential import curl_interior, magnetic_field_from_potential, potential_radii
from .errors import MappingError

__all__ = ["add_curl_sources"]

_FLAT = (1.0, 0.0, 0.0, 1.0, 0.0, 1.0)


def _halo_rows(start, stop, rows, radius):
    """Rows [lo, hi) to read for slab rows [start, stop): ``radius`` more on each side, and at
    least 2 radius + 1 in all where the axis has them (a centred stencil must fit)."""
    lo, hi = max(0, start - radius), min(rows, stop + radius)
    need = min(rows, 2 * radius + 1)
    while hi - lo < need:
        if hi < rows:
            hi += 1
        else:
            lo -= 1
    return lo, hi


class _Halo:
    """What both derived sources share: the storage geometry and the stored valid_mask."""

    def __init__(self, storage_shape, axis_order, order, mask_source, where):
        self.storage_shape = tuple(storage_shape)
        self.axis_order = axis_order
        self.order = order
        self.mask_source = mask_source
        xyz = self.storage_shape if axis_order == "xyz" else self.storage_shape[::-1]
        # also checks that every axis fits a stencil (an error naming the axis otherwise)
        try:
            radii = potential_radii("vector_potential", order, xyz)
        except ValueError as error:
            raise MappingError(f"{where}: [quantities.vector_potential] curl_order = {order} "
                               f"on the grid {xyz}: {error}") from None
        self.radius = radii[0] if axis_order == "xyz" else radii[2]

    def to_xyz(self, stored):
        if self.axis_order == "xyz":
            return stored
        lead = stored.ndim - 3
        return stored.transpose(tuple(range(lead)) + (lead + 2, lead + 1, lead))

    def rows(self, start, stop):
        return _halo_rows(start, stop, self.storage_shape[0], self.radius)

    def valid(self, lo, hi):
        """Stored valid points of rows [lo, hi) (storage order), or None where all are."""
        if self.mask_source is None:
            return None
        stored = np.empty((hi - lo,) + self.storage_shape[1:], self.mask_source.dtype)
        self.mask_source.read_into(stored, lo, hi)
        return stored != 0


class CurlMagneticField:
    """Derived ``magnetic_field`` source: the curl of the stored ``vector_potential``."""

    def __init__(self, potential_source, metric_source, halo, spacing_xyz):
        self.potential = potential_source
        self.metric = metric_source
        self.halo = halo
        self.spacing = tuple(spacing_xyz)
        self.dtype = np.dtype(potential_source.dtype)
        self.shape = (3,) + halo.storage_shape
        self.paths = tuple(potential_source.paths) + tuple(metric_source.paths)
        self.chunk_rows = min(potential_source.chunk_rows, metric_source.chunk_rows)
        self.chunk_bytes = max(potential_source.chunk_bytes, metric_source.chunk_bytes)
        # per row read: A (3), gamma (6) and the curl (3) over the slab and its halo, plus the
        # sources' own scratch (the halo's fixed 2 radius rows are within a slab's slack)
        plane = int(np.prod(halo.storage_shape[1:]))
        self.scratch_bytes_per_row = (12 * plane * self.dtype.itemsize
                                      + potential_source.scratch_bytes_per_row
                                      + metric_source.scratch_bytes_per_row)

    def read_into(self, out, start, stop):
        lo, hi = self.halo.rows(start, stop)
        dtype = out.dtype
        block = (hi - lo,) + self.halo.storage_shape[1:]
        A = np.empty((3,) + block, dtype)
        gamma = np.empty((6,) + block, dtype)
        self.potential.read_into(A, lo, hi)
        self.metric.read_into(gamma, lo, hi)
        valid = self.halo.valid(lo, hi)
        if valid is not None:
            for c in range(3):
                A[c][~valid] = 0
            for c in range(6):
                gamma[c][~valid] = _FLAT[c]
        B = magnetic_field_from_potential(self.halo.to_xyz(gamma), self.halo.to_xyz(A),
                                          self.spacing, order=self.halo.order)
        # B is (x, y, z) ordered; its storage-order view holds rows lo..hi of the slab axis
        stored = self.halo.to_xyz(B)
        out[...] = stored[:, start - lo:stop - lo]


class CurlValidMask:
    """Derived ``valid_mask``: 1 where the curl of the potential has a value (module docstring)."""

    def __init__(self, halo, mask_source):
        self.halo = halo
        self.dtype = np.dtype(np.uint8)
        self.shape = halo.storage_shape
        self.paths = tuple(mask_source.paths) if mask_source is not None else ()
        self.chunk_rows = mask_source.chunk_rows if mask_source is not None else halo.storage_shape[0]
        self.chunk_bytes = mask_source.chunk_bytes if mask_source is not None else 0
        self.scratch_bytes_per_row = 2 * int(np.prod(halo.storage_shape[1:]))

    def read_into(self, out, start, stop):
        lo, hi = self.halo.rows(start, stop)
        valid = self.halo.valid(lo, hi)
        block = (hi - lo,) + self.halo.storage_shape[1:]
        # the block's first and last rows are the grid's faces only where lo = 0 or hi = n0;
        # elsewhere they are halo rows that the slab does not return
        interior = curl_interior(block, self.halo.order, valid)
        out[...] = interior[start - lo:stop - lo]


def add_curl_sources(stored, derived, *, order, spacing_xyz, axis_order, identity_metric,
                     where=""):
    """Register the derived ``magnetic_field`` and ``valid_mask`` of a level whose ``stored``
    sources hold ``vector_potential`` (module docstring).

    ``derived`` maps quantities to callables of the storage shape (``levels.build_level``);
    ``identity_metric`` builds the flat metric's source where the level stores none.
    """
    potential = stored["vector_potential"]
    mask = stored.get("valid_mask")

    def halo(storage):
        return _Halo(storage, axis_order, order, mask, where)

    def magnetic_field(storage):
        metric = stored.get("spatial_metric") or identity_metric(storage)
        return CurlMagneticField(potential, metric, halo(storage), spacing_xyz)

    def valid_mask(storage):
        return CurlValidMask(halo(storage), mask)

    derived["magnetic_field"] = magnetic_field
    derived["valid_mask"] = valid_mask
