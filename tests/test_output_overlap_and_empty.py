"""Preallocated outputs that share memory with one another, and grids with no points.

Overlapping outputs would let the kernel write one result over another (S_i into S_ij, S into
rho); they are refused with a ValueError that names both, before anything is written. Outputs
that share an owner but not memory (one workspace cut into disjoint pieces) are fine. A grid
with a zero-length axis is not an error: empty results of the right shapes and dtype.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

import emsource
from emsource.energy_flux import energy_fluxes
from conftest import random_curved_data

GRID = (4, 3, 2)
SENTINEL = -7.25


def _snapshot(arrays):
    return [a.copy() for a in arrays]


def _unchanged(arrays, before):
    for a, b in zip(arrays, before):
        np.testing.assert_array_equal(a, b)


def _out_buffers(dtype=np.float64):
    return emsource.AdmSources(np.full(GRID, SENTINEL, dtype), np.full((3,) + GRID, SENTINEL, dtype),
                               np.full((6,) + GRID, SENTINEL, dtype), np.full(GRID, SENTINEL, dtype))


@pytest.fixture
def data(rng):
    return random_curved_data(rng, GRID)


def _overlapping_cases():
    """(description, out tuple, the two output names the message must give)."""
    cases = []
    o = _out_buffers()
    cases.append(("S_i a view into S_ij", (o.rho, o.S_ij[:3], o.S_ij, o.S), ("S_i", "S_ij")))
    o = _out_buffers()
    cases.append(("S_i the last three rows of S_ij", (o.rho, o.S_ij[3:], o.S_ij, o.S), ("S_i", "S_ij")))
    o = _out_buffers()
    cases.append(("rho and S the same array", (o.rho, o.S_i, o.S_ij, o.rho), ("rho", "S")))
    o = _out_buffers()
    cases.append(("S a view of a row of S_i", (o.rho, o.S_i, o.S_ij, o.S_i[1]), ("S_i", "S")))
    # Two outputs over one foreign buffer (not owned by an ndarray): decided by addresses.
    raw = bytearray(8 * int(np.prod(GRID)) * 2)
    rho = np.frombuffer(raw, np.float64, count=int(np.prod(GRID))).reshape(GRID)
    S = np.frombuffer(raw, np.float64, count=int(np.prod(GRID)), offset=8).reshape(GRID)
    o = _out_buffers()
    cases.append(("rho and S over one bytearray, shifted by one value", (rho, o.S_i, o.S_ij, S),
                  ("rho", "S")))
    return cases


@pytest.mark.parametrize("case", range(len(_overlapping_cases())))
def test_overlapping_outputs_name_both_and_write_nothing(data, case):
    description, out, names = _overlapping_cases()[case]
    _, _, gamma, E, B = data
    before_in = _snapshot((gamma, E, B))
    before_out = _snapshot(out)
    with pytest.raises(ValueError) as info:
        emsource.adm_sources(gamma, E, B, out=out)
    message = str(info.value)
    assert all(re.search(rf"out {name}\b", message) for name in names), (description, message)
    assert "overlaps out" in message
    _unchanged((gamma, E, B), before_in)
    _unchanged(out, before_out)   # refused before the kernel ran


def test_outputs_cut_from_one_workspace_are_accepted(data):
    """Disjoint pieces of one array share an owner but no memory: not an overlap."""
    _, _, gamma, E, B = data
    n = int(np.prod(GRID))
    work = np.full(11 * n, SENTINEL)
    rho, S_i, S_ij, S = (work[:n].reshape(GRID), work[n:4 * n].reshape((3,) + GRID),
                         work[4 * n:10 * n].reshape((6,) + GRID), work[10 * n:].reshape(GRID))
    result = emsource.adm_sources(gamma, E, B, out=(rho, S_i, S_ij, S))
    fresh = emsource.adm_sources(gamma, E, B)
    for a, b, c in zip(result, (rho, S_i, S_ij, S), fresh):
        assert np.shares_memory(a, b)
        np.testing.assert_array_equal(a, c)
    assert not np.any(work == SENTINEL)


def test_energy_fluxes_out_overlapping_an_input_is_refused(data):
    alpha, beta, gamma, E, B = data
    out = np.empty((7,) + GRID)
    before = _snapshot(data)
    stacked = np.concatenate([E, B, gamma[:1]])        # E and B are views of an array of 7 rows
    with pytest.raises(ValueError, match="out overlaps input E"):
        energy_fluxes(alpha, beta, gamma, stacked[:3], stacked[3:6], out=stacked)
    _unchanged(data, before)
    with pytest.raises(ValueError, match=r"out must have shape \(7, 4, 3, 2\)"):
        energy_fluxes(alpha, beta, gamma, E, B, out=out[:6])


def test_stress_energy_out_overlapping_an_input_is_refused(data):
    alpha, beta, gamma, E, B = data
    work = np.concatenate([gamma, beta, alpha[None]])   # 10 rows: gamma, beta, alpha views
    with pytest.raises(ValueError, match="overlaps input"):
        emsource.stress_energy_4d(work[9], work[6:9], work[:6], E, B, out=work)


# ---- empty grids ----

EMPTY_GRIDS = [(0, 4, 5), (4, 0, 5), (4, 5, 0), (0,), (3, 0), (0, 0, 0)]


@pytest.mark.parametrize("grid", EMPTY_GRIDS)
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_empty_grids_give_empty_results(grid, dtype):
    alpha = np.ones(grid, dtype)
    beta = np.zeros((3,) + grid, dtype)
    gamma = np.zeros((6,) + grid, dtype)
    E = np.zeros((3,) + grid, dtype)
    B = np.zeros((3,) + grid, dtype)
    src = emsource.adm_sources(gamma, E, B)
    assert [a.shape for a in src] == [grid, (3,) + grid, (6,) + grid, grid]
    assert all(a.dtype == dtype for a in src)
    for index in ("lower", "upper"):
        T = emsource.stress_energy_4d(alpha, beta, gamma, E, B, index=index)
        assert T.shape == (10,) + grid and T.dtype == dtype
    f = energy_fluxes(alpha, beta, gamma, E, B, field_index="lower")
    assert (f.energy.shape, f.momentum.shape, f.flux.shape) == (grid, (3,) + grid, (3,) + grid)
    assert f.energy.dtype == dtype
    # Component-last layout and a full (3, 3) metric.
    last = emsource.adm_sources(np.zeros(grid + (3, 3), dtype), np.zeros(grid + (3,), dtype),
                                np.zeros(grid + (3,), dtype), layout="component_last")
    assert [a.shape for a in last] == [grid, grid + (3,), grid + (6,), grid]
    # Preallocated empty outputs are accepted and returned.
    out = tuple(np.empty_like(a) for a in src)
    again = emsource.adm_sources(gamma, E, B, out=out)
    assert all(a is b for a, b in zip(again, out))
    T_out = np.empty((10,) + grid, dtype)
    assert emsource.stress_energy_4d(alpha, beta, gamma, E, B, out=T_out) is T_out


def test_empty_grids_still_check_their_arguments():
    """No points is not a licence for wrong shapes or dtypes."""
    gamma = np.zeros((6, 0, 4, 5))
    E = np.zeros((3, 0, 4, 5))
    with pytest.raises(ValueError, match=r"B must have shape \(3, 0, 4, 5\), found \(3, 0, 4, 6\)"):
        emsource.adm_sources(gamma, E, np.zeros((3, 0, 4, 6)))
    with pytest.raises(TypeError, match="share one float dtype"):
        emsource.adm_sources(gamma, E, E.astype(np.float32))
    with pytest.raises(ValueError, match=r"alpha must have shape \(0, 4, 5\)"):
        energy_fluxes(np.ones((1, 4, 5)), E, gamma, E, E)
    with pytest.raises(ValueError, match="field_index must be one of"):
        emsource.adm_sources(gamma, E, E, field_index="mixed")
