"""Throughput and memory of the Dask path (emsource.distributed) at 1 and 2 workers.

Run:  python benchmarks/bench_dask.py [--points 256] [--levels 4] [--repeat 3] [--workers 1 2]

Needs the dask extra (pip install 'emsource[dask]'). It writes a float64 snapshot of points^3
with ``levels`` time levels (spatial_metric, electric_field, magnetic_field: 12 values per
point, 1.5 GiB per level at 256^3) into a temporary directory, then measures in the same run,
medians of ``repeat`` repetitions, in grid points per second over all levels:

  (a) plain read: the same datasets of every level read slab by slab into reused NumPy buffers
      (h5py ``read_direct``, one process): the yardstick of reading these bytes;
  (b) single process: ``integrate_snapshot`` (energy, momentum, face fluxes: a reduction) and
      ``compute_sources`` (11 values per point written), the package's streaming path;
  (c) Dask: ``integrate_series`` and ``compute_sources_dask`` on a local cluster of N worker
      processes (one thread each, Numba with cores / N threads), started once per N and warmed
      by one run (the workers load the kernels) before the timed runs;

and prints the ratios (c)/(a) and (c)/(b) side by side, and the peak resident set size of each
worker process (VmHWM, which includes the interpreter, NumPy, h5py, Numba and Dask:
about 150-250 MiB before any data). The file stays in the page cache when it fits, so these are
cached-I/O figures. On a machine shared with other jobs, read the ratios, not the absolute rates.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import sys
import tempfile
import time

import h5py
import numpy as np

from emsource import snapshot
from emsource.grid import UniformGrid
from emsource.integrals import integrate_snapshot
from emsource.snapshot.slabs import SlabBuffers, slabs
from emsource.snapshot.sources_pipeline import compute_sources

INPUTS = ("spatial_metric", "electric_field", "magnetic_field")


def write_series(path, n, levels, seed=7):
    """Flat-ish metrics and random fields, plane blocks written one at a time (bounded memory);
    chunks of whole planes, about 1 MiB each (as the package writes its outputs)."""
    rng = np.random.default_rng(seed)
    shape = (n, n, n)
    grid = UniformGrid(shape, (-0.5,) * 3, (1.0 / n,) * 3)
    with h5py.File(path, "w") as f:
        snapshot.write_root_attributes(f)
        for k in range(levels):
            g = f.create_group(f"time_levels/{k}")
            snapshot.write_level_attributes(g, time=0.1 * k, grid=grid, units="gaussian",
                                            axis_order="xyz")
            data = {}
            for q, c in zip(INPUTS, (6, 3, 3)):
                chunks = snapshot.chunk_shape((c,) + shape, 8)
                data[q] = g.create_dataset(q, (c,) + shape, "f8", chunks=chunks)
            block = 16
            for i in range(0, n, block):
                rows = min(block, n - i)
                gamma = 0.05 * rng.standard_normal((6, rows, n, n))
                gamma[[0, 3, 5]] += 1.0
                data["spatial_metric"][:, i:i + rows] = gamma
                data["electric_field"][:, i:i + rows] = rng.standard_normal((3, rows, n, n))
                data["magnetic_field"][:, i:i + rows] = rng.standard_normal((3, rows, n, n))


def median_seconds(function, repeat):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def plain_read(path, rows=16):
    with snapshot.open_snapshot(path) as snap:
        for level in snap.levels:
            buffers = SlabBuffers(level, INPUTS, rows, np.float64)
            for start, stop in slabs(level.storage_shape[0], rows):
                for q in INPUTS:
                    buffers.read(q, start, stop)


def peak_rss_mib():
    """Peak resident memory of this process (VmHWM; ``ru_maxrss`` would carry over the parent's
    peak into a worker process started by fork and exec)."""
    try:
        with open("/proc/self/status") as status:
            for line in status:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024  # kB
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # Linux: KiB


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--points", type=int, default=256, help="points per axis (default 256)")
    parser.add_argument("--levels", type=int, default=4, help="time levels (default 4)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--block-mib", type=float, default=256,
                        help="values per task in MiB (default 256, the package default)")
    parser.add_argument("--directory", default=None, help="where to write the files")
    args = parser.parse_args(argv)

    import dask
    from distributed import Client, LocalCluster

    from emsource.distributed.integrals import integrate_series
    from emsource.distributed.sources import compute_sources_dask

    n, nlevels = args.points, args.levels
    points = n**3 * nlevels
    block = int(args.block_mib * 2**20)
    print(f"bench_dask: {n}^3 x {nlevels} levels = {points:.3g} points, {args.repeat} repeats, "
          f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at start")
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}, dask {dask.__version__}")
    with tempfile.TemporaryDirectory(dir=args.directory) as directory:
        path = os.path.join(directory, "series.h5")
        began = time.perf_counter()
        write_series(path, n, nlevels)
        print(f"wrote {os.path.getsize(path) / 2**30:.2f} GiB in {time.perf_counter() - began:.0f} s")
        out = os.path.join(directory, "out.h5")
        rows = []

        def run_sources_single():
            compute_sources(path, out, force=True)

        def run_sources_dask():
            compute_sources_dask(path, out, force=True, block_bytes=block)

        read = median_seconds(lambda: plain_read(path), args.repeat)
        rows.append(("plain read (a)", "-", read, None))
        integrate_snapshot(path)  # loads the kernels
        single_integrate = median_seconds(lambda: integrate_snapshot(path), args.repeat)
        rows.append(("integrate, single process (b)", "-", single_integrate, None))
        run_sources_single()
        single_sources = median_seconds(run_sources_single, args.repeat)
        rows.append(("sources, single process (b)", "-", single_sources, None))
        reference = {"integrate": single_integrate, "sources": single_sources}
        for workers in args.workers:
            threads = max(1, (os.cpu_count() or 1) // workers)
            with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                              dashboard_address=None, silence_logs=50,
                              env={"NUMBA_NUM_THREADS": str(threads)}) as cluster, \
                    Client(cluster) as client:
                for name, function in (("integrate", lambda: integrate_series(path,
                                                                              block_bytes=block)),
                                       ("sources", run_sources_dask)):
                    function()  # warm: the workers import emsource and load the kernels
                    seconds = median_seconds(function, args.repeat)
                    memory = client.run(peak_rss_mib)
                    rows.append((f"{name}, dask ({workers} worker(s))", name, seconds,
                                 sorted(memory.values())))
        print(f"\n{'what':<34} {'median s':>9} {'Mpoints/s':>10} {'vs read':>8} "
              f"{'vs single':>9}  peak RSS per worker (MiB)")
        for what, kind, seconds, memory in rows:
            versus = f"{reference[kind] / seconds:9.2f}" if kind in reference else f"{'':>9}"
            print(f"{what:<34} {seconds:9.3f} {points / seconds / 1e6:10.2f} "
                  f"{read / seconds:8.2f} {versus}  "
                  + (", ".join(f"{m:.0f}" for m in memory) if memory else ""))
        print(f"\nthis process: peak RSS {peak_rss_mib():.0f} MiB; ratios > 1 are faster than the "
              "reference (read or single process)")


if __name__ == "__main__":
    main()
