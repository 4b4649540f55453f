"""Throughput of staggered reads (interpolation to the vertices) against the collocated pipeline.

Run:  python benchmarks/bench_staggered.py [--points 128] [--repeat 5] [--memory-limit 512]

Writes, into a temporary directory, two float64 files of the same grid (points^3 vertices, two
time levels, one dataset per component, flat metric given by the mapping):

  collocated: E and B on the vertices;
  staggered:  E on the edges (n - 1 values along its own axis), B on the faces (padded to n),
              B half a step after E (Yee lattice),

and measures in the same run, medians of ``repeat`` repetitions, for time level 1:

  (a) read: E and B through the mapping, slab by slab (``SlabBuffers``, the pipelines' reader),
      collocated vs staggered at order 2 (space only, and space + time: B from two levels);
  (b) the sources pipeline (:func:`compute_sources`, read + kernel + write), collocated vs
      staggered (space + time), order 2 and order 4;
  (c) yardsticks: a STREAM-style triad a = b + s c over arrays of one component
      (3 x 8 bytes per point), and plain NumPy 2-point averaging of the six stored components
      to the vertices ((a[1:] + a[:-1]) / 2 along the staggered axes, whole arrays in memory).

Ratios staggered / collocated are throughput ratios (collocated time / staggered time): the
target is >= 0.5 for order 2. The machine is shared and noisy; read the ratios, not the times.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time

import h5py
import numpy as np

from emsource.snapshot import open_snapshot
from emsource.snapshot.slabs import SlabBuffers, slab_rows, slabs
from emsource.snapshot.sources_pipeline import compute_sources
from emsource.staggering import centring_offsets

MAPPING = """mapping_version = 1
axis_order = "xyz"
units = "heaviside_lorentz"
interpolation_order = {order}
[time_levels]
pattern = "/frames/f{{index}}"
time = {{ attribute = "t" }}
[grid]
spacing = [0.01, 0.01, 0.01]
origin = [0.0, 0.0, 0.0]
[quantities.spatial_metric]
identity = true
[quantities.electric_field]
components = ["ex", "ey", "ez"]
{e}
[quantities.magnetic_field]
components = ["bx", "by", "bz"]
{b}
"""


def write_files(directory, n, seed=3):
    rng = np.random.default_rng(seed)
    paths = {}
    for kind in ("collocated", "staggered"):
        path = os.path.join(directory, f"{kind}.h5")
        with h5py.File(path, "w") as f:
            for level in range(2):
                g = f.create_group(f"frames/f{level}")
                g.attrs["t"] = 0.004 * level
                for name, centring, trim in (("e", "edge", True), ("b", "face", False)):
                    for c, offset in enumerate(centring_offsets(centring, 3)):
                        shape = tuple(n - 1 if (o and trim and kind == "staggered") else n
                                      for o in offset)
                        g[f"{name}{'xyz'[c]}"] = rng.standard_normal(shape)
        paths[kind] = path
    layouts = {"collocated": ("", ""), "space": ('centring = "edge"', 'centring = "face"'),
               "space_time": ('centring = "edge"', 'centring = "face"\ntime_offset = 0.002')}
    mappings = {}
    for name, (e, b) in layouts.items():
        for order in (2, 4):
            path = os.path.join(directory, f"{name}_{order}.toml")
            with open(path, "w") as handle:
                handle.write(MAPPING.format(order=order, e=e, b=b))
            mappings[name, order] = path
    return paths, mappings


def median_seconds(function, repeat):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def read_fields(path, mapping, memory_limit):
    with open_snapshot(path, mapping) as snap:
        level = snap.levels[1]
        quantities = ("electric_field", "magnetic_field")
        extra = sum(level.source(q).scratch_bytes_per_row for q in quantities)
        rows = slab_rows(level, 6, 8, memory_limit, extra_per_row=extra)
        buffers = SlabBuffers(level, quantities, rows, np.float64)
        for start, stop in slabs(level.storage_shape[0], rows):
            for q in quantities:
                buffers.read(q, start, stop)


def triad(n, repeat):
    b = np.random.default_rng(1).standard_normal(n**3)
    c = np.ones_like(b)
    a = np.empty_like(b)

    def run():
        np.multiply(c, 1.5, out=a)
        np.add(a, b, out=a)
    return median_seconds(run, repeat)


def numpy_averages(path, repeat):
    with h5py.File(path) as f:
        g = f["frames/f1"]
        stored = {k: g[k][()] for k in g}

    def run():
        for name, centring in (("e", "edge"), ("b", "face")):
            for c, offset in enumerate(centring_offsets(centring, 3)):
                a = stored[f"{name}{'xyz'[c]}"]
                for axis, o in enumerate(offset):
                    if o:
                        lo = [slice(None)] * 3
                        hi = [slice(None)] * 3
                        lo[axis], hi[axis] = slice(0, a.shape[axis] - 1), slice(1, None)
                        a = 0.5 * (a[tuple(lo)] + a[tuple(hi)])
    return median_seconds(run, repeat)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, default=128, help="vertices per axis (default 128)")
    parser.add_argument("--repeat", type=int, default=5, help="repetitions (median; default 5)")
    parser.add_argument("--memory-limit", type=float, default=512, help="MiB (default 512)")
    args = parser.parse_args()
    n, repeat, limit = args.points, args.repeat, int(args.memory_limit * 2**20)
    with tempfile.TemporaryDirectory() as directory:
        paths, mappings = write_files(directory, n)
        coll, stag = paths["collocated"], paths["staggered"]
        # warm-up: compile and load the kernels, fill the page cache
        read_fields(stag, mappings["space_time", 4], limit)
        compute_sources(stag, os.path.join(directory, "w.h5"), mapping=mappings["space", 2],
                        levels=[1], force=True)
        out = os.path.join(directory, "out.h5")
        megabytes = 6 * 8 * n**3 / 1e6
        print(f"grid {n}^3 vertices, float64, E and B (6 values per point, {megabytes:.0f} MB "
              f"per level), memory limit {args.memory_limit:g} MiB, median of {repeat}")
        t_triad = triad(n, repeat)
        t_numpy = numpy_averages(stag, repeat)
        print(f"  STREAM-style triad, one component  {t_triad * 1e3:9.1f} ms")
        print(f"  plain NumPy 2-point averages (6 components in memory) {t_numpy * 1e3:9.1f} ms"
              f"  ({t_numpy / t_triad / 6:.2f} triads per component)")
        rows = []
        t_read = median_seconds(lambda: read_fields(coll, mappings["collocated", 2], limit), repeat)
        rows.append(("read E, B: collocated", t_read, t_read))
        for layout in ("space", "space_time"):
            for order in (2, 4):
                t = median_seconds(lambda: read_fields(stag, mappings[layout, order], limit),
                                   repeat)
                rows.append((f"read E, B: staggered {layout}, order {order}", t, t_read))

        def pipeline(path, mapping):
            return lambda: compute_sources(path, out, mapping=mapping, levels=[1], force=True,
                                           memory_limit=limit)
        t_pipe = median_seconds(pipeline(coll, mappings["collocated", 2]), repeat)
        rows.append(("sources pipeline: collocated", t_pipe, t_pipe))
        for layout in ("space", "space_time"):
            for order in (2, 4):
                t = median_seconds(pipeline(stag, mappings[layout, order]), repeat)
                rows.append((f"sources pipeline: staggered {layout}, order {order}", t, t_pipe))
        print(f"  {'what':<48} {'time ms':>9} {'MB/s':>8} {'throughput vs collocated':>25}")
        for name, t, reference in rows:
            print(f"  {name:<48} {t * 1e3:9.1f} {megabytes / t:8.0f} {reference / t:25.2f}")


if __name__ == "__main__":
    main()
