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


def read_slice(path):
    """The arrays and grid attributes of a slice file, as a dict keyed like SliceFields."""
    try:
        f = h5py.File(path, "r")
    except (OSError, FileNotFoundError) as exc:
        raise SliceFileError(f"cannot open {path} as HDF5: {exc}") from None
    with f:
        out = {}
        for name, key in DATASETS.items():
            if name not in f:
                raise SliceFileError(f"{path}: dataset '{name}' is missing (found {sorted(f)})")
            out[key] = f[name][()]
        for attr in ("spacing",):
            if attr not in f.attrs:
                raise SliceFileError(f"{path}: root attribute '{attr}' is missing")
        out["spacing"] = tuple(float(h) for h in np.atleast_1d(f.attrs["spacing"]))
        out["origin"] = tuple(float(o) for o in np.atleast_1d(f.attrs.get("origin", (0.0,) * 3)))
        units = f.attrs.get("units", None)
        out["units"] = units.decode() if isinstance(units, bytes) else units
        out["mask"] = f["mask"][()].astype(bool) if "mask" in f else None
    return out
