"""Electromagnetic sources of whole snapshot files, slab by slab, in bounded memory.

A time level is read in slabs of whole planes along the slowest storage axis (x for "xyz"
files, z for "zyx" ones). Each slab goes through :func:`emsource.adm_sources` and is written
to the output before the next is read, so the working memory is a few slab buffers whatever
the snapshot size. Buffers are allocated once per level and reused (``out=``), which also makes
the result independent of the slab size: the kernel computes every point from that point's
values alone.

Memory bound. With ``memory_limit`` M bytes, the slab holds as many planes as fit in
``M - fixed`` where a plane costs ``(12 inputs + 11 outputs) * itemsize * points_per_plane``
(gamma 6, E 3, B 3; rho 1, S_i 3, S_ij 6, S 1) plus what reading a plane needs beyond the
buffers (:func:`~.slabs.read_overhead_bytes`), and ``fixed`` counts HDF5's chunk caches
(:data:`~.reading.CHUNK_CACHE_BYTES` per open input dataset; the output has none) and its
1 MiB type-conversion buffer. The Python interpreter and the libraries (about 150-200 MiB of
resident memory) come on top. Outputs are chunked (one component, whole planes, about 1 MiB a
chunk, a divisor of the slab so that writes cover whole chunks, :func:`output_chunk_rows`),
optionally gzip-compressed, and written chunk by chunk by :class:`.chunk_writing.ChunkWriter`
(gzip in worker threads; its few chunks in flight are counted in the bound).

Speed (``benchmarks/bench_snapshots.py``; :attr:`SourcesReport.stage_seconds` gives read, kernel,
write and finish): the kernel runs on the slab buffers in storage order, whatever the axis order
(each point depends on its own values only); the output is flushed to disk slab after slab in a
background thread (:class:`.writing.BackgroundFlush`), so that the final ``fsync`` of the
all-or-nothing output finds little left to write.

Output safety (:mod:`.writing`): the output may not be an input; it is written to a temporary
file in the target directory and renamed only when every level is complete; inputs are opened
read-only; an existing output is replaced only with ``force``; a failed write is an
:class:`~.errors.OutputError` naming the output, with nothing left behind.
"""

from __future__ import annotations

import os
import time as _time
from dataclasses import dataclass, field

import numpy as np

from .. import adm_sources, interruption
from ..quantities import COMPONENTS, FORM_OUTPUTS, OUTPUTS, SOURCE_INPUTS
from ..sources import GridPointError
from . import form_outputs
from .chunk_writing import ChunkWriter
from .native import LEVELS_GROUP
from .reading import CHUNK_CACHE_BYTES, open_snapshot
from .slabs import (CONVERSION_BUFFER_BYTES, DEFAULT_MEMORY_LIMIT, SlabBuffers, chunk_overhead,
                    common_field_dtype, neutralise_excised, progress_bar, read_overhead_bytes,
                    read_scratch_per_row, slab_error, slab_rows, slabs, values_per_point)
from .writing import (BackgroundFlush, atomic_output, check_output, chunk_shape, hdf5_output,
                      write_level_attributes, write_root_attributes)

__all__ = ["DEFAULT_MEMORY_LIMIT", "SOURCE_INPUTS", "SOURCE_OUTPUTS", "SourcesReport",
           "compute_sources", "output_chunk_rows", "plan_rows"]

SOURCE_OUTPUTS = OUTPUTS


@dataclass
class SourcesReport:
    """What :func:`compute_sources` did, for the summary screen."""

    input_file: str
    output_file: str
    description: str = ""
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
    #: Wall seconds by stage: "read" (inputs into the slab buffers), "kernel" (sources, energy
    #: range, excised points, form outputs), "write" (into the HDF5 file, compression included),
    #: "finish" (closing the file, flushing it to disk, the rename).
    stage_seconds: dict = field(default_factory=lambda: dict.fromkeys(
        ("read", "kernel", "write", "finish"), 0.0))


def _checked(level) -> tuple:
    """The valid_mask where the level has one (one uint8 per point, 0 or 1 in every file,
    whichever command reads it): excised points (0) are neither checked nor computed, the
    outputs hold :data:`EXCISED_FILL` there, and the mask is copied to the output."""
    return ("valid_mask",) if level.has("valid_mask") else ()


#: What the outputs hold at excised points (valid_mask = 0): not a number, never computed.
EXCISED_FILL = np.nan


def plan_rows(level, dtype, memory_limit, extra=(), compression=None) -> int:
    """Planes per slab of :func:`compute_sources` under ``memory_limit`` (bytes).

    Counts the 23 slab buffers, the read scratch of each input, HDF5's caches and chunk
    buffers, the compressed chunks waiting to be written (with ``compression``,
    :meth:`.ChunkWriter.overhead_bytes`), and per point 3 bytes for the valid_mask (its buffer
    and two boolean masks); the slab is a whole number of the inputs' chunks where it holds
    more than one.
    """
    read = SOURCE_INPUTS + _checked(level)
    fixed = (CHUNK_CACHE_BYTES * (12 + len(read) - len(SOURCE_INPUTS)) + CONVERSION_BUFFER_BYTES
             + chunk_overhead(level, read))
    if compression:
        itemsize = np.dtype(dtype).itemsize
        fixed += ChunkWriter.overhead_bytes(int(np.prod(chunk_shape(level.storage_shape, itemsize)))
                                            * itemsize)
    rows = slab_rows(level, values_per_point(SOURCE_INPUTS + SOURCE_OUTPUTS + tuple(extra)),
                     np.dtype(dtype).itemsize, memory_limit, fixed=fixed,
                     extra_per_row=read_scratch_per_row(level, read)
                     + 3 * len(_checked(level)) * level.plane_points)
    chunk = min(level.source(q).chunk_rows for q in SOURCE_INPUTS)
    if chunk < rows < level.storage_shape[0]:
        rows = rows // chunk * chunk
    return int(rows)


def output_chunk_rows(level, dtype, rows) -> tuple:
    """(planes per slab, planes per output chunk) for slabs of ``rows`` planes.

    Output chunks hold whole planes, about 1 MiB (:func:`.writing.chunk_shape`), and divide the
    slab, so that every write fills whole chunks (a partial write of a compressed chunk would
    read and re-compress it, and the direct chunk writes of :class:`.ChunkWriter` need whole
    chunks). The slab keeps its size where a divisor of it at least half the target size exists,
    or where the inputs are chunked: :func:`plan_rows` made it a whole number of their chunks,
    and cutting it would make every slab read a chunk that the next slab reads again (a
    compressed chunk is then decompressed twice). Otherwise (contiguous inputs) the slab is cut
    to a whole number of target-size chunks.
    """
    n0 = level.storage_shape[0]
    target = min(chunk_shape(level.storage_shape, np.dtype(dtype).itemsize)[0], rows)
    if rows >= n0:  # one slab: the last chunk may run past the grid's end
        return rows, target
    divisor = max(d for d in range(1, target + 1) if rows % d == 0)
    inputs_chunked = min(level.source(q).chunk_rows for q in SOURCE_INPUTS) < n0
    if 2 * divisor >= target or inputs_chunked:
        return rows, divisor
    return rows // target * target, target


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
        Never the input or the mapping (nor a link to them).
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
        Indices of the time levels to process (default: all), each at most once.
    check : bool
        Passed to :func:`emsource.adm_sources` (point checks of every input value).
    outputs : sequence of str
        Which of :data:`emsource.quantities.OUTPUTS` to write (default all). Writing is most of
        the cost: energy and momentum density alone are 4 of the 11 values per point.
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
        The output is an input, exists without ``force``, or cannot be written.
    """
    began = _time.perf_counter()
    unknown = sorted(set(outputs) - set(SOURCE_OUTPUTS + FORM_OUTPUTS))
    if unknown or not outputs:
        raise ValueError(f"outputs must be some of {', '.join(SOURCE_OUTPUTS + FORM_OUTPUTS)}; "
                         f"found {list(outputs)}")
    outputs = tuple(q for q in SOURCE_OUTPUTS + FORM_OUTPUTS if q in set(outputs))
    extra = form_outputs.extra_quantities(outputs)
    mapping_path = getattr(mapping, "path", mapping)
    inputs = (input_file,) + ((mapping_path,) if mapping_path is not None else ())
    check_output(output_file, force=force, inputs=inputs)
    report = SourcesReport(os.fspath(input_file), os.path.abspath(os.fspath(output_file)))
    with open_snapshot(input_file, mapping) as snap:
        report.description = snap.description
        chosen = snap.select(levels)
        plans = []
        for level in chosen:
            for q in SOURCE_INPUTS:
                level.source(q)  # raises with the file's contents if missing
            form_outputs.check_level(level, outputs)
            dtype = common_field_dtype(level)
            n = rows or plan_rows(level, dtype, memory_limit, extra, compression)
            plans.append((level, dtype, int(min(n, level.storage_shape[0]))))
        first = plans[0][0]
        report.levels = len(plans)
        report.grid_shape = first.grid.shape
        report.axis_order = first.axis_order
        report.units = first.units
        report.dtype = str(plans[0][1])
        total = sum(len(slabs(lv.storage_shape[0], n)) for lv, _, n in plans)
        options = {"memory_limit_bytes": int(memory_limit), "rows_per_slab": int(plans[0][2]),
                   "compression": compression or "none", "check": bool(check),
                   "outputs": list(outputs), "levels": [lv.label for lv, _, _ in plans]}
        attributes = snap.provenance(chosen, SOURCE_INPUTS, options)
        bar = progress_bar(total, "sources", progress)
        try:
            with atomic_output(output_file, force=force, inputs=snap.inputs) as temporary:
                # No chunk cache on the output: every write covers whole chunks, which HDF5 then
                # writes straight from the slab buffer (with a cache it copies each chunk through
                # it, measured 1.5-3x slower on 256^3).
                with hdf5_output(temporary, output_file, rdcc_nbytes=0) as out, \
                        ChunkWriter() as writer, BackgroundFlush(temporary) as flush:
                    write_root_attributes(out, attributes)
                    group = out.create_group(LEVELS_GROUP)
                    buffers = {}  # reused from level to level where they fit
                    for level, dtype, n in plans:
                        _level_sources(level, dtype, n, group, compression, check, outputs,
                                       report, bar, writer, flush, buffers)
                        report.times.append(level.time)
                    last_slab_done = _time.perf_counter()
                    flush.finish()
                report.planned_bytes = max(
                    (values_per_point(SOURCE_INPUTS + SOURCE_OUTPUTS + extra) * dt.itemsize * n
                     * lv.plane_points + read_overhead_bytes(lv, SOURCE_INPUTS, n))
                    for lv, dt, n in plans)
        finally:
            bar.close()
        report.stage_seconds["finish"] = _time.perf_counter() - last_slab_done
    report.bytes_written = os.path.getsize(report.output_file)
    report.seconds = _time.perf_counter() - began
    return report


def _level_sources(level, dtype, rows, group, compression, check, written, report, bar, writer,
                   flush, buffers):
    """One level's sources, slab by slab, into ``group``; ``buffers`` holds the slab buffers of
    the previous level (:meth:`SlabBuffers.reused`) and receives this level's."""
    g = group.create_group(level.label)
    write_level_attributes(g, time=level.time, grid=level.grid, units=level.units,
                           axis_order=level.axis_order)
    stored = level.storage_shape
    rows, chunk_rows = output_chunk_rows(level, dtype, rows)
    datasets = {}
    for q in written:
        ncomp = COMPONENTS[q]
        shape = ((ncomp,) if ncomp else ()) + stored
        chunks = ((1,) if ncomp else ()) + (chunk_rows,) + stored[1:]
        datasets[q] = g.create_dataset(q, shape=shape, dtype=dtype, chunks=chunks,
                                       compression=compression)
    for q in _checked(level):  # the valid_mask, so that the output says where it holds NaN
        datasets[q] = g.create_dataset(q, shape=stored, dtype=np.uint8,
                                       chunks=(chunk_rows,) + stored[1:], compression=compression)
    inputs = SlabBuffers.reused(buffers, "inputs", level, SOURCE_INPUTS, rows, dtype)
    checked = SlabBuffers.reused(buffers, "checked", level, _checked(level), rows, np.uint8)
    outputs = SlabBuffers.reused(buffers, "outputs", level, SOURCE_OUTPUTS, rows, dtype)
    low, high = report.energy_density_range
    if report.slabs == 0:
        report.rows_per_slab = rows  # as adjusted to whole chunks
    report.slabs += len(slabs(stored[0], rows))
    clock, stages = _time.perf_counter, report.stage_seconds
    for start, stop in slabs(stored[0], rows):
        began = clock()
        gamma = inputs.read("spatial_metric", start, stop)
        E = inputs.read("electric_field", start, stop)
        B = inputs.read("magnetic_field", start, stop)
        report.bytes_read += (gamma.nbytes + E.nbytes + B.nbytes)
        valid = True  # every point, where the level has no valid_mask
        for q in _checked(level):  # raises on a value other than 0 and 1
            valid = checked.read(q, start, stop).astype(bool)
            neutralise_excised({"spatial_metric": gamma, "electric_field": E,
                                "magnetic_field": B}, valid, in_place=True)
        read = clock()
        stages["read"] += read - began
        out_stored = [outputs.storage(q, stop - start) for q in SOURCE_OUTPUTS]
        out_xyz = tuple(level.to_xyz(a) for a in out_stored)
        try:
            # Every point is computed from its own values, so the kernel runs on the buffers in
            # storage order (contiguous: its flat loop); on (z, y, x) views of a "zyx" slab it
            # would walk memory with a stride of a plane (measured: 4.5 s against 0.22 s for a
            # slab of 78 planes of 192^2, load 9 on 2 cores).
            # to_xyz is an involution: it turns the (x, y, z) views back into the buffers.
            adm_sources(*(level.to_xyz(a) for a in (gamma, E, B)), units=level.units,
                        check=check, out=tuple(out_stored))
        except GridPointError:
            try:  # the error path only: again on the (x, y, z) views, for the (x, y, z) index
                adm_sources(gamma, E, B, units=level.units, check=check, out=out_xyz)
            except GridPointError as error:
                raise slab_error(error, level, start, stop) from None
            raise AssertionError("the kernel failed on storage-order buffers only")  # never
        rho = out_xyz[0]
        low = min(low, float(rho.min(where=valid, initial=np.inf)))
        high = max(high, float(rho.max(where=valid, initial=-np.inf)))
        if not np.all(valid):
            excised = ~valid
            for a in out_xyz:
                a[..., excised] = EXCISED_FILL
        extra = form_outputs.slab_outputs(level, written, start, stop, gamma, E, B, valid, check)
        computed = clock()
        stages["kernel"] += computed - read
        for q, a in list(zip(SOURCE_OUTPUTS, out_stored)) + list(extra.items()):
            if q in datasets:
                writer.write(datasets[q], a, start)
        for q in _checked(level):
            writer.write(datasets[q], checked.storage(q, stop - start), start)
        flush.kick()
        stages["write"] += clock() - computed
        interruption.check()
        bar.update(1)
    report.energy_density_range = (low, high)
