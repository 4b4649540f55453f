"""Snapshot files: the native HDF5 layout of emsource, and reading any layout slab by slab.

The native layout
-----------------
One HDF5 file holds one or more time levels of one 3D uniform grid::

    /                                   attributes: format = "emsource-snapshot",
    |                                               format_version = 1
    |                                   (output files also carry the provenance attributes below)
    +-- time_levels/                    group
        +-- 0, 1, 2, ...                one group per time level, named by its index
            |                           attributes: time         float, coordinate time
            |                                       origin       3 floats, (x, y, z) of point (0,0,0)
            |                                       spacing      3 floats, (dx, dy, dz)
            |                                       axis_order   "xyz" or "zyx"
            |                                       units        "gaussian" or "heaviside_lorentz"
            +-- lapse                   (*grid)
            +-- shift                   (3, *grid)     beta^i
            +-- spatial_metric          (6, *grid)     gamma_ij packed (xx, xy, xz, yy, yz, zz)
            +-- extrinsic_curvature     (6, *grid)     K_ij packed
            +-- electric_field          (3, *grid)     E^i (contravariant, normal observer)
            +-- magnetic_field          (3, *grid)     B^i
            +-- charge_density          (*grid)
            +-- current_density         (3, *grid)
            +-- valid_mask              (*grid) uint8, 1 where the data are valid (optional)
            +-- energy_density          (*grid)        outputs of ``emsource sources``: rho,
            +-- momentum_density        (3, *grid)     S_i (covariant),
            +-- spatial_stress          (6, *grid)     S_ij packed,
            +-- stress_trace            (*grid)        S = gamma^ij S_ij

Every dataset is optional; a computation says which ones it needs. The component axis comes
first. ``*grid`` is the grid in storage order: (nx, ny, nz) when ``axis_order`` is "xyz", and
(nz, ny, nx) when it is "zyx"; component indices always mean (x, y, z). ``origin`` and
``spacing`` are always given in (x, y, z) order. Data are float32 or float64; all quantities of
one level share the grid. Outputs are written in the storage order of their input.

Provenance attributes of an output file's root: ``producer`` ("emsource <version>"),
``created_utc`` (ISO 8601), ``input_file`` (absolute path), ``input_mapping`` (the mapping file
or ""), ``input_datasets`` (JSON list of the HDF5 paths read) and ``options`` (JSON object of
the settings used).

Reading
-------
:func:`open_snapshot` opens a native file, or any file through a layout mapping
(:mod:`emsource.layout_mapping`), read-only, and returns a :class:`SnapshotFile`, whose
:class:`TimeLevel` objects read one quantity over a slab of the slowest storage axis at a time,
so that files larger than memory can be processed (:mod:`emsource.streaming`). Arrays come back
component first in (x, y, z) axis order, as views of the storage-order buffer.
"""

from __future__ import annotations

import json
import os
import tempfile
from contextlib import contextmanager

import h5py
import numpy as np

from . import __version__
from .grid import UniformGrid

__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "QUANTITIES",
    "SnapshotError",
    "OutputError",
    "SnapshotFile",
    "TimeLevel",
    "open_snapshot",
    "write_snapshot",
    "read_level",
    "atomic_output",
    "provenance_attributes",
]

FORMAT_NAME = "emsource-snapshot"
FORMAT_VERSION = 1
LEVELS_GROUP = "time_levels"

#: Quantity name -> number of components (0 for a scalar). Inputs first, outputs last.
QUANTITIES = {
    "lapse": 0,
    "shift": 3,
    "spatial_metric": 6,
    "extrinsic_curvature": 6,
    "electric_field": 3,
    "magnetic_field": 3,
    "charge_density": 0,
    "current_density": 3,
    "valid_mask": 0,
    "energy_density": 0,
    "momentum_density": 3,
    "spatial_stress": 6,
    "stress_trace": 0,
}
AXIS_ORDERS = ("xyz", "zyx")
UNIT_SYSTEMS = ("gaussian", "heaviside_lorentz")

#: Chunk cache per open dataset (bytes). Kept small and known so that the memory bound of the
#: streaming code can count it; h5py's default is 1 MiB per dataset.
CHUNK_CACHE_BYTES = 256 * 1024


class SnapshotError(ValueError):
    """An input snapshot or mapping is missing, unreadable or inconsistent."""


class OutputError(OSError):
    """An output file cannot be written (exists without ``force``, directory not writable)."""


def _components(quantity: str) -> int:
    return QUANTITIES[quantity]


class TimeLevel:
    """One time level of a snapshot: metadata, and slab reads of its quantities.

    Attributes
    ----------
    label : str
        Name of the level in its file (native: the group name, "0", "1", ...).
    time : float
        Coordinate time.
    grid : UniformGrid
        The grid in (x, y, z) order.
    units : str
        Unit system of the fields, "gaussian" or "heaviside_lorentz".
    axis_order : str
        Storage order of the grid axes, "xyz" or "zyx".
    """

    def __init__(self, label, time, grid, units, axis_order, sources, where):
        self.label = label
        self.time = float(time)
        self.grid = grid
        self.units = units
        self.axis_order = axis_order
        self._sources = sources  # quantity -> _Source
        self._where = where

    # --- geometry of the storage ------------------------------------------------------------
    @property
    def slab_axis(self) -> int:
        """The (x, y, z) axis that is slowest in storage: slabs are cut along it."""
        return 0 if self.axis_order == "xyz" else 2

    @property
    def storage_shape(self) -> tuple:
        """Grid shape in storage order."""
        return self.grid.shape if self.axis_order == "xyz" else self.grid.shape[::-1]

    def slab_grid(self, start: int, stop: int) -> UniformGrid:
        """The sub-grid of storage rows ``start:stop`` along :attr:`slab_axis`."""
        ax = self.slab_axis
        shape = list(self.grid.shape)
        origin = list(self.grid.origin)
        shape[ax] = stop - start
        origin[ax] = self.grid.origin[ax] + start * self.grid.spacing[ax]
        return UniformGrid(tuple(shape), tuple(origin), self.grid.spacing)

    # --- contents ----------------------------------------------------------------------------
    def has(self, quantity: str) -> bool:
        return quantity in self._sources

    @property
    def quantities(self) -> tuple:
        return tuple(q for q in QUANTITIES if q in self._sources)

    def dtype(self, quantity: str) -> np.dtype:
        return self._source(quantity).dtype

    def dataset_paths(self, quantity: str) -> list:
        """HDF5 paths that :meth:`read` reads for ``quantity`` (for provenance)."""
        return list(self._source(quantity).paths)

    def _source(self, quantity):
        if quantity not in QUANTITIES:
            raise SnapshotError(f"unknown quantity {quantity!r}; known: {', '.join(QUANTITIES)}")
        try:
            return self._sources[quantity]
        except KeyError:
            raise SnapshotError(
                f"{self._where}: time level {self.label!r} has no {quantity!r}; "
                f"it holds {', '.join(self.quantities) or 'no known quantity'}"
                f"{self._listing()}") from None

    def _listing(self) -> str:
        listing = getattr(self, "file_listing", None)
        return f". Objects in the file: {listing}" if listing else ""

    def read(self, quantity: str, start: int = 0, stop: int | None = None, dtype=None,
             out=None) -> np.ndarray:
        """Read ``quantity`` over storage rows ``start:stop`` of the slowest axis.

        Parameters
        ----------
        quantity : str
            A name of :data:`QUANTITIES`.
        start, stop : int
            Row range along :attr:`slab_axis` (default: all).
        dtype : numpy dtype, optional
            Type of the result (default: the stored one).
        out : ndarray, optional
            Storage-order buffer, shape ``(ncomp, stop - start, n1, n2)`` (no component axis for
            a scalar), C-contiguous, of the requested dtype; reused to avoid allocation.

        Returns
        -------
        ndarray
            Component first, grid axes in (x, y, z) order: a view of the storage buffer
            (transposed when ``axis_order`` is "zyx").
        """
        source = self._source(quantity)
        n0 = self.storage_shape[0]
        stop = n0 if stop is None else stop
        if not 0 <= start < stop <= n0:
            raise ValueError(f"slab rows {start}:{stop} outside 0:{n0}")
        ncomp = _components(quantity)
        shape = ((ncomp,) if ncomp else ()) + (stop - start,) + self.storage_shape[1:]
        dtype = np.dtype(source.dtype if dtype is None else dtype)
        if out is None:
            out = np.empty(shape, dtype)
        elif out.shape != shape or out.dtype != dtype or not out.flags.c_contiguous:
            raise ValueError(f"read({quantity!r}): out must be C-contiguous {shape} {dtype}, "
                             f"found {out.shape} {out.dtype}")
        try:
            source.read_into(out, start, stop)
        except (OSError, RuntimeError, KeyError) as error:
            raise SnapshotError(f"{self._where}: cannot read {quantity!r} of time level "
                                f"{self.label!r} (rows {start}:{stop}): {error}") from error
        return self.to_xyz(out)

    def to_xyz(self, stored: np.ndarray) -> np.ndarray:
        """View of a storage-order array (component axis first if any) in (x, y, z) order."""
        if self.axis_order == "xyz":
            return stored
        lead = stored.ndim - 3
        return stored.transpose(tuple(range(lead)) + (lead + 2, lead + 1, lead))

    def to_storage(self, xyz: np.ndarray) -> np.ndarray:
        """Inverse of :meth:`to_xyz` (the same axis reversal)."""
        return self.to_xyz(xyz)


class _NativeSource:
    """One native dataset (component axis first, storage order)."""

    def __init__(self, dataset):
        self.dataset = dataset
        self.dtype = np.dtype(np.uint8) if dataset.dtype == np.bool_ else dataset.dtype
        self.paths = (dataset.name,)

    def read_into(self, out, start, stop):
        if self.dataset.ndim == 4:
            self.dataset.read_direct(out, source_sel=np.s_[:, start:stop])
        else:
            self.dataset.read_direct(out, source_sel=np.s_[start:stop])


class SnapshotFile:
    """An open snapshot (read-only). Use as a context manager; see :func:`open_snapshot`.

    Attributes
    ----------
    path : str
    levels : list of TimeLevel
    mapping_path : str or None
        The layout mapping used, if any.
    """

    def __init__(self, path, h5file, levels, mapping_path=None):
        self.path = path
        self._file = h5file
        self.levels = levels
        self.mapping_path = mapping_path

    @property
    def description(self) -> str:
        """The root attribute ``description`` (free text about the scenario), or ""."""
        return _text(self._file.attrs.get("description", ""))

    def close(self):
        self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _file_listing(h5file, limit=40) -> str:
    """The file's datasets and groups, for error messages."""
    names = []

    def visit(name, obj):
        kind = f"dataset {obj.shape} {obj.dtype}" if isinstance(obj, h5py.Dataset) else "group"
        names.append(f"/{name} ({kind})")

    h5file.visititems(visit)
    if not names:
        return "(the file is empty)"
    more = f", ... ({len(names) - limit} more)" if len(names) > limit else ""
    return ", ".join(names[:limit]) + more


def _open_hdf5(path) -> h5py.File:
    """Open ``path`` read-only with a small, known chunk cache; clear errors otherwise."""
    path = os.fspath(path)
    if not os.path.exists(path):
        raise SnapshotError(f"snapshot {path!r} does not exist")
    if not os.path.isfile(path):
        raise SnapshotError(f"snapshot {path!r} is not a file")
    if not h5py.is_hdf5(path):
        raise SnapshotError(f"snapshot {path!r} is not an HDF5 file (no HDF5 signature found)")
    try:
        return h5py.File(path, "r", rdcc_nbytes=CHUNK_CACHE_BYTES)
    except OSError as error:
        raise SnapshotError(f"snapshot {path!r} cannot be opened as HDF5 "
                            f"(truncated or damaged?): {error}") from error


def _attribute(obj, name, where):
    try:
        return obj.attrs[name]
    except KeyError:
        raise SnapshotError(f"{where}: attribute {name!r} missing; found "
                            f"{sorted(obj.attrs.keys()) or 'no attributes'}") from None


def _text(value) -> str:
    return value.decode() if isinstance(value, bytes) else str(value)


def check_level_shapes(level: TimeLevel, sources: dict, where: str):
    """Every source of a level must have the grid's storage shape and its component count."""
    expected_grid = level.storage_shape
    for quantity, source in sources.items():
        ncomp = _components(quantity)
        expected = ((ncomp,) if ncomp else ()) + expected_grid
        found = source.shape
        if tuple(found) != expected:
            raise SnapshotError(
                f"{where}: time level {level.label!r}: {quantity!r} ({', '.join(source.paths)}) "
                f"has shape {tuple(found)}, expected {expected} (component axis first, grid "
                f"{expected_grid} in {level.axis_order!r} storage order)")
        if not (np.issubdtype(source.dtype, np.floating) or quantity == "valid_mask"):
            raise SnapshotError(f"{where}: {quantity!r} has dtype {source.dtype}, "
                                "expected float32 or float64")


def _native_levels(h5file, path):
    where = f"snapshot {path!r}"
    if _text(h5file.attrs.get("format", "")) != FORMAT_NAME:
        raise SnapshotError(
            f"{where} is not in the emsource layout (root attribute format={FORMAT_NAME!r} "
            f"missing); give a layout mapping for other layouts. Objects in the file: "
            f"{_file_listing(h5file)}")
    version = int(h5file.attrs.get("format_version", -1))
    if version != FORMAT_VERSION:
        raise SnapshotError(f"{where}: format_version {version} not supported "
                            f"(this emsource reads {FORMAT_VERSION})")
    if LEVELS_GROUP not in h5file:
        raise SnapshotError(f"{where}: group /{LEVELS_GROUP} missing. Objects in the file: "
                            f"{_file_listing(h5file)}")
    group = h5file[LEVELS_GROUP]
    labels = sorted(group.keys(), key=lambda s: (not s.isdigit(), int(s) if s.isdigit() else 0, s))
    levels = []
    for label in labels:
        g = group[label]
        lw = f"{where}, /{LEVELS_GROUP}/{label}"
        axis_order = _text(_attribute(g, "axis_order", lw))
        units = _text(_attribute(g, "units", lw))
        if axis_order not in AXIS_ORDERS:
            raise SnapshotError(f"{lw}: axis_order {axis_order!r}, expected one of {AXIS_ORDERS}")
        if units not in UNIT_SYSTEMS:
            raise SnapshotError(f"{lw}: units {units!r}, expected one of {UNIT_SYSTEMS}")
        origin = tuple(float(v) for v in _attribute(g, "origin", lw))
        spacing = tuple(float(v) for v in _attribute(g, "spacing", lw))
        sources = {}
        for name, obj in g.items():
            if name in QUANTITIES and isinstance(obj, h5py.Dataset):
                sources[name] = _NativeSource(obj)
        if not sources:
            raise SnapshotError(f"{lw}: no known dataset; expected some of {', '.join(QUANTITIES)}"
                                f"; found {sorted(g.keys())}")
        any_source = next(iter(sources.items()))
        ncomp = _components(any_source[0])
        stored = tuple(any_source[1].dataset.shape[1 if ncomp else 0:])
        if len(stored) != 3:
            raise SnapshotError(f"{lw}: {any_source[0]!r} has shape {any_source[1].dataset.shape}; "
                                "snapshots must hold 3D grids")
        shape = stored if axis_order == "xyz" else stored[::-1]
        try:
            grid = UniformGrid(shape, origin, spacing)
        except ValueError as error:
            raise SnapshotError(f"{lw}: {error}") from None
        level = TimeLevel(label, float(_attribute(g, "time", lw)), grid, units, axis_order,
                          sources, where)
        for s in sources.values():
            s.shape = s.dataset.shape
        check_level_shapes(level, sources, where)
        level.file_listing = None
        levels.append(level)
    if not levels:
        raise SnapshotError(f"{where}: /{LEVELS_GROUP} holds no time level")
    return levels


def open_snapshot(path, mapping=None) -> SnapshotFile:
    """Open a snapshot read-only.

    Parameters
    ----------
    path : str or path-like
        HDF5 file.
    mapping : str, path-like or LayoutMapping, optional
        A layout mapping (:mod:`emsource.layout_mapping`) for files not in the native layout.

    Raises
    ------
    SnapshotError
        Missing, non-HDF5 or damaged file; not native and no mapping; missing attributes;
        datasets whose shapes disagree (the message says which and what the file holds).
    """
    h5file = _open_hdf5(path)
    try:
        if mapping is None:
            levels = _native_levels(h5file, os.fspath(path))
            mapping_path = None
        else:
            from .layout_mapping import LayoutMapping, load_mapping
            if not isinstance(mapping, LayoutMapping):
                mapping = load_mapping(mapping)
            levels = mapping.levels(h5file, os.fspath(path))
            mapping_path = mapping.path
    except BaseException:
        h5file.close()
        raise
    return SnapshotFile(os.fspath(path), h5file, levels, mapping_path)


def read_level(path, index: int = 0, mapping=None) -> dict:
    """Every quantity of time level ``index`` in memory, (x, y, z) order, plus metadata.

    Returns a dict: quantity name -> ndarray, and "time", "grid", "units", "label".
    """
    with open_snapshot(path, mapping) as snap:
        level = snap.levels[index]
        data = {q: level.read(q) for q in level.quantities}
        data.update(time=level.time, grid=level.grid, units=level.units, label=level.label)
    return data


# --- writing ---------------------------------------------------------------------------------

@contextmanager
def atomic_output(path, *, force: bool = False):
    """Yield a temporary path beside ``path``; rename it to ``path`` only on success.

    The temporary file (``.<name>.<random>.partial`` in the same directory, so that the rename
    is atomic) is removed on any exception, including KeyboardInterrupt, so an output is
    complete or absent. Only a process killed outright (SIGKILL, power loss) can leave such a
    hidden ``.partial`` file behind, never a half-written ``path``. An existing ``path`` is
    replaced only with ``force``.

    Raises
    ------
    OutputError
        ``path`` exists and ``force`` is false, or its directory is missing or not writable.
    """
    path = os.path.abspath(os.fspath(path))
    directory = os.path.dirname(path)
    if os.path.isdir(path):
        raise OutputError(f"output {path!r} is a directory")
    if os.path.exists(path) and not force:
        raise OutputError(f"output {path!r} exists; use --force (force=True in Python) to replace it")
    if not os.path.isdir(directory):
        raise OutputError(f"output directory {directory!r} does not exist")
    try:
        handle, temporary = tempfile.mkstemp(prefix="." + os.path.basename(path) + ".",
                                             suffix=".partial", dir=directory)
    except OSError as error:
        raise OutputError(f"cannot write in output directory {directory!r}: {error}") from error
    os.close(handle)
    try:
        yield temporary
        # mkstemp makes the file private (0600); give it the permissions of a normal new file.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        os.replace(temporary, path)
    except BaseException:
        try:
            os.unlink(temporary)
        except FileNotFoundError:
            pass
        raise


def provenance_attributes(input_file, input_datasets, options, mapping_path=None) -> dict:
    """Root attributes that say how an output was made (see the module docstring)."""
    import datetime

    return {
        "producer": f"emsource {__version__}",
        "created_utc": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "input_file": os.path.abspath(os.fspath(input_file)),
        "input_mapping": os.path.abspath(os.fspath(mapping_path)) if mapping_path else "",
        "input_datasets": json.dumps(sorted(set(input_datasets))),
        "options": json.dumps(options, sort_keys=True),
    }


def write_root_attributes(h5file, extra=None):
    h5file.attrs["format"] = FORMAT_NAME
    h5file.attrs["format_version"] = FORMAT_VERSION
    for key, value in (extra or {}).items():
        h5file.attrs[key] = value


def write_level_attributes(group, *, time, grid, units, axis_order):
    if axis_order not in AXIS_ORDERS:
        raise ValueError(f"axis_order must be one of {AXIS_ORDERS}, found {axis_order!r}")
    if units not in UNIT_SYSTEMS:
        raise ValueError(f"units must be one of {UNIT_SYSTEMS}, found {units!r}")
    group.attrs["time"] = float(time)
    group.attrs["origin"] = np.asarray(grid.origin, dtype=np.float64)
    group.attrs["spacing"] = np.asarray(grid.spacing, dtype=np.float64)
    group.attrs["axis_order"] = axis_order
    group.attrs["units"] = units


_FIELDS_OF_SLICE = {
    "lapse": "alpha",
    "shift": "beta",
    "spatial_metric": "gamma",
    "extrinsic_curvature": "K",
    "electric_field": "E",
    "magnetic_field": "B",
    "charge_density": "charge_density",
    "current_density": "current_density",
}


def write_snapshot(path, levels, *, force: bool = False, axis_order: str = "xyz",
                   compression: str | None = None, attributes: dict | None = None):
    """Write exact or simulated data as a native snapshot (atomically).

    Parameters
    ----------
    path : str or path-like
        Output file; replaced only with ``force``.
    levels : sequence of SliceFields or of dict
        One entry per time level. A dict maps quantity names (:data:`QUANTITIES`) to arrays in
        (x, y, z) order, component first, plus "time", "grid" (UniformGrid) and "units".
        A :class:`~emsource.exact.SliceFields` gives all eight inputs and its mask.
    axis_order : {"xyz", "zyx"}
        Storage order of the grid axes.
    compression : {None, "gzip"}
        Dataset compression (chunked datasets, one chunk per component and a few planes).
    attributes : dict, optional
        Extra root attributes (for example a description of the scenario).
    """
    entries = [_level_dict(level) for level in levels]
    with atomic_output(path, force=force) as temporary:
        with h5py.File(temporary, "w") as f:
            write_root_attributes(f, attributes)
            group = f.create_group(LEVELS_GROUP)
            for index, entry in enumerate(entries):
                g = group.create_group(str(index))
                grid = entry["grid"]
                write_level_attributes(g, time=entry["time"], grid=grid, units=entry["units"],
                                       axis_order=axis_order)
                for quantity, array in entry["arrays"].items():
                    ncomp = _components(quantity)
                    expected = ((ncomp,) if ncomp else ()) + grid.shape
                    if array.shape != expected:
                        raise ValueError(f"write_snapshot: {quantity!r} has shape {array.shape}, "
                                         f"expected {expected}")
                    stored = array if axis_order == "xyz" else array.transpose(
                        tuple(range(array.ndim - 3)) + (array.ndim - 1, array.ndim - 2, array.ndim - 3))
                    kwargs = {}
                    if compression:
                        kwargs = dict(compression=compression,
                                      chunks=chunk_shape(stored.shape, stored.dtype.itemsize))
                    g.create_dataset(quantity, data=np.ascontiguousarray(stored), **kwargs)


def chunk_shape(shape, itemsize, target_bytes=1 << 20):
    """Chunks of one component and as many planes of the slowest grid axis as fit ~1 MiB."""
    lead = len(shape) - 3
    plane = int(np.prod(shape[lead + 1:])) * itemsize
    rows = int(max(1, min(shape[lead], target_bytes // max(plane, 1))))
    return (1,) * lead + (rows,) + tuple(shape[lead + 1:])


def _level_dict(level):
    if isinstance(level, dict):
        arrays = {q: np.asarray(v) for q, v in level.items() if q in QUANTITIES and v is not None}
        unknown = [k for k in level if k not in QUANTITIES and k not in ("time", "grid", "units")]
        if unknown:
            raise ValueError(f"write_snapshot: unknown quantities {unknown}; known: {list(QUANTITIES)}")
        return {"arrays": arrays, "time": level["time"], "grid": level["grid"],
                "units": level.get("units", "gaussian")}
    arrays = {q: np.asarray(getattr(level, attr)) for q, attr in _FIELDS_OF_SLICE.items()
              if getattr(level, attr) is not None}
    if level.mask is not None:
        arrays["valid_mask"] = np.asarray(level.mask).astype(np.uint8)
    return {"arrays": arrays, "time": level.t, "grid": level.grid, "units": level.units}
