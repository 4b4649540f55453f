"""Throughput and peak memory per worker of the Dask path (emsource.distributed) at 1 and 2 workers.

Run:  python benchmarks/bench_dask.py [--points 256] [--levels 4] [--repeat 3]
          [--repeat-constraints N] [--workers 1 2] [--operations sources integrate constraints]
          [--directory DIR] [--file PATH] [--block-mib 256] [--sample-ms 50]

Needs the dask extra (pip install 'emsource[dask]'; psutil comes with distributed). It writes
a float64 snapshot of points^3 with ``levels`` time levels (spatial_metric, extrinsic_curvature,
electric_field, magnetic_field: 18 values per point, 2.25 GiB per level at 256^3; chunks of one
component and 2 planes, 1 MiB, as the package writes) into ``--directory`` (deleted at the end)
or at ``--file`` (kept, and reused by the next run when its shape matches), then measures in
the same run, medians of ``repeat`` repetitions, over all levels:

  baselines (one process, no computing): a plain read of the bytes each operation reads (h5py
      ``read_direct`` into reused buffers, slab by slab); for ``sources`` also the read plus
      a write of the 11 output values per point, and that write alone (same output chunks,
      ``fsync`` at the end as the package's complete-or-nothing writer does); a STREAM-style
      triad (memory bandwidth);
  single process: ``compute_sources`` (pointwise, writes the outputs), ``integrate_snapshot``
      (energy, momentum, face fluxes) and, for constraints, what ``emsource constraints`` does
      per level (the whole level read, then ``adm_constraints``, order 4);
  Dask: ``compute_sources_dask`` (map_blocks; blocks come back to this process, the one
      writer), ``integrate_series`` (tree reduction) and ``constraint_norms`` (map_overlap,
      depth 2) on a LocalCluster of N worker processes (one thread each, Numba with
      cores / N threads), warmed on a small file first (the workers load the kernels).

It prints wall time, MB/s of input bytes read (1 MB = 1e6 B) and Mpoints/s (grid points x
levels), the ratios to the plain read and to the single process, CPU seconds of each process
(CPU s / wall s shows who is busy), and the PEAK MEMORY of this process and of each worker
process, measured two ways: (1) the kernel's high-water mark of resident memory (VmHWM in
/proc/PID/status), reset before every timed run by writing 5 to /proc/PID/clear_refs, so it
is the exact peak of that run (it includes the interpreter and libraries, about 150-250 MiB);
(2) the largest RSS seen by a thread of this process sampling every worker with psutil every
``--sample-ms`` (a cross-check; it can miss short peaks). When the file does not fit in the
page cache next to the outputs these are partly disk figures: the header prints the memory.
On a machine shared with other jobs, read the ratios within one run, not absolute rates.
"""

from __future__ import annotations

import argparse
import datetime
import os
import statistics
import sys
import tempfile
import threading
import time

import h5py
import numba
import numpy as np
import psutil

from emsource import snapshot
from emsource.grid import UniformGrid
from emsource.quantities import COMPONENTS
from emsource.snapshot.slabs import SlabBuffers, slabs
from emsource.snapshot.sources_pipeline import SOURCE_OUTPUTS

SOURCE_INPUTS = ("spatial_metric", "electric_field", "magnetic_field")
CONSTRAINT_INPUTS = ("spatial_metric", "extrinsic_curvature", "electric_field", "magnetic_field")
FILE_QUANTITIES = CONSTRAINT_INPUTS
OPERATIONS = ("sources", "integrate", "constraints")
MIB = 2**20


# ----------------------------------------------------------------------------- the snapshot file

def write_series(path, n, levels, seed=7):
    """Flat-ish metrics, small random K, random fields; plane blocks written one at a time
    (bounded memory); chunks of one component and whole planes, about 1 MiB (as the package
    writes its outputs)."""
    rng = np.random.default_rng(seed)
    shape = (n, n, n)
    grid = UniformGrid(shape, (-0.5,) * 3, (1.0 / n,) * 3)
    with h5py.File(path, "w") as f:
        snapshot.write_root_attributes(f)
        for k in range(levels):
            g = f.create_group(f"time_levels/{k}")
            snapshot.write_level_attributes(g, time=0.1 * k, grid=grid, units="gaussian",
                                            axis_order="xyz")
            data = {q: g.create_dataset(q, (COMPONENTS[q],) + shape, "f8",
                                        chunks=snapshot.chunk_shape((COMPONENTS[q],) + shape, 8))
                    for q in FILE_QUANTITIES}
            block = 16
            for i in range(0, n, block):
                rows = min(block, n - i)
                gamma = 0.05 * rng.standard_normal((6, rows, n, n))
                gamma[[0, 3, 5]] += 1.0
                data["spatial_metric"][:, i:i + rows] = gamma
                data["extrinsic_curvature"][:, i:i + rows] = 0.01 * rng.standard_normal((6, rows, n, n))
                data["electric_field"][:, i:i + rows] = rng.standard_normal((3, rows, n, n))
                data["magnetic_field"][:, i:i + rows] = rng.standard_normal((3, rows, n, n))


def matching_file(path, n, levels):
    """True when ``path`` is a snapshot this script wrote with the same size (reused)."""
    try:
        with h5py.File(path, "r") as f:
            groups = f["time_levels"]
            return (len(groups) == levels and all(
                q in groups[str(k)] and groups[str(k)][q].shape[1:] == (n, n, n)
                for k in range(levels) for q in FILE_QUANTITIES))
    except (OSError, KeyError):
        return False


# ----------------------------------------------------------------------------------- baselines

@numba.njit(parallel=True, cache=True)
def _triad(a, b, c, scalar):
    for i in numba.prange(a.shape[0]):
        a[i] = b[i] + scalar * c[i]


def triad_bandwidth(repeat, n=2**25):
    """STREAM-style triad on 256 MiB arrays, bytes/s (3 arrays counted once), median."""
    a, b, c = np.zeros(n), np.ones(n), np.full(n, 2.0)
    _triad(a, b, c, 3.0)
    times = []
    for _ in range(max(repeat, 5)):
        start = time.perf_counter()
        _triad(a, b, c, 3.0)
        times.append(time.perf_counter() - start)
    return 3 * a.itemsize * n / statistics.median(times)


def plain_read(path, quantities, rows=16):
    """Read ``quantities`` of every level slab by slab into reused buffers (no computing)."""
    with snapshot.open_snapshot(path) as snap:
        for level in snap.levels:
            buffers = SlabBuffers(level, quantities, rows, np.float64)
            for start, stop in slabs(level.storage_shape[0], rows):
                for q in quantities:
                    buffers.read(q, start, stop)


def _fsync(path):
    with open(path, "rb+") as handle:
        os.fsync(handle.fileno())


def plain_write(path, out_path, read, rows=16):
    """Write the 11 source values per point of every level (zeros from a reused buffer) in
    the output chunking of the Dask path (one component, whole planes, about 1 MiB), reading
    the inputs slab by slab first when ``read``; fsync at the end, as the package does."""
    with snapshot.open_snapshot(path) as snap, h5py.File(out_path, "w", rdcc_nbytes=0) as out:
        for level in snap.levels:
            shape = level.storage_shape
            inputs = SlabBuffers(level, SOURCE_INPUTS, rows, np.float64)
            outputs = SlabBuffers(level, SOURCE_OUTPUTS, rows, np.float64)
            g = out.create_group(f"time_levels/{level.label}")
            datasets = {}
            for q in SOURCE_OUTPUTS:
                c = COMPONENTS[q]
                full = ((c,) if c else ()) + shape
                chunks = ((1,) if c else ()) + snapshot.chunk_shape(shape, 8)
                datasets[q] = g.create_dataset(q, full, "f8", chunks=chunks)
            for start, stop in slabs(shape[0], rows):
                if read:
                    for q in SOURCE_INPUTS:
                        inputs.read(q, start, stop)
                for q in SOURCE_OUTPUTS:
                    values = outputs.storage(q, stop - start)
                    values[...] = 0.0
                    datasets[q][..., start:stop, :, :] = values
    _fsync(out_path)
    os.unlink(out_path)


def single_constraints(path, levels):
    """What ``emsource constraints`` does, for every level: read the level whole, then
    ``adm_constraints`` at order 4 with the file's units."""
    from emsource.commands._snapshot_level import read_slice
    from emsource.constraints import adm_constraints

    for k in range(levels):
        d = read_slice(path, k)
        res = adm_constraints(d["gamma"], d["K"], d["E"], d["B"], spacing=d["spacing"], order=4,
                              units=d["units"], valid_mask=d["mask"])
        res.hamiltonian_norms  # noqa: B018 - the norms the command prints
        res.momentum_norms  # noqa: B018
        del d, res


# ------------------------------------------------------------------------------ memory and CPU

def reset_peak_rss():
    """Reset this process's VmHWM to its current RSS (Linux >= 4.0); False if not allowed."""
    try:
        with open("/proc/self/clear_refs", "w") as handle:
            handle.write("5")
        return True
    except OSError:
        return False


def peak_rss_mib():
    """Peak resident memory of this process since start or the last reset (VmHWM)."""
    with open("/proc/self/status") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024  # kB
    return float("nan")


class Sampler:
    """Largest RSS of each of ``pids`` seen every ``interval`` s by a thread (psutil)."""

    def __init__(self, pids, interval):
        self.processes = {pid: psutil.Process(pid) for pid in pids}
        self.interval = interval
        self.largest = dict.fromkeys(pids, 0)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self):
        while not self._stop.is_set():
            for pid, process in self.processes.items():
                try:
                    self.largest[pid] = max(self.largest[pid], process.memory_info().rss)
                except psutil.Error:
                    pass
            self._stop.wait(self.interval)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()


def cpu_seconds(pids):
    out = {}
    for pid in pids:
        times = psutil.Process(pid).cpu_times()
        out[pid] = times.user + times.system
    return out


class Result:
    def __init__(self, what, operation, path, seconds, memory, sampled, cpu, kind):
        self.what, self.operation, self.path = what, operation, path
        self.seconds, self.memory, self.sampled, self.cpu = seconds, memory, sampled, cpu
        self.kind = kind  # "baseline", "single" or "dask"


def measure(what, operation, path, function, repeat, interval, client=None, kind="single"):
    """Median wall time of ``repeat`` runs; per process (this one first, then the workers) the
    largest VmHWM over the runs (reset before each), the largest sampled RSS and the median CPU
    seconds."""
    addresses = client.run(os.getpid) if client is not None else {}  # address -> pid
    worker_pids = [addresses[a] for a in sorted(addresses)]
    pids = [os.getpid()] + worker_pids
    times, hwm, sampled, cpu = [], [], [], []
    for _ in range(repeat):
        ok = reset_peak_rss()
        if client is not None:
            ok = all(client.run(reset_peak_rss).values()) and ok
        before = cpu_seconds(pids)
        with Sampler(pids, interval) as sampler:
            start = time.perf_counter()
            function()
            times.append(time.perf_counter() - start)
        after = cpu_seconds(pids)
        peaks = [peak_rss_mib()]
        if client is not None:
            by_address = client.run(peak_rss_mib)
            peaks += [by_address[a] for a in sorted(addresses)]
        hwm.append(peaks if ok else [float("nan")] * len(pids))
        sampled.append([sampler.largest[p] / MIB for p in pids])
        cpu.append([after[p] - before[p] for p in pids])
    result = Result(what, operation, path, statistics.median(times),
                    [max(column) for column in zip(*hwm)],
                    [max(column) for column in zip(*sampled)],
                    [statistics.median(column) for column in zip(*cpu)], kind)
    print(f"  {what:<40} {result.seconds:8.2f} s   peak RSS {fmt(result.memory)} MiB",
          flush=True)
    return result


def fmt(values):
    return ", ".join(f"{v:.0f}" for v in values)


def fmt1(values):
    return ", ".join(f"{v:.1f}" for v in values)


# ----------------------------------------------------------------------------------------- main

def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--points", type=int, default=256, help="points per axis (default 256)")
    parser.add_argument("--levels", type=int, default=4, help="time levels (default 4)")
    parser.add_argument("--repeat", type=int, default=3, help="timed runs each (default 3)")
    parser.add_argument("--repeat-constraints", type=int, default=None,
                        help="timed runs of the constraints, the slowest (default: --repeat)")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    parser.add_argument("--operations", nargs="+", choices=OPERATIONS, default=list(OPERATIONS))
    parser.add_argument("--block-mib", type=float, default=256,
                        help="values per task in MiB (default 256, the package default)")
    parser.add_argument("--directory", default=None,
                        help="where to write the snapshot and outputs (default: system temp)")
    parser.add_argument("--file", default=None,
                        help="keep the snapshot at this path, and reuse it if it matches")
    parser.add_argument("--sample-ms", type=float, default=50.0,
                        help="RSS sampling interval in ms (default 50)")
    args = parser.parse_args(argv)

    import dask
    from distributed import Client, LocalCluster

    from emsource.distributed.constraints import constraint_norms
    from emsource.distributed.integrals import integrate_series
    from emsource.distributed.sources import compute_sources_dask
    from emsource.integrals import integrate_snapshot
    from emsource.snapshot.sources_pipeline import compute_sources

    n, nlevels = args.points, args.levels
    points = n**3 * nlevels
    block = int(args.block_mib * MIB)
    interval = args.sample_ms / 1000
    repeats = dict.fromkeys(OPERATIONS, args.repeat)
    if args.repeat_constraints is not None:
        repeats["constraints"] = args.repeat_constraints
    memory = psutil.virtual_memory()
    print(f"bench_dask {datetime.datetime.now():%Y-%m-%d %H:%M}: {n}^3 x {nlevels} levels = "
          f"{points:.4g} points, medians of {args.repeat} (constraints "
          f"{repeats['constraints']}); {os.cpu_count()} cores, "
          f"{memory.total / 2**30:.1f} GiB memory ({memory.available / 2**30:.1f} available); "
          f"load averages {', '.join(f'{x:.2f}' for x in os.getloadavg())} at start")
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}, numba {numba.__version__}, "
          f"h5py {h5py.__version__}, dask {dask.__version__}; blocks of {args.block_mib:g} MiB of "
          f"values per task")
    with tempfile.TemporaryDirectory(dir=args.directory, prefix="emsource-bench-dask-") as directory:
        path = args.file or os.path.join(directory, "series.h5")
        if args.file and matching_file(path, n, nlevels):
            print(f"reusing {path}")
        else:
            began = time.perf_counter()
            write_series(path, n, nlevels)
            _fsync(path)
            print(f"wrote {path} in {time.perf_counter() - began:.0f} s")
        size = os.path.getsize(path)
        with h5py.File(path, "r") as f:
            chunks = f["time_levels/0/spatial_metric"].chunks[1]
        print(f"file {size / 2**30:.2f} GiB ({size / 1e9:.2f} GB), chunks (1, {chunks}, {n}, {n}) "
              f"= {chunks * n * n * 8 / MIB:.2f} MiB; inputs read: sources and integrate "
              f"{12 * 8 * points / 1e9:.2f} GB, constraints {18 * 8 * points / 1e9:.2f} GB")
        small = os.path.join(directory, "warm.h5")
        write_series(small, 16, 2)
        out = os.path.join(directory, "out.h5")
        input_bytes = {"sources": 12 * 8 * points, "integrate": 12 * 8 * points,
                       "constraints": 18 * 8 * points, "read12": 12 * 8 * points,
                       "read18": 18 * 8 * points}

        single = {
            "sources": lambda p: compute_sources(p, out, force=True),
            "integrate": lambda p: integrate_snapshot(p),
            "constraints": lambda p: single_constraints(p, nlevels if p == path else 2),
        }
        distributed = {
            "sources": lambda p: compute_sources_dask(p, out, force=True, block_bytes=block),
            "integrate": lambda p: integrate_series(p, block_bytes=block),
            "constraints": lambda p: constraint_norms(p, block_bytes=block),
        }
        results = []
        triad = triad_bandwidth(args.repeat)
        print(f"triad {triad / 1e9:.1f} GB/s (this process, {numba.get_num_threads()} threads)")
        print("baselines and single process (peak RSS: this process)", flush=True)
        results.append(measure("plain read, 12 values/point", "read12", path,
                               lambda: plain_read(path, SOURCE_INPUTS), args.repeat, interval,
                               kind="baseline"))
        if "constraints" in args.operations:
            results.append(measure("plain read, 18 values/point", "read18", path,
                                   lambda: plain_read(path, CONSTRAINT_INPUTS), args.repeat,
                                   interval, kind="baseline"))
        if "sources" in args.operations:
            results.append(measure("plain read 12 + write 11 values/point", "sources", path,
                                   lambda: plain_write(path, out, True), args.repeat, interval,
                                   kind="baseline"))
            results.append(measure("plain write 11 values/point (no read)", "sources", path,
                                   lambda: plain_write(path, out, False), args.repeat, interval,
                                   kind="baseline"))
        for operation in args.operations:
            single[operation](small)  # loads the kernels in this process
            results.append(measure(f"{operation}, single process", operation, path,
                                   lambda: single[operation](path), repeats[operation], interval))
        for workers in args.workers:
            threads = max(1, (os.cpu_count() or 1) // workers)
            print(f"Dask, {workers} worker(s) x 1 thread, Numba {threads} thread(s) each "
                  "(peak RSS: this process, then each worker)", flush=True)
            with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                              dashboard_address=None, silence_logs=50,
                              env={"NUMBA_NUM_THREADS": str(threads)}) as cluster, \
                    Client(cluster) as client:
                for operation in args.operations:
                    distributed[operation](small)  # the workers import emsource, load kernels
                    results.append(measure(f"{operation}, Dask {workers} worker(s)", operation,
                                           path, lambda: distributed[operation](path),
                                           repeats[operation], interval, client=client,
                                           kind="dask"))
        if os.path.exists(out):
            os.unlink(out)

    reference = {r.operation: r.seconds for r in results if r.kind == "single"}
    read = {r.operation: r.seconds for r in results if r.operation in ("read12", "read18")}
    print(f"\nload averages {', '.join(f'{x:.2f}' for x in os.getloadavg())} at the end; "
          f"{datetime.datetime.now():%H:%M}")
    print(f"{'what':<40} {'median s':>8} {'MB/s':>6} {'Mpts/s':>6} {'vs read':>7} "
          f"{'vs single':>9}  {'CPU s (this, workers)':<22} peak RSS MiB: VmHWM | sampled")
    for r in results:
        nbytes = input_bytes["read18" if r.operation in ("constraints", "read18") else "read12"]
        plain = read["read18" if r.operation in ("constraints", "read18") else "read12"]
        versus = f"{reference[r.operation] / r.seconds:9.2f}" \
            if r.operation in reference and r.kind == "dask" else f"{'':>9}"
        print(f"{r.what:<40} {r.seconds:8.2f} {nbytes / r.seconds / 1e6:6.0f} "
              f"{points / r.seconds / 1e6:6.2f} {plain / r.seconds:7.2f} {versus}  "
              f"{fmt1(r.cpu):<22} {fmt(r.memory)} | {fmt(r.sampled)}")
    print("MB/s: input bytes read per second; vs read: time of the plain read of the same bytes / "
          "time (< 1: slower than reading); vs single: single-process time / Dask time (> 1: "
          "Dask faster)")


if __name__ == "__main__":
    main()
