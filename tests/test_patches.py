"""Patches of a domain decomposition in one process: tiling, ghosts, coordinates, the checks.

The collective behaviour under several ranks is tested in ``test_patches_mpi.py``; here the
parts that need no second process: the decomposition tiles the grid, a patch's coordinates are
the global grid's bit for bit, the consistency check finds overlaps, gaps and mismatched grids,
and the package works without mpi4py.
"""

import subprocess
import sys

import numpy as np
import pytest

from emsource.grid import UniformGrid
from emsource.patches import (PatchGrid, _tiling_failures, decompose, patch_of,
                              process_grid)

GRID = UniformGrid.from_bounds((-1.0, 0.5, 2.0), (1.0, 1.4, 2.7), (13, 10, 7))


@pytest.mark.parametrize("size", [1, 2, 3, 4, 5, 6, 7, 12])
def test_decomposition_tiles_the_grid_once(size):
    owner = np.full(GRID.shape, -1)
    for rank in range(size):
        p = decompose(GRID, rank, size, ghost=2)
        block = owner[tuple(slice(s, e) for s, e in zip(p.owned_start, p.owned_stop))]
        assert (block == -1).all()  # no point owned twice
        block[...] = rank
    assert (owner >= 0).all()  # no point left out
    dims = process_grid(size, GRID.shape)
    assert np.prod(dims) == size
    for a, d in enumerate(dims):  # uneven splits differ by at most one point
        sizes = {decompose(GRID, r, size, ghost=0).owned_shape[a] for r in range(size)}
        assert max(sizes) - min(sizes) <= 1 and sum(sizes) <= GRID.shape[a]


def test_a_patch_has_ghosts_only_towards_its_neighbours():
    p = decompose(GRID, 1, 3, ghost=2, dims=(3, 1, 1))  # the middle of three along x
    assert p.owned_start == (5, 0, 0) and p.owned_shape == (4, 10, 7)
    assert p.lower_ghost == (2, 0, 0) and p.upper_ghost == (2, 0, 0)
    assert p.shape == (8, 10, 7) and p.offset == (3, 0, 0)
    assert p.owned == (slice(2, 6), slice(0, 10), slice(0, 7))
    assert p.valid_extent(1) == (slice(1, 7), slice(0, 10), slice(0, 7))
    first = decompose(GRID, 0, 3, ghost=2, dims=(3, 1, 1))
    assert first.lower_ghost == (0, 0, 0) and first.upper_ghost == (2, 0, 0)
    # A ghost width larger than what the grid holds beyond the box is cut at the face.
    tiny = PatchGrid.from_owned(GRID, (1, 0, 0), (11, 10, 7), 3)
    assert tiny.lower_ghost == (1, 0, 0) and tiny.upper_ghost == (1, 0, 0)


def test_patch_coordinates_are_the_global_grids_bit_for_bit():
    """Exact data on a patch must equal the whole grid's at the same points (the MPI tests
    compare to 1e-13 and rely on identical inputs)."""
    whole = GRID.coordinates()
    for rank in range(3):
        p = decompose(GRID, rank, 3, ghost=2, dims=(1, 1, 3))
        local = p.coordinates()
        window = tuple(slice(o, o + n) for o, n in zip(p.offset, p.shape))
        for a in range(3):
            assert np.array_equal(local[a], whole[a][window])
        assert p.global_grid == GRID


def test_a_patch_that_does_not_fit_its_grid_is_refused():
    with pytest.raises(ValueError, match=r"owned box start \(10, 0, 0\), shape \(5, 10, 7\)"):
        PatchGrid.from_owned(GRID, (10, 0, 0), (5, 10, 7), 1)
    with pytest.raises(ValueError, match="dims"):
        decompose(GRID, 0, 4, ghost=1, dims=(3, 1, 1))
    p = decompose(GRID, 0, 2, ghost=1)
    with pytest.raises(ValueError, match=r"valid_ghosts must be an integer in \[0, ghost = 1\]"):
        p.require_ghosts("f", 2, 1, "a stencil")


def test_the_consistency_check_names_the_ranks():
    parts = [decompose(GRID, r, 3, ghost=1, dims=(3, 1, 1)) for r in range(3)]
    described = [p.describe() for p in parts]
    assert _tiling_failures(described) == []
    overlapping = list(described)
    overlapping[2] = PatchGrid.from_owned(GRID, (8, 0, 0), (5, 10, 7), 1).describe()
    (rank, message), = _tiling_failures(overlapping)
    assert rank == 1 and "overlaps rank 2's at global indices (8, 0, 0) to (8, 9, 6)" in message
    gap = list(described)
    gap[1] = PatchGrid.from_owned(GRID, (5, 0, 0), (4, 10, 6), 1).describe()
    (rank, message), = _tiling_failures(gap)
    # Both rank 0 (below along x) and rank 1 (below along z) touch the gap: either is named.
    assert rank in (0, 1) and "leave 40 of 910" in message and "(5, 0, 6)" in message
    other = UniformGrid(GRID.shape, GRID.origin, (GRID.spacing[0], 0.1, GRID.spacing[2]))
    mismatched = list(described)
    mismatched[2] = decompose(other, 2, 3, ghost=1, dims=(3, 1, 1)).describe()
    (rank, message), = _tiling_failures(mismatched)
    assert rank == 2 and message.startswith("spacing")


def test_a_partial_patch_without_comm_is_an_error():
    p = decompose(GRID, 0, 2, ghost=1)
    with pytest.raises(ValueError, match="pass comm= for the global result"):
        patch_of("integrate_level_arrays", p, None)
    assert patch_of("f", decompose(GRID, 0, 1, ghost=1), None) is None  # the whole grid


def test_the_package_works_without_mpi4py():
    """mpi4py stays optional: with its import blocked the package imports and integrates."""
    code = (
        "import sys; sys.modules['mpi4py'] = None\n"
        "import numpy as np, emsource, emsource.patches as p\n"
        "from emsource.integrals import integrate_level_arrays\n"
        "from emsource.grid import UniformGrid\n"
        "assert not p.mpi_available()\n"
        "g = UniformGrid.from_bounds((0, 0, 0), (1, 1, 1), (5, 5, 5))\n"
        "gamma = np.zeros((6, 5, 5, 5)); gamma[[0, 3, 5]] = 1\n"
        "E = np.zeros((3, 5, 5, 5)); E[0] = 2.0\n"
        "r = integrate_level_arrays(g, gamma, E, np.zeros_like(E))\n"
        "print(r.energy)\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    # Gaussian units: rho = E^2 / (8 pi) = 4 / (8 pi) over the unit cube (trapezoid exact).
    assert float(done.stdout) == pytest.approx(1 / (2 * np.pi), rel=1e-14)
