"""Under ``mpiexec -n 3``: inconsistent patches and bad data on one rank, reported on every rank.

Each scenario calls a global quantity with something wrong on some ranks; every rank catches
the :class:`emsource.patches.PatchError` and records it. That every scenario is reached on every
rank shows that no rank was left waiting in a collective call. Each rank writes
``<directory>/rank-<r>.json``: scenario -> {"error": type name, "message", "failures":
[[rank, message], ...]} (or {"error": None} when nothing was raised).
"""

import json
import os
import sys

import numpy as np
from mpi4py import MPI

from emsource import exact
from emsource.conservation import level_residual
from emsource.grid import UniformGrid
from emsource.integrals import integrate_level_arrays
from emsource.patches import PatchError, PatchGrid, abort_on_error, decompose

GRID = UniformGrid.from_bounds((0.0, 0.0, 0.0), (1.0, 0.9, 0.7), (13, 12, 11))


def integrate(patch, comm, **options):
    d = exact.plane_wave_gauge_wave(patch, 0.1)
    return integrate_level_arrays(patch, d.gamma, d.E, d.B, lapse=d.alpha, shift=d.beta,
                                  comm=comm, **options)


def scenarios(rank, size, comm):
    good = decompose(GRID, rank, size, ghost=2, dims=(size, 1, 1))

    def moved(patch, start, shape):
        return PatchGrid.from_owned(GRID, start, shape, patch.ghost)

    def overlap():  # rank 1 also claims rank 0's last owned plane
        p = good
        if rank == 1:
            p = moved(good, (good.owned_start[0] - 1,) + good.owned_start[1:],
                      (good.owned_shape[0] + 1,) + good.owned_shape[1:])
        integrate(p, comm)

    def gap():  # rank 2 leaves out its last plane
        p = good
        if rank == 2:
            p = moved(good, good.owned_start, (good.owned_shape[0] - 1,) + good.owned_shape[1:])
        integrate(p, comm)

    def spacing():  # rank 1 decomposes a grid with another spacing along y
        grid = GRID
        if rank == 1:
            grid = UniformGrid.from_bounds((0.0, 0.0, 0.0), (1.0, 0.95, 0.7), (13, 12, 11))
        integrate(decompose(grid, rank, size, ghost=2, dims=(size, 1, 1)), comm)

    def origin():  # rank 2 decomposes a grid shifted along z
        grid = GRID
        if rank == 2:
            grid = UniformGrid((13, 12, 11), (0.0, 0.0, 0.01), GRID.spacing)
        integrate(decompose(grid, rank, size, ghost=2, dims=(size, 1, 1)), comm)

    def thin_ghosts():  # rank 1 keeps one ghost layer, order 4 needs two
        p = decompose(GRID, rank, size, ghost=1 if rank == 1 else 2, dims=(size, 1, 1))
        level_residual(exact.plane_wave_gauge_wave(p, 0.1), order=4, comm=comm)

    def too_few_valid():  # every rank says only one of its two ghost layers is valid
        level_residual(exact.plane_wave_gauge_wave(good, 0.1), order=4, comm=comm,
                       valid_ghosts=1)

    def nan_on_one_rank():  # rank 2 holds NaN at global index (11, 3, 4)
        d = exact.plane_wave_gauge_wave(good, 0.1)
        E = d.E.copy()
        if rank == 2:
            E[1, 11 - good.offset[0], 3, 4] = np.nan
        integrate_level_arrays(good, d.gamma, E, d.B, lapse=d.alpha, comm=comm)

    def wrong_shape():  # rank 0 passes arrays without their ghost layers
        d = exact.plane_wave_gauge_wave(good, 0.1)
        gamma = d.gamma[(slice(None),) + good.owned] if rank == 0 else d.gamma
        integrate_level_arrays(good, gamma, d.E, d.B, comm=comm)

    def not_a_patch():  # rank 1 passes the whole grid instead of its patch
        integrate(GRID if rank == 1 else good, comm)

    def fine():  # the same communicator still works after all of the above
        integrate(good, comm)

    return {f.__name__: f for f in (overlap, gap, spacing, origin, thin_ghosts, too_few_valid,
                                    nan_on_one_rank, wrong_shape, not_a_patch, fine)}


def main():
    comm = MPI.COMM_WORLD
    rank, size = comm.Get_rank(), comm.Get_size()
    out = {}
    with abort_on_error(comm):
        for name, scenario in scenarios(rank, size, comm).items():
            try:
                scenario()
                out[name] = {"error": None}
            except PatchError as error:
                out[name] = {"error": type(error).__name__, "message": str(error),
                             "rank": error.rank, "failures": [list(f) for f in error.failures]}
    with open(os.path.join(sys.argv[1], f"rank-{rank}.json"), "w") as f:
        json.dump(out, f)


if __name__ == "__main__":
    main()
