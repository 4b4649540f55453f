"""A time level of a snapshot, and the protocol its data sources follow.

A :class:`TimeLevel` knows its grid, units and storage order, and reads one quantity over a slab
of planes of the slowest storage axis through a :class:`DataSource`. The native layout
(:mod:`.native`) and the layout mappings (:mod:`.mapping`) differ only in the sources they build;
both hand them to :func:`build_level`, which derives the grid and checks every source against it.
"""

from __future__ import annotations

from collections import Counter
from typing import Protocol

import numpy as np

from ..grid import UniformGrid
from ..quantities import COMPONENTS, NAMES
from .errors import SnapshotError

__all__ = ["AXIS_ORDERS", "UNIT_SYSTEMS", "DataSource", "TimeLevel", "build_level",
           "attribute_number", "attribute_vector", "attribute_text", "found", "open_object",
           "kind_of", "level_at", "choose_levels", "chunk_rows_of", "chunk_bytes_of"]

AXIS_ORDERS = ("xyz", "zyx")
UNIT_SYSTEMS = ("gaussian", "heaviside_lorentz")
#: Stored data types the kernels take (float16 and long double are refused with a message).
FLOAT_TYPES = (np.dtype(np.float32), np.dtype(np.float64))


class DataSource(Protocol):
    """Where one quantity of one level comes from.

    Attributes
    ----------
    dtype : numpy dtype
        Type of the stored values.
    shape : tuple
        Shape in storage order with the component axis first (none for a scalar).
    paths : tuple of str
        HDF5 paths read (for provenance and messages); empty if nothing is stored.
    chunk_rows : int
        Planes of the slowest storage axis per stored chunk (the whole axis if contiguous).
    chunk_bytes : int
        Bytes of the largest stored chunk (0 if contiguous).
    scratch_bytes_per_row : int
        Memory, per plane read, that :meth:`read_into` needs beyond ``out`` (counted in the
        memory bound).
    """

    dtype: np.dtype
    shape: tuple
    paths: tuple
    chunk_rows: int
    chunk_bytes: int
    scratch_bytes_per_row: int

    def read_into(self, out: np.ndarray, start: int, stop: int) -> None:
        """Fill ``out`` (storage order, component first, C-contiguous) with rows start:stop."""


def chunk_rows_of(dataset, lead: int) -> int:
    """Planes of the slowest grid axis per chunk (the whole axis for contiguous data)."""
    rows = dataset.chunks or dataset.shape
    return int(rows[lead]) if len(rows) > lead else 1  # too few axes: build_level says so


def chunk_bytes_of(dataset) -> int:
    """Bytes of one chunk (0 for contiguous data, which HDF5 reads without a chunk buffer)."""
    chunks = dataset.chunks
    return int(np.prod(chunks)) * dataset.dtype.itemsize if chunks else 0


def _shape_of(quantity, grid_storage):
    ncomp = COMPONENTS[quantity]
    return ((ncomp,) if ncomp else ()) + tuple(grid_storage)


def _grid_part(quantity, shape):
    return tuple(shape[1:]) if COMPONENTS[quantity] else tuple(shape)


def open_object(parent, path, where, error=SnapshotError):
    """``parent[path]``, or None if there is no such link. An object that exists but that HDF5
    cannot open (a damaged object header, say) raises ``error`` naming it: it must not pass for
    an absent one (``Group.items()`` maps it to None)."""
    try:
        if path not in parent:
            return None
        return parent[path]
    except (KeyError, OSError, RuntimeError, ValueError) as failure:
        raise error(f"{where}: object {path!r} under {parent.name} cannot be opened (damaged "
                    f"HDF5 metadata?): {failure}") from None


def kind_of(obj) -> str:
    """"dataset", "group", "datatype" (a committed type), or "dangling link" for None."""
    return "dangling link" if obj is None else type(obj).__name__.lower()


def found(value) -> str:
    """An attribute value for a one-line message: arrays on one line with shape and type."""
    if isinstance(value, np.ndarray) and value.ndim > 0:
        text = np.array2string(value, separator=", ", threshold=12, max_line_width=10**6)
        return f"array {' '.join(text.split())} (shape {value.shape}, {value.dtype})"
    return repr(value)


def attribute_text(value, name, where) -> str:
    """Text from an attribute value (str or bytes, also as a 0-d array), or a message naming it."""
    if isinstance(value, np.ndarray) and value.shape == ():
        value = value[()]
    if isinstance(value, bytes):
        try:
            return value.decode()
        except UnicodeDecodeError:
            raise SnapshotError(f"{where}: {name} must be UTF-8 text, "
                                f"found {found(value)}") from None
    if isinstance(value, str):
        return str(value)
    raise SnapshotError(f"{where}: {name} must be text, found {found(value)}")


def attribute_number(value, name, where) -> float:
    """A finite float from an attribute (or mapping) value, or a message naming it."""
    try:
        array = np.asarray(value)
        if array.dtype.kind not in "iuf" or array.size != 1:
            raise TypeError
        number = float(array.reshape(-1)[0])
    except (TypeError, ValueError):
        raise SnapshotError(f"{where}: {name} must be one number, found {found(value)}") from None
    if not np.isfinite(number):
        raise SnapshotError(f"{where}: {name} must be finite, found {number!r}")
    return number


def attribute_vector(value, name, where) -> tuple:
    """Three finite floats from an attribute value, or a message naming it."""
    array = np.asarray(value)
    if array.dtype.kind not in "iuf" or array.size != 3:
        raise SnapshotError(f"{where}: {name} must be 3 numbers, found {found(value)}")
    values = tuple(float(v) for v in array.reshape(-1))
    if not all(np.isfinite(values)):
        raise SnapshotError(f"{where}: {name} must be finite, found {values}")
    return values


class TimeLevel:
    """One time level of a snapshot: metadata, and slab reads of its quantities.

    Build it with :func:`build_level`, which checks the sources against the grid.

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
    where : str
        The file (and mapping) it comes from, for messages.
    listing : str
        The file's objects, appended to the message of a missing quantity ("" for none).
    """

    def __init__(self, label, time, grid, units, axis_order, sources, where, listing=""):
        self.label = str(label)
        self.time = float(time)
        self.grid = grid
        self.units = units
        self.axis_order = axis_order
        self.where = where
        self.listing = listing
        self._sources = dict(sources)

    # --- geometry of the storage ------------------------------------------------------------
    @property
    def slab_axis(self) -> int:
        """The (x, y, z) axis that is slowest in storage: slabs are cut along it."""
        return 0 if self.axis_order == "xyz" else 2

    @property
    def storage_shape(self) -> tuple:
        """Grid shape in storage order."""
        return self.grid.shape if self.axis_order == "xyz" else self.grid.shape[::-1]

    @property
    def plane_points(self) -> int:
        """Grid points in one plane of the slowest storage axis."""
        return int(np.prod(self.storage_shape[1:]))

    # --- contents ----------------------------------------------------------------------------
    def has(self, quantity: str) -> bool:
        return quantity in self._sources

    @property
    def quantities(self) -> tuple:
        return tuple(q for q in NAMES if q in self._sources)

    def source(self, quantity: str) -> DataSource:
        """The :class:`DataSource` of ``quantity``; a message listing the level otherwise."""
        if quantity not in COMPONENTS:
            raise SnapshotError(f"unknown quantity {quantity!r}; known: {', '.join(NAMES)}")
        try:
            return self._sources[quantity]
        except KeyError:
            listing = f". Objects in the file: {self.listing}" if self.listing else ""
            raise SnapshotError(
                f"{self.where}: time level {self.label!r} has no {quantity!r}; "
                f"it holds {', '.join(self.quantities) or 'no known quantity'}{listing}") from None

    def dtype(self, quantity: str) -> np.dtype:
        return np.dtype(self.source(quantity).dtype)

    def dataset_paths(self, quantity: str) -> list:
        """HDF5 paths that :meth:`read` reads for ``quantity`` (for provenance)."""
        return list(self.source(quantity).paths)

    def read(self, quantity: str, start: int = 0, stop: int | None = None, dtype=None,
             out=None) -> np.ndarray:
        """Read ``quantity`` over storage rows ``start:stop`` of the slowest axis.

        Parameters
        ----------
        quantity : str
            A name of :data:`emsource.quantities.NAMES`.
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
        source = self.source(quantity)
        n0 = self.storage_shape[0]
        stop = n0 if stop is None else stop
        if not 0 <= start < stop <= n0:
            raise ValueError(f"slab rows {start}:{stop} outside 0:{n0}")
        shape = _shape_of(quantity, (stop - start,) + self.storage_shape[1:])
        dtype = np.dtype(source.dtype if dtype is None else dtype)
        if out is None:
            out = np.empty(shape, dtype)
        elif out.shape != shape or out.dtype != dtype or not out.flags.c_contiguous:
            raise ValueError(f"read({quantity!r}): out must be C-contiguous {shape} {dtype}, "
                             f"found {out.shape} {out.dtype}")
        # A mask is checked in its stored type (a conversion would clip -1 or 256 into range).
        mask = quantity == "valid_mask"
        target = np.empty(shape, source.dtype) if mask and source.dtype != dtype else out
        try:
            source.read_into(target, start, stop)
        except (OSError, RuntimeError, KeyError, TypeError, ValueError) as error:
            raise SnapshotError(f"{self.where}: cannot read {quantity!r} of time level "
                                f"{self.label!r} (rows {start}:{stop}): {error}") from error
        if mask:
            self._check_mask(source, target, start)
            out[...] = target
        return self.to_xyz(out)

    def _check_mask(self, source, stored, start):
        """A valid_mask holds 0 (excluded) and 1 (valid) only: any other value is bad input."""
        bad = (stored != 0) & (stored != 1)
        if bad.any():
            first = np.unravel_index(int(np.argmax(bad)), bad.shape)
            index = tuple(int(i) + (start if axis == 0 else 0) for axis, i in enumerate(first))
            raise SnapshotError(
                f"{self.where}: 'valid_mask' ({', '.join(source.paths)}) of time level "
                f"{self.label!r} must hold 0 (excluded) or 1 (valid); found "
                f"{stored[first].item()!r} at storage index {index} "
                f"({int(np.count_nonzero(bad))} such point(s) in rows {start}:"
                f"{start + stored.shape[0]})")

    def to_xyz(self, stored: np.ndarray) -> np.ndarray:
        """View of a storage-order array (component axis first if any) in (x, y, z) order."""
        if self.axis_order == "xyz":
            return stored
        lead = stored.ndim - 3
        return stored.transpose(tuple(range(lead)) + (lead + 2, lead + 1, lead))


def build_level(label, time, units, axis_order, origin, spacing, stored, where, *,
                derived=None, listing="", expected_grid=None) -> TimeLevel:
    """Check the sources of one level, derive its grid and return the :class:`TimeLevel`.

    Parameters
    ----------
    stored : dict
        Quantity -> :class:`DataSource` read from the file (with shapes).
    derived : dict, optional
        Quantity -> callable(storage_shape) -> DataSource for quantities with nothing stored
        (a flat metric); built once the grid is known.
    expected_grid : tuple, optional
        Storage grid shape of an earlier level of the same file: decides a tie between
        datasets of different shapes (levels may have different grids).

    The grid is the storage shape that most stored datasets share (ties go to ``expected_grid``
    or to the first in table order), so a message names the datasets that differ, not the one
    that happens to be read first.
    """
    lw = f"{where}, time level {label!r}"
    if axis_order not in AXIS_ORDERS:
        raise SnapshotError(f"{lw}: axis_order {axis_order!r}, expected one of {AXIS_ORDERS}")
    if units not in UNIT_SYSTEMS:
        raise SnapshotError(f"{lw}: units {units!r}, expected one of {UNIT_SYSTEMS}")
    if not stored:
        raise SnapshotError(f"{lw}: no stored dataset; expected some of {', '.join(NAMES)}")
    ordered = [q for q in NAMES if q in stored]
    for q in ordered:
        source = stored[q]
        ncomp = COMPONENTS[q]
        if len(source.shape) != (4 if ncomp else 3) or (ncomp and source.shape[0] != ncomp):
            expected = f"({ncomp}, n0, n1, n2)" if ncomp else "(n0, n1, n2)"
            raise SnapshotError(f"{lw}: {q!r} ({', '.join(source.paths)}) has shape "
                                f"{tuple(source.shape)}, expected {expected}: a 3D grid"
                                + (", component axis first" if ncomp else ""))
        dtype = np.dtype(source.dtype)
        if q == "valid_mask":
            if dtype.kind not in "biu":
                raise SnapshotError(f"{lw}: 'valid_mask' ({', '.join(source.paths)}) has dtype "
                                    f"{dtype}, expected uint8 (or another integer or bool type)")
        elif dtype not in FLOAT_TYPES:
            raise SnapshotError(f"{lw}: {q!r} ({', '.join(source.paths)}) has dtype {dtype}, "
                                "expected float32 or float64")
    votes = Counter(_grid_part(q, stored[q].shape) for q in ordered)
    best = max(votes.values())
    candidates = [g for g, n in votes.items() if n == best]
    if expected_grid is not None and tuple(expected_grid) in candidates:
        storage = tuple(expected_grid)
    else:
        storage = next(_grid_part(q, stored[q].shape) for q in ordered
                       if _grid_part(q, stored[q].shape) in candidates)
    wrong = [q for q in ordered if _grid_part(q, stored[q].shape) != storage]
    if wrong:
        agree = [q for q in ordered if q not in wrong]
        details = "; ".join(f"{q!r} ({', '.join(stored[q].paths)}) has shape "
                            f"{tuple(stored[q].shape)}, expected {_shape_of(q, storage)}"
                            for q in wrong)
        raise SnapshotError(f"{lw}: {details} (the grid {storage} in {axis_order!r} storage "
                            f"order is that of {', '.join(agree)}; component axis first)")
    shape = storage if axis_order == "xyz" else storage[::-1]
    try:
        grid = UniformGrid(shape, origin, spacing)
    except ValueError as error:
        raise SnapshotError(f"{lw}: {error}") from None
    sources = dict(stored)
    for q, make in (derived or {}).items():
        sources[q] = make(storage)
    return TimeLevel(label, time, grid, units, axis_order, sources, where, listing)


def level_at(levels, index, where="snapshot"):
    """``levels[index]`` (negative counts from the end), or a :class:`SnapshotError` giving the range."""
    count = len(levels)
    if isinstance(index, bool) or not isinstance(index, (int, np.integer)) or not -count <= index < count:
        raise SnapshotError(f"{where}: time level index {index!r} out of range: the file has "
                            f"{count} level(s), indices 0 to {count - 1} (or -{count} to -1 "
                            "from the end)")
    return levels[int(index)]


def choose_levels(levels, indices=None, where="snapshot") -> list:
    """The levels at ``indices`` (default all), each at most once.

    Raises
    ------
    SnapshotError
        An index out of range, or one level named twice (also as i and i - count).
    """
    if indices is None:
        return list(levels)
    chosen, seen = [], {}
    for i in indices:
        level = level_at(levels, i, where)
        position = int(i) % len(levels)
        if position in seen:
            raise SnapshotError(f"{where}: time level {level.label!r} chosen twice (indices "
                                f"{seen[position]} and {i}); give each level once")
        seen[position] = i
        chosen.append(level)
    return chosen
