"""Electromagnetic sources of one snapshot or a time series on a Dask cluster (``map_blocks``).

The sources are pointwise, so each block (whole stored chunks along the slowest storage axis,
:mod:`.arrays`) goes through :func:`emsource.adm_sources` on its own: a ``map_blocks`` over
the spatial metric, E, B and the valid_mask (one stacked array, :mod:`.arrays`), exactly what the single-process
:func:`emsource.snapshot.sources_pipeline.compute_sources` does per slab (the same
neutralising of excised points, the same kernel, NaN at excised points). The blocks come back
to this process in order, a few at a time (:func:`.cluster.in_order`), and are written to one
native-layout file through :func:`emsource.snapshot.atomic_output`: complete or absent.

Each output level has the layout of the single-process output (datasets energy_density,
momentum_density, spatial_stress, stress_trace, the valid_mask where the input has one, in
the input's storage order). Levels keep their labels for one input file; a series of several
files is written as levels "0", "1", ... in time order.
"""

from __future__ import annotations

import json
import os
import time as _time

import numpy as np

from .. import adm_sources
from ..quantities import COMPONENTS
from ..snapshot import atomic_output, check_output, chunk_shape, hdf5_output
from ..snapshot.native import LEVELS_GROUP
from ..snapshot.slabs import common_field_dtype, neutralise_excised, slab_error, values_per_point
from ..snapshot.sources_pipeline import (EXCISED_FILL, SOURCE_INPUTS, SOURCE_OUTPUTS,
                                         SourcesReport)
from ..snapshot.writing import (provenance_attributes, write_level_attributes,
                                write_root_attributes)
from ..sources import GridPointError
from .arrays import DEFAULT_BLOCK_BYTES, block_rows, block_starts, level_stack
from .cluster import current_client, in_order
from .series import open_series

__all__ = ["compute_sources_dask", "sources_array"]

#: Output channels of a block: rho, S_i (3), S_ij (6), S, and the valid_mask (1 valid, 0 not).
_CHANNELS = {"energy_density": slice(0, 1), "momentum_density": slice(1, 4),
             "spatial_stress": slice(4, 10), "stress_trace": slice(10, 11)}
_MASK_CHANNEL = 11


def _sources_block(stacked, *, level, layout, check, starts, block_info=None):
    """rho, S_i, S_ij, S and the mask of one block, (12, rows, n1, n2) in storage order."""
    start = starts[block_info[None]["chunk-location"][1]]
    rows = stacked.shape[1]
    xyz = level.to_xyz
    mask = stacked[layout["valid_mask"].start] if "valid_mask" in layout else None
    valid = xyz(mask) != 0 if mask is not None else None
    arrays = neutralise_excised({q: xyz(stacked[layout[q]]) for q in SOURCE_INPUTS}, valid,
                                in_place=False)
    out = np.empty((12, rows) + stacked.shape[2:], stacked.dtype)
    views = (xyz(out[0]), xyz(out[1:4]), xyz(out[4:10]), xyz(out[10]))
    try:
        adm_sources(arrays["spatial_metric"], arrays["electric_field"], arrays["magnetic_field"],
                    units=level.units, check=check, out=views)
    except GridPointError as error:
        raise slab_error(error, level, start, start + rows) from None
    if valid is not None and not valid.all():
        for view in views:
            view[..., ~valid] = EXCISED_FILL
    out[_MASK_CHANNEL] = mask if mask is not None else 1
    return out


def sources_array(level, *, check=True, block_bytes=DEFAULT_BLOCK_BYTES):
    """The sources of ``level`` (a :class:`~.series.SeriesLevel`) as a lazy Dask array.

    Returns
    -------
    dask.array.Array
        (12, *storage grid) in the level's storage order and the common type of E and B:
        channels rho, S_i (3), S_ij (6), S, then the valid_mask (1 or 0); NaN at excised points.
    """
    level.require(SOURCE_INPUTS, "the sources")
    dtype = common_field_dtype(level)
    read = SOURCE_INPUTS + (("valid_mask",) if level.has("valid_mask") else ())
    heights = block_rows(level, read, values_per_point(SOURCE_INPUTS + SOURCE_OUTPUTS) + 2,
                         dtype.itemsize, block_bytes)
    stacked, layout = level_stack(level, read, heights, dtype)
    n1, n2 = level.storage_shape[1:]
    return stacked.map_blocks(
        _sources_block, level=level, layout=layout, check=check, starts=block_starts(heights),
        chunks=((12,), heights, (n1,), (n2,)), dtype=dtype, meta=np.empty((0, 0, 0, 0), dtype))


def compute_sources_dask(inputs, output_file, *, mapping=None, block_bytes=DEFAULT_BLOCK_BYTES,
                         force=False, compression=None, levels=None, check=True,
                         outputs=SOURCE_OUTPUTS, progress=False, window=None) -> SourcesReport:
    """:func:`emsource.snapshot.sources_pipeline.compute_sources` on Dask, for one or many files.

    Parameters
    ----------
    inputs : str, path-like or list
        A snapshot, a directory of snapshots or a glob pattern (:func:`.series.open_series`).
    output_file : str or path-like
        The native-layout output (never an input).
    block_bytes : int
        Bound on the values one task holds (:func:`.arrays.block_rows`).
    window : int, optional
        Blocks in flight at once (default: 2 per worker, at least 4): this process holds
        that many output blocks at most.
    mapping, force, compression, levels, check, outputs, progress
        As for ``compute_sources``; ``levels`` are positions in the time-ordered series.

    Returns
    -------
    SourcesReport
        ``rows_per_slab`` and ``slabs`` count blocks.
    """
    began = _time.perf_counter()
    unknown = sorted(set(outputs) - set(SOURCE_OUTPUTS))
    if unknown or not outputs:
        raise ValueError(f"outputs must be some of {', '.join(SOURCE_OUTPUTS)}; found {list(outputs)}")
    outputs = tuple(q for q in SOURCE_OUTPUTS if q in set(outputs))
    chosen = open_series(inputs, mapping, levels)
    files = sorted({level.path for level in chosen})
    sources = files + ([chosen[0].mapping] if chosen[0].mapping else [])
    check_output(output_file, force=force, inputs=sources)
    arrays = [sources_array(level, check=check, block_bytes=block_bytes) for level in chosen]
    one_file = len(files) == 1
    labels = [level.label if one_file else str(k) for k, level in enumerate(chosen)]
    report = SourcesReport(", ".join(files), os.path.abspath(os.fspath(output_file)))
    first = chosen[0]
    report.levels = len(chosen)
    report.grid_shape = first.grid.shape
    report.axis_order = first.axis_order
    report.units = first.units
    report.dtype = str(arrays[0].dtype)
    report.rows_per_slab = max(arrays[0].chunks[1])
    report.slabs = sum(a.numblocks[1] for a in arrays)
    report.planned_bytes = int(block_bytes)
    options = {"block_bytes": int(block_bytes), "compression": compression or "none",
               "check": bool(check), "outputs": list(outputs), "levels": labels,
               "scheduler": "dask"}
    used = [path for level in chosen for q in SOURCE_INPUTS + ("valid_mask",) if level.has(q)
            for path in level.dataset_paths(q)]
    attributes = provenance_attributes(files[0], used, options, first.mapping)
    attributes["input_files"] = json.dumps(files)
    attributes["input_levels"] = json.dumps([[level.path, level.label] for level in chosen])
    if window is None:
        client = current_client()
        window = max(4, 2 * len(client.scheduler_info().get("workers", ()))) if client else 4
    blocks = [(k, i, block) for k, a in enumerate(arrays)
              for i, block in enumerate(a.to_delayed().ravel())]
    low, high = np.inf, -np.inf
    with atomic_output(output_file, force=force, inputs=sources) as temporary:
        with hdf5_output(temporary, output_file, rdcc_nbytes=0) as out:
            write_root_attributes(out, attributes)
            group = out.create_group(LEVELS_GROUP)
            datasets = [_level_datasets(group, label, level, a, outputs, compression)
                        for label, level, a in zip(labels, chosen, arrays)]
            values = in_order([b for _, _, b in blocks], window=window, progress=progress,
                              description="sources")
            for (k, i, _), value in zip(blocks, values):
                start = block_starts(arrays[k].chunks[1])[i]
                stop = start + value.shape[1]
                valid = value[_MASK_CHANNEL] != 0
                rho = value[0]
                low = min(low, float(rho.min(where=valid, initial=np.inf)))
                high = max(high, float(rho.max(where=valid, initial=-np.inf)))
                for q, dataset in datasets[k].items():
                    if q == "valid_mask":
                        dataset[start:stop] = value[_MASK_CHANNEL].astype(np.uint8)
                    elif COMPONENTS[q]:
                        dataset[:, start:stop] = value[_CHANNELS[q]]
                    else:
                        dataset[start:stop] = value[_CHANNELS[q].start]
                report.bytes_read += sum(value.shape[1] * chosen[k].plane_points
                                         * arrays[k].dtype.itemsize * COMPONENTS[q]
                                         for q in SOURCE_INPUTS)
    report.times = [level.time for level in chosen]
    report.energy_density_range = (low, high)
    report.bytes_written = os.path.getsize(report.output_file)
    report.seconds = _time.perf_counter() - began
    return report


def _level_datasets(group, label, level, array, outputs, compression) -> dict:
    """The output datasets of one level (chunks of whole planes dividing the block height)."""
    g = group.create_group(label)
    write_level_attributes(g, time=level.time, grid=level.grid, units=level.units,
                           axis_order=level.axis_order)
    stored = level.storage_shape
    height = array.chunks[1][0]
    chunk_rows = min(chunk_shape(stored, array.dtype.itemsize)[0], height)
    while height % chunk_rows:  # a divisor of the block: writes cover whole chunks
        chunk_rows -= 1
    datasets = {}
    for q in outputs:
        ncomp = COMPONENTS[q]
        datasets[q] = g.create_dataset(
            q, shape=((ncomp,) if ncomp else ()) + stored, dtype=array.dtype,
            chunks=((1,) if ncomp else ()) + (chunk_rows,) + stored[1:], compression=compression)
    if level.has("valid_mask"):
        datasets["valid_mask"] = g.create_dataset("valid_mask", shape=stored, dtype=np.uint8,
                                                  chunks=(chunk_rows,) + stored[1:],
                                                  compression=compression)
    return datasets
