"""emsource.snapshot_balance: the file route equals the in-memory conservation functions.

Independent route: :func:`emsource.conservation.global_balance` and
:func:`emsource.conservation.level_residual` called on the exact time levels in memory (the
functions whose published sources and checks live in tests/test_conservation.py; Gourgoulhon,
3+1 Formalism (2012), sec. 6). The file route reads the same levels from a native snapshot, one
at a time, and combines per-level partials: it must give the same numbers to round-off.
"""

from __future__ import annotations

import numpy as np
import pytest

from emsource.conservation import global_balance, level_residual
from emsource.exact import plane_wave
from emsource.grid import UniformGrid
from emsource.snapshot import SnapshotError, open_snapshot, write_snapshot
from emsource.snapshot_balance import balance_open_snapshot


def _levels(count=5):
    grid = UniformGrid((12, 10, 9), (0.0, 0.1, -0.2), (0.09, 0.1, 0.11))
    k = np.array([3.1, 2.2, 1.7])
    return [plane_wave(grid, 0.03 * i, wave_vector=k, polarization=np.cross(k, (0, 0.3, 1)))
            for i in range(count)]


def test_file_route_equals_the_in_memory_functions(tmp_path):
    levels = _levels()
    write_snapshot(tmp_path / "w.h5", levels)
    with open_snapshot(tmp_path / "w.h5") as snap:
        result = balance_open_snapshot(snap, order=4)
    want = global_balance(levels, order=4)
    # Same arithmetic on the same float64 values, in the same order: equal up to the
    # summation order of the partials (a few eps of the largest total).
    scale = np.abs(want.totals).max()
    assert np.allclose(result.balance.totals, want.totals, rtol=0, atol=1e-13 * scale)
    assert np.isclose(result.balance.energy.mismatch, want.energy.mismatch, rtol=0,
                      atol=1e-13 * scale)
    assert result.residuals[0].energy is None and result.residuals[-1].energy is None
    for k in (1, 2, 3):
        ref = level_residual(levels[k], before=levels[k - 1], after=levels[k + 1], order=4)
        got = result.residuals[k]
        assert np.isclose(got.energy.l2, ref.energy_norms.l2, rtol=1e-12, atol=0)
        assert np.allclose(got.momentum.normalised_l2, ref.momentum_norms.normalised_l2,
                           rtol=1e-12, atol=0)
    assert result.absent == []  # the exact levels carry lapse, shift, K and charges


def test_unequal_steps_skip_the_residual_and_bad_choices_are_named(tmp_path):
    levels = _levels()
    write_snapshot(tmp_path / "w.h5", [levels[i] for i in (0, 1, 2, 4)])
    with open_snapshot(tmp_path / "w.h5") as snap:
        result = balance_open_snapshot(snap)
        assert result.residuals[1].energy is not None   # t = 0, 0.03, 0.06
        assert result.residuals[2].energy is None       # 0.03, 0.06, 0.12: unequal steps
        with pytest.raises(SnapshotError, match="at least two time levels"):
            balance_open_snapshot(snap, levels=[1])
        with pytest.raises(SnapshotError, match="must increase"):
            balance_open_snapshot(snap, levels=[2, 0])
