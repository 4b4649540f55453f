"""Weak scaling of the evolution-loop diagnostics on MPI ranks: the reductions against the kernels.

Run:  mpiexec -n 1 python benchmarks/bench_mpi.py [--points 48] [--steps 15]
      mpiexec -n 2 python benchmarks/bench_mpi.py

Each rank owns a patch of ``points``^3 points (2 ghost layers) of a global grid that grows with
the number of ranks along x (weak scaling), holding a plane wave of ``emsource.exact``. Per
"step" it runs what a coupled code would run every step, and each piece is timed on its own,
after a barrier (so that waiting for a slower rank is not counted), medians over the steps:

- sources: ``adm_sources(out=...)`` on the local array (pointwise, no communication);
- integrals: ``integrate_level_arrays(patch, ..., comm=comm)`` (energy, momentum, face fluxes;
  the local kernel and sums plus the reduction);
- residual: ``conservation_residual(..., patch=patch, comm=comm)`` (stencils on the ghosts, the
  norms reduced);
- reduction alone: ``global_partial`` of an already computed partial of each kind (pickling,
  the reduce to rank 0 in rank order with ``combine``, the broadcast);
- message latency: a lowercase ``allreduce`` of one float (pickled, as the partials are) and an
  uppercase ``Allreduce`` of 8 doubles (buffer);
- references: a STREAM-style triad a = b + s c moving as many bytes as ``adm_sources`` does on
  the patch (12 arrays read, 10 written: arrays of 22/3 times the patch's points; the
  bandwidth ceiling of the kernels) and plain NumPy for the energy integral (a sum of
  (E^2 + B^2) / 8 pi, no metric, no checks, no face fluxes).

The machine has 2 cores shared with other jobs: read the ratios printed side by side, not the
absolute times. ``NUMBA_NUM_THREADS`` defaults to 1 (one thread per rank, the same work per
rank at every rank count; on a loaded machine a second thread mostly waits for a core).
"""

from __future__ import annotations

import argparse
import math
import os
import statistics
import time

from mpi4py import MPI

COMM = MPI.COMM_WORLD
os.environ.setdefault("NUMBA_NUM_THREADS", "1")

import numba  # noqa: E402
import numpy as np  # noqa: E402

from emsource import adm_sources  # noqa: E402
from emsource.conservation import conservation_residual  # noqa: E402
from emsource.exact import plane_wave  # noqa: E402
from emsource.grid import UniformGrid  # noqa: E402
from emsource.integrals import integrate_level_arrays  # noqa: E402
from emsource.kernels._compile import grid_kernel  # noqa: E402
from emsource.patches import decompose, global_partial  # noqa: E402


@grid_kernel
def _triad(a, b, c, scalar):
    for i in numba.prange(a.shape[0]):
        a[i] = b[i] + scalar * c[i]


def timed(function, steps, comm):
    """Median seconds of ``function()`` over ``steps`` calls, each after a barrier (one warm-up)."""
    function()
    times = []
    for _ in range(steps):
        comm.Barrier()
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    # The slowest rank's median: the step waits for it.
    return comm.allreduce(statistics.median(times), op=MPI.MAX)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=48, help="owned points per axis per rank")
    parser.add_argument("--steps", type=int, default=15, help="timed repetitions of each piece")
    args = parser.parse_args(argv)
    rank, size = COMM.Get_rank(), COMM.Get_size()
    n = args.points
    whole = UniformGrid.from_bounds((0.0, 0.0, 0.0), (size * 1.0, 1.0, 1.0), (n * size, n, n))
    patch = decompose(whole, rank, size, ghost=2, dims=(size, 1, 1))
    level = plane_wave(patch, 0.1, wave_vector=(2 * math.pi, math.pi, 0.5 * math.pi),
                       polarization=(1.0, -2.0, 0.0))  # transverse: k . e = 0
    gamma, E, B = level.gamma, level.E, level.B
    out = adm_sources(gamma, E, B)
    zero = np.zeros((6,) + patch.shape)

    def sources():
        adm_sources(gamma, E, B, out=out)

    def integrals():
        return integrate_level_arrays(patch, gamma, E, B, comm=COMM)

    def residual():
        return conservation_residual(level.alpha, level.beta, gamma, level.K, E, B,
                                     spacing=patch.spacing, order=4, dt_E=level.dt_E,
                                     dt_B=level.dt_B, dt_gamma=zero, patch=patch, comm=COMM)

    from emsource.integrals import _box_partial

    def local_integrals():  # the rank's partial only: what integrals() does before reducing
        return _box_partial(whole, gamma, E, B, units="gaussian", lapse=None, shift=None,
                            valid_mask=None, spheres=(), lower=patch.owned_start,
                            upper=patch.owned_stop, array_start=patch.offset,
                            in_place=False, by_position=True)

    def local_residual():  # the kernels on the local array, without patch bookkeeping
        return conservation_residual(level.alpha, level.beta, gamma, level.K, E, B,
                                     spacing=patch.spacing, order=4, dt_E=level.dt_E,
                                     dt_B=level.dt_B, dt_gamma=zero)

    level_piece = local_integrals()
    norm_piece = residual().norm_partial

    a = np.zeros(math.prod(patch.shape) * 22 // 3)
    b, c = np.ones_like(a), np.full_like(a, 2.0)
    h3 = math.prod(patch.spacing)
    own = (slice(None),) + patch.owned
    figures = {
        "sources (adm_sources)": timed(sources, args.steps, COMM),
        "integrals, with comm": timed(integrals, args.steps, COMM),
        "residual + norms, with comm": timed(residual, args.steps, COMM),
        "  integrals, local partial only": timed(local_integrals, args.steps, COMM),
        "  residual, local kernels only": timed(local_residual, args.steps, COMM),
        "reduction of LevelPartial": timed(
            lambda: global_partial("bench", COMM, patch, lambda: level_piece), args.steps, COMM),
        "reduction of NormPartial": timed(
            lambda: global_partial("bench", COMM, patch, lambda: norm_piece), args.steps, COMM),
        "allreduce of 1 float (pickled)": timed(lambda: COMM.allreduce(1.0), args.steps, COMM),
        "Allreduce of 8 doubles (buffer)": timed(
            lambda: COMM.Allreduce(np.ones(8), np.empty(8)), args.steps, COMM),
        "triad, bytes of adm_sources": timed(lambda: _triad(a, b, c, 3.0), args.steps, COMM),
        "plain NumPy energy integral": timed(
            lambda: float(np.sum((np.sum(E[own] ** 2, axis=0) + np.sum(B[own] ** 2, axis=0))
                                 / (8 * math.pi)) * h3), args.steps, COMM),
    }
    if rank == 0:
        triad = figures["triad, bytes of adm_sources"]
        print(f"ranks {size}, owned {n}^3 points per rank (+2 ghost layers), global "
              f"{whole.shape}, NUMBA_NUM_THREADS={os.environ['NUMBA_NUM_THREADS']}, "
              f"medians of {args.steps}, slowest rank")
        print(f"{'piece':34s} {'ms':>9s} {'/ triad':>8s}")
        for name, seconds in figures.items():
            print(f"{name:34s} {1e3 * seconds:9.3f} {seconds / triad:8.2f}")
        step = figures["integrals, with comm"] + figures["residual + norms, with comm"]
        reductions = figures["reduction of LevelPartial"] + figures["reduction of NormPartial"]
        print(f"reductions / (integrals + residual): {reductions / step:.4f}")
        print(f"per-stage reduction cost (2 log2 P stages, P = {size}): "
              + (f"{1e6 * reductions / (2 * 2 * math.log2(size)):.1f} us" if size > 1 else "-"))


if __name__ == "__main__":
    main()
