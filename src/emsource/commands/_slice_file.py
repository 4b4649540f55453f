"""Plain HDF5 files of one 3+1 slice, as written by ``emsource black-hole`` (not API).

Layout: root datasets ``lapse`` (nx, ny, nz), ``shift`` (3, ...), ``spatial_metric`` and
``extrinsic_curvature`` (6, ...) packed (xx, xy, xz, yy, yz, zz), ``electric_field`` and
``magnetic_field`` (3, ...) contravariant, ``mask`` (nx, ny, nz) uint8 (1 = valid); root
attributes ``origin`` and ``spacing`` (3 floats each, code units), ``units`` (the unit system
of the fields), ``component_layout`` and free-form ``description`` and parameters.
"""

from __future__ import annotations

import os

import h5py
import numpy as np

DATASETS = {
    "lapse": "alpha",
    "shift": "beta",
    "spatial_metric": "gamma",
    "extrinsic_curvature": "K",
    "electric_field": "E",
    "magnetic_field": "B",
}
LAYOUT_NOTE = "component axis first; symmetric tensors packed xx,xy,xz,yy,yz,zz; vectors contravariant"


class SliceFileError(ValueError):
    """A slice file is missing, unreadable or lacks a dataset or attribute."""


def write_slice(path, data, *, attributes=None, force=False, compression="gzip"):
    """Write a :class:`~emsource.exact.SliceFields` to ``path`` (whole file or nothing)."""
    if os.path.exists(path) and not force:
        raise FileExistsError(f"{path} exists (use --force to overwrite)")
    tmp = f"{path}.partial"
    try:
        with h5py.File(tmp, "w") as f:
            for name, attr in DATASETS.items():
                f.create_dataset(name, data=getattr(data, attr), compression=compression)
            mask = data.mask if data.mask is not None else np.ones(data.grid.shape, dtype=bool)
            f.create_dataset("mask", data=mask.astype(np.uint8), compression=compression)
            f.attrs["origin"] = np.asarray(data.grid.origin, dtype=np.float64)
            f.attrs["spacing"] = np.asarray(data.grid.spacing, dtype=np.float64)
            f.attrs["units"] = data.units
            f.attrs["component_layout"] = LAYOUT_NOTE
            for key, value in (attributes or {}).items():
                f.attrs[key] = value
        os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


def _text(value):
    return value.decode() if isinstance(value, bytes) else (None if value is None else str(value))


def read_slice(path, level=0):
    """The arrays and grid attributes of a slice file, as a dict keyed like SliceFields.

    Reads the plain layout above, or one time level of a snapshot in the package's native
    layout (group ``time_levels/<level>`` with the same dataset names, ``valid_mask`` and
    ``axis_order``; "zyx" storage is returned in (x, y, z) axis order).
    """
    try:
        f = h5py.File(path, "r")
    except (OSError, FileNotFoundError) as exc:
        raise SliceFileError(f"cannot open {path} as HDF5: {exc}") from None
    with f:
        if "time_levels" in f:
            levels = f["time_levels"]
            if str(level) not in levels:
                raise SliceFileError(f"{path}: time level {level} not found "
                                     f"(levels: {sorted(levels)})")
            group = levels[str(level)]
            where = f"{path}:/time_levels/{level}"
            mask_name = "valid_mask"
        else:
            group = f
            where = path
            mask_name = "mask"
        reverse = _text(group.attrs.get("axis_order", "xyz")) == "zyx"

        def load(name):
            a = group[name][()]
            if reverse:  # storage (c, z, y, x) -> (c, x, y, z)
                a = np.ascontiguousarray(a.transpose((0,) * (a.ndim == 4) + (a.ndim - 1, a.ndim - 2,
                                                                          a.ndim - 3)))
            return a

        out = {}
        for name, key in DATASETS.items():
            if name not in group:
                raise SliceFileError(f"{where}: dataset '{name}' is missing (found {sorted(group)})")
            out[key] = load(name)
        if "spacing" not in group.attrs:
            raise SliceFileError(f"{where}: attribute 'spacing' is missing")
        out["spacing"] = tuple(float(h) for h in np.atleast_1d(group.attrs["spacing"]))
        out["origin"] = tuple(float(o) for o in np.atleast_1d(group.attrs.get("origin", (0.0,) * 3)))
        out["units"] = _text(group.attrs.get("units", None))
        out["mask"] = load(mask_name).astype(bool) if mask_name in group else None
    return out
