"""Malformed mappings and snapshots: a message naming the file, key or dataset, exit code 3."""

import os

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
