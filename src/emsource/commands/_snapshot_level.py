"""One time level of a snapshot, read for the constraint commands (not API).

Thin layer over :mod:`emsource.snapshot`: a native snapshot, or any file through a layout mapping,
read into memory in (x, y, z) order, with the names the constraint functions use.
"""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np

#: snapshot quantity -> key in the returned dict
NEEDED = {
    "spatial_metric": "gamma",
    "extrinsic_curvature": "K",
    "electric_field": "E",
    "magnetic_field": "B",
}


def read_slice(path, level=0, mapping=None):
    """gamma, K, E, B, mask, spacing, origin and units of time level ``level`` of ``path``.

    The fields are returned in float64 whatever their stored type (float32 or float64, mixed
    too), as ``integrate`` computes. Raises ``emsource.snapshot.SnapshotError`` for a bad file
    or mapping, a level index out of range, a missing quantity or a grid that is not 3D.
    """
    from ..snapshot import SnapshotError, read_level

    data = read_level(path, level, mapping)
    missing = [q for q in NEEDED if q not in data]
    if missing:
        found = sorted(k for k in data if k not in ("time", "grid", "units", "label"))
        raise SnapshotError(f"snapshot {path!r}, time level {level}: the constraints need "
                            f"{', '.join(missing)} (found {', '.join(found) or 'nothing'})")
    out = {key: data[q].astype(np.float64, copy=False) for q, key in NEEDED.items()}
    grid = data["grid"]
    out["spacing"] = grid.spacing
    out["origin"] = grid.origin
    out["units"] = data.get("units")
    mask = data.get("valid_mask")
    out["mask"] = None if mask is None else mask.astype(bool)
    return out


@contextmanager
def input_errors(path, level):
    """Turn a ``ValueError`` of a diagnostic on the data of ``path`` (a bad grid point, a grid
    too small for the stencil) into a ``SnapshotError`` naming the file and the level."""
    from ..snapshot import SnapshotError

    try:
        yield
    except SnapshotError:
        raise
    except ValueError as error:
        raise SnapshotError(f"snapshot {path!r}, time level {level}: {error}") from None


def add_snapshot_arguments(parser):
    parser.add_argument("snapshot", help="HDF5 snapshot (native layout, or any with --mapping)")
    parser.add_argument("--mapping", metavar="TOML",
                        help="layout mapping file for a snapshot in another code's layout")
    parser.add_argument("--level", type=int, default=0,
                        help="index of the time level to check (default 0)")
