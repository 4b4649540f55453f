"""Malformed mappings and snapshots: a message naming the file, key or dataset, exit code 3."""

import os
from collections import Counter

import h5py
import numpy as np
import pytest

from emsource import snapshot
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT
from emsource.grid import UniformGrid
from emsource.sample_grids import FOREIGN_MAPPING_TEXT, dipole_levels, write_foreign_dipole
from emsource.snapshot import MappingError, SnapshotError, load_mapping

from snapshot_data import checksums, curved_levels, run_cli


@pytest.fixture(scope="module")
def foreign(tmp_path_factory):
    directory = tmp_path_factory.mktemp("foreign")
    path = directory / "foreign.h5"
    write_foreign_dipole(path, dipole_levels()[0])
    return path


def _mapping(tmp_path, old, new):
    assert old in FOREIGN_MAPPING_TEXT
    path = tmp_path / "m.toml"
    path.write_text(FOREIGN_MAPPING_TEXT.replace(old, new))
    return path


EX = 'components = ["fields/Ex", "fields/Ey", "fields/Ez"]'
CASES = {
    # name: (text replaced, replacement, words the message must hold)
    "components not paths": (EX, "components = [1, 2, 3]",
                             ["[quantities.electric_field] components", "[1, 2, 3]"]),
    "identity false alone": ("identity = true", "identity = false",
                             ["[quantities.spatial_metric] identity must be true", "False"]),
    "identity a string": ("identity = true", 'identity = "no"',
                          ["[quantities.spatial_metric] identity must be true", "'no'"]),
    "object a number": ('origin = { attribute = "corner" }',
                        'origin = { attribute = "corner", object = 5 }',
                        ["[grid] origin object", "found 5"]),
    "attribute a number": ('origin = { attribute = "corner" }', "origin = { attribute = 3 }",
                           ["[grid] origin attribute", "found 3"]),
    "scale not a number": (EX, EX + '\nscale = "abc"',
                           ["[quantities.electric_field] scale", "'abc'"]),
    "spacing booleans": ('spacing = { attribute = "cell_size" }', "spacing = [true, true, true]",
                         ["[grid] spacing", "True"]),
    "units missing": ('units = "heaviside_lorentz"', "", ["required key 'units' missing"]),
    "scale of a mask": ('components = ["fields/inside_domain"]',
                        'components = ["fields/inside_domain"]\nscale = 2.0',
                        ["[quantities.valid_mask] takes no scale", "2.0"]),
    "units misspelt": ('units = "heaviside_lorentz"', 'units = "HL"', ["units must be one of"]),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_malformed_mapping_values_name_the_file_and_key(tmp_path, foreign, capsys, case):
    old, new, words = CASES[case]
    path = _mapping(tmp_path, old, new)
    with pytest.raises(MappingError) as error:
        load_mapping(path)
    message = str(error.value)
    assert str(path) in message
    for word in words:
        assert word in message, (word, message)
    out = tmp_path / "out.h5"
    assert main(["sources", str(foreign), "--mapping", str(path), "-o", str(out),
                 "--quiet"]) == EXIT_BAD_INPUT
    assert str(path) in capsys.readouterr().err
    assert sorted(os.listdir(tmp_path)) == ["m.toml"]


def test_directory_and_non_utf8_mappings(tmp_path, foreign):
    code, _, err = run_cli("sources", foreign, "--mapping", tmp_path, "-o", tmp_path / "o.h5")
    assert code == EXIT_BAD_INPUT and "is a directory" in err and str(tmp_path) in err
    assert "Traceback" not in err
    latin = tmp_path / "latin.toml"
    latin.write_bytes(FOREIGN_MAPPING_TEXT.replace("# How", "# caf\xe9: how").encode("latin-1"))
    with pytest.raises(MappingError, match=f"{latin}.*not UTF-8"):
        load_mapping(latin)
    assert sorted(os.listdir(tmp_path)) == ["latin.toml"]


def test_one_order_rule_for_spacing_lists_and_attributes(tmp_path):
    # A z, y, x file whose spacings and corner differ per axis, described once with attributes
    # and once with three values: both are read in storage order (z, y, x), so both give the
    # same grid, with (dx, dy, dz) = (0.1, 0.2, 0.3) and origin (x0, y0, z0) = (-1, -2, -3).
    grid = UniformGrid((5, 6, 7), (-1.0, -2.0, -3.0), (0.1, 0.2, 0.3))
    rng = np.random.default_rng(5)
    path = tmp_path / "zyx.h5"
    with h5py.File(path, "w") as f:
        g = f.create_group("run/step_0")
        g.attrs["sim_time"] = 0.0
        g.attrs["cell_size"] = np.array(grid.spacing[::-1])
        g.attrs["corner"] = np.array(grid.origin[::-1])
        for name in ("Ex", "Ey", "Ez", "Bx", "By", "Bz"):
            g.create_dataset(f"fields/{name}", data=rng.standard_normal(grid.shape[::-1]))
    with_attributes = tmp_path / "a.toml"
    with_attributes.write_text(FOREIGN_MAPPING_TEXT.replace(
        '[quantities.valid_mask]\ncomponents = ["fields/inside_domain"]\n', ""))
    with_values = tmp_path / "v.toml"
    with_values.write_text(with_attributes.read_text().replace(
        'spacing = { attribute = "cell_size" }', "spacing = [0.3, 0.2, 0.1]").replace(
        'origin = { attribute = "corner" }', "origin = [-3.0, -2.0, -1.0]"))
    for mapping in (with_attributes, with_values):
        with snapshot.open_snapshot(path, mapping) as snap:
            assert snap.grid == grid, mapping


def _native(tmp_path, rng, **changes):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng, times=(0.0, 0.5, 1.0)))
    with h5py.File(path, "a") as f:
        for key, value in changes.items():
            level, name = key.split("/")
            g = f[f"time_levels/{level}"]
            if name in g.attrs or name in ("time",):
                g.attrs[name] = value
            else:
                del g[name]
                g[name] = value
    return path


@pytest.mark.parametrize("dtype", [np.float16, np.longdouble])
def test_unsupported_float_types_are_named(tmp_path, rng, capsys, dtype):
    if np.dtype(dtype) == np.float64:
        pytest.skip("long double is float64 on this platform")
    level = curved_levels(rng, times=(0.0,))[0]
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, [{**level, "electric_field": level["electric_field"].astype(dtype)}])
    with pytest.raises(SnapshotError, match=f"'electric_field'.*dtype {np.dtype(dtype)}, "
                                            "expected float32 or float64"):
        snapshot.open_snapshot(path)
    assert main(["sources", str(path), "-o", str(tmp_path / "o.h5"), "--quiet"]) == EXIT_BAD_INPUT
    assert sorted(os.listdir(tmp_path)) == ["snap.h5"]


def test_time_attribute_that_is_not_a_number(tmp_path, rng):
    path = _native(tmp_path, rng, **{"1/time": "zero"})
    with pytest.raises(SnapshotError, match=r"/time_levels/1: attribute 'time' must be one "
                                            r"number, found 'zero'"):
        snapshot.open_snapshot(path)


def test_short_dataset_at_a_later_level_is_the_one_named(tmp_path, rng):
    level = curved_levels(rng, times=(0.0,))[0]
    short = np.ones((3, 9, 8, 6))
    # electric_field is the first dataset in the file's (alphabetical) order
    path = _native(tmp_path, rng, **{"2/electric_field": short})
    with pytest.raises(SnapshotError) as error:
        snapshot.open_snapshot(path)
    message = str(error.value)
    assert "time level '2'" in message
    assert "'electric_field' (/time_levels/2/electric_field) has shape (3, 9, 8, 6), " \
           "expected (3, 9, 8, 7)" in message
    assert "'lapse' (" not in message and level["lapse"].shape == (9, 8, 7)
    # Only lapse and the short field: a tie, decided by the first level's grid.
    path2 = tmp_path / "two.h5"
    good = {k: level[k] for k in ("lapse", "electric_field", "time", "grid")}
    snapshot.write_snapshot(path2, [good, good])
    with h5py.File(path2, "a") as f:
        del f["time_levels/1/electric_field"]
        f["time_levels/1/electric_field"] = short
    with pytest.raises(SnapshotError, match=r"'electric_field' \(/time_levels/1/electric_field\) "
                                            r"has shape \(3, 9, 8, 6\)"):
        snapshot.open_snapshot(path2)


def test_level_choices(tmp_path, rng, capsys):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    before = checksums(tmp_path)
    for levels, words in ((["0", "0"], "chosen twice"), (["1", "-1"], "chosen twice"),
                          (["5"], "out of range: the file has 2 level(s), indices 0 to 1")):
        code = main(["sources", str(path), "-o", str(tmp_path / "o.h5"), "--levels", *levels,
                     "--quiet"])
        assert code == EXIT_BAD_INPUT and words in capsys.readouterr().err, levels
    assert checksums(tmp_path) == before
    with pytest.raises(SnapshotError, match="index 99 out of range"):
        snapshot.read_level(path, 99)


@pytest.mark.parametrize("command", ["constraints", "audit-units"])
def test_level_out_of_range_in_the_constraint_commands(tmp_path, rng, command):
    path = tmp_path / "snap.h5"
    levels = curved_levels(rng, times=(0.0,))
    levels[0]["extrinsic_curvature"] = np.zeros((6, 9, 8, 7))
    snapshot.write_snapshot(path, levels)
    code, out, err = run_cli(command, path, "--level", "99")
    assert code == EXIT_BAD_INPUT
    assert "time level index 99 out of range: the file has 1 level(s)" in out + err
    assert "list index" not in out + err and "Traceback" not in err


# --- attributes of the wrong form, damaged metadata (found by tests/test_hostile_input.py) ----

WRONG_FORMS = [
    # (where, attribute, value, words the message must hold)
    ("0", "time", h5py.Empty("f8"), "attribute 'time' must be one number, found Empty"),
    ("0", "time", np.array([0.0, 1.0]), "attribute 'time' must be one number, found array"),
    ("1", "spacing", 0.25, "attribute 'spacing' must be 3 numbers, found np.float64(0.25)"),
    ("1", "spacing", h5py.Empty("f8"), "attribute 'spacing' must be 3 numbers, found Empty"),
    ("0", "origin", np.zeros((3, 3)), "attribute 'origin' must be 3 numbers, found array "
     "[[0., 0., 0.], [0., 0., 0.], [0., 0., 0.]] (shape (3, 3), float64)"),
    ("0", "axis_order", h5py.Empty("S1"), "attribute 'axis_order' must be text, found Empty"),
    ("0", "axis_order", np.array([b"xyz", b"zyx"]), "attribute 'axis_order' must be text"),
    ("1", "units", 1.0, "attribute 'units' must be text, found np.float64(1.0)"),
    ("1", "units", np.bytes_(b"\xff"), "attribute 'units' must be UTF-8 text"),
    ("/", "format_version", np.array([1, 1]),
     "root attribute format_version must be the integer 1 (the version this emsource reads), "
     "found array [1, 1] (shape (2,), int64)"),
    ("/", "format", h5py.Empty("S1"), "root attribute format Empty"),
]


@pytest.mark.parametrize("where, name, value, words", WRONG_FORMS,
                         ids=[f"{w[1]}={type(w[2]).__name__}" for w in WRONG_FORMS])
def test_attributes_of_the_wrong_form_are_named(tmp_path, rng, where, name, value, words):
    # Before: h5py Empty, arrays where a scalar belongs and the reverse escaped as TypeError
    # or were printed as the text of their repr.
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    with h5py.File(path, "a") as f:
        (f if where == "/" else f[f"time_levels/{where}"]).attrs[name] = value
    with pytest.raises(SnapshotError) as error:
        snapshot.open_snapshot(path)
    assert str(path) in str(error.value) and words in str(error.value), str(error.value)
    assert "\n" not in str(error.value)  # one line on stderr (numpy prints arrays on several)


def test_dataset_with_too_few_axes_is_named(tmp_path, rng):
    path = _native(tmp_path, rng, **{"1/lapse": np.float64(1.0)})  # before: IndexError
    with pytest.raises(SnapshotError, match=r"'lapse' \(/time_levels/1/lapse\) has shape \(\), "
                                            r"expected \(n0, n1, n2\)"):
        snapshot.open_snapshot(path)


def _object_header(path, name):
    with h5py.File(path, "r") as f:
        return h5py.h5o.get_info(f[name].id).addr


def _damage(path, offset):
    with open(path, "r+b") as handle:
        handle.seek(offset)
        handle.write(b"\xfe")  # an object header version HDF5 does not know


def test_damaged_object_header_is_named_not_skipped(tmp_path, rng, capsys):
    # h5py's Group.items() maps an object it cannot open to None: a damaged lapse read as an
    # absent one, and integrate went on with alpha = 1. It must be bad input naming the object.
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    _damage(path, _object_header(path, "time_levels/1/lapse"))
    before = checksums(tmp_path)
    with pytest.raises(SnapshotError, match=r"object 'lapse' under /time_levels/1 cannot be "
                                            r"opened \(damaged HDF5 metadata\?\).*version"):
        snapshot.open_snapshot(path)
    assert main(["integrate", str(path), "--quiet"]) == EXIT_BAD_INPUT
    assert f"{path}" in capsys.readouterr().err
    assert checksums(tmp_path) == before


def test_damaged_object_header_through_a_mapping(tmp_path, foreign):
    copy = tmp_path / "foreign.h5"
    copy.write_bytes(foreign.read_bytes())
    _damage(copy, _object_header(copy, "run/step_0000/fields/Ey"))
    mapping = _mapping(tmp_path, "# How", "# How")
    # The search for level groups visits every object and meets the damage first (before: a
    # RuntimeError from h5py's visititems escaped as a traceback).
    with pytest.raises(SnapshotError, match=f"snapshot '{copy}' cannot be read \\(damaged or "
                                            "truncated HDF5 metadata\\?\\).*object header"):
        snapshot.open_snapshot(copy, mapping)


def test_damaged_level_group_is_bad_input_naming_the_file(tmp_path, rng):
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng))
    _damage(path, _object_header(path, "time_levels"))
    with pytest.raises(SnapshotError, match=f"snapshot '{path}'.*damaged"):
        snapshot.open_snapshot(path)


def test_every_damaged_byte_of_a_dataset_header_is_harmless_or_named(tmp_path, rng):
    # Each byte of electric_field's object header (and the symbol-table bytes after it) set to
    # 0xff in turn. HDF5 reports such damage as KeyError, RuntimeError or ValueError (for
    # instance "Insufficient precision in available types" for a damaged float type), or turns
    # the dataset into another kind of object; each must become a SnapshotError naming the file
    # (before, the ValueError reached the command's guard without the file's name, and an
    # object that was no longer a dataset was skipped as absent).
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, curved_levels(rng, shape=(3, 4, 5), times=(0.0,)))
    original = path.read_bytes()
    start = _object_header(path, "time_levels/0/electric_field")
    outcomes = Counter()
    for offset in range(start, min(start + 320, len(original))):
        damaged = bytearray(original)
        damaged[offset] = 0xFF
        path.write_bytes(bytes(damaged))
        try:
            data = snapshot.read_level(path)
        except SnapshotError as error:
            assert str(path) in str(error), (offset, str(error))
            outcomes["refused"] += 1
        else:
            assert data["electric_field"].shape == (3, 3, 4, 5), offset
            outcomes["harmless"] += 1
    assert outcomes["refused"] > 0 and outcomes["harmless"] > 0, outcomes
