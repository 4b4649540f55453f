"""The grid-function allocator (emsource.grid_arrays) and the kernels' flat path over its arrays.

The physics is checked against outside references elsewhere (test_sources_reference.py,
test_sources_flat_space.py); here the package is compared with itself in another memory layout.
Padded arrays take the same flat driver as C-contiguous ones, so results agree bit for bit;
arrays whose gaps cannot be seen safely take the column driver and agree to
``assert_same_arithmetic``.
"""

import numpy as np
import pytest

import emsource
from emsource import _arguments as arg
from emsource.grid_arrays import (CACHE_LINE, SET_PERIOD, empty_grid_function,
                                  grid_function_like, has_contiguous_rows, zeros_grid_function)
from conftest import assert_same_arithmetic, random_curved_data, unpack_symmetric

GRID = (5, 6, 7)


def padded_copy(a, grid_ndim=3):
    p = grid_function_like(a, grid_ndim=grid_ndim)
    p[...] = a
    return p


def row_starts(a, ncomp_axes):
    rows = a.reshape((-1,) + a.shape[ncomp_axes:])
    return [rows[c].__array_interface__["data"][0] for c in range(rows.shape[0])]


@pytest.mark.parametrize("shape, grid_ndim", [((6, 40, 40, 41), None), ((3, 3, 9, 8, 7), 3),
                                              ((3, 100), 1), ((20, 21, 22), None)])
def test_shape_dtype_and_rows_are_ordinary_contiguous_memory(shape, grid_ndim):
    for dtype in (np.float32, np.float64):
        a = empty_grid_function(shape, dtype, grid_ndim=grid_ndim)
        assert a.shape == shape and a.dtype == dtype and a.flags.writeable
        ncomp_axes = len(shape) - (grid_ndim or 3)
        assert has_contiguous_rows(a, len(shape) - ncomp_axes)
        # Used as a plain array: every element is its own memory (no row overlaps another).
        a[...] = np.arange(np.prod(shape)).reshape(shape)
        np.testing.assert_array_equal(a, np.arange(np.prod(shape), dtype=dtype).reshape(shape))
        # Rows start on cache lines.
        assert all(start % CACHE_LINE == 0 for start in row_starts(a, ncomp_axes))
    assert not zeros_grid_function(shape, grid_ndim=grid_ndim).any()


def test_rows_fall_into_different_cache_sets():
    # The point of the module: the 23 rows a source call streams (12 in, 11 out, on a grid whose
    # row length is a power of two) start in 23 distinct sets of a 4 KiB period (an L1 of 64
    # sets) and of the SET_PERIOD (an L2), where contiguous arrays would put them all in one.
    n = 64  # row of 2 MiB: a multiple of every period, the worst case for contiguous arrays
    arrays = [empty_grid_function(s) for s in ((6, n, n, n), (3, n, n, n), (3, n, n, n), (n, n, n),
                                                (3, n, n, n), (6, n, n, n), (n, n, n))]
    starts = [s for a in arrays for s in row_starts(a, a.ndim - 3)]
    assert len(starts) == 23
    for period in (4096, SET_PERIOD):
        sets = {(s % period) // CACHE_LINE for s in starts}
        assert len(sets) == 23, period
    contiguous = np.empty((6, n, n, n))
    assert len({(s % 4096) for s in row_starts(contiguous, 1)}) == 1


def test_padded_arrays_take_the_flat_path_and_agree_bit_for_bit(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    reference = emsource.adm_sources(gamma, E, B)
    padded = [padded_copy(a) for a in (gamma, E, B)]
    views, flat = arg.kernel_views(padded, GRID)
    assert flat and all(v.flags.c_contiguous for v in views)
    out = emsource.AdmSources(*(padded_copy(a) for a in reference))
    for a in out:
        a[...] = np.nan
    result = emsource.adm_sources(*padded, out=out)
    assert all(r is o for r, o in zip(result, out))
    for a, b in zip(result, reference):
        np.testing.assert_array_equal(a, b)
    # A padded full (3, 3) metric and padded inputs with contiguous outputs.
    full = padded_copy(unpack_symmetric(gamma))
    views, flat = arg.kernel_views([full] + padded[1:], GRID)  # rows 1/3 of the first stride apart
    assert flat and views[0].shape == (9, full.strides[1] // full.itemsize)
    for a, b in zip(emsource.adm_sources(full, *padded[1:]), reference):
        np.testing.assert_array_equal(a, b)
    T = emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    T_padded = emsource.stress_energy_4d(padded_copy(alpha), padded_copy(beta), *padded,
                                         out=grid_function_like(T))
    # The T_ab drivers of whole 3-D arrays and of padded row blocks are two specialisations:
    # LLVM may contract a multiply-add into an FMA in one and not the other (seen on a Zen 4
    # host: 75 of 2100 values one rounding apart), so equal up to contraction.
    assert_same_arithmetic(T_padded, T)


def test_spaced_rows_whose_gaps_are_not_all_owned_take_the_column_path(rng):
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    reference = emsource.adm_sources(gamma, E, B)
    npoints = int(np.prod(GRID))
    # Every second row of an 11-row block: the gap after the last row would run past the end.
    block = np.zeros((11, npoints))
    block[::2] = gamma.reshape(6, npoints)
    spaced = block[::2].reshape((6,) + GRID)
    assert arg._row_block(spaced, 1, 6, npoints) is None
    assert_same_arithmetic(emsource.adm_sources(spaced, E, B).S_ij, reference.S_ij)
    # The same rows in a 12-row block: the gaps are owned, so the flat path applies.
    block = np.zeros((12, npoints))
    block[::2] = gamma.reshape(6, npoints)
    spaced = block[::2].reshape((6,) + GRID)
    assert arg.kernel_views([spaced, E], GRID)[1]
    np.testing.assert_array_equal(emsource.adm_sources(spaced, E, B).S_ij, reference.S_ij)
    # Memory of a foreign object: its extent is not known, so no gaps are assumed.
    foreign = np.frombuffer(bytearray(block.tobytes()), np.float64).reshape(12, npoints)
    assert arg._row_block(foreign[::2].reshape((6,) + GRID), 1, 6, npoints) is None


def test_error_on_padded_arrays_names_the_grid_index(rng):
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    E = padded_copy(E)
    E[1, 3, 2, 4] = np.inf
    with pytest.raises(emsource.GridPointError, match=r"first is grid index \(3, 2, 4\)") as info:
        emsource.adm_sources(padded_copy(gamma), E, padded_copy(B))
    assert info.value.bad_count == 1 and "E[1] = inf" in info.value.reason


def test_shape_is_checked():
    with pytest.raises(ValueError, match=r"shape must be .* found \(3, -1\)"):
        empty_grid_function((3, -1))
    assert empty_grid_function((3, 0, 4)).shape == (3, 0, 4)
