"""Staggered quantities of a layout mapping: their keys, and a data source that reads them at the vertices.

A mapping declares where a quantity is stored with ``centring`` (a named layout) or ``offsets``
(one triple per component) and ``time_offset`` (module :mod:`.mapping` documents the keys;
:mod:`emsource.staggering` the positions and the interpolation). :class:`StaggeredSource` is a
``DataSource`` (:mod:`.levels`) like the others: asked for vertex rows ``start:stop`` of the
slowest storage axis, it reads the stored rows those vertices' stencils need (a halo of
``order / 2`` rows on either side, fewer at the faces), interpolates along each staggered axis
in turn and, for a time offset, combines the levels of the time stencil. Its memory beyond the
slab buffer is counted in ``scratch_bytes_per_row``, so the slab pipelines stay within their
memory bound.
"""

from __future__ import annotations

import threading
from collections import Counter
from dataclasses import dataclass

import numpy as np

from ..staggering import (CENTRINGS, INTERPOLATION_ORDERS, OFFSETS, centring_offsets,
                          interpolate_axis, stored_points_allowed, time_stencil, vertex_stencils)
from .errors import MappingError
from .levels import FLOAT_TYPES, chunk_bytes_of, chunk_rows_of

__all__ = ["QUANTITY_KEYS", "Staggering", "parse_staggering", "parse_interpolation_order",
           "RawComponent", "StaggeredSource", "vertex_storage_shape", "undeclared_staggering"]

#: Keys of a ``[quantities.<name>]`` table that this module reads.
QUANTITY_KEYS = {"centring", "offsets", "time_offset"}
DEFAULT_ORDER = 2


@dataclass(frozen=True)
class Staggering:
    """Where a quantity is stored relative to the vertices and the level's time.

    Attributes
    ----------
    offsets : tuple of (3,) tuples
        One offset triple per component (one for a scalar), in units of the spacing, along the
        grid axes in storage order.
    time_offset : float
        Stored time minus level time, in the file's time unit (before the time ``scale``).
    key : str
        The mapping key that declared the offsets ("centring" or "offsets"), for messages.
    """

    offsets: tuple
    time_offset: float = 0.0
    key: str = "offsets"

    @property
    def in_space(self) -> bool:
        return any(o != 0 for triple in self.offsets for o in triple)


def parse_interpolation_order(table, check) -> int:
    """The top-level ``interpolation_order`` (default 2)."""
    if "interpolation_order" not in table:
        return DEFAULT_ORDER
    value = table["interpolation_order"]
    if isinstance(value, bool) or value not in INTERPOLATION_ORDERS:
        check.fail(f"interpolation_order must be one of {list(INTERPOLATION_ORDERS)}, "
                   f"found {value!r}")
    return int(value)


def parse_staggering(q, name, ncomp, axis_order, where, check):
    """The :class:`Staggering` of one ``[quantities.<name>]`` table, or None (on the vertices,
    at the level's time)."""
    given = [k for k in ("centring", "offsets", "time_offset") if k in q]
    if not given:
        return None
    if name == "valid_mask":
        check.fail(f"{where} takes no {given[0]}: a mask holds 0 and 1 and cannot be "
                   "interpolated; store it on the vertices")
    if "identity" in q:
        check.fail(f"{where} identity takes no {given[0]}")
    if "centring" in q and "offsets" in q:
        check.fail(f"{where} needs at most one of 'centring' or 'offsets', found both")
    count = max(ncomp, 1)
    offsets = ((0.0, 0.0, 0.0),) * count
    key = "offsets"
    if "centring" in q:
        key = "centring"
        centring = check.text(q["centring"], f"{where} centring", CENTRINGS)
        if centring in ("face", "edge") and ncomp != 3:
            check.fail(f"{where} centring {centring!r} applies to vectors (3 components); "
                       f"{name} has {count}")
        xyz = centring_offsets(centring, ncomp)
        offsets = tuple(t if axis_order == "xyz" else t[::-1] for t in xyz)
    if "offsets" in q:
        listed = q["offsets"]
        shape_ok = (isinstance(listed, list) and len(listed) == count
                    and all(isinstance(t, list) and len(t) == 3 for t in listed))
        if not shape_ok:
            check.fail(f"{where} offsets must be a list of {count} triple(s) [o0, o1, o2] (one "
                       f"per component, each along the grid axes in storage order), found "
                       f"{listed!r}")
        for t in listed:
            for value in t:
                if isinstance(value, bool) or value not in OFFSETS:
                    check.fail(f"{where} offsets: each offset must be 0 or 0.5 (units of the "
                               f"spacing), found {value!r} in {t!r}")
        offsets = tuple(tuple(float(v) for v in t) for t in listed)
    time_offset = 0.0
    if "time_offset" in q:
        time_offset = check.number(q["time_offset"], f"{where} time_offset")
    return Staggering(offsets, time_offset, key)


class RawComponent:
    """One stored component of a staggered quantity (a dataset, or a slice of a stacked one)."""

    def __init__(self, dataset, index=None, last=False):
        self.dataset = dataset
        self.index = index
        self.last = last
        self.path = dataset.name + ("" if index is None else f"[component {index}]")
        shape = tuple(dataset.shape)
        if index is None:
            self.shape = shape
        else:
            self.shape = shape[:-1] if last else shape[1:]
        self.dtype = np.dtype(dataset.dtype)
        lead = 1 if (index is not None and not last) else 0
        self.chunk_rows = chunk_rows_of(dataset, lead)
        self.chunk_bytes = chunk_bytes_of(dataset)

    def read(self, out, lo, hi):
        """Stored rows lo:hi (slowest storage axis) into ``out`` (C-ordered, any float type)."""
        if self.index is None:
            self.dataset.read_direct(out, source_sel=np.s_[lo:hi])
        elif self.last:
            out[...] = self.dataset[lo:hi, :, :, self.index]
        else:
            self.dataset.read_direct(out, source_sel=np.s_[self.index, lo:hi])


def check_raw(raw, where, key_text):
    """A stored component must be a 3D grid of float32 or float64."""
    if len(raw.shape) != 3:
        raise MappingError(f"{where}: {key_text}: {raw.path} has grid shape {raw.shape}, "
                           "expected 3 axes (n0, n1, n2)")
    if raw.dtype not in FLOAT_TYPES:
        raise MappingError(f"{where}: {key_text}: {raw.path} has dtype {raw.dtype}, expected "
                           "float32 or float64")


def vertex_storage_shape(entries, where) -> tuple:
    """Vertices per storage axis from stored shapes and their offsets.

    ``entries``: (label, shape, offsets) of every stored component (unstaggered quantities with
    offsets 0). Along each axis the length of the components with offset 0 there is the vertex
    count (they must agree); an axis along which every component is offset by 1/2 has one vertex
    more than the stored points (values between the vertices).
    """
    shape = []
    for axis in range(3):
        plain = {s[axis] for _, s, o in entries if o[axis] == 0}
        if len(plain) == 1:
            shape.append(plain.pop())
            continue
        if len(plain) > 1:
            counts = Counter(s[axis] for _, s, o in entries if o[axis] == 0)
            expected = max(counts, key=lambda n: (counts[n], n))
            wrong = "; ".join(f"{label} has shape {s}" for label, s, o in entries
                              if o[axis] == 0 and s[axis] != expected)
            raise MappingError(f"{where}: the datasets stored on the vertices along storage axis "
                               f"{axis} (offset 0 there) differ in length: expected {expected} "
                               f"points along that axis (as most of them), found: {wrong}. "
                               "Check the declared centring or offsets")
        stored = {s[axis] + 1 for _, s, o in entries}
        if len(stored) > 1:
            detail = ", ".join(f"{label} {s}" for label, s, _ in entries)
            raise MappingError(f"{where}: every dataset is offset by 1/2 along storage axis "
                               f"{axis} but their lengths differ ({detail}); expected one length "
                               "(the vertex count minus one)")
        shape.append(stored.pop())
    return tuple(shape)


def undeclared_staggering(shapes, where):
    """A :class:`MappingError` (or None) for data that look staggered while the mapping declares
    no offsets: grid shapes (storage order) that differ by one point along some axes."""
    distinct = sorted({s for _, s in shapes})
    if len(distinct) < 2 or any(len(s) != 3 for s in distinct):
        return None
    if not all(abs(a - b) <= 1 for s in distinct for t in distinct for a, b in zip(s, t)):
        return None
    detail = ", ".join(f"{label} {s}" for label, s in shapes)
    return MappingError(
        f"{where}: dataset shapes differ by one point along some axes ({detail}): this looks "
        "like a staggered layout, and the mapping declares no offsets. Reading such data as if "
        "they sat on the vertices would be wrong; declare where each quantity is stored with "
        "'centring' (vertex, cell, face, edge) or 'offsets' (and 'time_offset' for half steps) "
        "in its [quantities.<name>] table")


class ScratchPool:
    """Reused work buffers of the staggered sources of one open file, one set per thread.

    A fresh buffer per read costs a page fault per 4 KiB on first touch, which made the
    interpolation several times slower than the arithmetic (measured on 96^3: 7 ms instead
    of about 1 ms per component and axis); reused buffers are touched once. Each slot grows to
    the largest request and is kept while the file is open: the sources count that memory in
    ``scratch_bytes_per_row``.
    """

    def __init__(self):
        self._local = threading.local()

    def array(self, slot, shape, dtype):
        slots = self._local.__dict__.setdefault("slots", {})
        dtype = np.dtype(dtype)
        size = int(np.prod(shape)) * dtype.itemsize
        buffer = slots.get(slot)
        if buffer is None or buffer.nbytes < size:
            buffer = slots[slot] = np.empty(max(size, 1), np.uint8)
        return buffer[:size].view(dtype).reshape(shape)


class StaggeredSource:
    """A ``DataSource`` that reads a staggered quantity at the vertices (module docstring).

    Parameters
    ----------
    name : str
        Quantity name (for messages).
    nodes : list of (weight, list of RawComponent)
        The time levels of the time stencil with their weights (one node of weight 1 without a
        time offset); each holds the stored components in (x, y, z) component order.
    staggering : Staggering
    vertex_shape : tuple
        Vertices per storage axis.
    order : int
    scale : float
    scalar : bool
    where : str
        The level and mapping, for messages.
    pool : ScratchPool, optional
        Work buffers shared with the other staggered sources of the file.
    """

    def __init__(self, name, nodes, staggering, vertex_shape, order, scale, scalar, where,
                 pool=None):
        self.name = name
        self.pool = ScratchPool() if pool is None else pool
        self.nodes = nodes
        self.scale = scale
        self.scalar = scalar
        self.order = order
        self.vertex_shape = tuple(vertex_shape)
        first = nodes[0][1]
        ncomp = len(first)
        self.shape = self.vertex_shape if scalar else (ncomp,) + self.vertex_shape
        raws = [r for _, comps in nodes for r in comps]
        dtypes = {r.dtype for r in raws}
        self.dtype = dtypes.pop() if len(dtypes) == 1 else np.dtype(np.float64)
        self.paths = tuple(dict.fromkeys(r.dataset.name for r in raws))
        self.chunk_rows = min(r.chunk_rows for r in raws)
        self.chunk_bytes = max(r.chunk_bytes for r in raws)
        self.stencils = []
        for c, offsets in enumerate(staggering.offsets):
            per_axis = []
            for axis in range(3):
                lengths = {comps[c].shape[axis] for _, comps in nodes}
                component = f"component {'xyz'[c]}" if ncomp == 3 else f"component {c}"
                label = name if scalar else f"{name} {component}"
                try:
                    if len(lengths) != 1:
                        raise ValueError(f"the time levels of its time stencil store "
                                         f"{sorted(lengths)} points")
                    per_axis.append(vertex_stencils(self.vertex_shape[axis], lengths.pop(),
                                                    offsets[axis], order))
                except ValueError as error:
                    expected = tuple(" or ".join(map(str, stored_points_allowed(n, o)))
                                     for n, o in zip(self.vertex_shape, offsets))
                    raise MappingError(
                        f"{where}: [quantities.{name}] {staggering.key} puts {label} "
                        f"({first[c].path}) at offsets {offsets} (storage order), which does "
                        f"not fit the grid of {self.vertex_shape} vertices: expected a stored "
                        f"shape ({', '.join(expected)}), found {first[c].shape}; along storage "
                        f"axis {axis}: {error}") from None
            self.stencils.append(per_axis)
        plane_stored = max(int(np.prod(r.shape[1:])) for r in raws)
        plane = int(np.prod(self.vertex_shape[1:]))
        # Per vertex row, at most: the stored rows with a halo of ``order`` rows (counted as if
        # a slab were one row), two intermediate results, and one level of the time stencil.
        self.scratch_bytes_per_row = 8 * ((order + 1) * plane_stored + 2 * max(plane, plane_stored)
                                          + (plane if len(nodes) > 1 else 0))

    def _component(self, raw, stencils, start, stop, dtype, dest):
        (starts0, w0), *_ = stencils
        lo = int(starts0[start])
        hi = int(starts0[stop - 1]) + w0.shape[1]
        staggered = [axis for axis in range(3) if stencils[axis][1].shape[1] > 1]
        if not staggered:
            raw.read(dest, lo, hi)
            return
        work = self.pool.array("stored", (hi - lo,) + raw.shape[1:], dtype)
        raw.read(work, lo, hi)
        shape = list(work.shape)
        for step, axis in enumerate(staggered):
            starts, weights = stencils[axis]
            if axis == 0:
                starts, weights, base = starts[start:stop], weights[start:stop], lo
            else:
                base = 0
            shape[axis] = len(starts)
            out = (dest if axis == staggered[-1]
                   else self.pool.array(f"step{step % 2}", tuple(shape), dtype))
            work = interpolate_axis(work, axis, starts, weights.astype(dtype, copy=False),
                                    base=base, out=out)

    def read_into(self, out, start, stop):
        buffer = None
        for c in range(out.shape[0] if not self.scalar else 1):
            target = out if self.scalar else out[c]
            for k, (weight, comps) in enumerate(self.nodes):
                if k == 0:
                    self._component(comps[c], self.stencils[c], start, stop, out.dtype, target)
                    if weight != 1.0:
                        target *= out.dtype.type(weight)
                    continue
                if buffer is None:
                    buffer = self.pool.array("time", target.shape, out.dtype)
                self._component(comps[c], self.stencils[c], start, stop, out.dtype, buffer)
                buffer *= out.dtype.type(weight)
                target += buffer
        if self.scale != 1.0:
            out *= out.dtype.type(self.scale)


def time_nodes(times, k, offset, order, where, name):
    """(level index, weight) pairs that bring a quantity stored at times + offset to times[k]."""
    if offset == 0:
        return [(k, 1.0)]
    try:
        indices, weights = time_stencil(np.asarray(times) + offset, times[k], order)
    except ValueError as error:
        raise MappingError(f"{where}: [quantities.{name}] time_offset {offset!r}: {error}") from None
    return list(zip(indices.tolist(), weights.tolist()))
