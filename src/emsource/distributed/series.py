"""Many snapshot files read as one time series: which levels, in which order, on which grid.

:func:`open_series` takes one snapshot file, a directory of them or a glob pattern, opens each
file once through :func:`emsource.snapshot.open_snapshot` (so native files and layout mappings
both work, with the same checks and messages), and returns a :class:`SeriesLevel` per time
level, ordered by coordinate time. A :class:`SeriesLevel` holds only metadata (file, level
index, grid, units, storage order, each quantity's shape, type and chunking): it is small and
picklable, so the tasks of a Dask graph carry it to worker processes, which open the file
themselves (:mod:`.arrays`). No HDF5 file stays open.

Checks across files, each a :class:`~emsource.snapshot.SnapshotError` naming both places:
two levels at the same time (a dump written twice, or two runs mixed), and levels whose grid
(points, origin, spacing) or unit system differs from the first level of the series.
"""

from __future__ import annotations

import glob
import os
from dataclasses import dataclass, field

import numpy as np

from ..grid import UniformGrid
from ..snapshot import SnapshotError, TimeLevel, open_snapshot
from ..snapshot.levels import choose_levels

__all__ = ["choose_in_series", "SeriesLevel", "open_series", "snapshot_files", "SNAPSHOT_SUFFIXES"]

#: File name endings taken from a directory (other files there are left alone).
SNAPSHOT_SUFFIXES = (".h5", ".hdf5", ".he5")


@dataclass(frozen=True)
class StoredInfo:
    """What the tasks need to know about one stored quantity without opening the file."""

    shape: tuple
    dtype: str
    chunk_rows: int
    chunk_bytes: int
    paths: tuple = ()


@dataclass(frozen=True)
class SeriesLevel:
    """One time level of a series: where it is stored and what it holds (metadata only).

    Attributes
    ----------
    path : str
        The HDF5 file (absolute).
    mapping : str or None
        The layout mapping file (absolute), None for the native layout.
    index : int
        Position of the level in its file (``SnapshotFile.levels[index]``).
    label, time, grid, units, axis_order, where
        As for :class:`emsource.snapshot.TimeLevel`.
    stored : dict
        Quantity name -> :class:`StoredInfo`.
    """

    path: str
    mapping: str | None
    index: int
    label: str
    time: float
    grid: UniformGrid
    units: str
    axis_order: str
    where: str
    stored: dict = field(default_factory=dict)

    # The storage geometry is that of TimeLevel (the same properties, read from axis_order
    # and grid), so that code written for a TimeLevel (error relocation, views) takes either.
    slab_axis = TimeLevel.slab_axis
    storage_shape = TimeLevel.storage_shape
    plane_points = TimeLevel.plane_points
    to_xyz = TimeLevel.to_xyz

    def has(self, quantity: str) -> bool:
        return quantity in self.stored

    def dtype(self, quantity: str) -> np.dtype:
        return np.dtype(self.stored[quantity].dtype)

    def dataset_paths(self, quantity: str) -> list:
        """HDF5 paths read for ``quantity`` (for provenance)."""
        return list(self.stored[quantity].paths)

    def require(self, quantities, purpose: str):
        """Raise a :class:`SnapshotError` naming the missing ones of ``quantities``."""
        missing = [q for q in quantities if q not in self.stored]
        if missing:
            raise SnapshotError(f"{self.where}, time level {self.label!r}: {purpose} needs "
                                f"{', '.join(missing)}; the level holds "
                                f"{', '.join(self.stored) or 'no known quantity'}")


def _of_level(level, path, mapping, index) -> SeriesLevel:
    stored = {}
    for q in level.quantities:
        source = level.source(q)
        stored[q] = StoredInfo(tuple(source.shape), np.dtype(source.dtype).str,
                               int(source.chunk_rows), int(source.chunk_bytes),
                               tuple(source.paths))
    return SeriesLevel(path, mapping, index, level.label, level.time, level.grid, level.units,
                       level.axis_order, level.where, stored)


def snapshot_files(spec) -> list:
    """The files named by ``spec``: a file, a directory (its ``*.h5``, ``*.hdf5`` and ``*.he5``
    files, sorted by name) or a glob pattern (sorted matches); a list of these is joined.

    Raises
    ------
    SnapshotError
        A directory without snapshot files, a pattern that matches nothing, or a missing path.
    """
    if isinstance(spec, (list, tuple)):
        files = [f for item in spec for f in snapshot_files(item)]
    else:
        spec = os.fspath(spec)
        if os.path.isdir(spec):
            files = sorted(os.path.join(spec, name) for name in os.listdir(spec)
                           if name.lower().endswith(SNAPSHOT_SUFFIXES) and not name.startswith(".")
                           and os.path.isfile(os.path.join(spec, name)))
            if not files:
                raise SnapshotError(f"snapshot directory {spec!r} holds no snapshot file (none "
                                    f"ending in {', '.join(SNAPSHOT_SUFFIXES)})")
        elif glob.has_magic(spec):
            files = sorted(f for f in glob.glob(spec) if os.path.isfile(f))
            if not files:
                raise SnapshotError(f"snapshot pattern {spec!r} matches no file")
        else:
            files = [spec]  # open_snapshot says what is wrong with it, if anything
    seen, unique = set(), []
    for f in files:
        key = os.path.realpath(f)
        if key in seen:
            raise SnapshotError(f"snapshot file {f!r} is named twice (directly or through a "
                                "link); give each file once")
        seen.add(key)
        unique.append(f)
    return unique


def _same_grid(a: UniformGrid, b: UniformGrid) -> bool:
    return (tuple(a.shape) == tuple(b.shape) and tuple(a.origin) == tuple(b.origin)
            and tuple(a.spacing) == tuple(b.spacing))


def _grid_text(grid) -> str:
    return (f"{'x'.join(str(n) for n in grid.shape)} points, origin {tuple(grid.origin)}, "
            f"spacing {tuple(grid.spacing)}")


def open_series(spec, mapping=None, levels=None) -> list:
    """The time levels of one or many snapshot files, ordered by time.

    Parameters
    ----------
    spec : str, path-like or list of them
        A snapshot file, a directory of snapshot files or a glob pattern (see
        :func:`snapshot_files`).
    mapping : str or path-like, optional
        A layout mapping that every file follows.
    levels : sequence of int, optional
        Levels to keep (default all), each at most once: positions in the time-ordered series,
        or, when ``spec`` comes down to one file, the indices of that file's own levels (as on the
        single-process path, :meth:`emsource.snapshot.SnapshotFile.select`; the two differ for
        a file whose levels are not stored in time order).

    Returns
    -------
    list of SeriesLevel

    Raises
    ------
    SnapshotError
        A bad file (as :func:`emsource.snapshot.open_snapshot` reports it), two levels at the
        same time, or a grid or unit system that differs from that of the first level.
    """
    mapping_path = None if mapping is None else os.path.abspath(os.fspath(mapping))
    found = []
    for path in snapshot_files(spec):
        with open_snapshot(path, mapping_path) as snap:
            absolute = os.path.abspath(path)
            found += [_of_level(level, absolute, mapping_path, i)
                      for i, level in enumerate(snap.levels)]
    found.sort(key=lambda level: level.time)  # stable: file order, then level order
    for before, after in zip(found, found[1:]):
        if before.time == after.time:
            raise SnapshotError(f"time t = {after.time!r} appears twice in the series: "
                                f"{before.where}, time level {before.label!r} and {after.where}, "
                                f"time level {after.label!r}; give each time once")
    first = found[0]
    for level in found[1:]:
        if not _same_grid(level.grid, first.grid):
            raise SnapshotError(f"{level.where}, time level {level.label!r} (t = {level.time:g}) "
                                f"has the grid {_grid_text(level.grid)}; the series began on "
                                f"{_grid_text(first.grid)} ({first.where}, time level "
                                f"{first.label!r}): every level of a series needs the same grid")
        if level.units != first.units:
            raise SnapshotError(f"{level.where}, time level {level.label!r} is in {level.units!r} "
                                f"units; the series began in {first.units!r} ({first.where}, "
                                f"time level {first.label!r})")
    return choose_in_series(found, levels, spec if isinstance(spec, str) else "snapshot series")


def choose_in_series(series, levels, where="snapshot series") -> list:
    """The levels of ``series`` (time-ordered, from :func:`open_series`) that ``levels`` names,
    each at most once: positions in time order, or, when every level comes from one file, the
    indices of that file's levels (what ``levels`` means without a cluster; the two differ for a
    file whose levels are not stored in time order)."""
    if levels is not None and len({level.path for level in series}) == 1:
        # One file: --levels means what it means without a cluster (the file's own indices).
        series = sorted(series, key=lambda level: level.index)
    return choose_levels(series, levels, where)
