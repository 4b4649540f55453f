"""Kernel calls from several Python threads at once give the results of serial calls.

The kernels release the GIL, so threads really run them concurrently. Numba's "workqueue"
threading layer aborts the process on concurrent parallel launches (Numba documentation, "The
Threading Layers", from memory; measured by the package: exit code 134), so the package
serialises calls there (src/emsource/_threading.py). The same script runs here in this
process (whatever layer Numba picked) and in a subprocess forced onto workqueue.

Results are compared bit for bit: every output value is computed by the same point code from
the same inputs whatever thread or chunk runs it, so a concurrent call may not change a bit.
"""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np

SCRIPT = textwrap.dedent("""
    import sys
    import threading

    import numba
    import numpy as np

    sys.path.insert(0, {tests!r})
    import emsource
    from emsource import _threading
    from emsource.energy_flux import energy_fluxes
    from conftest import random_curved_data

    THREADS, CALLS, GRID = 4, 20, (6, 5, 4)
    rng = np.random.default_rng(20261202)
    # Different data for every call; every third one has a NaN at a call-specific point.
    data = []
    for t in range(THREADS * CALLS):
        arrays = [a.copy() for a in random_curved_data(rng, GRID)]
        bad = None
        if t % 3 == 2:
            bad = (t % GRID[0], (t // 3) % GRID[1], t % GRID[2])
            arrays[3][(1,) + bad] = np.nan
        data.append((arrays, bad))

    def compute(arrays, bad):
        alpha, beta, gamma, E, B = arrays
        if bad is not None:
            try:
                emsource.adm_sources(gamma, E, B)
            except emsource.GridPointError as err:
                return ("error", err.first_index, err.bad_count)
            return ("no error",)
        src = emsource.adm_sources(gamma, E, B)
        T = emsource.stress_energy_4d(alpha, beta, gamma, E, B, index="upper")
        f = energy_fluxes(alpha, beta, gamma, E, B)
        return tuple(a.copy() for a in (*src, T, f.flux))

    # Threads first: in a fresh process the very first launch is concurrent too.
    threaded = [None] * len(data)
    barrier = threading.Barrier(THREADS)

    def worker(w):
        barrier.wait()
        for t in range(w, len(data), THREADS):
            threaded[t] = compute(*data[t])

    threads = [threading.Thread(target=worker, args=(w,)) for w in range(THREADS)]
    for th in threads:
        th.start()
    for th in threads:
        th.join()
    serial = [compute(*d) for d in data]

    mismatches = 0
    for t, (a, b) in enumerate(zip(threaded, serial)):
        if data[t][1] is not None:
            ok = a == b == ("error", data[t][1], 1)
        else:
            ok = a is not None and all(np.array_equal(x, y) for x, y in zip(a, b))
        mismatches += 0 if ok else 1
    layer = numba.threading_layer()
    serialised = _threading.kernel_call() is _threading._LOCK
    print("layer", layer)
    print("serialised", serialised)
    print("calls", len(data), "mismatches", mismatches)
    assert serialised == (layer not in _threading.THREAD_SAFE_LAYERS)
    sys.exit(0 if mismatches == 0 else 1)
""")

TESTS = str(Path(__file__).resolve().parent)


def _run(env_extra):
    env = dict(os.environ)
    env.update(env_extra)
    return subprocess.run([sys.executable, "-c", SCRIPT.format(tests=TESTS)], env=env,
                          capture_output=True, text=True, timeout=600)


def _report(result):
    return dict(line.split(" ", 1) for line in result.stdout.splitlines() if " " in line)


def test_concurrent_calls_equal_serial_calls_in_this_process():
    """Run the script in this interpreter's namespace (default threading layer)."""
    namespace = {"__name__": "threading_script"}
    try:
        exec(compile(SCRIPT.format(tests=TESTS), "threading_script", "exec"), namespace)
    except SystemExit as stop:
        assert stop.code == 0, "threaded results differ from serial ones"


def test_workqueue_layer_is_serialised_and_correct():
    result = _run({"NUMBA_THREADING_LAYER": "workqueue"})
    assert result.returncode == 0, (result.returncode, result.stdout, result.stderr[-3000:])
    report = _report(result)
    assert report["layer"] == "workqueue"      # the layer really was the unsafe one ...
    assert report["serialised"] == "True"      # ... and the package took its lock
    assert report["calls"] == "80 mismatches 0"
    assert "Traceback" not in result.stderr


def test_control_workqueue_without_the_lock_aborts():
    """The control: the same script with the package's guard replaced by a no-op aborts on
    workqueue, so the test above could fail. The barrier sends the four threads into their
    first launches together and each makes 20 more; one overlap is enough for the abort
    (aborted in 3 of 3 trial runs here)."""
    unguarded = SCRIPT.replace(
        "from emsource import _threading\n",
        "from emsource import _threading\n"
        "import contextlib, emsource.sources, emsource.energy_flux\n"
        "_threading.kernel_call = contextlib.nullcontext\n"
        "emsource.sources.kernel_call = emsource.energy_flux.kernel_call = contextlib.nullcontext\n")
    assert unguarded != SCRIPT
    env = dict(os.environ, NUMBA_THREADING_LAYER="workqueue")
    result = subprocess.run([sys.executable, "-c", unguarded.format(tests=TESTS)], env=env,
                            capture_output=True, text=True, timeout=600)
    assert result.returncode != 0
    assert "oncurrent access" in result.stderr, result.stderr[-2000:]
