"""Throughput of ``emsource sources`` on snapshot files, against a plain read + write of the same bytes.

Run:  python benchmarks/bench_snapshots.py [--points 256] [--gzip-points 128] [--repeat 3]
                                            [--memory-limit 512] [--cases native,mapped,native-gzip,mapped-gzip]

Four cases, each measured in the same run as its own yardstick:

  native         the package's layout: spatial_metric (6, n, n, n), electric_field and
                 magnetic_field (3, n, n, n), contiguous datasets, axis order "xyz";
  mapped         an invented foreign layout read through a layout mapping: one dataset per
                 component ("metric/g_xx", ..., "fields/E_x", ...), axis order "zyx";
  native-gzip,   the same two files with every dataset chunked (one component, about 1 MiB per
  mapped-gzip    chunk) and gzip-compressed (level 4), and ``--compress`` on the output.

For each case, ``repeat`` repetitions of (p), (b) and (b) with durability in turn (medians):

  (p) the pipeline, :func:`emsource.snapshot.sources_pipeline.compute_sources` (the same work as
      ``emsource sources``), with its stages: read (inputs into the slab buffers), kernel
      (sources, energy range, excised points), write (outputs into the HDF5 file, compression
      included) and finish (closing the file, ``fsync``, rename);
  (b) the yardstick: h5py reads of the same input datasets, slab by slab with the pipeline's slab
      size, into reused buffers (``read_direct``), and h5py writes of the same output bytes (the
      pipeline's own outputs, read beforehand from an uncompressed copy outside the timer) into
      datasets of the same shape, chunking and compression, then the file closed. Timed twice:
      "without durability" (the data end in the page cache), and "with the same durability" as
      the pipeline's all-or-nothing output: written under a temporary name, ``fsync``-ed and
      renamed, as :func:`emsource.snapshot.writing.atomic_output` does.

The goal's figure is (b, with the same durability) / (p): a pipeline that promises an output that
is complete or absent after a crash must pay the flush to disk, and a yardstick that leaves its
bytes in the page cache measures a different job. The ratio without durability is printed beside
it. Outputs are removed before every run (outside the timer) in both, so neither pays for
freeing an old output's pages. The files stay in the page cache (24 GiB machine), so these are
cached-read figures. The gzip cases also report zlib's compression and decompression rates on
this machine (level 4, one thread, 1 MiB of the real outputs), the floor of any gzip writer here.

For the native case, peak memory too: tracemalloc's peak of Python and NumPy allocations during
(p), and the peak resident set size of a child process running ``emsource sources``, minus that
of the same command on an 8^3 file (the interpreter, NumPy, h5py and Numba's kernels alone).
The machine is shared and noisy: read the ratios within one run, and the load printed with them.
"""

from __future__ import annotations

import argparse
import datetime
import os
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
import zlib

import h5py
import numpy as np

from emsource import snapshot
from emsource.grid import UniformGrid
from emsource.quantities import COMPONENTS
from emsource.snapshot.reading import CHUNK_CACHE_BYTES
from emsource.snapshot.slabs import slabs
from emsource.snapshot.sources_pipeline import SOURCE_OUTPUTS, compute_sources

INPUTS = ("spatial_metric", "electric_field", "magnetic_field")
#: Component dataset names of the invented foreign layout (x, y, z order of the components).
FOREIGN = {"spatial_metric": [f"metric/g_{c}" for c in ("xx", "xy", "xz", "yy", "yz", "zz")],
           "electric_field": [f"fields/E_{c}" for c in "xyz"],
           "magnetic_field": [f"fields/B_{c}" for c in "xyz"]}
GZIP_LEVEL = 4  # h5py's default for compression="gzip", which the pipeline uses


def _fields(rng, rows, n):
    """A flat-ish metric and random fields over ``rows`` planes, (x, y, z) order."""
    gamma = 0.05 * rng.standard_normal((6, rows, n, n))
    gamma[[0, 3, 5]] += 1.0
    return {"spatial_metric": gamma, "electric_field": rng.standard_normal((3, rows, n, n)),
            "magnetic_field": rng.standard_normal((3, rows, n, n))}


def _chunked(shape, compression):
    """Dataset options: contiguous, or ~1 MiB chunks of one component (the package's rule)."""
    if not compression:
        return {}
    return {"chunks": snapshot.chunk_shape(shape, 8), "compression": compression,
            "compression_opts": GZIP_LEVEL}


def write_native(path, n, compression=None, seed=7):
    """Native snapshot, written plane block by plane block (bounded memory)."""
    rng = np.random.default_rng(seed)
    shape = (n, n, n)
    with h5py.File(path, "w") as f:
        snapshot.write_root_attributes(f)
        g = f.create_group("time_levels/0")
        snapshot.write_level_attributes(g, time=0.0, grid=UniformGrid(shape, (0.0,) * 3, (1.0 / n,) * 3),
                                        units="gaussian", axis_order="xyz")
        data = {q: g.create_dataset(q, (c,) + shape, "f8", **_chunked((c,) + shape, compression))
                for q, c in zip(INPUTS, (6, 3, 3))}
        for i in range(0, n, 16):
            rows = min(16, n - i)
            for q, a in _fields(rng, rows, n).items():
                data[q][:, i:i + rows] = a


MAPPING = """mapping_version = 1
axis_order = "zyx"
units = "gaussian"
[time_levels]
pattern = "/steps/{{index}}"
time = {{ attribute = "t" }}
[grid]
spacing = [{h}, {h}, {h}]
origin = [0.0, 0.0, 0.0]
[quantities.spatial_metric]
components = {metric}
[quantities.electric_field]
components = {electric}
[quantities.magnetic_field]
components = {magnetic}
"""


def write_mapped(path, mapping_path, n, compression=None, seed=7):
    """The foreign layout (one dataset per component, stored (z, y, x)) and its mapping."""
    rng = np.random.default_rng(seed)
    shape = (n, n, n)
    with h5py.File(path, "w") as f:
        g = f.create_group("steps/0")
        g.attrs["t"] = 0.0
        data = {name: g.create_dataset(name, shape, "f8", **_chunked(shape, compression))
                for q in INPUTS for name in FOREIGN[q]}
        for i in range(0, n, 16):  # i runs over z, the slowest storage axis
            rows = min(16, n - i)
            for q, a in _fields(rng, rows, n).items():
                for c, name in enumerate(FOREIGN[q]):
                    data[name][i:i + rows] = a[c]
    with open(mapping_path, "w") as m:
        m.write(MAPPING.format(h=1.0 / n, metric=FOREIGN["spatial_metric"],
                               electric=FOREIGN["electric_field"], magnetic=FOREIGN["magnetic_field"]))


def _fsync(path):
    handle = os.open(path, os.O_RDONLY)
    try:
        os.fsync(handle)
    finally:
        os.close(handle)


def plain_read_write(case, reference, out_path, rows, compression, durable):
    """The yardstick (b): seconds of (read, write + close, fsync + rename); their sum is its time
    (reading the pipeline's outputs from the reference file, between the two, is not counted)."""
    clock = time.perf_counter
    t_read = t_write = 0.0
    temporary = out_path + (".partial" if durable else "")
    with h5py.File(case["path"], "r", rdcc_nbytes=CHUNK_CACHE_BYTES) as f, \
            h5py.File(reference, "r") as ref:
        level = f[case["level"]]
        ref_level = ref["time_levels/0"]
        n0 = ref_level["stress_trace"].shape[0]
        plane = int(np.prod(ref_level["stress_trace"].shape[1:]))
        inputs = {q: np.empty(COMPONENTS[q] * rows * plane) for q in INPUTS}
        outputs = {q: np.empty(max(COMPONENTS[q], 1) * rows * plane) for q in SOURCE_OUTPUTS}
        began = clock()
        out = h5py.File(temporary, "w", rdcc_nbytes=0)
        group = out.create_group("time_levels/0")
        datasets = {q: group.create_dataset(q, ref_level[q].shape, "f8", chunks=ref_level[q].chunks,
                                            compression=compression,
                                            compression_opts=GZIP_LEVEL if compression else None)
                    for q in SOURCE_OUTPUTS}
        t_write += clock() - began
        for start, stop in slabs(n0, rows):
            began = clock()
            for q in INPUTS:
                buffer = inputs[q][:COMPONENTS[q] * (stop - start) * plane].reshape(
                    (COMPONENTS[q], stop - start) + ref_level["stress_trace"].shape[1:])
                if case["mapped"]:
                    for c, name in enumerate(FOREIGN[q]):
                        level[name].read_direct(buffer, source_sel=np.s_[start:stop], dest_sel=np.s_[c])
                else:
                    level[q].read_direct(buffer, source_sel=np.s_[:, start:stop])
            t_read += clock() - began
            slab = {}
            for q in SOURCE_OUTPUTS:  # the pipeline's output values, outside the timer
                lead = (COMPONENTS[q],) if COMPONENTS[q] else ()
                shape = lead + (stop - start,) + ref_level[q].shape[-2:]
                slab[q] = outputs[q][:int(np.prod(shape))].reshape(shape)
                ref_level[q].read_direct(slab[q], source_sel=np.s_[..., start:stop, :, :])
            began = clock()
            for q in SOURCE_OUTPUTS:
                datasets[q][..., start:stop, :, :] = slab[q]
            t_write += clock() - began
        began = clock()
        out.close()
        t_write += clock() - began
    began = clock()
    if durable:
        _fsync(temporary)
        os.replace(temporary, out_path)
    t_finish = clock() - began
    return t_read, t_write, t_finish


def interleaved_runs(functions, repeat, cleanup, stage_totals):
    """Run each of ``functions`` once per repetition, in turn (so that a change of the machine's
    load during the run falls on all of them alike); per function the median total, the
    per-stage medians, the list of totals and the median CPU share. Where ``stage_totals`` is
    true for a function, its total is the sum of the stages it returns, not its wall time."""
    runs = [[] for _ in functions]
    for _ in range(repeat):
        for function, record in zip(functions, runs):
            cleanup()
            cpu = sum(os.times()[:2])
            began = time.perf_counter()
            stages = function()
            wall = time.perf_counter() - began
            record.append((wall, stages, (sum(os.times()[:2]) - cpu) / wall))
    cleanup()
    results = []
    for record, counted in zip(runs, stage_totals):
        # the yardstick's own time is the sum of its stages: its wall time also holds the
        # reading of the reference outputs, which is not part of the job it stands for
        totals = [sum(r[1]) if counted else r[0] for r in record]
        stages = tuple(statistics.median(r[1][i] for r in record) for i in range(len(record[0][1])))
        results.append((statistics.median(totals), stages, totals,
                        statistics.median(r[2] for r in record)))
    return results


def zlib_rates(reference):
    """MB/s of zlib level-4 compression and of decompression on one thread, up to 8 MiB of outputs
    in 1 MiB pieces (the chunk size of the outputs)."""
    with h5py.File(reference, "r") as ref:
        stress = ref["time_levels/0/spatial_stress"]
        plane = int(np.prod(stress.shape[2:])) * 8
        planes = min(stress.shape[1], -(-8 * 2**20 // (6 * plane)))
        sample = stress[:, :planes].tobytes()[:8 * 2**20]  # the real outputs, not a repeated plane
    pieces = [sample[i:i + 2**20] for i in range(0, len(sample), 2**20)]
    began = time.perf_counter()
    packed = [zlib.compress(p, GZIP_LEVEL) for p in pieces]
    t_compress = time.perf_counter() - began
    began = time.perf_counter()
    for p in packed:
        zlib.decompress(p)
    t_decompress = time.perf_counter() - began
    return len(sample) / 1e6 / t_compress, len(sample) / 1e6 / t_decompress


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


def _load():
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def run_case(name, directory, n, limit, repeat):
    mapped = name.startswith("mapped")
    compression = "gzip" if name.endswith("gzip") else None
    path = os.path.join(directory, f"{name}.h5")
    mapping = os.path.join(directory, f"{name}.toml") if mapped else None
    began = time.perf_counter()
    if mapped:
        write_mapped(path, mapping, n, compression)
    else:
        write_native(path, n, compression)
    written = time.perf_counter() - began
    case = {"path": path, "mapped": mapped, "level": "steps/0" if mapped else "time_levels/0"}
    out_path = os.path.join(directory, f"{name}-sources.h5")
    reference = os.path.join(directory, f"{name}-reference.h5")

    def remove():
        for p in (out_path, out_path + ".partial"):
            if os.path.exists(p):
                os.unlink(p)

    # warm-up (kernels, page cache) and the uncompressed output the yardstick writes again
    report = compute_sources(path, reference, mapping=mapping, memory_limit=limit, force=True)
    rows = report.rows_per_slab

    def pipeline():
        r = compute_sources(path, out_path, mapping=mapping, memory_limit=limit,
                            compression=compression)
        stages = getattr(r, "stage_seconds", None) or {}
        return tuple(stages.get(k, float("nan")) for k in ("read", "kernel", "write", "finish"))

    load_before = _load()
    (t_pipe, s_pipe, all_pipe, cpu_pipe), (t_fast, s_fast, all_fast, cpu_fast), \
        (t_safe, s_safe, all_safe, cpu_safe) = \
        interleaved_runs([pipeline,
                          lambda: plain_read_write(case, reference, out_path, rows, compression, False),
                          lambda: plain_read_write(case, reference, out_path, rows, compression, True)],
                         repeat, remove, stage_totals=(False, True, True))
    ratio_safe = statistics.median(s / p for s, p in zip(all_safe, all_pipe))
    ratio_fast = statistics.median(f / p for f, p in zip(all_fast, all_pipe))
    load_after = _load()
    input_mb = 12 * 8 * n**3 / 1e6
    print(f"\n{name}: {n}^3 float64, {input_mb:.0f} MB of inputs ({os.path.getsize(path) / 1e6:.0f} MB"
          f" in the file, written in {written:.1f} s), slab {rows} planes, "
          f"{len(slabs(n, rows))} slabs; medians of {repeat}; load {load_before} -> {load_after}")
    print(f"  {'':44s} {'total':>8s} {'read':>8s} {'kernel':>8s} {'write':>8s} {'finish':>8s}")
    print(f"  {'(p) emsource sources':44s} {t_pipe:8.3f} " + " ".join(f"{x:8.3f}" for x in s_pipe))
    print(f"  {'(b) read + write, without durability':44s} {t_fast:8.3f} {s_fast[0]:8.3f} "
          f"{'':8s} {s_fast[1]:8.3f} {s_fast[2]:8.3f}")
    print(f"  {'(b) read + write + fsync + rename (goal)':44s} {t_safe:8.3f} {s_safe[0]:8.3f} "
          f"{'':8s} {s_safe[1]:8.3f} {s_safe[2]:8.3f}")
    print(f"  {input_mb / t_pipe:.0f} MB/s of input; ratio (b)/(p) with the same durability "
          f"{ratio_safe:.2f} (goal >= 0.80), without {ratio_fast:.2f} (medians of the ratios "
          f"within each repetition; totals of (p): {', '.join(f'{t:.2f}' for t in all_pipe)} s)")
    print(f"  CPU seconds per wall second (user + system, this process; 2 = both cores, far below 1 "
          f"= the machine is busy with others): (p) {cpu_pipe:.2f}, (b) {cpu_fast:.2f}, "
          f"(b) durable {cpu_safe:.2f}")
    if compression:
        c_rate, d_rate = zlib_rates(reference)
        output_mb = 11 * 8 * n**3 / 1e6
        print(f"  zlib level {GZIP_LEVEL}, one thread: compression {c_rate:.0f} MB/s "
              f"({output_mb / c_rate:.2f} s for the {output_mb:.0f} MB of outputs), "
              f"decompression {d_rate:.0f} MB/s ({input_mb / d_rate:.2f} s for the inputs)")
    result = {"case": name, "safe": ratio_safe, "fast": ratio_fast}
    if name == "native":
        tracemalloc.start()
        compute_sources(path, out_path, memory_limit=limit, force=True)
        _, traced_peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        remove()
        megabytes = str(limit / 2**20)
        rss = child_peak_rss("sources", path, "-o", out_path, "--memory-limit", megabytes, "--quiet")
        remove()
        small = os.path.join(directory, "small.h5")
        write_native(small, 8)
        baseline = child_peak_rss("sources", small, "-o", out_path, "--quiet")
        remove()
        print(f"  peak NumPy/Python memory during (p) (tracemalloc): {traced_peak / 2**20:.1f} MiB; "
              f"peak RSS of 'emsource sources' {rss / 2**20:.0f} MiB, on an 8^3 file "
              f"{baseline / 2**20:.0f} MiB, difference {(rss - baseline) / 2**20:.0f} MiB "
              f"(limit {limit / 2**20:g} MiB)")
    for p in (path, reference):
        os.unlink(p)
    return result


def main():
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--points", type=int, default=256,
                        help="grid points per axis of the uncompressed cases (default 256)")
    parser.add_argument("--gzip-points", type=int, default=128,
                        help="grid points per axis of the gzip cases (default 128: zlib compresses "
                             "about 10-15 MB/s here, so 256^3 would take minutes per run)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--memory-limit", type=float, default=512.0, help="MiB (default 512)")
    parser.add_argument("--cases", default="native,mapped,native-gzip,mapped-gzip")
    args = parser.parse_args()
    limit = int(args.memory_limit * 2**20)
    print(f"bench_snapshots {datetime.datetime.now(datetime.timezone.utc):%Y-%m-%d %H:%M} UTC, "
          f"{os.cpu_count()} cores, load {_load()}, memory limit {args.memory_limit:g} MiB")
    results = []
    with tempfile.TemporaryDirectory(prefix="emsource-bench-", dir=os.environ.get("TMPDIR")) as d:
        for name in args.cases.split(","):
            n = args.gzip_points if name.endswith("gzip") else args.points
            results.append(run_case(name, d, n, limit, args.repeat))
    print("\nsummary: ratio yardstick / pipeline (>= 0.80 is the goal), with the same durability "
          "| without")
    for r in results:
        print(f"  {r['case']:12s} {r['safe']:.2f} | {r['fast']:.2f}")


if __name__ == "__main__":
    main()
