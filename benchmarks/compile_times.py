"""Cold compilation time of the kernels, per kernel and signature, in an empty Numba cache.

Run:  python benchmarks/compile_times.py [--cases sources,conservation,strided,mixed,constraints]

Before Numba is imported, ``NUMBA_CACHE_DIR`` is pointed at a new empty directory (removed at
the end), so every kernel compiles as on a user's first run. Each case calls a public function
once on a small grid (float64):

  sources        ``adm_sources`` on contiguous arrays
  conservation   ``conservation_residual`` on contiguous arrays, supplied time derivatives
  strided        the same on arrays stored z-fastest and seen through transposed views (the
                 snapshot layout with axes in the order z, y, x): every input strided (the
                 wrapper hands them to the kernels with the axes reversed, so they share the
                 contiguous specialisation)
  mixed          the same with only E, B and their time derivatives strided (another mix of
                 contiguous and strided inputs: the strided specialisation)
  constraints    ``adm_constraints`` on contiguous arrays

Every compilation of a dispatcher is recorded through Numba's event API ("numba:compile");
the table lists the outermost ones (a kernel, with the point and column functions compiled
inside it counted in its time) with wall and CPU seconds. On a shared machine the CPU
seconds of this process are the steadier figure; the load average is printed beside them.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time

CASES = ("sources", "conservation", "strided", "mixed", "constraints")


def _flat_data(grid, rng, np):
    gamma = np.zeros((6,) + grid)
    gamma[[0, 3, 5]] = 1.0
    return {"alpha": np.ones(grid), "beta": np.zeros((3,) + grid), "gamma": gamma,
            "K": np.zeros((6,) + grid), "E": rng.standard_normal((3,) + grid),
            "B": rng.standard_normal((3,) + grid), "dt_E": np.zeros((3,) + grid),
            "dt_B": np.zeros((3,) + grid), "dt_gamma": np.zeros((6,) + grid)}


def _z_fastest(a, np):
    """The values of ``a`` (components first, grid axes x, y, z) stored as (components, z, y, x)
    and seen through a transposed view with axes (components, x, y, z): strided, x fastest."""
    lead = a.ndim - 3
    stored = np.ascontiguousarray(np.moveaxis(a, (lead, lead + 2), (lead + 2, lead)))
    return np.moveaxis(stored, (lead, lead + 2), (lead + 2, lead))


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", default=",".join(CASES),
                        help=f"comma-separated subset of {', '.join(CASES)} (default: all)")
    parser.add_argument("--points", type=int, default=10, help="points per axis (default 10)")
    args = parser.parse_args(argv)
    cases = [c for c in args.cases.split(",") if c]
    unknown = sorted(set(cases) - set(CASES))
    if unknown:
        parser.error(f"--cases: unknown case(s) {', '.join(unknown)}; expected some of "
                     f"{', '.join(CASES)}")
    if "numba" in sys.modules:
        raise RuntimeError("compile_times must set NUMBA_CACHE_DIR before numba is imported")
    cache = tempfile.mkdtemp(prefix="emsource-cold-cache-")
    os.environ["NUMBA_CACHE_DIR"] = cache
    try:
        return _run(cases, args.points)
    finally:
        shutil.rmtree(cache, ignore_errors=True)


def _run(cases, n):
    import numba
    import numpy as np
    from numba.core import event

    import emsource
    from emsource.conservation import conservation_residual
    from emsource.constraints import adm_constraints

    records = []
    depth = [0]

    class Outermost(event.Listener):
        def on_start(self, ev):
            depth[0] += 1
            if depth[0] == 1:
                self.began = (time.perf_counter(), time.process_time())

        def on_end(self, ev):
            depth[0] -= 1
            if depth[0] == 0:
                wall, cpu = time.perf_counter(), time.process_time()
                dispatcher = ev.data["dispatcher"]
                kinds = [getattr(t, "layout", "") for t in ev.data["args"]]
                layouts = " ".join(f"{kinds.count(x)}{x}" for x in "CFA" if x in kinds)
                records.append((current[0], dispatcher.py_func.__name__, layouts,
                                wall - self.began[0], cpu - self.began[1]))

    current = [""]
    rng = np.random.default_rng(0)
    grid = (n, n, n)
    d = _flat_data(grid, rng, np)
    calls = {
        "sources": lambda: emsource.adm_sources(d["gamma"], d["E"], d["B"]),
        "conservation": lambda: conservation_residual(
            d["alpha"], d["beta"], d["gamma"], d["K"], d["E"], d["B"], spacing=0.1,
            dt_E=d["dt_E"], dt_B=d["dt_B"], dt_gamma=d["dt_gamma"]),
        "strided": lambda: conservation_residual(
            *(_z_fastest(d[k], np) for k in ("alpha", "beta", "gamma", "K", "E", "B")),
            spacing=0.1, dt_E=_z_fastest(d["dt_E"], np), dt_B=_z_fastest(d["dt_B"], np),
            dt_gamma=_z_fastest(d["dt_gamma"], np)),
        "mixed": lambda: conservation_residual(
            d["alpha"], d["beta"], d["gamma"], d["K"], _z_fastest(d["E"], np),
            _z_fastest(d["B"], np), spacing=0.1, dt_E=_z_fastest(d["dt_E"], np),
            dt_B=_z_fastest(d["dt_B"], np), dt_gamma=d["dt_gamma"]),
        "constraints": lambda: adm_constraints(d["gamma"], d["K"], d["E"], d["B"], spacing=0.1),
    }
    print(f"numba {numba.__version__}, numpy {np.__version__}, {n}^3 float64, empty cache; "
          f"load average before: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    listener = Outermost()
    with event.install_listener("numba:compile", listener):
        for case in cases:
            current[0] = case
            began = (time.perf_counter(), time.process_time())
            calls[case]()
            print(f"  {case:13s} first call {time.perf_counter() - began[0]:7.1f} s wall "
                  f"{time.process_time() - began[1]:7.1f} s CPU", flush=True)
    print(f"\n{'case':13s} {'kernel':28s} {'arrays':>12s} {'wall s':>8s} {'CPU s':>8s}")
    for case, name, layouts, wall, cpu in records:
        print(f"{case:13s} {name:28s} {layouts:>12s} {wall:8.1f} {cpu:8.1f}")
    print(f"load average after: {' '.join(f'{x:.2f}' for x in os.getloadavg())} "
          f"({os.cpu_count()} CPUs)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
