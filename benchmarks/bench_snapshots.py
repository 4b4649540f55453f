"""Throughput and memory of ``emsource sources`` on a snapshot file, against plain HDF5 reads.

Run:  python benchmarks/bench_snapshots.py [--points 256] [--repeat 3] [--memory-limit 512]

It writes a float64 snapshot of points^3 (spatial_metric, electric_field, magnetic_field:
12 values per point, 1.5 GiB at 256^3) into a temporary directory, then measures in the same
run, medians of ``repeat`` repetitions:

  (a) plain read: the same three datasets read slab by slab (the same slab size the pipeline
      uses) into reused NumPy buffers with h5py ``read_direct``: the yardstick;
  (b) plain read + write: (a) plus writing 11 values per point to a new chunked file, the I/O
      that any sources pipeline must do, without computing anything;
  (c) the pipeline, :func:`emsource.snapshot.sources_pipeline.compute_sources` with the given memory limit;
  (d) the same writing only energy_density and momentum_density (4 of the 11 values per point);

and reports wall time, MB/s of input (1 MB = 1e6 bytes), the ratios (c)/(a) and (c)/(b), and
peak memory: tracemalloc's peak of Python and NumPy allocations during (c) (the slab buffers),
and the peak resident set size of a child process running ``emsource sources``, minus that of
the same command on an 8^3 file (the interpreter, NumPy, h5py and Numba's kernels alone).
The file stays in the page cache (24 GiB machine), so these are cached-I/O figures; the machine is
shared and noisy, so read the ratios.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc

import h5py
import numpy as np

from emsource import snapshot
from emsource.grid import UniformGrid
from emsource.quantities import COMPONENTS
from emsource.snapshot.slabs import SlabBuffers, slabs
from emsource.snapshot.sources_pipeline import (SOURCE_OUTPUTS, compute_sources, plan_rows)

INPUTS = ("spatial_metric", "electric_field", "magnetic_field")


def write_snapshot(path, n, seed=7):
    """A flat-ish metric and random fields, written plane by plane."""
    rng = np.random.default_rng(seed)
    shape = (n, n, n)
    with h5py.File(path, "w") as f:
        snapshot.write_root_attributes(f)
        g = f.create_group("time_levels/0")
        snapshot.write_level_attributes(g, time=0.0, grid=UniformGrid(shape, (0.0,) * 3, (1.0 / n,) * 3),
                                  units="gaussian", axis_order="xyz")
        data = {q: g.create_dataset(q, (c,) + shape, "f8") for q, c in zip(INPUTS, (6, 3, 3))}
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


def plain_read(path, rows):
    with snapshot.open_snapshot(path) as snap:
        level = snap.levels[0]
        buffers = SlabBuffers(level, INPUTS, rows, np.float64)
        for start, stop in slabs(level.storage_shape[0], rows):
            for q in INPUTS:
                buffers.read(q, start, stop)


def plain_read_write(path, out_path, rows):
    with snapshot.open_snapshot(path) as snap:
        level = snap.levels[0]
        buffers = SlabBuffers(level, INPUTS, rows, np.float64)
        outputs = SlabBuffers(level, SOURCE_OUTPUTS, rows, np.float64)
        shape = level.storage_shape
        with h5py.File(out_path, "w", rdcc_nbytes=0) as out:
            datasets = {}
            for q in SOURCE_OUTPUTS:
                c = COMPONENTS[q]
                full = ((c,) if c else ()) + shape
                chunks = ((1,) if c else ()) + (min(rows, snapshot.chunk_shape(shape, 8)[0]),) + shape[1:]
                datasets[q] = out.create_dataset(q, full, "f8", chunks=chunks)
            for start, stop in slabs(shape[0], rows):
                for q in INPUTS:
                    buffers.read(q, start, stop)
                for q in SOURCE_OUTPUTS:
                    a = outputs.storage(q, stop - start)
                    a[...] = 0.0
                    if a.ndim == 4:
                        datasets[q][:, start:stop] = a
                    else:
                        datasets[q][start:stop] = a
    os.unlink(out_path)


_PEAK_RSS = ("import sys\n"
             "from emsource.cli import main\n"
             "main(sys.argv[1:])\n"
             "status = open('/proc/self/status').read().split('VmHWM:')[1]\n"
             "print(int(status.split()[0]))\n")


def child_peak_rss(*arguments):
    """Peak RSS (bytes, VmHWM) of a fresh interpreter that runs the CLI with ``arguments``.

    VmHWM belongs to the new process image; getrusage's ru_maxrss would not do here, because
    Linux carries the parent's high-water mark across fork and exec.
    """
    result = subprocess.run([sys.executable, "-c", _PEAK_RSS, *arguments], check=True,
                            capture_output=True, text=True)
    return int(result.stdout.split()[-1]) * 1024  # kB


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--points", type=int, default=256, help="grid points per axis (default 256)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--memory-limit", type=float, default=512.0, help="MiB (default 512)")
    args = parser.parse_args()
    limit = int(args.memory_limit * 2**20)
    n = args.points
    with tempfile.TemporaryDirectory(prefix="emsource-bench-") as directory:
        path = os.path.join(directory, "snapshot.h5")
        out_path = os.path.join(directory, "sources.h5")
        began = time.perf_counter()
        write_snapshot(path, n)
        input_bytes = 12 * 8 * n**3
        print(f"snapshot {n}^3 float64, {input_bytes / 2**20:.0f} MiB of inputs "
              f"(written in {time.perf_counter() - began:.1f} s); memory limit {args.memory_limit:g} MiB")
        with snapshot.open_snapshot(path) as snap:
            rows = plan_rows(snap.levels[0], np.float64, limit)
        compute_sources(path, out_path, memory_limit=limit, force=True)  # warm-up: kernels, cache
        plain_read(path, rows)
        t_read = median_seconds(lambda: plain_read(path, rows), args.repeat)
        t_copy = median_seconds(lambda: plain_read_write(path, out_path, rows), args.repeat)
        t_pipe = median_seconds(lambda: compute_sources(path, out_path, memory_limit=limit,
                                                        force=True), args.repeat)
        t_two = median_seconds(lambda: compute_sources(
            path, out_path, memory_limit=limit, force=True,
            outputs=("energy_density", "momentum_density")), args.repeat)
        tracemalloc.start()
        report = compute_sources(path, out_path, memory_limit=limit, force=True)
        _, traced_peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        os.unlink(out_path)
        rss = child_peak_rss("sources", path, "-o", out_path, "--memory-limit",
                             str(args.memory_limit), "--force", "--quiet")
        os.unlink(out_path)
        # the same interpreter running a tiny problem: libraries and compiled kernels loaded
        small = os.path.join(directory, "small.h5")
        write_snapshot(small, 8)
        baseline = child_peak_rss("sources", small, "-o", out_path, "--quiet")
    mb = input_bytes / 1e6
    print(f"slab: {report.rows_per_slab} planes of {n}x{n}, {report.slabs} slabs; "
          f"medians of {args.repeat}")
    print(f"  (a) plain read            {t_read:8.3f} s  {mb / t_read:8.0f} MB/s of input")
    print(f"  (b) plain read + write    {t_copy:8.3f} s  {mb / t_copy:8.0f} MB/s of input")
    print(f"  (c) emsource sources      {t_pipe:8.3f} s  {mb / t_pipe:8.0f} MB/s of input")
    print(f"  (d) sources, rho and S_i  {t_two:8.3f} s  {mb / t_two:8.0f} MB/s of input")
    print(f"  ratio (c)/(a) = {t_read / t_pipe:.2f}   (c)/(b) = {t_copy / t_pipe:.2f}   "
          f"(d)/(a) = {t_read / t_two:.2f}")
    print(f"  peak NumPy/Python memory during (c) (tracemalloc): {traced_peak / 2**20:.1f} MiB "
          f"(limit {args.memory_limit:g} MiB)")
    print(f"  peak RSS of a child running 'emsource sources': {rss / 2**20:.0f} MiB; the same on "
          f"an 8^3 file: {baseline / 2**20:.0f} MiB; difference {(rss - baseline) / 2**20:.0f} MiB "
          f"(limit {args.memory_limit:g} MiB)")


if __name__ == "__main__":
    main()
