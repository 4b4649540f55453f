"""Reading a time level slab by slab: slab sizes under a memory bound, reused buffers.

A slab is a run of whole planes of the slowest storage axis (x for "xyz" files, z for "zyx"
ones). :func:`slab_rows` sizes it so that the buffers of a computation fit a memory limit;
:class:`SlabBuffers` holds one reused buffer per quantity; :func:`slabs` lists the row ranges.
"""

from __future__ import annotations

import numpy as np

from ..quantities import BY_NAME, COMPONENTS
from .levels import choose_levels
from .reading import CHUNK_CACHE_BYTES

__all__ = ["DEFAULT_MEMORY_LIMIT", "CHUNK_CACHE_BYTES", "CONVERSION_BUFFER_BYTES",
           "values_per_point", "slab_rows", "SlabBuffers", "slabs", "choose_levels",
           "common_field_dtype", "progress_bar", "slab_error", "neutralise_excised",
           "read_overhead_bytes", "read_scratch_per_row", "chunk_overhead"]

DEFAULT_MEMORY_LIMIT = 512 * 2**20  #: bytes
#: HDF5's default type-conversion buffer (bytes), counted in the fixed part of the bound.
CONVERSION_BUFFER_BYTES = 1 << 20


def values_per_point(quantities) -> int:
    """Number of stored values per grid point of ``quantities`` (a scalar counts 1)."""
    return sum(BY_NAME[q].values_per_point for q in quantities)


def read_scratch_per_row(level, quantities) -> int:
    """Bytes per plane that reading ``quantities`` needs beyond the slab buffers (a
    component-last block is read whole, then transposed into the buffer)."""
    return sum(level.source(q).scratch_bytes_per_row for q in quantities if level.has(q))


def chunk_overhead(level, quantities) -> int:
    """Bytes HDF5 holds while it reads a chunk larger than the chunk cache, for the largest such
    chunk of ``quantities`` (reads run one at a time): the chunk as stored, the decompressed
    chunk and the filter's output buffer while it grows, three chunk sizes in all (measured:
    peak RSS of a 128^3 gzip file with one whole component per chunk, 16 MiB chunks)."""
    largest = 0
    for q in quantities:
        if level.has(q):
            chunk = level.source(q).chunk_bytes
            if chunk > CHUNK_CACHE_BYTES:
                largest = max(largest, 3 * chunk)
    return largest


def read_overhead_bytes(level, quantities, rows) -> int:
    """Memory that reading ``rows`` planes of ``quantities`` takes beyond the slab buffers."""
    return read_scratch_per_row(level, quantities) * rows + chunk_overhead(level, quantities)


def slab_rows(level, values: int, itemsize: int, memory_limit: int, *, fixed: int = 0,
              halo: int = 0, extra_per_row: int = 0) -> int:
    """Planes per slab so that ``values`` arrays of a slab (+ ``halo`` planes) fit the bound.

    ``fixed`` bytes are taken off the bound first; each plane costs ``values * itemsize`` per
    point plus ``extra_per_row`` bytes.

    Raises
    ------
    ValueError
        If not even one plane (plus halo) fits, naming the least limit that would work.
    """
    plane = level.plane_points * values * itemsize + int(extra_per_row)
    budget = int(memory_limit) - int(fixed)
    rows = budget // plane - halo
    if rows < 1:
        need = (1 + halo) * plane + fixed
        raise ValueError(f"{level.where}: memory limit {memory_limit / 2**20:.3g} MiB is too small "
                         f"for its grid: "
                         f"one slab of {1 + halo} plane(s) of {level.storage_shape[1:]} points "
                         f"needs {need / 2**20:.3g} MiB")
    return int(min(rows, level.storage_shape[0]))


class SlabBuffers:
    """Reused read buffers: ``quantities`` over up to ``rows`` storage planes, one dtype."""

    def __init__(self, level, quantities, rows, dtype):
        self.level = level
        self.dtype = np.dtype(dtype)
        self.rows = rows
        plane = level.plane_points
        self._flat = {q: np.empty(max(COMPONENTS[q], 1) * rows * plane, self.dtype)
                      for q in quantities}

    @classmethod
    def reused(cls, store: dict, key, level, quantities, rows, dtype):
        """The buffers kept in ``store[key]`` (by an earlier level), made ready for ``level``
        where they hold the same ``quantities`` in ``dtype`` with room for ``rows`` of its
        planes, else new buffers; kept in ``store[key]`` for the next level. A series whose
        levels share a grid then allocates its buffers once: fresh buffers are paid in page
        faults on first use (``emsource sources`` on a 128^3 file of 4 levels: 0.42 of its
        0.54 s kernel stage, measured). Buffers that do not fit are dropped before the new ones
        are allocated, so that at most one level's buffers are held (the memory bound)."""
        previous = store.pop(key, None)
        if (previous is not None and previous.dtype == np.dtype(dtype)
                and tuple(previous._flat) == tuple(quantities)
                and all(a.size >= max(COMPONENTS[q], 1) * rows * level.plane_points
                        for q, a in previous._flat.items())):
            previous.level = level
            previous.rows = rows
        else:
            previous = None  # the last reference: freed before the allocation
            previous = cls(level, quantities, rows, dtype)
        store[key] = previous
        return previous

    @property
    def nbytes(self) -> int:
        return sum(a.nbytes for a in self._flat.values())

    def storage(self, quantity, nrows):
        ncomp = COMPONENTS[quantity]
        shape = ((ncomp,) if ncomp else ()) + (nrows,) + self.level.storage_shape[1:]
        return self._flat[quantity][: int(np.prod(shape))].reshape(shape)

    def read(self, quantity, start, stop):
        """(x, y, z)-order view of ``quantity`` over storage rows start:stop."""
        return self.level.read(quantity, start, stop, dtype=self.dtype,
                               out=self.storage(quantity, stop - start))


def slabs(n, rows):
    """(start, stop) pairs covering 0:n in steps of ``rows``."""
    return [(s, min(s + rows, n)) for s in range(0, n, rows)]


def common_field_dtype(level) -> np.dtype:
    """float64 if E and B are stored in different types, else their type."""
    dtypes = {np.dtype(level.dtype(q)) for q in ("electric_field", "magnetic_field")}
    return np.dtype(np.float64) if len(dtypes) > 1 else dtypes.pop()


class _Silent:
    def update(self, n=1):
        pass

    def close(self):
        pass


def progress_bar(total, description, enabled):
    """A tqdm bar (on stderr) or a do-nothing stand-in."""
    if enabled:
        from tqdm import tqdm
        return tqdm(total=total, desc=description, unit="slab", leave=False)
    return _Silent()


def neutralise_excised(arrays: dict, valid, in_place: bool) -> dict:
    """Arrays with flat metric, zero field, unit lapse and zero shift where ``valid`` is False.

    Excised points (valid_mask = 0) hold whatever the writer put there (NaN at a singularity):
    they are neither checked nor used, but a whole slab goes through one kernel call, which
    must not see them. ``arrays`` maps quantity names to (x, y, z)-order arrays (None allowed);
    ``in_place`` overwrites them (caller-owned scratch buffers), otherwise copies are changed.
    """
    if valid is None or valid.all():
        return arrays
    invalid = ~valid
    flat = {"spatial_metric": (1.0, 0.0, 0.0, 1.0, 0.0, 1.0), "lapse": 1.0}
    out = {}
    for name, a in arrays.items():
        if a is None:
            out[name] = a
            continue
        a = a if in_place else a.copy()
        fill = flat.get(name, 0.0)
        if a.ndim == invalid.ndim:
            a[invalid] = fill
        else:
            for c in range(a.shape[0]):
                a[c][invalid] = fill[c] if isinstance(fill, tuple) else fill
        out[name] = a
    return out


def slab_error(error, level, start, stop):
    """A :class:`GridPointError` of the slab of rows ``start:stop`` in the whole grid's terms:
    the index in the whole (x, y, z) grid, the file, the time level and the rows named."""
    axis = "xyz"[level.slab_axis]
    return error.relocated(level.slab_axis, start,
                           f"{level.where}, time level {level.label!r} ({axis} rows {start}:{stop})")
