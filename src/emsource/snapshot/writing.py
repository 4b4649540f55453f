"""Writing outputs: one place for atomic output, the overwrite and same-file checks, write
failures, provenance and the native writer.

Every output of emsource is written to a hidden temporary file beside its target
(``.<name>.<random>.partial``) and renamed onto the target only once complete and flushed to
disk (``fsync``), so an output is complete or absent. The temporary file is removed on any
exception, on Ctrl-C and on SIGTERM or SIGHUP (which :mod:`emsource.cli` turns into an
exception). Only a process killed outright (SIGKILL, power loss, the out-of-memory killer) can
leave a ``.partial`` file behind, never a half-written target; ``find DIR -name '.*.partial'``
lists them.

Write failures (no space left, I/O errors, a file system that turns read-only) become an
:class:`OutputError` that names the output. HDF5 outputs are written through
:class:`GuardedFile`: a file object that records the first failed write and keeps HDF5 itself
out of its error paths (HDF5 2.0 was seen to crash in its file close after a failed write), then
reports the failure once the file is closed.

Provenance attributes of an output file's root: ``producer`` ("emsource <version>"),
``created_utc`` (ISO 8601), ``input_file`` (absolute path), ``input_mapping`` (the mapping file
or ""), ``input_datasets`` (JSON list of the HDF5 paths read) and ``options`` (JSON object of
the settings used).
"""

from __future__ import annotations

import datetime
import io
import json
import os
import secrets
from contextlib import contextmanager

import h5py
import numpy as np

from .. import __version__, interruption
from ..quantities import BY_NAME, COMPONENTS, NAMES
from .errors import OutputError
from .levels import AXIS_ORDERS, UNIT_SYSTEMS
from .native import FORMAT_NAME, FORMAT_VERSION, LEVELS_GROUP

__all__ = ["atomic_output", "check_output", "hdf5_output", "GuardedFile", "BackgroundFlush",
           "provenance_attributes", "write_root_attributes", "write_level_attributes",
           "write_snapshot", "chunk_shape"]


def _same_file(path, other) -> bool:
    try:
        return os.path.samefile(path, other)
    except OSError:
        return False


def check_output(path, *, force=False, inputs=()) -> str:
    """Check an output path before any work; returns it made absolute.

    Raises
    ------
    OutputError
        ``path`` resolves to one of ``inputs`` (same path, a symbolic or a hard link), is a
        directory, exists and ``force`` is false, or its directory is missing or not writable.
    """
    path = os.path.abspath(os.fspath(path))
    for source in inputs:
        if source is None:
            continue
        source = os.fspath(source)
        if (os.path.realpath(path) == os.path.realpath(source)) or _same_file(path, source):
            raise OutputError(f"output {path!r} is the input {os.path.abspath(source)!r} (same "
                              "file, or a link to it); inputs are never overwritten, even with "
                              "--force")
    if os.path.isdir(path):
        raise OutputError(f"output {path!r} is a directory")
    if os.path.lexists(path) and not force:
        raise OutputError(f"output {path!r} exists; use --force (force=True in Python) to replace it")
    directory = os.path.dirname(path)
    if not os.path.isdir(directory):
        raise OutputError(f"output directory {directory!r} does not exist")
    if not os.access(directory, os.W_OK | os.X_OK):
        raise OutputError(f"output directory {directory!r} is not writable")
    return path


def _fsync(path):
    handle = os.open(path, os.O_RDONLY)
    try:
        os.fsync(handle)
    finally:
        os.close(handle)


@contextmanager
def atomic_output(path, *, force: bool = False, inputs=()):
    """Yield a temporary path beside ``path``; rename it to ``path`` only on success.

    Parameters
    ----------
    path : str or path-like
        The output.
    force : bool
        Replace an existing ``path``.
    inputs : sequence of paths
        Files the output must not resolve to (checked again just before the rename).

    Raises
    ------
    OutputError
        See :func:`check_output`; and any ``OSError`` of the body, of the final flush or of the
        rename, with the partial file removed.
    """
    path = check_output(path, force=force, inputs=inputs)
    directory = os.path.dirname(path)
    # The name is chosen (128 random bits) before the file is created, so that a stop request
    # arriving right after the creation, before a call could return the name, still finds it
    # to remove (seen under load with a name returned by the creating call).
    temporary = os.path.join(directory, f".{os.path.basename(path)}.{secrets.token_hex(16)}"
                                        ".partial")
    try:
        try:
            handle = os.open(temporary, os.O_CREAT | os.O_EXCL | os.O_RDWR | os.O_CLOEXEC, 0o600)
        except OSError as error:
            temporary = None  # not created here: nothing of ours to remove
            raise OutputError(f"cannot write in output directory {directory!r}: "
                              f"{error}") from error
        os.close(handle)
        try:
            yield temporary
            # Created private (0600); give it the permissions of a new file.
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(temporary, 0o666 & ~umask)
            _fsync(temporary)  # delayed write errors (quota, NFS, EIO) show up here
            interruption.check()  # a stop request swallowed by a finaliser ends here
            check_output(path, force=force, inputs=inputs)
            os.replace(temporary, path)
        except OutputError:
            raise
        except OSError as error:
            raise OutputError(f"cannot write output {path!r}: {_reason(error)}") from error
    except BaseException:
        if temporary is not None:
            try:
                os.unlink(temporary)
            except FileNotFoundError:
                pass
        raise


class BackgroundFlush:
    """Flush a file being written to disk in a background thread, slab after slab.

    The final ``fsync`` of :func:`atomic_output` must otherwise write every byte of the output
    to disk at once, after the computation (measured: 0.27 s for 600 MB here, a quarter of
    ``emsource sources`` on it). :meth:`kick` starts an ``fdatasync`` of what has been written so
    far unless one is still running, so the disk works while the next slab is computed and the
    final ``fsync`` finds little left. An error of a background flush (a delayed write error:
    quota, EIO) is raised by the next :meth:`kick` or by :meth:`finish`, never lost: once one
    ``fsync`` has reported it, Linux does not report it again to a later one.

    Use as a context manager around the writing; call :meth:`finish` before the output is
    closed for good (:func:`atomic_output` still ``fsync``-s it).
    """

    def __init__(self, path):
        from concurrent.futures import ThreadPoolExecutor

        self._fd = os.open(path, os.O_RDONLY | os.O_CLOEXEC)
        self._pool = ThreadPoolExecutor(1, thread_name_prefix="emsource-flush")
        self._pending = None

    def _collect(self, wait):
        if self._pending is not None and (wait or self._pending.done()):
            pending, self._pending = self._pending, None
            pending.result()  # raises the flush's OSError

    def kick(self):
        """Start flushing what has been written, unless a flush is running."""
        self._collect(wait=False)
        if self._pending is None:
            self._pending = self._pool.submit(os.fdatasync, self._fd)

    def finish(self):
        """Wait for the running flush and raise its error, if any."""
        self._collect(wait=True)

    def close(self):
        self._pool.shutdown(wait=True)
        os.close(self._fd)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def _reason(error) -> str:
    if isinstance(error, OSError) and error.strerror:
        return error.strerror + (f" (errno {error.errno})" if error.errno else "")
    return str(error).split("\n")[0]


class GuardedFile(io.RawIOBase):
    """A writable, seekable file for h5py that never lets a failed write reach HDF5.

    The first failing ``write`` (or ``truncate``) is recorded in :attr:`error`; it and every
    later write then report success to HDF5 without writing, and reads of regions that were
    never written return zeros, so HDF5 finishes and closes the file without entering its
    error paths. :func:`hdf5_output` raises the recorded error after the close.
    """

    def __init__(self, path):
        super().__init__()
        self.name = os.fspath(path)
        self._fd = os.open(path, os.O_RDWR)
        # Truncate only a file that has contents: truncating even an empty file makes ext4 flush
        # it to disk on close (its "replace via truncate" rule), measured 0.22 s for 600 MB,
        # which the fsync that follows would then pay again in part. The outputs of
        # :func:`atomic_output` are new, empty files.
        try:
            if os.fstat(self._fd).st_size:
                os.ftruncate(self._fd, 0)
        except OSError:
            os.close(self._fd)
            raise
        self._position = 0
        self._size = 0
        self.error = None

    def readable(self):
        return True

    def writable(self):
        return True

    def seekable(self):
        return True

    def seek(self, offset, whence=io.SEEK_SET):
        if whence == io.SEEK_SET:
            self._position = offset
        elif whence == io.SEEK_CUR:
            self._position += offset
        else:
            self._position = self._size + offset
        return self._position

    def tell(self):
        return self._position

    def readinto(self, buffer):
        view = memoryview(buffer).cast("B")
        done = 0
        if self.error is None:
            done = os.preadv(self._fd, [view], self._position)
        if self.error is not None and done < len(view):
            view[done:] = bytes(len(view) - done)
            done = len(view)
        self._position += done
        return done

    def write(self, data):
        view = memoryview(data).cast("B")
        if self.error is None:
            try:
                done = 0
                while done < len(view):
                    done += os.pwrite(self._fd, view[done:], self._position + done)
            except OSError as error:
                self.error = error
        self._position += len(view)
        self._size = max(self._size, self._position)
        return len(view)

    def truncate(self, size=None):
        size = self._position if size is None else size
        if self.error is None:
            try:
                os.ftruncate(self._fd, size)
            except OSError as error:
                self.error = error
        self._size = size
        return size

    def flush(self):
        pass

    def close(self):
        if not self.closed:
            os.close(self._fd)
        super().close()


@contextmanager
def hdf5_output(temporary, target, **options):
    """An ``h5py.File`` open for writing on ``temporary`` through a :class:`GuardedFile`.

    ``target`` is the final name, for messages. Raises :class:`OutputError` after closing the
    file if any write failed.
    """
    guard = GuardedFile(temporary)
    try:
        with h5py.File(guard, "w", **options) as h5file:
            yield h5file
        if guard.error is not None:
            raise OutputError(f"cannot write output {os.path.abspath(os.fspath(target))!r}: "
                              f"{_reason(guard.error)}") from guard.error
    finally:
        guard.close()


def provenance_attributes(input_file, input_datasets, options, mapping_path=None) -> dict:
    """Root attributes that say how an output was made (see the module docstring)."""
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


def chunk_shape(shape, itemsize, target_bytes=1 << 20):
    """Chunks of one component and as many planes of the slowest grid axis as fit ~1 MiB."""
    lead = len(shape) - 3
    plane = int(np.prod(shape[lead + 1:])) * itemsize
    rows = int(max(1, min(shape[lead], target_bytes // max(plane, 1))))
    return (1,) * lead + (rows,) + tuple(shape[lead + 1:])


#: The eight inputs a TimeLevelFields carries (its attributes are the table's API names).
_LEVEL_QUANTITIES = ("lapse", "shift", "spatial_metric", "extrinsic_curvature", "electric_field",
                     "magnetic_field", "charge_density", "current_density")


def _level_dict(level):
    if isinstance(level, dict):
        arrays = {q: np.asarray(v) for q, v in level.items() if q in COMPONENTS and v is not None}
        unknown = [k for k in level if k not in COMPONENTS and k not in ("time", "grid", "units")]
        if unknown:
            raise ValueError(f"write_snapshot: unknown quantities {unknown}; known: {list(NAMES)}")
        return {"arrays": arrays, "time": level["time"], "grid": level["grid"],
                "units": level.get("units", "gaussian")}
    arrays = {}
    for q in _LEVEL_QUANTITIES:
        value = getattr(level, BY_NAME[q].api)
        if value is not None:
            arrays[q] = np.asarray(value)
    if level.valid_mask is not None:
        arrays["valid_mask"] = np.asarray(level.valid_mask).astype(np.uint8)
    return {"arrays": arrays, "time": level.t, "grid": level.grid, "units": level.units}


def write_snapshot(path, levels, *, force: bool = False, axis_order: str = "xyz",
                   compression: str | None = None, attributes: dict | None = None):
    """Write exact or simulated data as a native snapshot (atomically).

    Parameters
    ----------
    path : str or path-like
        Output file; replaced only with ``force``.
    levels : sequence of TimeLevelFields or of dict
        One entry per time level. A dict maps quantity names (:data:`emsource.quantities.NAMES`)
        to arrays in (x, y, z) order, component first, plus "time", "grid" (UniformGrid) and
        "units" (default "gaussian"). A :class:`~emsource.exact.TimeLevelFields` gives all eight
        inputs and its valid_mask.
    axis_order : {"xyz", "zyx"}
        Storage order of the grid axes.
    compression : {None, "gzip"}
        Dataset compression (chunked datasets, one chunk per component and a few planes).
    attributes : dict, optional
        Extra root attributes (for example a description of the scenario).

    Raises
    ------
    OutputError
        The output exists without ``force`` or cannot be written (nothing is left behind).
    """
    entries = [_level_dict(level) for level in levels]
    with atomic_output(path, force=force) as temporary:
        with hdf5_output(temporary, path) as f:
            write_root_attributes(f, attributes)
            group = f.create_group(LEVELS_GROUP)
            for index, entry in enumerate(entries):
                g = group.create_group(str(index))
                grid = entry["grid"]
                write_level_attributes(g, time=entry["time"], grid=grid, units=entry["units"],
                                       axis_order=axis_order)
                for quantity, array in entry["arrays"].items():
                    ncomp = COMPONENTS[quantity]
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
