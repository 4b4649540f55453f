"""Layout mappings: read another code's HDF5 snapshots through a TOML file, without code.

A mapping file says where each quantity lives, in what axis order and units, how the time
levels are found and where the grid's spacing and origin come from. Example (every key)::

    mapping_version = 1
    axis_order = "zyx"              # storage order of the grid axes: "xyz" or "zyx"
    units = "heaviside_lorentz"     # unit system of the stored fields: or "gaussian"

    [time_levels]
    pattern = "/run/step_{index}"   # HDF5 group of each level; {index} matches digits
    time = { attribute = "sim_time" }       # an attribute of the level group, or
    # time = { per_index = 0.25 }           # time = index * per_index

    [grid]
    spacing = { attribute = "cell_size" }   # attribute in storage axis order, or
    # spacing = [0.1, 0.1, 0.1]             # values in (x, y, z) order
    origin = { attribute = "corner", object = "fields/Bx" }  # "object": path relative to the
                                            # level group (default: the level group itself)

    [quantities.electric_field]
    components = ["fields/Ex", "fields/Ey", "fields/Ez"]   # one dataset per component, or
    # dataset = "E"                         # one dataset holding all components
    # component_axis = "first"              # ... with the component axis "first" or "last"
    scale = 1.0                             # stored value * scale = value in `units`

    [quantities.spatial_metric]
    identity = true                         # flat metric gamma_ij = delta_ij, nothing stored

Quantity names are those of the native layout (:data:`emsource.io.QUANTITIES`). Dataset paths
are relative to the level group unless they start with "/". Packed tensors list their six
components in the order (xx, xy, xz, yy, yz, zz). An unknown key anywhere is an error that lists
the keys allowed there, and a dataset that is not in the file is an error that lists what the
file holds.
"""

from __future__ import annotations

import os
import re
import sys
from dataclasses import dataclass, field

import h5py
import numpy as np

from .grid import UniformGrid
from .io import (AXIS_ORDERS, QUANTITIES, UNIT_SYSTEMS, SnapshotError, TimeLevel,
                 _file_listing, check_level_shapes)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 only
    import tomli as tomllib

__all__ = ["LayoutMapping", "MappingError", "load_mapping", "MAPPING_VERSION"]

MAPPING_VERSION = 1

_TOP_KEYS = {"mapping_version", "axis_order", "units", "time_levels", "grid", "quantities"}
_LEVEL_KEYS = {"pattern", "time"}
_TIME_KEYS = {"attribute", "object", "per_index"}
_GRID_KEYS = {"spacing", "origin"}
_ATTRIBUTE_KEYS = {"attribute", "object"}
_QUANTITY_KEYS = {"dataset", "components", "component_axis", "scale", "identity"}


class MappingError(SnapshotError):
    """A layout mapping file is malformed or does not fit the snapshot."""


def _check_keys(table, allowed, where, path):
    if not isinstance(table, dict):
        raise MappingError(f"mapping {path!r}: {where} must be a table, found {table!r}")
    unknown = sorted(set(table) - allowed)
    if unknown:
        raise MappingError(f"mapping {path!r}: unknown key(s) {unknown} in {where}; "
                           f"allowed: {sorted(allowed)}")


@dataclass
class QuantitySpec:
    name: str
    dataset: str | None = None
    components: list | None = None
    component_axis: str = "first"
    scale: float = 1.0
    identity: bool = False


@dataclass
class LayoutMapping:
    """A parsed mapping file (see the module docstring). Build it with :func:`load_mapping`."""

    path: str
    axis_order: str
    units: str
    pattern: str
    time: dict
    spacing: object
    origin: object
    quantities: dict = field(default_factory=dict)

    # --- levels --------------------------------------------------------------------------
    def _level_groups(self, h5file):
        regex = re.compile("^" + re.escape(self.pattern.strip("/")).replace(
            re.escape("{index}"), r"(\d+)") + "$")
        found = []

        def visit(name, obj):
            if isinstance(obj, h5py.Group):
                match = regex.match(name)
                if match:
                    found.append((int(match.group(1)), name))

        h5file.visititems(visit)
        return sorted(found)

    def levels(self, h5file, path):
        where = f"snapshot {path!r} (mapping {self.path!r})"
        groups = self._level_groups(h5file)
        if not groups:
            raise MappingError(f"{where}: no group matches the time-level pattern "
                               f"{self.pattern!r}. Objects in the file: {_file_listing(h5file)}")
        levels = []
        for index, name in groups:
            group = h5file[name]
            lw = f"{where}, level /{name}"
            time = self._time(group, index, lw)
            spacing = self._vector(group, self.spacing, "spacing", lw)
            origin = self._vector(group, self.origin, "origin", lw)
            sources = {q: self._source(h5file, group, spec, lw)
                       for q, spec in self.quantities.items()}
            shapes = [s.shape for s in sources.values() if s.shape is not None]
            if not shapes:
                raise MappingError(f"{where}: the mapping names no stored dataset")
            first_q = next(q for q, s in sources.items() if s.shape is not None)
            ncomp = QUANTITIES[first_q]
            stored = tuple(sources[first_q].shape[1 if ncomp else 0:])
            if len(stored) != 3:
                raise MappingError(f"{lw}: {first_q!r} has grid shape {stored}; "
                                   "snapshots must hold 3D grids")
            shape = stored if self.axis_order == "xyz" else stored[::-1]
            try:
                grid = UniformGrid(shape, origin, spacing)
            except ValueError as error:
                raise MappingError(f"{lw}: {error}") from None
            level = TimeLevel(str(index), time, grid, self.units, self.axis_order, sources, where)
            for s in sources.values():
                if s.shape is None:
                    s.shape = ((6,) + level.storage_shape)
            check_level_shapes(level, sources, where)
            level.file_listing = _file_listing(h5file)
            levels.append(level)
        return levels

    def _time(self, group, index, where):
        if "per_index" in self.time:
            return index * float(self.time["per_index"])
        obj = _object(group, self.time.get("object", "."), where)
        name = self.time["attribute"]
        if name not in obj.attrs:
            raise MappingError(f"{where}: time attribute {name!r} not on {obj.name}; found "
                               f"{sorted(obj.attrs.keys()) or 'no attributes'}")
        return float(np.asarray(obj.attrs[name]).reshape(-1)[0])

    def _vector(self, group, spec, what, where):
        if isinstance(spec, list):
            return tuple(float(v) for v in spec)
        obj = _object(group, spec.get("object", "."), where)
        name = spec["attribute"]
        if name not in obj.attrs:
            raise MappingError(f"{where}: {what} attribute {name!r} not on {obj.name}; found "
                               f"{sorted(obj.attrs.keys()) or 'no attributes'}")
        values = np.asarray(obj.attrs[name], dtype=float).reshape(-1)
        if values.size != 3:
            raise MappingError(f"{where}: {what} attribute {name!r} has {values.size} values, "
                               "expected 3")
        return tuple(values if self.axis_order == "xyz" else values[::-1])

    def _source(self, h5file, group, spec, where):
        if spec.identity:
            return _IdentityMetric()
        if spec.components is not None:
            datasets = [_dataset(h5file, group, p, where) for p in spec.components]
            shapes = {d.shape for d in datasets}
            if len(shapes) != 1:
                listing = ", ".join(f"{d.name} {d.shape}" for d in datasets)
                raise MappingError(f"{where}: components of {spec.name!r} differ in shape: {listing}")
            return _ComponentSource(datasets, spec.scale, QUANTITIES[spec.name] == 0)
        dataset = _dataset(h5file, group, spec.dataset, where)
        return _StackedSource(dataset, spec.scale, spec.component_axis, QUANTITIES[spec.name])


def _object(group, relative, where):
    if relative in (".", ""):
        return group
    try:
        return group[relative]
    except KeyError:
        raise MappingError(f"{where}: object {relative!r} not found under {group.name}") from None


def _dataset(h5file, group, path, where):
    try:
        obj = h5file[path] if path.startswith("/") else group[path]
    except KeyError:
        raise MappingError(f"{where}: dataset {path!r} not found. Objects in the file: "
                           f"{_file_listing(h5file)}") from None
    if not isinstance(obj, h5py.Dataset):
        raise MappingError(f"{where}: {obj.name!r} is a group, expected a dataset")
    return obj


class _ComponentSource:
    """One dataset per component; scalars are a one-entry list."""

    def __init__(self, datasets, scale, scalar):
        self.datasets = datasets
        self.scale = scale
        self.scalar = scalar
        self.dtype = datasets[0].dtype
        self.paths = tuple(d.name for d in datasets)
        grid = tuple(datasets[0].shape)
        self.shape = grid if scalar else (len(datasets),) + grid

    def read_into(self, out, start, stop):
        if self.scalar:
            self.datasets[0].read_direct(out, source_sel=np.s_[start:stop])
        else:
            for c, d in enumerate(self.datasets):
                d.read_direct(out, source_sel=np.s_[start:stop], dest_sel=np.s_[c])
        if self.scale != 1.0:
            out *= out.dtype.type(self.scale)


class _StackedSource:
    """One dataset with a component axis first or last (or none for a scalar)."""

    def __init__(self, dataset, scale, component_axis, ncomp):
        self.dataset = dataset
        self.scale = scale
        self.last = component_axis == "last" and ncomp > 0
        self.dtype = dataset.dtype
        self.paths = (dataset.name,)
        shape = tuple(dataset.shape)
        self.shape = (shape[-1],) + shape[:-1] if self.last else shape
        self.ncomp = ncomp

    def read_into(self, out, start, stop):
        if self.last:
            block = self.dataset[start:stop]
            out[...] = np.moveaxis(block, -1, 0)
        elif self.ncomp:
            self.dataset.read_direct(out, source_sel=np.s_[:, start:stop])
        else:
            self.dataset.read_direct(out, source_sel=np.s_[start:stop])
        if self.scale != 1.0:
            out *= out.dtype.type(self.scale)


class _IdentityMetric:
    """gamma_ij = delta_ij, nothing stored."""

    dtype = np.dtype(np.float64)
    paths = ()
    shape = None

    def read_into(self, out, start, stop):
        out[...] = 0
        out[0] = out[3] = out[5] = 1


def load_mapping(path) -> LayoutMapping:
    """Read and check a mapping file (TOML).

    Raises
    ------
    MappingError
        Unreadable TOML, unknown keys (the message lists the allowed ones), missing required
        keys, bad values.
    """
    path = os.fspath(path)
    try:
        with open(path, "rb") as handle:
            table = tomllib.load(handle)
    except FileNotFoundError:
        raise MappingError(f"mapping file {path!r} does not exist") from None
    except tomllib.TOMLDecodeError as error:
        raise MappingError(f"mapping file {path!r} is not valid TOML: {error}") from None
    _check_keys(table, _TOP_KEYS, "the top level", path)
    for key in ("mapping_version", "axis_order", "time_levels", "grid", "quantities"):
        if key not in table:
            raise MappingError(f"mapping {path!r}: required key {key!r} missing")
    if table["mapping_version"] != MAPPING_VERSION:
        raise MappingError(f"mapping {path!r}: mapping_version {table['mapping_version']!r} not "
                           f"supported (this emsource reads {MAPPING_VERSION})")
    axis_order = table["axis_order"]
    if axis_order not in AXIS_ORDERS:
        raise MappingError(f"mapping {path!r}: axis_order {axis_order!r}, expected one of {AXIS_ORDERS}")
    units = table.get("units", "gaussian")
    if units not in UNIT_SYSTEMS:
        raise MappingError(f"mapping {path!r}: units {units!r}, expected one of {UNIT_SYSTEMS}")

    levels = table["time_levels"]
    _check_keys(levels, _LEVEL_KEYS, "[time_levels]", path)
    pattern = levels.get("pattern")
    if not isinstance(pattern, str) or pattern.count("{index}") != 1:
        raise MappingError(f"mapping {path!r}: [time_levels] pattern must be a string with one "
                           f"'{{index}}', found {pattern!r}")
    time = levels.get("time", {"per_index": 1.0})
    _check_keys(time, _TIME_KEYS, "[time_levels] time", path)
    if ("attribute" in time) == ("per_index" in time):
        raise MappingError(f"mapping {path!r}: [time_levels] time needs exactly one of "
                           f"'attribute' or 'per_index', found {sorted(time)}")

    grid = table["grid"]
    _check_keys(grid, _GRID_KEYS, "[grid]", path)
    vectors = {}
    for key in ("spacing", "origin"):
        if key not in grid:
            raise MappingError(f"mapping {path!r}: [grid] {key} missing")
        spec = grid[key]
        if isinstance(spec, list):
            if len(spec) != 3 or not all(isinstance(v, (int, float)) for v in spec):
                raise MappingError(f"mapping {path!r}: [grid] {key} must be 3 numbers, found {spec!r}")
        else:
            _check_keys(spec, _ATTRIBUTE_KEYS, f"[grid] {key}", path)
            if "attribute" not in spec:
                raise MappingError(f"mapping {path!r}: [grid] {key} needs 'attribute' or 3 values")
        vectors[key] = spec

    quantities = table["quantities"]
    _check_keys(quantities, set(QUANTITIES), "[quantities]", path)
    specs = {}
    for name, q in quantities.items():
        where = f"[quantities.{name}]"
        _check_keys(q, _QUANTITY_KEYS, where, path)
        ncomp = QUANTITIES[name]
        spec = QuantitySpec(name, scale=float(q.get("scale", 1.0)),
                            component_axis=q.get("component_axis", "first"),
                            identity=bool(q.get("identity", False)))
        if spec.component_axis not in ("first", "last"):
            raise MappingError(f"mapping {path!r}: {where} component_axis must be 'first' or "
                               f"'last', found {spec.component_axis!r}")
        given = [k for k in ("dataset", "components", "identity") if k in q]
        if len(given) != 1:
            raise MappingError(f"mapping {path!r}: {where} needs exactly one of 'dataset', "
                               f"'components' or 'identity', found {given}")
        if spec.identity and name != "spatial_metric":
            raise MappingError(f"mapping {path!r}: {where} identity applies to spatial_metric only")
        if "components" in q:
            spec.components = list(q["components"])
            if len(spec.components) != max(ncomp, 1):
                raise MappingError(f"mapping {path!r}: {where} lists {len(spec.components)} "
                                   f"components, {name} has {max(ncomp, 1)}")
        if "dataset" in q:
            spec.dataset = str(q["dataset"])
        specs[name] = spec
    return LayoutMapping(path=os.path.abspath(path), axis_order=axis_order, units=units,
                         pattern=pattern, time=time, spacing=vectors["spacing"],
                         origin=vectors["origin"], quantities=specs)
