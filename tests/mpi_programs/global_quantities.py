"""Under ``mpiexec -n K``: the global quantities of ``patch_cases`` on every rank, as JSON.

Each rank writes ``<directory>/rank-<r>.json`` (the directory is the first argument) holding
``{"rank": r, "size": P, "results": {layout: {quantity: [floats]}}}`` for
``tests/test_patches_mpi.py``, which compares every rank with the single-process results.
Layouts: the default process grid with 2 ghost layers; all ranks along z with 3 ghost layers
(more than the stencils need); and the default grid with 3 ghost layers of which only 2 are
valid (the outer one holds NaN and must not be read).
"""

import json
import os
import sys

from mpi4py import MPI

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from patch_cases import CASES, run_all  # noqa: E402

from emsource.patches import abort_on_error, decompose  # noqa: E402


def main():
    comm = MPI.COMM_WORLD
    rank, size = comm.Get_rank(), comm.Get_size()
    layouts = {
        "process grid, ghost 2": (2, None, tuple(CASES), None),
        # run_case decomposes its own grids: once (in the first layout) is enough.
        "along z, ghost 3": (3, (1, 1, size), tuple(c for c in CASES if c != "named convergence"),
                             None),
        "ghost 3, 2 valid": (3, None, ("integrals", "residuals"), 2),
    }
    out = {}
    with abort_on_error(comm):
        for name, (ghost, dims, cases, valid) in layouts.items():
            def place(grid, ghost=ghost, dims=dims):
                return decompose(grid, rank, size, ghost=ghost, dims=dims)
            out[name] = run_all(place, comm, cases, valid)
    with open(os.path.join(sys.argv[1], f"rank-{rank}.json"), "w") as f:
        json.dump({"rank": rank, "size": size, "results": out}, f)


if __name__ == "__main__":
    main()
