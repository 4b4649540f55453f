"""Electromagnetic sources of whole snapshot files, slab by slab, in bounded memory.

A time level is read in slabs of whole planes along the slowest storage axis (x for "xyz"
files, z for "zyx" ones). Each slab goes through :func:`emsource.adm_sources` and is written
to the output before the next is read, so the working memory is a few slab buffers whatever
the snapshot size. Buffers are allocated once per level and reused (``out=``), which also makes
the result independent of the slab size: the kernel computes every point from that point's
values alone.

Memory bound. With ``memory_limit`` M bytes, the slab holds as many planes as fit in
``M - fixed`` where a plane costs ``(12 inputs + 11 outputs) * itemsize * points_per_plane``
(gamma 6, E 3, B 3; rho 1, S_i 3, S_ij 6, S 1) and ``fixed`` counts HDF5's chunk caches
(:data:`emsource.io.CHUNK_CACHE_BYTES` per open input dataset; the output has none) and its
1 MiB type-conversion buffer. The Python interpreter and the libraries (about 150-200 MiB of
resident memory) come on top. Outputs are chunked (one component, whole planes, about 1 MiB a
chunk, a divisor of the slab so that writes cover whole chunks), optionally gzip-compressed.

Output safety: the output is written to a temporary file in the target directory and renamed
only when every level is complete (:func:`emsource.io.atomic_output`); inputs are opened
read-only; an existing output is replaced only with ``force``.
"""

from __future__ import annotations

import os
import time as _time
from dataclasses import dataclass, field

import h5py
import numpy as np

from . import adm_sources
from .io import (CHUNK_CACHE_BYTES, LEVELS_GROUP, QUANTITIES, SnapshotError, atomic_output,
                 chunk_shape, open_snapshot, provenance_attributes, write_level_attributes,
                 write_root_attributes)
from .sources import GridPointError

__all__ = ["DEFAULT_MEMORY_LIMIT", "SourcesReport", "compute_sources", "slab_rows", "SlabBuffers"]

DEFAULT_MEMORY_LIMIT = 512 * 2**20  #: bytes

SOURCE_INPUTS = ("spatial_metric", "electric_field", "magnetic_field")
SOURCE_OUTPUTS = ("energy_density", "momentum_density", "spatial_stress", "stress_trace")
#: HDF5's default type-conversion buffer (bytes), counted in the fixed part of the bound.
CONVERSION_BUFFER_BYTES = 1 << 20


def values_per_point(quantities) -> int:
    """Number of stored values per grid point of ``quantities`` (a scalar counts 1)."""
    return sum(max(QUANTITIES[q], 1) for q in quantities)


def slab_rows(level, values: int, itemsize: int, memory_limit: int, *, fixed: int = 0,
              halo: int = 0) -> int:
    """Planes per slab so that ``values`` arrays of a slab (+ ``halo`` planes) fit the bound.

    Raises
    ------
    ValueError
        If not even one plane (plus halo) fits, naming the least limit that would work.
    """
    plane = int(np.prod(level.storage_shape[1:])) * values * itemsize
    budget = int(memory_limit) - int(fixed)
    rows = budget // plane - halo
    if rows < 1:
        need = (1 + halo) * plane + fixed
        raise ValueError(f"memory limit {memory_limit / 2**20:.3g} MiB is too small for this grid: "
                         f"one slab of {1 + halo} plane(s) of {level.storage_shape[1:]} points "
                         f"needs {need / 2**20:.3g} MiB")
    return int(min(rows, level.storage_shape[0]))


class SlabBuffers:
    """Reused read buffers: ``quantities`` over up to ``rows`` storage planes, one dtype."""

    def __init__(self, level, quantities, rows, dtype):
        self.level = level
        self.dtype = np.dtype(dtype)
        plane = int(np.prod(level.storage_shape[1:]))
        self._flat = {q: np.empty(max(QUANTITIES[q], 1) * rows * plane, self.dtype)
                      for q in quantities}
        self.rows = rows

    def storage(self, quantity, nrows):
        ncomp = QUANTITIES[quantity]
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
    dtypes = {np.dtype(level.dtype(q)) for q in ("electric_field", "magnetic_field")}
    return np.dtype(np.float64) if len(dtypes) > 1 else dtypes.pop()


def progress_bar(total, description, enabled):
    """A tqdm bar (on stderr) or a do-nothing stand-in."""
    if enabled:
        from tqdm import tqdm
        return tqdm(total=total, desc=description, unit="slab", leave=False)

    class _Silent:
        def update(self, n=1):
            pass

        def close(self):
            pass

    return _Silent()


def slab_error(error, level, start, stop):
    """Re-raise a point error with the slab's place in the full grid."""
    axis = "xyz"[level.slab_axis]
    return SnapshotError(f"time level {level.label!r}, slab {axis} rows {start}:{stop}: {error} "
                         f"(grid index along {axis} is relative to row {start})")


@dataclass
class SourcesReport:
    """What :func:`compute_sources` did, for the summary screen."""

    input_file: str
    output_file: str
    levels: int = 0
    grid_shape: tuple = ()
    axis_order: str = "xyz"
    units: str = "gaussian"
    dtype: str = "float64"
    rows_per_slab: int = 0
    slabs: int = 0
    planned_bytes: int = 0
    bytes_read: int = 0
    bytes_written: int = 0
    seconds: float = 0.0
    energy_density_range: tuple = (np.inf, -np.inf)
    times: list = field(default_factory=list)


def compute_sources(input_file, output_file, *, mapping=None, memory_limit=DEFAULT_MEMORY_LIMIT,
                    rows=None, force=False, compression=None, levels=None, check=True,
                    outputs=SOURCE_OUTPUTS, progress=False) -> SourcesReport:
    """Energy density, momentum density, stress and trace for every level of a snapshot file.

    Parameters
    ----------
    input_file : str or path-like
        Native snapshot, or any HDF5 file with ``mapping``.
    output_file : str or path-like
        Native-layout output (datasets energy_density, momentum_density, spatial_stress,
        stress_trace per level, in the input's storage order, with provenance attributes).
    mapping : str, path-like or LayoutMapping, optional
        Layout mapping of a foreign input.
    memory_limit : int
        Bound in bytes on the slab buffers plus HDF5's caches (see the module docstring).
    rows : int, optional
        Planes per slab; overrides the value derived from ``memory_limit`` (tests use it).
    force : bool
        Replace an existing output.
    compression : {None, "gzip"}
    levels : sequence of int, optional
        Indices of the time levels to process (default: all).
    check : bool
        Passed to :func:`emsource.adm_sources` (point checks of every input value).
    outputs : sequence of str
        Which of energy_density, momentum_density, spatial_stress, stress_trace to write
        (default all). Writing is most of the cost: energy and momentum density alone are
        4 of the 11 values per point.
    progress : bool
        Show a tqdm bar on stderr.

    Returns
    -------
    SourcesReport

    Raises
    ------
    SnapshotError
        Bad input (before any output exists, or with the partial output removed).
    OutputError
        The output exists without ``force`` or cannot be written.
    """
    began = _time.perf_counter()
    unknown = sorted(set(outputs) - set(SOURCE_OUTPUTS))
    if unknown or not outputs:
        raise ValueError(f"outputs must be some of {', '.join(SOURCE_OUTPUTS)}; found {list(outputs)}")
    outputs = tuple(q for q in SOURCE_OUTPUTS if q in set(outputs))
    report = SourcesReport(os.fspath(input_file), os.path.abspath(os.fspath(output_file)))
    with open_snapshot(input_file, mapping) as snap:
        chosen = _choose_levels(snap.levels, levels)
        plans = []
        for level in chosen:
            for q in SOURCE_INPUTS:
                level.dtype(q)  # raises with the file's contents if missing
            dtype = common_field_dtype(level)
            fixed = CHUNK_CACHE_BYTES * 12 + CONVERSION_BUFFER_BYTES
            n = rows or slab_rows(level, values_per_point(SOURCE_INPUTS + SOURCE_OUTPUTS),
                                  dtype.itemsize, memory_limit, fixed=fixed)
            plans.append((level, dtype, int(min(n, level.storage_shape[0]))))
        report.levels = len(plans)
        report.grid_shape = plans[0][0].grid.shape
        report.axis_order = plans[0][0].axis_order
        report.units = plans[0][0].units
        report.dtype = str(plans[0][1])
        total = sum(len(slabs(lv.storage_shape[0], n)) for lv, _, n in plans)
        datasets_read = []
        options = {"memory_limit_bytes": int(memory_limit), "rows_per_slab": int(plans[0][2]),
                   "compression": compression or "none", "check": bool(check),
                   "outputs": list(outputs),
                   "levels": [lv.label for lv, _, _ in plans]}
        for level, _, _ in plans:
            for q in SOURCE_INPUTS:
                datasets_read.extend(level.dataset_paths(q))
        bar = progress_bar(total, "sources", progress)
        try:
            with atomic_output(output_file, force=force) as temporary:
                # No chunk cache on the output: every write covers whole chunks, which HDF5 then
                # writes straight from the slab buffer (with a cache it copies each chunk through
                # it, measured 1.5-3x slower on 256^3).
                with h5py.File(temporary, "w", rdcc_nbytes=0) as out:
                    write_root_attributes(out, provenance_attributes(
                        input_file, datasets_read, options, snap.mapping_path))
                    group = out.create_group(LEVELS_GROUP)
                    for level, dtype, n in plans:
                        _level_sources(level, dtype, n, group, compression, check, outputs,
                                       report, bar)
                        report.times.append(level.time)
                report.planned_bytes = max(
                    (values_per_point(SOURCE_INPUTS + SOURCE_OUTPUTS) * dt.itemsize * n
                     * int(np.prod(lv.storage_shape[1:]))) for lv, dt, n in plans)
        finally:
            bar.close()
    report.bytes_written = os.path.getsize(report.output_file)
    report.seconds = _time.perf_counter() - began
    return report


def _choose_levels(all_levels, wanted):
    if wanted is None:
        return list(all_levels)
    chosen = []
    for i in wanted:
        if not -len(all_levels) <= int(i) < len(all_levels):
            raise SnapshotError(f"time level index {i} out of range: the file has "
                                f"{len(all_levels)} level(s)")
        chosen.append(all_levels[int(i)])
    return chosen


def _level_sources(level, dtype, rows, group, compression, check, written, report, bar):
    g = group.create_group(level.label)
    write_level_attributes(g, time=level.time, grid=level.grid, units=level.units,
                           axis_order=level.axis_order)
    stored = level.storage_shape
    # Chunks of whole planes, a divisor of the slab so that every write fills whole chunks
    # (a partial write of a compressed chunk would read and re-compress it).
    chunk_rows = min(chunk_shape(stored, dtype.itemsize)[0], rows)
    rows = max(chunk_rows, rows // chunk_rows * chunk_rows)
    datasets = {}
    for q in written:
        ncomp = QUANTITIES[q]
        shape = ((ncomp,) if ncomp else ()) + stored
        chunks = ((1,) if ncomp else ()) + (chunk_rows,) + stored[1:]
        datasets[q] = g.create_dataset(q, shape=shape, dtype=dtype, chunks=chunks,
                                       compression=compression)
    inputs = SlabBuffers(level, SOURCE_INPUTS, rows, dtype)
    outputs = SlabBuffers(level, SOURCE_OUTPUTS, rows, dtype)
    low, high = report.energy_density_range
    if report.slabs == 0:
        report.rows_per_slab = rows  # as adjusted to whole chunks
    report.slabs += len(slabs(stored[0], rows))
    for start, stop in slabs(stored[0], rows):
        gamma = inputs.read("spatial_metric", start, stop)
        E = inputs.read("electric_field", start, stop)
        B = inputs.read("magnetic_field", start, stop)
        report.bytes_read += (gamma.nbytes + E.nbytes + B.nbytes)
        out_stored = [outputs.storage(q, stop - start) for q in SOURCE_OUTPUTS]
        out_xyz = tuple(level.to_xyz(a) for a in out_stored)
        try:
            adm_sources(gamma, E, B, units=level.units, check=check, out=out_xyz)
        except GridPointError as error:
            raise slab_error(error, level, start, stop) from None
        for q, a in zip(SOURCE_OUTPUTS, out_stored):
            if q not in datasets:
                continue
            if a.ndim == 4:
                datasets[q][:, start:stop] = a
            else:
                datasets[q][start:stop] = a
        rho = out_stored[0]
        low = min(low, float(rho.min()))
        high = max(high, float(rho.max()))
        bar.update(1)
    report.energy_density_range = (low, high)
