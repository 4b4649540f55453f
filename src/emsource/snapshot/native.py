"""The native HDF5 layout of emsource: reading its time levels.

One HDF5 file holds one or more time levels of one 3D uniform grid::

    /                                   attributes: format = "emsource-snapshot",
    |                                               format_version = 1
    |                                   (output files also carry provenance, see .writing)
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
            +-- vector_potential        (3, *grid)     A_i (covariant); B^i is derived from it
            |                                          through a mapping only (.potential_sources)
            +-- conformal_metric        (6, *grid)     tilde-gamma_ij (mapping key [forms] metric)
            +-- conformal_factor        (*grid)        chi, W or phi ([forms] metric)
            +-- faraday_tensor          (6, *grid)     F_ab or F^ab ([forms] fields)
            +-- fluid_velocity          (3, *grid)     v^i or u^i ([forms] fields = "ideal_mhd")
            +-- valid_mask              (*grid) uint8, 1 where the data are valid (optional)
            +-- energy_density          (*grid)        outputs of ``emsource sources``: rho,
            +-- momentum_density        (3, *grid)     S_i (covariant),
            +-- spatial_stress          (6, *grid)     S_ij packed,
            +-- stress_trace            (*grid)        S = gamma^ij S_ij
            +-- conformal_tracefree_stress (6, *grid)  c S_ij^TF (``--outputs``, [forms] metric)
            +-- faraday_lower           (6, *grid)     F_ab packed (tx, ty, tz, xy, xz, yz)
            +-- faraday_upper           (6, *grid)     F^ab packed
            +-- field_invariant         (*grid)        F_ab F^ab = 2 (B^2 - E^2)
            +-- dual_invariant          (*grid)        F_ab *F^ab = 4 E_i B^i

The dataset names and component counts are those of :data:`emsource.quantities.TABLE`. Every
dataset is optional; a computation says which ones it needs. The component axis comes first.
``*grid`` is the grid in storage order: (nx, ny, nz) when ``axis_order`` is "xyz", and
(nz, ny, nx) when it is "zyx"; component indices always mean (x, y, z). ``origin`` and
``spacing`` are always given in (x, y, z) order. Data are float32 or float64 (valid_mask an
integer type); all quantities of one level share the grid.
"""

from __future__ import annotations

import h5py
import numpy as np

from ..quantities import COMPONENTS, NAMES
from .errors import SnapshotError
from .levels import (attribute_number, attribute_text, attribute_vector, build_level,
                     chunk_bytes_of, chunk_rows_of, found, kind_of,
                     open_object)

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "LEVELS_GROUP", "NativeSource", "native_levels"]

FORMAT_NAME = "emsource-snapshot"
FORMAT_VERSION = 1
LEVELS_GROUP = "time_levels"


class NativeSource:
    """One native dataset (component axis first, storage order); see ``levels.DataSource``."""

    def __init__(self, dataset):
        self.dataset = dataset
        self.dtype = np.dtype(np.uint8) if dataset.dtype == np.bool_ else np.dtype(dataset.dtype)
        self.shape = tuple(dataset.shape)
        self.paths = (dataset.name,)
        self.chunk_rows = chunk_rows_of(dataset, 1 if dataset.ndim == 4 else 0)
        self.chunk_bytes = chunk_bytes_of(dataset)
        self.scratch_bytes_per_row = 0

    def read_into(self, out, start, stop):
        if self.dataset.ndim == 4:
            self.dataset.read_direct(out, source_sel=np.s_[:, start:stop])
        else:
            self.dataset.read_direct(out, source_sel=np.s_[start:stop])


def _attribute(obj, name, where):
    try:
        return obj.attrs[name]
    except KeyError:
        try:  # damaged metadata can give names as bytes beside str (seen in the hostile tests)
            names = sorted(k.decode(errors="replace") if isinstance(k, bytes) else str(k)
                           for k in obj.attrs.keys())
        except (OSError, RuntimeError, KeyError, TypeError, ValueError):
            names = "attribute names that cannot be read"
        raise SnapshotError(f"{where}: attribute {name!r} missing; found "
                            f"{names or 'no attributes'}") from None
    except (OSError, TypeError) as error:
        raise SnapshotError(f"{where}: attribute {name!r} cannot be read: {error}") from None


def _text_or_none(value):
    try:
        return attribute_text(value, "", "")
    except SnapshotError:
        return None


def native_levels(h5file, path, listing) -> list:
    """The :class:`~.levels.TimeLevel` objects of a native file (``listing``: callable -> str)."""
    where = f"snapshot {path!r}"
    stored = h5file.attrs.get("format")
    if stored is None or _text_or_none(stored) != FORMAT_NAME:
        what = "missing" if stored is None else found(stored)
        raise SnapshotError(
            f"{where} is not in the emsource layout (root attribute format {what}, expected "
            f"{FORMAT_NAME!r}); give a layout mapping for other layouts. Objects in the file: "
            f"{listing()}")
    version = np.asarray(h5file.attrs.get("format_version", -1))
    if version.dtype.kind not in "iu" or version.shape != () or int(version) != FORMAT_VERSION:
        raise SnapshotError(f"{where}: root attribute format_version must be the integer "
                            f"{FORMAT_VERSION} (the version this emsource reads), found "
                            f"{found(h5file.attrs.get('format_version'))}")
    if LEVELS_GROUP not in h5file or not isinstance(h5file[LEVELS_GROUP], h5py.Group):
        raise SnapshotError(f"{where}: group /{LEVELS_GROUP} missing. Objects in the file: "
                            f"{listing()}")
    group = h5file[LEVELS_GROUP]
    labels = sorted(group.keys(), key=lambda s: (not s.isdigit(), int(s) if s.isdigit() else 0, s))
    levels = []
    for label in labels:
        g = open_object(group, label, where)
        lw = f"{where}, /{LEVELS_GROUP}/{label}"
        if not isinstance(g, h5py.Group):
            raise SnapshotError(f"{lw} is a {kind_of(g)}; /{LEVELS_GROUP} must hold one group "
                                "per level")
        axis_order = attribute_text(_attribute(g, "axis_order", lw), "attribute 'axis_order'", lw)
        units = attribute_text(_attribute(g, "units", lw), "attribute 'units'", lw)
        time = attribute_number(_attribute(g, "time", lw), "attribute 'time'", lw)
        origin = attribute_vector(_attribute(g, "origin", lw), "attribute 'origin'", lw)
        spacing = attribute_vector(_attribute(g, "spacing", lw), "attribute 'spacing'", lw)
        stored = {}
        for name in g:
            if name in COMPONENTS:
                obj = open_object(g, name, where)
                if not isinstance(obj, h5py.Dataset):
                    raise SnapshotError(f"{lw}/{name} is a {kind_of(obj)}, expected a dataset")
                stored[name] = NativeSource(obj)
        if not stored:
            raise SnapshotError(f"{lw}: no known dataset; expected some of {', '.join(NAMES)}"
                                f"; found {sorted(g.keys())}")
        levels.append(build_level(label, time, units, axis_order, origin, spacing, stored, where,
                                  expected_grid=levels[0].storage_shape if levels else None))
    if not levels:
        raise SnapshotError(f"{where}: /{LEVELS_GROUP} holds no time level")
    return levels
