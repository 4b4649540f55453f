"""Foreign layouts read through a TOML mapping give the numbers of the native layout."""

import os

import h5py
import numpy as np
import pytest

from emsource import snapshot
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT
from emsource.snapshot import MappingError, load_mapping
from emsource.sample_grids import FOREIGN_MAPPING_TEXT, dipole_levels, write_foreign_dipole
from emsource.snapshot.sources_pipeline import compute_sources

from snapshot_data import curved_levels

OUTPUTS = ("energy_density", "momentum_density", "spatial_stress", "stress_trace")
U32 = 2.0**-24  # float32 unit round-off


@pytest.fixture(scope="module")
def dipole_files(tmp_path_factory):
    """The sample dipole's t = 0 level, native (Gaussian, float32) and foreign (HL, zyx)."""
    directory = tmp_path_factory.mktemp("dipole")
    level = dipole_levels()[0]
    native = directory / "native.h5"
    snapshot.write_snapshot(native, [{"spatial_metric": level.gamma.astype(np.float32),
                                "electric_field": level.E.astype(np.float32),
                                "magnetic_field": level.B.astype(np.float32),
                                "valid_mask": level.valid_mask.astype(np.uint8),
                                "time": level.t, "grid": level.grid}])
    foreign = directory / "foreign.h5"
    write_foreign_dipole(foreign, level)
    mapping = directory / "foreign.toml"
    mapping.write_text(FOREIGN_MAPPING_TEXT)
    return native, foreign, mapping


def test_foreign_sample_gives_the_native_numbers(dipole_files, tmp_path):
    # The foreign file stores E/sqrt(4 pi), B/sqrt(4 pi) (Heaviside-Lorentz; Jackson, Classical
    # Electrodynamics, 3rd ed., appendix on units, table 2) as float32, axes (z, y, x), one
    # dataset per component, no metric. Through its mapping the sources must equal the native
    # Gaussian ones up to float32 rounding: each stored value carries a relative error <= u
    # (u = 2^-24) in either file (2u per squared field, 4u between the files), and the float32
    # sum of six squares with the prefactor adds <= 7u in each computation, so
    # |difference| <= 18 u rho pointwise; S_i and S_ij are bounded by rho-sized terms in the
    # same way (|S_i| <= rho, |S_ij| <= 2 rho).
    native, foreign, mapping = dipole_files
    with snapshot.open_snapshot(foreign, mapping) as snap:
        level = snap.levels[0]
        assert (level.axis_order, level.units, level.label) == ("zyx", "heaviside_lorentz", "0")
        with snapshot.open_snapshot(native) as ref:
            assert level.grid == ref.levels[0].grid and level.time == ref.levels[0].time
    compute_sources(native, tmp_path / "n.h5")
    compute_sources(foreign, tmp_path / "f.h5", mapping=mapping)
    a, b = snapshot.read_level(tmp_path / "n.h5"), snapshot.read_level(tmp_path / "f.h5")
    mask = snapshot.read_level(foreign, mapping=mapping)["valid_mask"]
    assert np.array_equal(mask, snapshot.read_level(native)["valid_mask"])
    # Both outputs carry the mask and hold NaN exactly at its excised points (r < 0.4).
    valid = mask.astype(bool)
    assert not valid.all()
    for out in (a, b):
        assert np.array_equal(out["valid_mask"], mask)
    rho = a["energy_density"].astype(np.float64)[valid]
    assert rho.max() > 1  # a real field, not zeros
    for q in OUTPUTS:
        for out in (a, b):
            assert np.isnan(out[q][..., ~valid]).all() and np.isfinite(out[q][..., valid]).all(), q
        difference = np.abs(a[q].astype(np.float64) - b[q].astype(np.float64))[..., valid]
        assert np.all(difference <= 2 * 18 * U32 * rho + 1e-30), q


def test_stacked_component_last_layout_is_bit_for_bit(tmp_path, rng):
    # A layout with all components in one dataset, component axis last, (x, y, z) storage,
    # spacing and origin given as values, time from the level index: same bits as native.
    level = curved_levels(rng, times=(0.0,))[0]
    path = tmp_path / "stacked.h5"
    with h5py.File(path, "w") as f:
        for step in (3, 7):
            g = f.create_group(f"out/it{step}")
            g["metric"] = np.moveaxis(level["spatial_metric"], 0, -1)
            g["efield"] = np.moveaxis(level["electric_field"], 0, -1)
            g["bfield"] = level["magnetic_field"]
    grid = level["grid"]
    mapping = tmp_path / "stacked.toml"
    mapping.write_text(f"""
mapping_version = 1
axis_order = "xyz"
units = "gaussian"
[time_levels]
pattern = "out/it{{index}}"
time = {{ per_index = 0.5 }}
[grid]
spacing = {list(grid.spacing)}
origin = {list(grid.origin)}
[quantities.spatial_metric]
dataset = "metric"
component_axis = "last"
[quantities.electric_field]
dataset = "efield"
component_axis = "last"
[quantities.magnetic_field]
dataset = "bfield"
""")
    with snapshot.open_snapshot(path, mapping) as snap:
        assert [lv.time for lv in snap.levels] == [1.5, 3.5]
        assert [lv.label for lv in snap.levels] == ["3", "7"]
        assert snap.levels[1].grid == grid
    back = snapshot.read_level(path, 1, mapping=mapping)
    for q in ("spatial_metric", "electric_field", "magnetic_field"):
        assert np.array_equal(back[q], level[q]), q


def _mapping_with(tmp_path, extra_top="", extra_quantity=""):
    text = FOREIGN_MAPPING_TEXT.replace("mapping_version = 1", "mapping_version = 1\n" + extra_top)
    text = text.replace('components = ["fields/Bx", "fields/By", "fields/Bz"]',
                        'components = ["fields/Bx", "fields/By", "fields/Bz"]\n' + extra_quantity)
    path = tmp_path / "mapping.toml"
    path.write_text(text)
    return path


def test_unknown_key_is_an_error_listing_the_allowed_keys(tmp_path, dipole_files, capsys):
    path = _mapping_with(tmp_path, extra_quantity='scael = 2.0')
    with pytest.raises(MappingError, match=r"unknown key\(s\) \['scael'\] in "
                                           r"\[quantities.magnetic_field\]; allowed: .*'scale'"):
        load_mapping(path)
    top = _mapping_with(tmp_path, extra_top='axes = "zyx"')
    with pytest.raises(MappingError, match=r"\['axes'\] in the top level; allowed: .*'axis_order'"):
        load_mapping(top)
    out = tmp_path / "out.h5"
    code = main(["sources", str(dipole_files[1]), "--mapping", str(top), "-o", str(out), "--quiet"])
    assert code == EXIT_BAD_INPUT
    assert "unknown key" in capsys.readouterr().err
    assert not out.exists() and sorted(os.listdir(tmp_path)) == ["mapping.toml"]


def test_misnamed_dataset_lists_the_file_contents(tmp_path, dipole_files):
    text = FOREIGN_MAPPING_TEXT.replace("fields/By", "fields/BY")
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(MappingError, match=r"dataset 'fields/BY' not found.*"
                                           r"/run/step_0000/fields/By \(dataset \(33, 33, 33\)"):
        snapshot.open_snapshot(dipole_files[1], path)


def test_pattern_that_matches_nothing_and_bad_toml(tmp_path, dipole_files):
    path = tmp_path / "m.toml"
    path.write_text(FOREIGN_MAPPING_TEXT.replace("step_{index}", "iteration_{index}"))
    with pytest.raises(MappingError, match="no group matches the time-level pattern.*Objects in the file"):
        snapshot.open_snapshot(dipole_files[1], path)
    path.write_text("mapping_version = = 1\n")
    with pytest.raises(MappingError, match="not valid TOML"):
        load_mapping(path)
    path.write_text(FOREIGN_MAPPING_TEXT.replace('components = ["fields/Ex", "fields/Ey", "fields/Ez"]',
                                                 'components = ["fields/Ex", "fields/Ey"]'))
    with pytest.raises(MappingError, match="lists 2 components, electric_field has 3"):
        load_mapping(path)
