"""Hostile input for the snapshot commands: nothing lost, no traceback (property-based).

What is generated. Hypothesis builds three families of bad input and runs one snapshot command
(``sources``, ``integrate``, ``constraints`` or ``audit-units``, chosen by Hypothesis too) on each,
in a fresh interpreter (``tests/snapshot_data.py: run_cli``), as a user would:

- native snapshots (two time levels, 10 x 10 x 11 points, every input quantity and a valid_mask)
  changed by one to three edits: a dataset dropped, stored in a wrong dtype (float16, long double,
  integers, complex, bool, strings) or a wrong shape (a plane or a component short, a grid axis
  missing, an axis too many); an attribute of a level or of the root deleted or replaced by a value
  of the wrong form (h5py Empty, text, bytes, NaN, Inf, arrays where a number belongs and the reverse,
  a zero or negative spacing); NaN or Inf written at random grid points, at points the valid_mask
  excludes or not; valid_mask values other than 0 and 1 (2, 255, 0.5 in a float mask); a level
  group renamed or a dataset where a level group belongs;
- the same snapshots damaged as bytes: truncated at a random length, or random bytes overwritten
  in the HDF5 metadata (the superblock, object headers, heaps and B-trees: every byte outside the
  datasets' raw data, whose places h5py reports);
- TOML layout mappings for a small file in a foreign layout: the working mapping with values at
  random keys replaced by values of any TOML type (strings, integers, floats with NaN and Inf,
  booleans, dates, arrays, tables), keys deleted or unknown keys added, or its text damaged
  (the working mapping holds the staggering keys ``centring``, ``time_offset``,
  ``interpolation_order`` and a time ``scale`` at values that change nothing, so edits reach them);
  the ``[forms]`` keys also set to valid form names that do not fit the stored data.

The property, for every example (issue 10, "Nothing lost, no traceback"): the exit code is a
documented one (:mod:`emsource.commands`: 0 ok, 1 a check failed, 2 usage, 3 bad input, 4 output
error); stderr holds no Python traceback and no uncaught warning; on a failure stdout is empty (the
message is on stderr, starts with "emsource: error:" and, for bad input, names the snapshot or
the mapping file); on success stderr is empty; no file is left in the directory besides the
inputs and complete outputs (no ``.*.partial``; a failed command leaves no output at all; a
successful one leaves its outputs, and an HDF5 output opens); the inputs' checksums are unchanged.

Budget. A command in a fresh interpreter takes about 0.7-1 s here (imports and loading the cached
kernels dominate; the grids are tiny), so the three families run 40 + 30 + 30 examples, about 100
subprocesses (examples whose edits Hypothesis discards run none): about 70 s for the whole file on
a shared 2-core machine, within the 2 minutes this file may add to the suite. The examples are
derandomized (the same every run, so CI is reproducible) and no example database is written;
failures are shrunk as usual. For a longer search: ``HOSTILE_EXAMPLES=500`` (examples per family)
and ``HOSTILE_NO_SHRINK=1`` (report failures as found); 300 per family found nothing more.
"""

import datetime
import json
import math
import os
import re
import shutil
import sys
import tempfile

import h5py
import numpy as np
import pytest
from hypothesis import HealthCheck, Phase, event, given, settings
from hypothesis import strategies as st

from emsource import snapshot
from emsource.commands import (EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK, EXIT_OUTPUT_ERROR,
                               EXIT_USAGE)
from emsource.snapshot.stored_forms import FIELD_FORMS, FORMS_KEYS, METRIC_FORMS, VELOCITY_FORMS

from snapshot_data import checksums, curved_levels, run_cli

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 only
    import tomli as tomllib

DOCUMENTED = {EXIT_OK, EXIT_CHECK_FAILED, EXIT_USAGE, EXIT_BAD_INPUT, EXIT_OUTPUT_ERROR}
SCALE = int(os.environ.get("HOSTILE_EXAMPLES", "0")) or None


def budget(examples):
    # HOSTILE_NO_SHRINK=1: report failures as found, without minimising them (faster searches).
    quick = {"phases": [Phase.explicit, Phase.generate]} if os.environ.get("HOSTILE_NO_SHRINK") else {}
    return settings(max_examples=SCALE or examples, deadline=None, derandomize=True, **quick,
                    database=None, suppress_health_check=[HealthCheck.too_slow,
                                                          HealthCheck.data_too_large])


SHAPE = (10, 10, 11)  # audit-units needs 10 points per axis at order 4 (2 x (2 x 2 + 1))
SNAP = "snap.h5"
MAP = "map.toml"
FOREIGN = "foreign.h5"
QUANTITIES = ("lapse", "shift", "spatial_metric", "extrinsic_curvature", "electric_field",
              "magnetic_field", "valid_mask")


# --- base inputs ------------------------------------------------------------------------------

def _native_base(path):
    rng = np.random.default_rng(101)
    levels = curved_levels(rng, shape=SHAPE, times=(0.0, 0.5))
    mask = np.ones(SHAPE, np.uint8)
    mask[:2, :2, :2] = 0  # an excised corner, as in the sample grids
    for level in levels:
        level["extrinsic_curvature"] = 0.1 * rng.standard_normal((6,) + SHAPE)
        level["valid_mask"] = mask
    snapshot.write_snapshot(path, levels, attributes={"description": "hostile-input base"})


#: A mapping of the foreign base file: z, y, x storage, one dataset per component for E and B,
#: stacked component-first datasets for K and the metric, attributes for time, spacing, origin.
BASE_MAPPING = {
    "mapping_version": 1,
    "axis_order": "zyx",
    "units": "gaussian",
    # Keys of the staggered layouts, at values that change nothing, so that edits reach them.
    "interpolation_order": 2,
    "time_levels": {"pattern": "/run/step_{index}",
                    "time": {"attribute": "sim_time", "scale": 1.0}},
    "grid": {"spacing": {"attribute": "cell_size"},
             "origin": {"attribute": "corner", "object": "fields"}},
    "quantities": {
        "spatial_metric": {"dataset": "fields/metric"},
        "extrinsic_curvature": {"dataset": "fields/curv", "component_axis": "first",
                                "scale": 1.0},
        "electric_field": {"components": ["fields/Ex", "fields/Ey", "fields/Ez"],
                           "centring": "vertex", "time_offset": 0.0},
        "magnetic_field": {"components": ["fields/Bx", "fields/By", "/run/step_0/fields/Bz"]},
        "valid_mask": {"components": ["fields/ok"]},
    },
    # physical-unit keys (emsource.snapshot.mapping_units), so that random edits reach them
    "physical_units": {"code_scale": {"value": 1.0, "unit": "solar_mass"}, "time_unit": "s"},
    "forms": {"fields": "upper", "metric": "physical"},
}
BASE_MAPPING["quantities"]["electric_field"]["unit"] = "statV/cm"


def _zyx(a):
    """(x, y, z)-order array, component axis first if any, in (z, y, x) storage order."""
    lead = a.ndim - 3
    return np.ascontiguousarray(a.transpose(tuple(range(lead)) + (lead + 2, lead + 1, lead)))


def _foreign_base(path):
    rng = np.random.default_rng(202)
    with h5py.File(path, "w") as f:
        f.attrs["code"] = "invented layout for the hostile-input tests"
        for index, level in enumerate(curved_levels(rng, shape=SHAPE, times=(0.0, 0.25))):
            g = f.create_group(f"run/step_{index}")
            g.attrs["sim_time"] = level["time"]
            g.attrs["cell_size"] = np.array(level["grid"].spacing[::-1])
            fields = g.create_group("fields")
            fields.attrs["corner"] = np.array(level["grid"].origin[::-1])
            fields["metric"] = _zyx(level["spatial_metric"])
            fields["curv"] = _zyx(0.1 * rng.standard_normal((6,) + SHAPE))
            for c, axis in enumerate("xyz"):
                fields[f"E{axis}"] = _zyx(level["electric_field"][c]).astype(np.float32)
                fields[f"B{axis}"] = _zyx(level["magnetic_field"][c])
            fields["ok"] = np.ones(SHAPE[::-1], np.uint8)


@pytest.fixture(scope="module")
def bases(tmp_path_factory):
    directory = tmp_path_factory.mktemp("hostile-bases")
    _native_base(directory / SNAP)
    _foreign_base(directory / FOREIGN)
    (directory / MAP).write_text(toml_text(BASE_MAPPING))
    return directory


# --- running a command and checking the property ---------------------------------------------

COMMANDS = ("sources", "integrate", "constraints", "audit-units")


def command_line(command, snap, mapping, level, extra):
    """argv (relative names, run in the example's directory) and the outputs it may write."""
    argv = [command, snap] + (["--mapping", mapping] if mapping else [])
    if command == "sources":
        return argv + ["-o", "out.h5"] + extra, ["out.h5"]
    if command == "integrate":
        return argv + ["--hdf5", "series.h5", "--csv", "series.csv"] + extra, \
            ["series.h5", "series.csv"]
    return argv + ["--level", str(level)], []


def run_and_check(directory, argv, inputs, outputs):
    """Run ``emsource ARGV`` in ``directory`` and assert the hostile-input property."""
    before = checksums(directory)
    assert sorted(before) == sorted(inputs)
    code, out, err = run_cli(*argv, timeout=120, cwd=directory)
    context = f"emsource {' '.join(argv)}\nexit {code}\nstdout:\n{out}\nstderr:\n{err}"
    assert code in DOCUMENTED, context
    assert "Traceback" not in err and "Traceback" not in out, context
    assert not re.search(r"\b[A-Z]\w*(Error|Exception|Warning): ", err), context  # uncaught
    after = checksums(directory)
    for name in inputs:
        assert after.get(name) == before[name], f"input {name} changed\n{context}"
    left = set(after) - set(inputs)
    assert not [n for n in left if n.endswith(".partial")], context
    if code in (EXIT_OK, EXIT_CHECK_FAILED):
        assert err == "", context
        assert left == set(outputs), context
        for name in outputs:
            if name.endswith(".h5"):
                with h5py.File(os.path.join(directory, name), "r") as f:
                    assert len(f.attrs) > 0, context
    else:
        assert out == "", context
        assert left == set(), context
        assert err.startswith("emsource: error: "), context
        assert err.count("\n") == 1, context  # one message, on one line
        if code == EXIT_BAD_INPUT:
            named = [n for n in inputs if n in err]
            assert named, f"the message names no input file\n{context}"
    return code, err


class Workspace:
    """A fresh directory holding copies of the base inputs, removed afterwards."""

    def __init__(self, bases, names):
        self.path = tempfile.mkdtemp(prefix="hostile-", dir=bases)
        for name in names:
            shutil.copyfile(os.path.join(bases, name), os.path.join(self.path, name))

    def __enter__(self):
        return self.path

    def __exit__(self, *exc):
        shutil.rmtree(self.path)


# --- native snapshots: edits through h5py -----------------------------------------------------

LEVEL = st.sampled_from(["0", "1"])
FLOATS = st.floats(allow_nan=True, allow_infinity=True, width=64)
BAD_ATTRIBUTE = st.one_of(
    st.just(h5py.Empty("f8")), st.just(h5py.Empty("S1")),
    st.text(max_size=6), st.binary(max_size=6), FLOATS, st.integers(-3, 3), st.booleans(),
    st.lists(FLOATS, min_size=0, max_size=5).map(lambda v: np.array(v, dtype=np.float64)),
    st.lists(st.integers(-2, 2), min_size=1, max_size=4).map(np.array),
    st.just(np.zeros((3, 3))), st.just(np.array([1 + 2j, 0, 1])), st.just(np.array([0.1, 0.0, 0.1])),
    st.just(np.array([0.1, -0.2, 0.1])), st.just(np.array(["a", "b", "c"], dtype="S1")),
    st.sampled_from(["xyz", "zyx", "xzy", "gaussian", "heaviside_lorentz", "SI", ""]),
)
BAD_DTYPES = ("float16", "longdouble", "int32", "uint8", "int64", "complex64", "bool", "S4",
              "float32")

native_edit = st.one_of(
    st.tuples(st.just("drop"), LEVEL, st.sampled_from(QUANTITIES)),
    st.tuples(st.just("dtype"), LEVEL, st.sampled_from(QUANTITIES), st.sampled_from(BAD_DTYPES)),
    st.tuples(st.just("shape"), LEVEL, st.sampled_from(QUANTITIES),
              st.sampled_from(["short", "component", "flat", "extra", "scalar"]),
              st.integers(0, 3)),
    st.tuples(st.just("attribute"), LEVEL, st.sampled_from(["time", "origin", "spacing",
                                                            "axis_order", "units"]),
              BAD_ATTRIBUTE),
    st.tuples(st.just("delete attribute"), LEVEL,
              st.sampled_from(["time", "origin", "spacing", "axis_order", "units"])),
    st.tuples(st.just("root attribute"), st.sampled_from(["format", "format_version",
                                                          "description"]), BAD_ATTRIBUTE),
    st.tuples(st.just("nonfinite"), LEVEL,
              st.sampled_from(QUANTITIES[:-1]), st.sampled_from([math.nan, math.inf, -math.inf]),
              st.lists(st.integers(0, 10**6), min_size=1, max_size=4), st.booleans()),
    st.tuples(st.just("mask value"), LEVEL, st.sampled_from([2, 255, 0.5, 1.0, True]),
              st.integers(0, 10**6)),
    st.tuples(st.just("level group"), st.sampled_from(["rename", "dataset", "empty", "extra"])),
)


def _grid_points(seeds):
    return [np.unravel_index(s % int(np.prod(SHAPE)), SHAPE) for s in seeds]


def apply_native_edit(f, edit):
    kind = edit[0]
    if kind in ("drop", "dtype", "shape", "nonfinite", "mask value", "attribute",
                "delete attribute"):
        if not isinstance(f.get(f"time_levels/{edit[1]}"), h5py.Group):  # an earlier edit
            return
        g = f[f"time_levels/{edit[1]}"]
    if kind == "drop":
        if edit[2] in g:
            del g[edit[2]]
    elif kind == "dtype":
        _, _, name, dtype = edit
        if name in g and g[name].dtype.kind in "biuf":  # not again after complex or text
            data = g[name][...]
            del g[name]
            g[name] = data.astype(dtype)
    elif kind == "shape":
        _, _, name, how, axis = edit
        if name in g:
            data = g[name][...]
            lead = data.ndim - 3
            if how == "short":
                data = np.delete(data, 0, axis=lead + axis % 3)
            elif how == "component":
                data = data[:-1] if lead else data[None]
            elif how == "flat":
                data = data[..., 0]
            elif how == "extra":
                data = data[..., None]
            else:
                data = np.float64(1.0)
            del g[name]
            g[name] = data
    elif kind == "attribute":
        g.attrs[edit[2]] = edit[3]
    elif kind == "delete attribute":
        if edit[2] in g.attrs:
            del g.attrs[edit[2]]
    elif kind == "root attribute":
        f.attrs[edit[1]] = edit[2]
    elif kind == "nonfinite":
        _, _, name, value, seeds, masked = edit
        if name in g and g[name].dtype.kind == "f" and g[name].ndim >= 3:
            data = g[name][...]
            for point in _grid_points(seeds):
                data[(Ellipsis,) + tuple(point)] = value
                if masked and "valid_mask" in g and g["valid_mask"].shape == SHAPE:
                    g["valid_mask"][tuple(point)] = 0
            g[name][...] = data
    elif kind == "mask value":
        _, _, value, seed = edit
        if "valid_mask" in g:
            data = g["valid_mask"][...]
            if isinstance(value, float) and value != 1.0:
                data = data.astype(np.float64)
            if data.ndim == 3:
                data[tuple(_grid_points([seed])[0])] = value
            del g["valid_mask"]
            g["valid_mask"] = data
    elif kind == "level group":
        group = f["time_levels"]
        how = edit[1]
        if how == "rename" and "1" in group:
            group.move("1", "one")
        elif how == "dataset" and "1" in group:
            del group["1"]
            group["1"] = np.zeros(3)
        elif how == "empty":
            for name in list(group):
                del group[name]
        elif how == "extra":
            group.require_group("2")


def _run_command(directory, command, level, extra, mapping=None, snap=SNAP, *, record=True):
    inputs = sorted(os.listdir(directory))
    argv, outputs = command_line(command, snap, mapping, level, extra)
    code, err = run_and_check(directory, argv, inputs, outputs)
    if record:
        event(f"{command}: exit {code}")  # pytest --hypothesis-show-statistics shows the mix
    return code, err


EXTRA = {
    "sources": st.sampled_from([[], ["--levels", "1"], ["--levels", "-1", "0"],
                                ["--memory-limit", "0.01"], ["--no-check"]]),
    "integrate": st.sampled_from([[], ["--radius", "0.3"], ["--levels", "0"],
                                  ["--memory-limit", "0.01"]]),
}


@st.composite
def command_choice(draw):
    command = draw(st.sampled_from(COMMANDS))
    extra = draw(EXTRA[command]) if command in EXTRA else []
    return command, draw(st.sampled_from([0, 1, -1])), extra


@budget(40)
@given(edits=st.lists(native_edit, min_size=1, max_size=3), choice=command_choice())
def test_edited_native_snapshots(bases, edits, choice):
    with Workspace(bases, [SNAP]) as directory:
        with h5py.File(os.path.join(directory, SNAP), "a") as f:
            for edit in edits:
                apply_native_edit(f, edit)
        _run_command(directory, *choice)


# --- damaged bytes ----------------------------------------------------------------------------

def raw_data_ranges(path):
    """(start, stop) byte ranges of the datasets' raw data (contiguous storage) in ``path``."""
    ranges = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset):
            offset = obj.id.get_offset()
            if offset is not None:
                ranges.append((offset, offset + obj.id.get_storage_size()))

    with h5py.File(path, "r") as f:
        f.visititems(visit)
    return sorted(ranges)


def metadata_offset(ranges, size, seed):
    """The ``seed``-th byte (modulo their number) of ``size`` bytes outside ``ranges``."""
    gaps, position = [], 0
    for start, stop in ranges:
        if start > position:
            gaps.append((position, start))
        position = max(position, stop)
    if position < size:
        gaps.append((position, size))
    total = sum(b - a for a, b in gaps)
    k = seed % total
    for a, b in gaps:
        if k < b - a:
            return a + k
        k -= b - a
    raise AssertionError("unreachable")


damage = st.one_of(
    st.tuples(st.just("truncate"), st.floats(0.0, 0.999)),
    st.tuples(st.just("metadata"), st.lists(st.tuples(st.integers(0, 10**9), st.integers(0, 255)),
                                            min_size=1, max_size=12)),
)


@budget(30)
@given(how=damage, choice=command_choice(), foreign=st.booleans())
def test_damaged_snapshot_bytes(bases, how, choice, foreign):
    names = [FOREIGN, MAP] if foreign else [SNAP]
    with Workspace(bases, names) as directory:
        path = os.path.join(directory, names[0])
        size = os.path.getsize(path)
        if how[0] == "truncate":
            with open(path, "r+b") as handle:
                handle.truncate(int(how[1] * size))
        else:
            ranges = raw_data_ranges(path)
            with open(path, "r+b") as handle:
                for seed, value in how[1]:
                    handle.seek(metadata_offset(ranges, size, seed))
                    handle.write(bytes([value]))
        command, level, extra = choice
        _run_command(directory, command, level, extra, mapping=MAP if foreign else None,
                     snap=names[0])


# --- TOML mappings ----------------------------------------------------------------------------

def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, (datetime.date, datetime.time)):
        return value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(value)


def toml_text(table: dict) -> str:
    """A TOML document of ``table``: one line per top-level key, inline tables below."""
    return "".join(f"{json.dumps(k)} = {toml_value(v)}\n" for k, v in table.items())


TEXT = st.text(st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")), max_size=8)
SCALARS = st.one_of(
    TEXT, st.sampled_from(["fields/Ex", "/run/step_0/fields/Ey", "fields", "zyx", "xyz",
                           "first", "last", "gaussian", "cell_size", "corner", "sim_time",
                           "/run/step_{index}", "{index}", ".", "/"]),
    st.integers(-2**63, 2**63 - 1), st.integers(-2, 3), FLOATS, st.booleans(),
    st.dates(), st.times(),
)
TOML_VALUES = st.recursive(SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(TEXT | st.sampled_from(
        ["attribute", "object", "dataset", "components", "scale", "identity", "per_index"]),
        inner, max_size=3)), max_leaves=6)


def key_paths(table, prefix=()):
    paths = []
    for key, value in table.items():
        paths.append(prefix + (key,))
        if isinstance(value, dict):
            paths += key_paths(value, prefix + (key,))
    return paths


PATHS = key_paths(BASE_MAPPING)

#: Valid names of the [forms] keys, most of them wrong for the stored data (a Faraday tensor or a
#: conformal factor that is not there; a densitized reading that is merely different numbers).
FORM_NAMES = st.sampled_from(FIELD_FORMS + METRIC_FORMS + VELOCITY_FORMS)

mapping_edit = st.one_of(
    st.tuples(st.just("replace"), st.sampled_from(PATHS), TOML_VALUES),
    st.tuples(st.just("replace"), st.sampled_from([("forms", k) for k in sorted(FORMS_KEYS)]),
              FORM_NAMES),
    st.tuples(st.just("delete"), st.sampled_from(PATHS)),
    st.tuples(st.just("add"), st.sampled_from([()] + PATHS), TEXT, TOML_VALUES),
)


def apply_mapping_edit(table, edit):
    if edit[0] == "add":
        _, path, key, value = edit
    else:
        path = edit[1]
    parent = table
    for key in path[:-1] if edit[0] != "add" else path:
        parent = parent.get(key)
        if not isinstance(parent, dict):
            return
    if edit[0] == "replace":
        parent[path[-1]] = edit[2]
    elif edit[0] == "delete":
        parent.pop(path[-1], None)
    else:
        parent.setdefault(key, value)


@budget(30)
@given(edits=st.lists(mapping_edit, min_size=1, max_size=3),
       text_damage=st.none() | st.tuples(st.integers(0, 10**4), st.integers(0, 3), TEXT),
       choice=command_choice())
def test_random_mappings(bases, edits, text_damage, choice):
    table = json.loads(json.dumps(BASE_MAPPING))
    for edit in edits:
        apply_mapping_edit(table, edit)
    text = toml_text(table)
    if text_damage is not None:
        at, cut, junk = text_damage
        at %= len(text) + 1
        text = text[:at] + junk + text[at + cut:]
    with Workspace(bases, [FOREIGN]) as directory:
        with open(os.path.join(directory, MAP), "w", encoding="utf-8") as handle:
            handle.write(text)
        _run_command(directory, *choice, mapping=MAP, snap=FOREIGN)


# --- the bases themselves work ----------------------------------------------------------------

@pytest.mark.parametrize("command", COMMANDS)
def test_the_unedited_bases_pass(bases, command):
    # Without this the property could hold because every example fails on the base already.
    for names, mapping in (([SNAP], None), ([FOREIGN, MAP], MAP)):
        with Workspace(bases, names) as directory:
            code, _ = _run_command(directory, command, 0, [], mapping=mapping, snap=names[0],
                                   record=False)
            assert code in (EXIT_OK, EXIT_CHECK_FAILED)
            if command in ("sources", "integrate"):
                assert code == EXIT_OK
    with open(os.path.join(bases, MAP), "rb") as handle:
        assert tomllib.load(handle) == BASE_MAPPING
