"""Packed (SIMD) against scalar arithmetic in the machine code of the source and T_ab drivers.

Run:  python benchmarks/vector_code.py

The conformal-source and ideal-MHD drivers (``emsource.kernels.conformal``,
``emsource.kernels.ideal_mhd``) are counted too.

Numba does not show the machine code of kernels loaded from its disk cache, so this script
re-runs itself with ``NUMBA_CACHE_DIR`` set to an empty temporary directory, calls the public
functions on contiguous arrays, padded grid functions, ghost-zone views and component-last data
(float64 and float32), and counts, in every compiled specialisation of the drivers in
``emsource.kernels.sources``, the packed arithmetic instructions on 128-, 256- and 512-bit
registers (``v{add,sub,mul,div,sqrt,fmadd,...}p{s,d}`` on xmm/ymm/zmm) and the scalar ones
(``...s{s,d}``). A driver whose loop vectorised shows packed operations; one that did not
shows scalar operations only. See DEVELOPERS.md "Vectorised point loops".
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import tempfile

ARITHMETIC = r"v(?:add|sub|mul|div|sqrt|f[n]?m(?:add|sub)\d*)"


def counts(assembly):
    packed = {width: len(re.findall(ARITHMETIC + r"p[sd]\s+[^\n]*%" + width, assembly))
              for width in ("xmm", "ymm", "zmm")}
    scalar = len(re.findall(ARITHMETIC + r"s[sd]\s", assembly))
    return packed, scalar


def measure():
    import numpy as np

    import emsource
    from emsource.grid_arrays import grid_function_like
    from emsource.conformal import conformal_sources
    from emsource.ideal_mhd import VELOCITY_KINDS, ideal_mhd_fields
    from emsource.kernels import conformal, ideal_mhd, sources
    from emsource.metric_forms import DECOMPOSITIONS
    from emsource.kernels._compile import _SHARED_BY_SIGNATURE

    for dtype in (np.float64, np.float32):
        rng = np.random.default_rng(0)
        grid = (12, 12, 12)
        gamma = np.zeros((6,) + grid, dtype)
        gamma[[0, 3, 5]] = 1
        alpha = np.ones(grid, dtype)
        beta = np.zeros((3,) + grid, dtype)
        E, B = (rng.standard_normal((3,) + grid).astype(dtype) for _ in range(2))
        ghost = (slice(None),) + (slice(2, -2),) * 3
        padded = [grid_function_like(a) for a in (gamma, E, B)]
        for p, a in zip(padded, (gamma, E, B)):
            p[...] = a
        emsource.adm_sources(gamma, E, B)
        for field_index in ("lower", "densitized"):  # one driver per input form
            emsource.adm_sources(gamma, E, B, field_index=field_index)
        emsource.stress_energy_4d(alpha, beta, gamma, E, B, index="upper")
        emsource.adm_sources(*padded)
        emsource.adm_sources(gamma[ghost], E[ghost], B[ghost])
        emsource.adm_sources(*(np.moveaxis(a, 0, -1) for a in (gamma, E, B)),
                             layout="component_last")
        emsource.stress_energy_4d(alpha, beta, gamma, E, B)
        emsource.stress_energy_4d(alpha[ghost[1:]], beta[ghost], gamma[ghost], E[ghost], B[ghost])
        emsource.stress_energy_4d(alpha, *(np.moveaxis(a, 0, -1) for a in (beta, gamma, E, B)),
                                  layout="component_last")
        # The conformal sources: the drivers over spans (line and window) of every
        # decomposition for E^i, and the column loop (E with x fastest: no unit stride along z).
        chi = rng.uniform(0.5, 1.5, grid).astype(dtype)
        for name in DECOMPOSITIONS:
            conformal_sources(chi, gamma, E, B, decomposition=name)
            conformal_sources(chi[ghost[1:]], gamma[ghost], E[ghost], B[ghost],
                              decomposition=name)
        x_fastest = np.ascontiguousarray(E.transpose(0, 3, 2, 1)).transpose(0, 3, 2, 1)
        conformal_sources(chi, gamma, x_fastest, B, decomposition="chi")
        # Ideal MHD (Eulerian v^i and the spatial part of u^a): line, window, column loop.
        velocity = (0.1 * E).astype(dtype)
        for kind in ("eulerian", "four_velocity"):
            ideal_mhd_fields(alpha, beta, gamma, B, velocity, velocity_kind=kind)
            ideal_mhd_fields(alpha[ghost[1:]], beta[ghost], gamma[ghost], B[ghost],
                             velocity[ghost], velocity_kind=kind)
        ideal_mhd_fields(alpha, beta, gamma, B, x_fastest * dtype(0.1))
    names = {d.code: d.name for d in DECOMPOSITIONS.values()}
    kinds = {code: name for name, code in VELOCITY_KINDS.items()}
    forms = {sources.FORM_CONTRAVARIANT: "E^i", sources.FORM_COVARIANT: "E_i",
             sources.FORM_DENSITIZED: "dens."}

    def labelled(table):
        """(label, driver) of a table of per-form drivers (keys: form, or (form, upper))."""
        pairs = []
        for key, driver in table.items():
            if table is conformal.CONFORMAL_SOURCES:  # keys (decomposition, form)
                decomposition, form = key
                pairs.append((f"conformal {names[decomposition]} {forms[form]}", driver))
                continue
            if table is ideal_mhd.IDEAL_MHD:  # keys (form, velocity kind)
                form, kind = key
                pairs.append((f"ideal MHD {forms[form]} {kinds[kind]}", driver))
                continue
            form, upper = key if isinstance(key, tuple) else (key, False)
            pairs.append((f"{driver.py_func.__name__} {forms[form]}{' up' if upper else ''}",
                          driver))
        return pairs

    drivers = (labelled(sources.ADM_SOURCES_FLAT) + labelled(sources.ADM_SOURCES_WINDOW)
               + [("adm_sources_grid", sources.adm_sources_grid)]
               + labelled(sources.STRESS_ENERGY_FLAT) + labelled(sources.STRESS_ENERGY_WINDOW)
               + [("stress_energy_grid", sources.stress_energy_grid)]
               + labelled(conformal.CONFORMAL_SOURCES)
               + [("conformal_sources_grid", conformal.conformal_sources_grid)]
               + labelled(ideal_mhd.IDEAL_MHD)
               + [("ideal_mhd_grid", ideal_mhd.ideal_mhd_grid)])
    print(f"{'driver':30s} {'first argument':34s} {'xmm':>5s} {'ymm':>5s} {'zmm':>5s} "
          f"{'scalar':>7s}")
    for label, driver in drivers:
        dispatchers = [driver] + [d for (function, _), d in _SHARED_BY_SIGNATURE.items()
                                  if function is driver.py_func]
        for dispatcher in dispatchers:
            for signature in dispatcher.signatures:
                packed, scalar = counts(dispatcher.inspect_asm(signature))
                print(f"{label:30s} {str(signature[0]):34s} "
                      f"{packed['xmm']:5d} {packed['ymm']:5d} {packed['zmm']:5d} {scalar:7d}")


def main():
    if os.environ.get("EMSOURCE_VECTOR_CODE_CHILD"):
        measure()
        return 0
    with tempfile.TemporaryDirectory(prefix="emsource-vector-code-") as cache:
        environment = dict(os.environ, NUMBA_CACHE_DIR=cache, EMSOURCE_VECTOR_CODE_CHILD="1")
        return subprocess.run([sys.executable, __file__], env=environment).returncode


if __name__ == "__main__":
    sys.exit(main())
