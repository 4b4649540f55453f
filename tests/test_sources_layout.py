"""Layouts, grid dimensions, dtypes, ``out`` buffers, and the absence of hidden copies.

Everything here compares the package with itself in another layout: the physics is checked
against outside references in test_sources_reference.py and test_sources_flat_space.py.
Layout changes only move the same numbers, so results must agree bit for bit.
"""

import numpy as np
import pytest

import emsource
import emsource.kernels.sources as kernels
from conftest import assert_same_arithmetic, random_curved_data, unpack_symmetric




def test_full_metric_equals_packed(rng):
    _, _, gamma, E, B = random_curved_data(rng, (4, 3, 2))
    packed = emsource.adm_sources(gamma, E, B)
    full = emsource.adm_sources(unpack_symmetric(gamma).copy(), E, B)
    for a, b in zip(packed, full):
        np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("grid", [(7,), (5, 4), (3, 4, 5)])
def test_grids_of_one_two_three_dimensions(rng, grid):
    alpha, beta, gamma, E, B = random_curved_data(rng, grid)
    src = emsource.adm_sources(gamma, E, B)
    assert src.rho.shape == grid and src.S_i.shape == (3,) + grid and src.S_ij.shape == (6,) + grid
    # The same points as one flattened 1D grid give the same numbers.
    line = emsource.adm_sources(*(a.reshape(a.shape[0], -1) for a in (gamma, E, B)))
    np.testing.assert_array_equal(src.rho.ravel(), line.rho)
    np.testing.assert_array_equal(src.S_ij.reshape(6, -1), line.S_ij)
    T = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    assert T.shape == (10,) + grid


def test_component_last_layout(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, (4, 3, 5))
    first = emsource.adm_sources(gamma, E, B)
    last_in = [np.ascontiguousarray(np.moveaxis(a, 0, -1)) for a in (gamma, E, B)]
    last = emsource.adm_sources(*last_in, layout="component_last")
    assert last.S_i.shape == (4, 3, 5, 3) and last.S_ij.shape == (4, 3, 5, 6)
    assert_same_arithmetic(np.moveaxis(last.S_i, -1, 0), first.S_i)
    assert_same_arithmetic(np.moveaxis(last.S_ij, -1, 0), first.S_ij)
    assert_same_arithmetic(last.rho, first.rho)
    # Full (*grid, 3, 3) metric blocks.
    blocks = np.ascontiguousarray(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1)))
    from_blocks = emsource.adm_sources(blocks, *last_in[1:], layout="component_last")
    np.testing.assert_array_equal(from_blocks.S_ij, last.S_ij)
    T_first = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    T_last = emsource.stress_energy_4d(alpha, np.moveaxis(beta, 0, -1).copy(), *last_in,
                                       layout="component_last")
    assert T_last.shape == (4, 3, 5, 10)
    assert_same_arithmetic(np.moveaxis(T_last, -1, 0), T_first)


def test_ghost_zone_views_agree_with_contiguous_copies(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, (9, 10, 11))
    inner = (slice(None), slice(3, -3), slice(3, -3), slice(3, -3))
    views = [a[inner] for a in (beta, gamma, E, B)]
    lapse = alpha[3:-3, 3:-3, 3:-3]
    assert not views[1].flags.c_contiguous
    strided = emsource.adm_sources(*views[1:])
    copied = emsource.adm_sources(*(np.ascontiguousarray(v) for v in views[1:]))
    for a, b in zip(strided, copied):
        assert_same_arithmetic(a, b)
    T_strided = emsource.stress_energy_4d(lapse, *views)
    T_copied = emsource.stress_energy_4d(np.ascontiguousarray(lapse), *(np.ascontiguousarray(v) for v in views))
    assert_same_arithmetic(T_strided, T_copied)


class _Spy:
    """Stands in for a kernel driver and records what memory its arguments point to."""

    def __init__(self, real):
        self.real = real
        self.arrays = []

    def __call__(self, *args):
        self.arrays = [a for a in args if isinstance(a, np.ndarray)]
        return self.real(*args)


class _SharedRouteSpy(_Spy):
    """Stands in for ``call_sharing_layouts(kernel, arguments, inputs)``."""

    def __call__(self, kernel, arguments, inputs):
        self.arrays = [a for a in arguments if isinstance(a, np.ndarray)]
        return self.real(kernel, arguments, inputs)


@pytest.mark.parametrize("route", ["flat", "window", "columns"])
def test_inputs_reach_the_kernel_without_copies(rng, monkeypatch, route):
    alpha, beta, gamma, E, B = random_curved_data(rng, (8, 8, 8))
    if route == "window":  # ghost zones sliced off: contiguous along z
        gamma, E, B = (a[:, 2:-2, 1:-1, 2:-2] for a in (gamma, E, B))
    elif route == "columns":  # z reversed: no unit stride along z, the column loop
        gamma, E, B = (a[:, 2:-2, 1:-1, ::-1] for a in (gamma, E, B))
    if route == "flat":
        spy = _Spy(kernels.ADM_SOURCES_FLAT[0])
        monkeypatch.setitem(kernels.ADM_SOURCES_FLAT, 0, spy)
    else:  # the strided drivers are called through the route that shares one specialisation
        spy = _SharedRouteSpy(emsource.sources.call_sharing_layouts)
        monkeypatch.setattr(emsource.sources, "call_sharing_layouts", spy)
    src = emsource.adm_sources(gamma, E, B)
    passed = spy.arrays
    given = (gamma, E, B) + tuple(src)
    if route != "window":
        assert len(passed) == 7
        for array, seen in zip(given, passed):
            assert np.shares_memory(array, seen)
            assert seen.size == array.size  # the whole array is seen, not a copied part
        return
    # The windowed driver sees 1-D spans of the same memory and uint64 element steps.
    spans, steps = passed[:7], passed[7]
    assert steps.shape == (7, 3) and steps.dtype == np.uint64
    for array, span, step in zip(given, spans, steps):
        assert span.ndim == 1 and span.flags.c_contiguous
        assert span.__array_interface__["data"][0] == array.__array_interface__["data"][0]
        grid = array if array.ndim == 3 else array.reshape((-1,) + array.shape[-3:])
        for component in range(grid.shape[0] if array.ndim == 4 else 1):
            for i, j in ((0, 0), (1, 2), (grid.shape[-3] - 1, grid.shape[-2] - 1)):
                start = int(component * step[0] + i * step[1] + j * step[2])
                row = grid[i, j] if array.ndim == 3 else grid[component, i, j]
                np.testing.assert_array_equal(span[start:start + row.size], row)


def test_out_buffers_are_filled_in_place(rng):
    _, _, gamma, E, B = random_curved_data(rng, (4, 4, 4))
    expected = emsource.adm_sources(gamma, E, B)
    out = emsource.AdmSources(*(np.full_like(a, np.nan) for a in expected))
    returned = emsource.adm_sources(gamma, E, B, out=out)
    for a, b, c in zip(out, returned, expected):
        assert a is b
        np.testing.assert_array_equal(a, c)
    T = np.full((10, 4, 4, 4), np.nan)
    alpha = np.ones((4, 4, 4))
    beta = np.zeros((3, 4, 4, 4))
    assert emsource.stress_energy_4d(alpha, beta, gamma, E, B, out=T) is T
    assert np.all(np.isfinite(T))


def test_float32_output_follows_input(rng):
    _, _, gamma, E, B = random_curved_data(rng, (4, 4, 4), dtype=np.float32)
    src = emsource.adm_sources(gamma, E, B)
    assert all(a.dtype == np.float32 for a in src)


def test_import_compiles_nothing():
    """Kernels compile lazily: a fresh interpreter that imports emsource has no signatures."""
    import subprocess
    import sys

    code = ("import emsource, emsource.kernels.sources as k, emsource.kernels.stencils as s;"
            "import numba;"
            "d=[v for m in (k, s) for v in vars(m).values() if hasattr(v, 'signatures')];"
            "print(len(d), sum(len(v.signatures) for v in d))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    dispatchers, compiled = map(int, out.stdout.split())
    assert dispatchers >= 6 and compiled == 0
