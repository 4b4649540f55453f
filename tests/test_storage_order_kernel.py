"""The sources pipeline runs its kernel on the slab buffers in storage order (contiguous), also
for "zyx" files; its errors must still speak of the whole (x, y, z) grid."""

import os

import numpy as np
import pytest

import emsource
from emsource import snapshot
from emsource.snapshot.sources_pipeline import compute_sources

from snapshot_data import curved_levels


def test_a_bad_point_of_a_zyx_file_is_named_by_its_xyz_index(tmp_path, rng):
    levels = curved_levels(rng, times=(0.0,))  # grid (9, 8, 7) in (x, y, z)
    levels[0]["electric_field"][1, 6, 2, 5] = np.nan
    levels[0]["magnetic_field"][0, 1, 3, 4] = np.inf  # same z slab (rows 4:6), later in storage
    path = tmp_path / "snap.h5"
    snapshot.write_snapshot(path, levels, axis_order="zyx")
    # Independent route: the in-memory API on the (x, y, z) arrays of the same slab (z = 4, 5).
    level = levels[0]
    with pytest.raises(emsource.GridPointError) as direct:
        emsource.adm_sources(*(level[q][..., 4:6] for q in ("spatial_metric", "electric_field",
                                                            "magnetic_field")))
    expected = (direct.value.first_index[0], direct.value.first_index[1],
                direct.value.first_index[2] + 4)
    with pytest.raises(emsource.GridPointError, match=r"snap.h5', time level '0' \(z rows 4:6\)") as info:
        compute_sources(path, tmp_path / "out.h5", rows=2)
    assert info.value.first_index == expected
    assert expected in ((6, 2, 5), (1, 3, 4))
    assert info.value.bad_count == direct.value.bad_count == 2
    assert os.listdir(tmp_path) == ["snap.h5"]
