"""Opening snapshots: native files, or any file through a layout mapping, read-only.

:func:`open_snapshot` returns a :class:`SnapshotFile`, which gives a command everything it needs
from one open file: the levels (:meth:`SnapshotFile.level`, :meth:`SnapshotFile.select`), the
scenario description, grid and units, and the provenance attributes of an output
(:meth:`SnapshotFile.provenance`).
"""

from __future__ import annotations

import os

import h5py
import numpy as np

from .errors import SnapshotError
from .levels import choose_levels, level_at
from .mapping import LayoutMapping, load_mapping
from .native import native_levels
from .writing import provenance_attributes

__all__ = ["CHUNK_CACHE_BYTES", "SnapshotFile", "open_snapshot", "read_level", "file_listing"]

#: Chunk cache per open dataset (bytes). Kept small and known so that the memory bound of the
#: streaming code can count it; h5py's default is 1 MiB per dataset.
CHUNK_CACHE_BYTES = 256 * 1024


def file_listing(h5file, limit=40) -> str:
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
    if not os.path.exists(path):
        raise SnapshotError(f"snapshot {path!r} does not exist")
    if not os.path.isfile(path):
        raise SnapshotError(f"snapshot {path!r} is not a file")
    if not os.access(path, os.R_OK):
        raise SnapshotError(f"snapshot {path!r} is not readable (permission denied)")
    if not h5py.is_hdf5(path):
        raise SnapshotError(f"snapshot {path!r} is not an HDF5 file (no HDF5 signature found)")
    try:
        return h5py.File(path, "r", rdcc_nbytes=CHUNK_CACHE_BYTES)
    except OSError as error:
        raise SnapshotError(f"snapshot {path!r} cannot be opened as HDF5 "
                            f"(truncated or damaged?): {error}") from error


class SnapshotFile:
    """An open snapshot (read-only). Use as a context manager; see :func:`open_snapshot`.

    Attributes
    ----------
    path : str
        The file, as given.
    levels : list of TimeLevel
    mapping_path : str or None
        The layout mapping used, if any (absolute).
    description : str
        The root attribute ``description`` (free text about the scenario), or "".
    physical_scale : PhysicalScale or None
        The code's physical scale declared by the mapping (``[physical_units] code_scale``).
    """

    def __init__(self, path, h5file, levels, mapping_path=None, physical_scale=None):
        self.path = path
        self.levels = levels
        self.mapping_path = mapping_path
        self.physical_scale = physical_scale
        # Free text about the scenario; anything that is not text is left out.
        description = h5file.attrs.get("description", "")
        if isinstance(description, np.ndarray) and description.shape == ():
            description = description[()]
        self.description = (description.decode(errors="replace") if isinstance(description, bytes)
                            else description if isinstance(description, str) else "")
        self._file = h5file

    @property
    def inputs(self) -> tuple:
        """The files this snapshot reads (the HDF5 file and the mapping, if any)."""
        return (self.path,) + ((self.mapping_path,) if self.mapping_path else ())

    @property
    def grid(self):
        """The grid of the first level (every level of the sample files shares it)."""
        return self.levels[0].grid

    @property
    def units(self) -> str:
        """The unit system of the first level."""
        return self.levels[0].units

    def level(self, index: int):
        """Time level ``index`` (negative counts from the end).

        Raises
        ------
        SnapshotError
            ``index`` is out of range (the message gives the range).
        """
        return level_at(self.levels, index, self.path)

    def select(self, indices=None) -> list:
        """The levels at ``indices`` (default all), each at most once; see ``choose_levels``."""
        return choose_levels(self.levels, indices, self.path)

    def provenance(self, levels, quantities, options) -> dict:
        """Provenance attributes of an output made from ``quantities`` of ``levels``.

        Lists the HDF5 paths of those quantities that each level has (absent optional ones,
        such as lapse or valid_mask, are left out), with ``options`` as given.
        """
        used = [path for level in levels for q in quantities if level.has(q)
                for path in level.dataset_paths(q)]
        return provenance_attributes(self.path, used, options, self.mapping_path)

    def close(self):
        self._file.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def open_snapshot(path, mapping=None) -> SnapshotFile:
    """Open a snapshot read-only.

    Parameters
    ----------
    path : str or path-like
        HDF5 file.
    mapping : str, path-like or LayoutMapping, optional
        A layout mapping (:mod:`emsource.snapshot.mapping`) for files not in the native layout.

    Raises
    ------
    SnapshotError
        Missing, non-HDF5 or damaged file; not native and no mapping; missing or malformed
        attributes; datasets whose shapes or types are wrong (the message says which and what
        the file holds).
    """
    path = os.fspath(path)
    if mapping is not None and not isinstance(mapping, LayoutMapping):
        mapping = load_mapping(mapping)
    h5file = _open_hdf5(path)
    try:
        listing = lambda: file_listing(h5file)  # noqa: E731 - built only for messages
        if mapping is None:
            levels = native_levels(h5file, path, listing)
        else:
            levels = mapping.levels(h5file, path, listing)
        if mapping is None:
            return SnapshotFile(path, h5file, levels)
        return SnapshotFile(path, h5file, levels, mapping.path, mapping.physical_units.scale)
    except SnapshotError:
        h5file.close()
        raise
    except (OSError, RuntimeError, KeyError, ValueError) as error:
        # h5py's errors for damaged metadata: an object header, heap, B-tree or type message
        # that HDF5 cannot decode while the groups, datasets and attributes are scanned.
        h5file.close()
        raise SnapshotError(f"snapshot {path!r} cannot be read (damaged or truncated HDF5 "
                            f"metadata?): {_first_line(error)}") from error
    except BaseException:
        h5file.close()
        raise


def _first_line(error) -> str:
    text = str(error).strip() or type(error).__name__
    return text.splitlines()[0]


def read_level(path, index: int = 0, mapping=None) -> dict:
    """Every quantity of time level ``index`` in memory, (x, y, z) order, plus metadata.

    Returns a dict: quantity name -> ndarray, and "time", "grid", "units", "label".
    """
    with open_snapshot(path, mapping) as snap:
        level = snap.level(index)
        data = {q: level.read(q) for q in level.quantities}
        data.update(time=level.time, grid=level.grid, units=level.units, label=level.label)
    return data
