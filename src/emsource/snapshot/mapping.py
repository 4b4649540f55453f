"""Layout mappings: read another code's HDF5 snapshots through a TOML file, without code.

A mapping file says where each quantity lives, in what axis order and units, how the time
levels are found and where the grid's spacing and origin come from. Example (every key)::

    mapping_version = 1
    axis_order = "zyx"              # storage order of the grid axes: "xyz" or "zyx"
    units = "heaviside_lorentz"     # unit system of the stored fields: or "gaussian" (required)
    interpolation_order = 2         # staggered data to the vertices: 2 or 4 points per staggered
                                    # direction (default 2; see "Staggered data" below)

    [time_levels]
    pattern = "/run/step_{index}"   # HDF5 group of each level; {index} matches digits
    time = { attribute = "sim_time" }       # an attribute of the level group, or
    # time = { per_index = 0.25 }           # time = index * per_index
    # time = { attribute = "t", scale = 299792458.0 }   # optional "scale": stored time * scale
                                            # = code time (a time unit; here seconds -> metres)

    [grid]
    spacing = { attribute = "cell_size" }   # an attribute, or
    # spacing = [0.1, 0.1, 0.1]             # three values
    origin = { attribute = "corner", object = "fields/Bx" }  # "object": path relative to the
                                            # level group (default: the level group itself)

    [quantities.electric_field]
    components = ["fields/Ex", "fields/Ey", "fields/Ez"]   # one dataset per component, or
    # dataset = "E"                         # one dataset holding all components
    # component_axis = "first"              # ... with the component axis "first" or "last"
    scale = 1.0                             # stored value * scale = value in `units`

    [quantities.magnetic_field]
    components = ["fields/Bx", "fields/By", "fields/Bz"]
    centring = "face"                       # where it is stored: "vertex" (default), "cell",
                                            # "face" or "edge" (vectors), or instead
    # offsets = [[0.5, 0, 0], [0, 0.5, 0], [0, 0, 0.5]]  # one triple per component (x, y, z),
                                            # each 0 or 0.5 along the grid axes (storage order)
    time_offset = 0.005                     # stored at level time + 0.005 (file time unit)

    [quantities.spatial_metric]
    identity = true                         # flat metric gamma_ij = delta_ij, nothing stored

    [quantities.vector_potential]           # A_i stored instead of magnetic_field: B^i is its
    dataset = "A"                           # curl (emsource.snapshot.potential_sources)
    curl_order = 4                          # centred differences of order 2 (default), 4 or 6
    unit = "T m"                            # stored in physical units (see below)

    [physical_units]                        # optional (emsource.snapshot.mapping_units)
    code_scale = { value = 1.0, unit = "m" }   # one code unit: length (m, cm), time (s) or
                                            # mass (g, kg, solar_mass)
    length_unit = "m"                       # spacing and origin stored in m (or cm)
    time_unit = "s"                         # level times stored in seconds

    [forms]                                 # optional: how the stored fields and metric are
    fields = "upper"                        # written (:mod:`.stored_forms`): "upper", "lower",
                                            # "densitized", "faraday_lower", "faraday_upper"
                                            # (faraday_tensor, lapse, shift) or "ideal_mhd"
                                            # (magnetic_field, fluid_velocity, lapse, shift)
    metric = "physical"                     # or "chi", "w", "phi": conformal_metric and
                                            # conformal_factor stored, spatial_metric computed
    velocity = "eulerian"                   # ideal_mhd: v^i, or "four_velocity" (u^i)

One rule for the order of the grid triples: ``spacing`` and ``origin`` are read in the file's
storage order (``axis_order``), whether they are given as three values or as an attribute; for
``axis_order = "zyx"`` both mean (z, y, x). Component lists and packed tensors are always in
(x, y, z) order: (x, y, z) for vectors, (xx, xy, xz, yy, yz, zz) for symmetric tensors.

Staggered data. ``centring``, ``offsets`` and ``time_offset`` say where a quantity is stored
(positions and interpolation: :mod:`emsource.staggering`): "face" puts component c at the
centre of the face normal to axis c (B^x at (i, j + 1/2, k + 1/2)), "edge" at the centre of the
edge along axis c (E^x at (i + 1/2, j, k)), "cell" every component at (i + 1/2, j + 1/2,
k + 1/2). Along an axis with offset 1/2 a component stores n - 1 values (between the n vertices)
or n (padded: the last half a cell outside). The vertex count of an axis is the length of the
datasets stored with offset 0 along it, or the stored length + 1 where every dataset is offset
there. Each quantity is read at the vertices, at the time of its level (``time_offset``: from
the levels around it), by Lagrange interpolation of ``interpolation_order``; the slab readers
read the halo rows the stencils need. A stored shape that does not fit its declared offsets
is an error naming the key, the expected and the found shape; shapes that differ by one point
while the mapping declares no offsets are an error saying that the data look staggered.

Quantity names are those of the native layout (:data:`emsource.quantities.NAMES`). Dataset paths
are relative to the level group unless they start with "/". ``units`` is required: a silent
default unit system is the very error the package exists to catch. An unknown key anywhere is
an error that lists the keys allowed there; a value of the wrong type is an error that names the
file, the key, the expected and the found value; a dataset that is not in the file is an error
that lists what the file holds.
"""

from __future__ import annotations

import math
import os
import re
import sys
from dataclasses import dataclass, field

import h5py
import numpy as np

from ..quantities import BY_NAME, COMPONENTS, NAMES
from . import stored_forms
from .errors import MappingError
from .mapping_units import MappingUnits, parse_physical_units
from .potential_sources import add_curl_sources
from .levels import (AXIS_ORDERS, UNIT_SYSTEMS, attribute_number, attribute_vector, build_level,
                     chunk_bytes_of, chunk_rows_of, kind_of, open_object)
from . import staggered

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 only
    import tomli as tomllib

__all__ = ["LayoutMapping", "QuantitySpec", "load_mapping", "MAPPING_VERSION"]

MAPPING_VERSION = 1

_TOP_KEYS = {"mapping_version", "axis_order", "units", "time_levels", "grid", "quantities",
             "physical_units", "interpolation_order", "forms"}
_LEVEL_KEYS = {"pattern", "time"}
_TIME_KEYS = {"attribute", "object", "per_index", "scale"}
_GRID_KEYS = {"spacing", "origin"}
_ATTRIBUTE_KEYS = {"attribute", "object"}
_QUANTITY_KEYS = ({"dataset", "components", "component_axis", "scale", "identity", "unit",
                   "curl_order"} | staggered.QUANTITY_KEYS)


@dataclass
class QuantitySpec:
    """Where one quantity is stored (one ``[quantities.<name>]`` table)."""

    name: str
    dataset: str | None = None
    components: list | None = None
    component_axis: str = "first"
    scale: float = 1.0
    identity: bool = False
    curl_order: int = 2
    staggering: staggered.Staggering | None = None


class _Checker:
    """Type checks of mapping values, with messages naming the file and the key."""

    def __init__(self, path):
        self.path = path

    def fail(self, text):
        raise MappingError(f"mapping {self.path!r}: {text}")

    def keys(self, table, allowed, where):
        if not isinstance(table, dict):
            self.fail(f"{where} must be a table, found {table!r}")
        unknown = sorted(set(table) - allowed)
        if unknown:
            self.fail(f"unknown key(s) {unknown} in {where}; allowed: {sorted(allowed)}")

    def text(self, value, where, choices=None):
        if not isinstance(value, str) or not value:
            self.fail(f"{where} must be a non-empty string, found {value!r}")
        if choices and value not in choices:
            self.fail(f"{where} must be one of {list(choices)}, found {value!r}")
        return value

    def number(self, value, where, *, nonzero=False):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            self.fail(f"{where} must be a finite number, found {value!r}")
        if nonzero and value == 0:
            self.fail(f"{where} must not be zero")
        return float(value)


def _object(group, relative, where):
    if relative in (".", ""):
        return group
    obj = open_object(group, relative, where, MappingError)
    if obj is None:
        raise MappingError(f"{where}: object {relative!r} not found under {group.name}")
    return obj


def _dataset(h5file, group, path, where, listing):
    obj = open_object(h5file if path.startswith("/") else group, path, where, MappingError)
    if obj is None:
        raise MappingError(f"{where}: dataset {path!r} not found. Objects in the file: "
                           f"{listing()}")
    if not isinstance(obj, h5py.Dataset):
        raise MappingError(f"{where}: {obj.name!r} is a {kind_of(obj)}, expected a dataset")
    return obj


class _ComponentSource:
    """One dataset per component; scalars are a one-entry list (see ``levels.DataSource``)."""

    def __init__(self, datasets, scale, scalar):
        self.datasets = datasets
        self.scale = scale
        self.scalar = scalar
        self.dtype = np.dtype(datasets[0].dtype)
        self.paths = tuple(d.name for d in datasets)
        grid = tuple(datasets[0].shape)
        self.shape = grid if scalar else (len(datasets),) + grid
        self.chunk_rows = min(chunk_rows_of(d, 0) for d in datasets)
        self.chunk_bytes = max(chunk_bytes_of(d) for d in datasets)
        self.scratch_bytes_per_row = 0

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
        self.ncomp = ncomp
        self.dtype = np.dtype(dataset.dtype)
        self.paths = (dataset.name,)
        shape = tuple(dataset.shape)
        self.shape = (shape[-1],) + shape[:-1] if self.last else shape
        self.chunk_rows = chunk_rows_of(dataset, 1 if (ncomp and not self.last) else 0)
        self.chunk_bytes = chunk_bytes_of(dataset)
        # A component-last block is read whole, then transposed into ``out``.
        self.scratch_bytes_per_row = (int(np.prod(shape[1:])) * self.dtype.itemsize
                                      if self.last and len(shape) >= 2 else 0)

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

    def __init__(self, storage_shape):
        self.dtype = np.dtype(np.float64)
        self.paths = ()
        self.shape = (6,) + tuple(storage_shape)
        self.chunk_rows = int(storage_shape[0])
        self.chunk_bytes = 0
        self.scratch_bytes_per_row = 0

    def read_into(self, out, start, stop):
        out[...] = 0
        out[0] = out[3] = out[5] = 1


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
    physical_units: MappingUnits = field(default_factory=MappingUnits)
    interpolation_order: int = staggered.DEFAULT_ORDER
    forms: dict = field(default_factory=dict)

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

    def levels(self, h5file, path, listing) -> list:
        """The time levels of an open file (``listing``: callable -> the file's objects)."""
        where = f"snapshot {path!r} (mapping {self.path!r})"
        groups = self._level_groups(h5file)
        if not groups:
            raise MappingError(f"{where}: no group matches the time-level pattern "
                               f"{self.pattern!r}. Objects in the file: {listing()}")
        if not any(not spec.identity for spec in self.quantities.values()):
            raise MappingError(f"{where}: the mapping names no stored dataset")
        levels = []
        text = listing()
        found = []
        for index, name in groups:
            group = h5file[name]
            lw = f"{where}, level /{name}"
            found.append((index, name, group, lw, self._time(group, index, lw)))
        times = [t for *_, t in found]
        raw = {}  # (level number, quantity) -> stored components of a staggered quantity
        for k, (index, name, group, lw, time) in enumerate(found):
            spacing = self._vector(group, self.spacing, "spacing", lw)
            origin = self._vector(group, self.origin, "origin", lw)
            spacing, origin = (tuple(v * self.physical_units.length_factor for v in triple)
                               for triple in (spacing, origin))
            stored, derived = {}, {}
            for q, spec in self.quantities.items():
                if spec.identity:
                    derived[q] = _IdentityMetric
                elif spec.staggering is None:
                    stored[q] = self._source(h5file, group, spec, lw, listing)
            self._check_undeclared_staggering(h5file, group, stored, lw, listing)
            self._staggered_sources(h5file, found, times, k, stored, raw, listing)
            if "vector_potential" in stored:  # after staggering: A is on the vertices
                self._curl_sources(stored, derived, spacing, lw)
            derived.update(stored_forms.derived_sources(self.forms, stored, derived))
            levels.append(build_level(
                str(index), time, self.units, self.axis_order, origin, spacing, stored, where,
                derived=derived, listing=text,
                expected_grid=levels[0].storage_shape if levels else None))
        return levels

    def _curl_sources(self, stored, derived, spacing, where):
        """B^i from the stored vector potential (:mod:`.potential_sources`)."""
        if "spatial_metric" not in stored and "spatial_metric" not in derived:
            raise MappingError(f"{where}: vector_potential needs the spatial_metric (a dataset, "
                               "or identity = true) to give B^i = [ijk] d_j A_k / sqrt(gamma)")
        add_curl_sources(stored, derived, order=self.quantities["vector_potential"].curl_order,
                         spacing_xyz=spacing, axis_order=self.axis_order,
                         identity_metric=derived.get("spatial_metric"), where=where)

    def _raw_components(self, h5file, group, spec, where, listing):
        """The stored components of a staggered quantity at one level (shapes may differ)."""
        ncomp = COMPONENTS[spec.name]
        if spec.components is not None:
            comps = [staggered.RawComponent(_dataset(h5file, group, p, where, listing))
                     for p in spec.components]
        else:
            dataset = _dataset(h5file, group, spec.dataset, where, listing)
            if not ncomp:
                comps = [staggered.RawComponent(dataset)]
            else:
                last = spec.component_axis == "last"
                expected = (f"(n0, n1, n2, {ncomp})" if last else f"({ncomp}, n0, n1, n2)")
                if dataset.ndim != 4 or dataset.shape[-1 if last else 0] != ncomp:
                    raise MappingError(f"{where}: {dataset.name!r} ({spec.name}, component axis "
                                       f"{spec.component_axis}) has shape {dataset.shape}, "
                                       f"expected {expected}")
                comps = [staggered.RawComponent(dataset, c, last) for c in range(ncomp)]
        for c in comps:
            staggered.check_raw(c, where, f"[quantities.{spec.name}]")
        return comps

    def _check_undeclared_staggering(self, h5file, group, stored, where, listing):
        """Shapes that differ by one point while the mapping declares no offsets: an error that
        says so (see :func:`.staggered.undeclared_staggering`)."""
        if any(spec.staggering is not None for spec in self.quantities.values()):
            return
        shapes = [(q, tuple(s.shape[1:]) if COMPONENTS[q] else tuple(s.shape))
                  for q, s in stored.items()]
        error = staggered.undeclared_staggering(shapes, where)
        if error is not None:
            raise error

    def _staggered_sources(self, h5file, found, times, k, stored, raw, listing):
        """Add the :class:`.staggered.StaggeredSource` of every staggered quantity of level
        ``k`` to ``stored`` (``raw`` caches the stored components of each level)."""
        specs = [spec for spec in self.quantities.values() if spec.staggering is not None]
        if not specs:
            return
        pool = raw.setdefault("pool", staggered.ScratchPool())
        lw = found[k][3]

        def components(j, spec):
            if (j, spec.name) not in raw:
                raw[j, spec.name] = self._raw_components(h5file, found[j][2], spec, found[j][3],
                                                         listing)
            return raw[j, spec.name]

        entries = [(f"[quantities.{q}] ({', '.join(s.paths)})",
                    tuple(s.shape[1:]) if COMPONENTS[q] else tuple(s.shape), (0, 0, 0))
                   for q, s in stored.items()]
        for spec in specs:
            for c, (comp, offsets) in enumerate(zip(components(k, spec),
                                                    spec.staggering.offsets)):
                entries.append((f"[quantities.{spec.name}] {spec.staggering.key} (component "
                                f"{c}, {comp.path})", comp.shape, offsets))
        vertex_shape = staggered.vertex_storage_shape(entries, lw)
        for spec in specs:
            nodes = staggered.time_nodes(times, k, spec.staggering.time_offset * self._time_factor(),
                                         self.interpolation_order, lw, spec.name)
            stored[spec.name] = staggered.StaggeredSource(
                spec.name, [(w, components(j, spec)) for j, w in nodes], spec.staggering,
                vertex_shape, self.interpolation_order, spec.scale, COMPONENTS[spec.name] == 0,
                lw, pool)

    def _time_factor(self) -> float:
        """Stored time (and time offset) * this = code time: the time spec's ``scale`` times
        the ``[physical_units]`` time unit's factor (both 1 unless given)."""
        return float(self.time.get("scale", 1.0)) * self.physical_units.time_factor

    def _time(self, group, index, where):
        scale = self._time_factor()
        if "per_index" in self.time:
            return index * float(self.time["per_index"]) * scale
        obj = _object(group, self.time.get("object", "."), where)
        name = self.time["attribute"]
        if name not in obj.attrs:
            raise MappingError(f"{where}: time attribute {name!r} not on {obj.name}; found "
                               f"{sorted(obj.attrs.keys()) or 'no attributes'}")
        return scale * attribute_number(obj.attrs[name], f"time attribute {name!r} of {obj.name}",
                                        where)

    def _vector(self, group, spec, what, where):
        """(x, y, z)-order triple from a list or an attribute, both in storage order."""
        if isinstance(spec, list):
            values = tuple(float(v) for v in spec)
        else:
            obj = _object(group, spec.get("object", "."), where)
            name = spec["attribute"]
            if name not in obj.attrs:
                raise MappingError(f"{where}: {what} attribute {name!r} not on {obj.name}; "
                                   f"found {sorted(obj.attrs.keys()) or 'no attributes'}")
            values = attribute_vector(obj.attrs[name], f"{what} attribute {name!r} of {obj.name}",
                                      where)
        return values if self.axis_order == "xyz" else values[::-1]

    def _source(self, h5file, group, spec, where, listing):
        if spec.components is not None:
            datasets = [_dataset(h5file, group, p, where, listing) for p in spec.components]
            shapes = {d.shape for d in datasets}
            if len(shapes) != 1:
                hint = staggered.undeclared_staggering([(d.name, d.shape) for d in datasets],
                                                       where)
                if hint is not None:
                    raise hint
                found = ", ".join(f"{d.name} {d.shape}" for d in datasets)
                raise MappingError(f"{where}: components of {spec.name!r} differ in shape: {found}")
            return _ComponentSource(datasets, spec.scale, COMPONENTS[spec.name] == 0)
        dataset = _dataset(h5file, group, spec.dataset, where, listing)
        if spec.component_axis == "last" and COMPONENTS[spec.name] and dataset.ndim != 4:
            raise MappingError(f"{where}: {dataset.name!r} ({spec.name}, component axis last) "
                               f"has shape {dataset.shape}, expected (n0, n1, n2, "
                               f"{COMPONENTS[spec.name]})")
        return _StackedSource(dataset, spec.scale, spec.component_axis, COMPONENTS[spec.name])


def _read_table(path, check):
    if os.path.isdir(path):
        check.fail("is a directory, expected a TOML file")
    try:
        with open(path, "rb") as handle:
            return tomllib.load(handle)
    except FileNotFoundError:
        raise MappingError(f"mapping file {path!r} does not exist") from None
    except UnicodeDecodeError as error:
        raise MappingError(f"mapping file {path!r} is not UTF-8 text (byte {error.start}: "
                           f"{error.reason}); TOML files must be UTF-8") from None
    except tomllib.TOMLDecodeError as error:
        raise MappingError(f"mapping file {path!r} is not valid TOML: {error}") from None
    except OSError as error:
        raise MappingError(f"mapping file {path!r} cannot be read: {error}") from None


def _attribute_spec(spec, where, check):
    check.keys(spec, _TIME_KEYS if "time" in where else _ATTRIBUTE_KEYS, where)
    if "attribute" in spec:
        check.text(spec["attribute"], f"{where} attribute")
    if "object" in spec:
        check.text(spec["object"], f"{where} object")
    return spec


def load_mapping(path) -> LayoutMapping:
    """Read and check a mapping file (TOML).

    Raises
    ------
    MappingError
        A directory, an unreadable, non-UTF-8 or invalid TOML file, unknown keys (the message
        lists the allowed ones), missing required keys, values of the wrong type or range (the
        message names the file and the key).
    """
    path = os.fspath(path)
    check = _Checker(path)
    table = _read_table(path, check)
    check.keys(table, _TOP_KEYS, "the top level")
    for key in ("mapping_version", "axis_order", "units", "time_levels", "grid", "quantities"):
        if key not in table:
            hint = (f" (one of {list(UNIT_SYSTEMS)}: the unit system of the stored fields is "
                    "never assumed)") if key == "units" else ""
            check.fail(f"required key {key!r} missing{hint}")
    version = table["mapping_version"]
    if isinstance(version, bool) or version != MAPPING_VERSION:
        check.fail(f"mapping_version {version!r} not supported (this emsource reads "
                   f"{MAPPING_VERSION})")
    axis_order = check.text(table["axis_order"], "axis_order", AXIS_ORDERS)
    units = check.text(table["units"], "units", UNIT_SYSTEMS)

    levels = table["time_levels"]
    check.keys(levels, _LEVEL_KEYS, "[time_levels]")
    pattern = levels.get("pattern")
    if not isinstance(pattern, str) or pattern.count("{index}") != 1:
        check.fail(f"[time_levels] pattern must be a string with one '{{index}}', found {pattern!r}")
    time = levels.get("time", {"per_index": 1.0})
    _attribute_spec(time, "[time_levels] time", check)
    if ("attribute" in time) == ("per_index" in time):
        check.fail(f"[time_levels] time needs exactly one of 'attribute' or 'per_index', found "
                   f"{sorted(time)}")
    if "per_index" in time:
        check.number(time["per_index"], "[time_levels] time per_index")
    if "scale" in time:
        if check.number(time["scale"], "[time_levels] time scale") <= 0:
            check.fail(f"[time_levels] time scale must be positive, found {time['scale']!r}")

    grid = table["grid"]
    check.keys(grid, _GRID_KEYS, "[grid]")
    vectors = {}
    for key in ("spacing", "origin"):
        if key not in grid:
            check.fail(f"[grid] {key} missing")
        spec = grid[key]
        if isinstance(spec, list):
            if len(spec) != 3:
                check.fail(f"[grid] {key} must be 3 numbers, found {spec!r}")
            for value in spec:
                check.number(value, f"[grid] {key} (each of 3 values)")
            if key == "spacing" and not all(v > 0 for v in spec):
                check.fail(f"[grid] spacing must be positive, found {spec!r}")
        else:
            _attribute_spec(spec, f"[grid] {key}", check)
            if "attribute" not in spec:
                check.fail(f"[grid] {key} needs 'attribute' or 3 values")
        vectors[key] = spec

    quantities = table["quantities"]
    check.keys(quantities, set(NAMES), "[quantities]")
    unit_scales, unit_factors = parse_physical_units(table, quantities, units, check)
    if "vector_potential" in quantities and "magnetic_field" in quantities:
        check.fail("[quantities] names both magnetic_field and vector_potential; B^i is derived "
                   "from vector_potential, give one of them")
    specs = {}
    for name, q in quantities.items():
        where = f"[quantities.{name}]"
        check.keys(q, _QUANTITY_KEYS, where)
        ncomp = COMPONENTS[name]
        spec = QuantitySpec(name)
        if "scale" in q:
            if BY_NAME[name].kind == "mask":
                check.fail(f"{where} takes no scale: a mask holds 0 and 1, found scale = "
                           f"{q['scale']!r}")
            spec.scale = check.number(q["scale"], f"{where} scale", nonzero=True)
        if "curl_order" in q:
            if name != "vector_potential":
                check.fail(f"{where} curl_order applies to vector_potential only")
            order = q["curl_order"]
            if isinstance(order, bool) or order not in (2, 4, 6):
                check.fail(f"{where} curl_order must be one of [2, 4, 6], found {order!r}")
            spec.curl_order = int(order)
        spec.scale *= unit_factors.get(name, 1.0)
        if "component_axis" in q:
            spec.component_axis = check.text(q["component_axis"], f"{where} component_axis",
                                             ("first", "last"))
        if "identity" in q:
            if q["identity"] is not True:
                check.fail(f"{where} identity must be true (leave it out otherwise), found "
                           f"{q['identity']!r}")
            if name != "spatial_metric":
                check.fail(f"{where} identity applies to spatial_metric only")
            spec.identity = True
        given = [k for k in ("dataset", "components", "identity") if k in q]
        if len(given) != 1:
            check.fail(f"{where} needs exactly one of 'dataset', 'components' or "
                       f"'identity = true', found {given or 'none'}")
        if "components" in q:
            listed = q["components"]
            if not isinstance(listed, list) or not all(isinstance(p, str) and p for p in listed):
                check.fail(f"{where} components must be a list of dataset paths (strings), "
                           f"found {listed!r}")
            if len(listed) != max(ncomp, 1):
                check.fail(f"{where} lists {len(listed)} components, {name} has {max(ncomp, 1)}")
            spec.components = list(listed)
        if "dataset" in q:
            spec.dataset = check.text(q["dataset"], f"{where} dataset")
        if spec.identity and ("scale" in q or "component_axis" in q):
            check.fail(f"{where} identity takes no scale or component_axis")
        spec.staggering = staggered.parse_staggering(q, name, ncomp, axis_order, where, check)
        specs[name] = spec
    forms = _forms(table.get("forms", {}), specs, check)
    return LayoutMapping(path=os.path.abspath(path), axis_order=axis_order, units=units,
                         pattern=pattern, time=time, spacing=vectors["spacing"],
                         origin=vectors["origin"], quantities=specs,
                         physical_units=unit_scales,
                         interpolation_order=staggered.parse_interpolation_order(table, check),
                         forms=forms)


def _forms(table, specs, check) -> dict:
    """The checked ``[forms]`` table: each value one of its choices, every quantity it reads
    named under [quantities] (stored, not identity where converted), none that it computes."""
    check.keys(table, stored_forms.FORMS_KEYS, "[forms]")
    choices = {"fields": stored_forms.FIELD_FORMS, "metric": stored_forms.METRIC_FORMS,
               "velocity": stored_forms.VELOCITY_FORMS}
    forms = {key: check.text(value, f"[forms] {key}", choices[key]) for key, value in table.items()}
    if "velocity" in forms and forms.get("fields") != "ideal_mhd":
        check.fail(f"[forms] velocity applies to fields = 'ideal_mhd' only, found fields = "
                   f"{forms.get('fields', 'upper')!r}")
    needed, replaced = stored_forms.needed_quantities(forms)
    for q in needed:
        if q not in specs:
            check.fail(f"[forms] {', '.join(f'{k} = {v!r}' for k, v in forms.items())} needs "
                       f"[quantities.{q}], which is missing")
    for q, key in replaced:
        if q in specs:
            check.fail(f"[forms] {key} = {forms[key]!r} computes {q}: remove "
                       f"[quantities.{q}]")
    return forms
