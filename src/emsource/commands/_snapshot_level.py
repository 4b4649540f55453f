"""One time level of a snapshot, read for the constraint commands (not API).

Thin layer over :mod:`emsource.snapshot`: a native snapshot, or any file through a layout mapping,
read into memory in (x, y, z) order, with the names the constraint functions use.
"""

from __future__ import annotations

#: snapshot quantity -> key in the returned dict
NEEDED = {
    "spatial_metric": "gamma",
    "extrinsic_curvature": "K",
    "electric_field": "E",
    "magnetic_field": "B",
}


class SliceFileError(ValueError):
    """A snapshot lacks what a constraint command needs."""


def read_slice(path, level=0, mapping=None):
    """gamma, K, E, B, mask, spacing, origin and units of time level ``level`` of ``path``.

    Raises ``emsource.snapshot.SnapshotError`` (a ValueError) for a bad file or mapping and a
    level index out of range, and :class:`SliceFileError` if a needed quantity is missing.
    """
    from ..snapshot import read_level

    data = read_level(path, level, mapping)
    missing = [q for q in NEEDED if q not in data]
    if missing:
        found = sorted(k for k in data if k not in ("time", "grid", "units", "label"))
        raise SliceFileError(f"{path}, level {level}: needs {', '.join(missing)} "
                             f"(found {', '.join(found) or 'nothing'})")
    out = {key: data[q] for q, key in NEEDED.items()}
    grid = data["grid"]
    if grid.ndim != 3:
        raise SliceFileError(f"{path}, level {level}: the constraints need a 3D grid, "
                             f"found shape {grid.shape}")
    out["spacing"] = grid.spacing
    out["origin"] = grid.origin
    out["units"] = data.get("units")
    mask = data.get("valid_mask")
    out["mask"] = None if mask is None else mask.astype(bool)
    return out


def add_snapshot_arguments(parser):
    parser.add_argument("snapshot", help="HDF5 snapshot (native layout, or any with --mapping)")
    parser.add_argument("--mapping", metavar="TOML",
                        help="layout mapping file for a snapshot in another code's layout")
    parser.add_argument("--level", type=int, default=0,
                        help="index of the time level to check (default 0)")
