"""The committed sample snapshots: readable, what their generator writes, physically right."""

import math
import os

import h5py
import numpy as np
import pytest

from emsource import integrals, snapshot
from emsource.sample_grids import DIPOLE, write_sample_grids

SAMPLES = os.path.join(os.path.dirname(__file__), os.pardir, "sample_grids")


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory):
    directory = tmp_path_factory.mktemp("samples")
    write_sample_grids(directory)
    return directory


@pytest.mark.parametrize("name", ["rotating_dipole.h5", "rotating_dipole_foreign.h5",
                                  "boosted_charge.h5"])
def test_committed_files_are_what_the_generator_writes(name, regenerated):
    # Guards the on-disk format and the sample data against accidental change: every dataset
    # and every attribute must be identical to a fresh run of the generator.
    def contents(path):
        items = {}
        with h5py.File(path, "r") as f:
            items["/"] = dict(f.attrs)

            def visit(key, obj):
                items[key] = (obj[()] if isinstance(obj, h5py.Dataset) else None, dict(obj.attrs))
            f.visititems(visit)
        return items

    committed, fresh = contents(os.path.join(SAMPLES, name)), contents(regenerated / name)
    assert committed.keys() == fresh.keys()
    for key in committed:
        if key == "/":
            assert committed[key].keys() == fresh[key].keys()
            continue
        (a, attrs_a), (b, attrs_b) = committed[key], fresh[key]
        assert (a is None and b is None) or np.array_equal(a, b), key
        assert attrs_a.keys() == attrs_b.keys()
        for k in attrs_a:
            assert np.array_equal(attrs_a[k], attrs_b[k]), (key, k)
    text = open(os.path.join(SAMPLES, "rotating_dipole_foreign.toml")).read()
    assert text == open(regenerated / "rotating_dipole_foreign.toml").read()


def test_total_size_is_a_few_megabytes():
    total = sum(os.path.getsize(os.path.join(SAMPLES, n)) for n in os.listdir(SAMPLES))
    assert total < 8 * 2**20


def test_sample_dipole_radiates_the_expected_luminosity():
    # (2/3) m^2 omega^4 sin^2(chi) (J. D. Jackson, Classical Electrodynamics, 3rd ed., sec. 9.3)
    # through spheres at R = 1.5, 2.5, 3.5 of the h = 0.25 float32 sample. Tolerance: the cubic
    # interpolation error at h = 0.25 seen in test_integrals (a few 1e-5 relative at R >= 1.5),
    # with a factor of ten of room, and float32 storage (1e-7): 1e-3 relative.
    exact = 2 / 3 * DIPOLE["moment"] ** 2 * DIPOLE["omega"] ** 4 * math.sin(DIPOLE["inclination"]) ** 2
    results = integrals.integrate_snapshot(os.path.join(SAMPLES, "rotating_dipole.h5"),
                                           radii=(1.5, 2.5, 3.5))
    assert [r.time for r in results] == list(DIPOLE["times"])
    for r in results:
        for R, value in r.luminosity.items():
            assert value == pytest.approx(exact, rel=1e-3), (r.time, R)
        # The box is symmetric under quarter turns about z, and the energy density of the
        # rotating pattern holds only the azimuthal harmonics |m| <= 2 (products of fields with
        # |m| <= 1), which such a box averages out: the energy in the box is constant in time
        # (to float32 storage, ~1e-7; 1e-6 with room).
        assert r.energy == pytest.approx(results[0].energy, rel=1e-6)
    with snapshot.open_snapshot(os.path.join(SAMPLES, "rotating_dipole_foreign.h5"),
                          os.path.join(SAMPLES, "rotating_dipole_foreign.toml")) as snap:
        assert snap.levels[0].units == "heaviside_lorentz"
