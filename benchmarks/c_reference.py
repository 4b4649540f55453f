"""A hand-written C + OpenMP version of the source kernel, built at benchmark time.

The yardstick for "is the Numba kernel as fast as a compiled loop can be on this data": the
same formulas as ``emsource.kernels.sources._adm_point`` (gamma = L D L^T, sqrt(gamma) from the
pivots, E_i, B_i lowered, rho, S_i, S_ij, S = rho) and the same folded checks (pivots above
``pivot_floor tr(gamma)``, rho (1 + tr gamma) finite, underflow count), on the same arrays
(each argument a base pointer and the distance between its component rows, so contiguous and
padded grid functions both work). ``restrict`` pointers and ``-fno-math-errno`` let GCC
vectorise the loop (without them it runs at about half the speed; shared performance notes).

Nothing is committed as a binary: :func:`build` compiles into a temporary folder where a C
compiler with OpenMP is found and returns None elsewhere (the benchmark then says so).
"""

from __future__ import annotations

import ctypes
import os
import shutil
import subprocess
import tempfile

import numpy as np

SOURCE = r"""
#include <math.h>
#include <stddef.h>

void adm_sources_c(const double *restrict g, ptrdiff_t gs,
                   const double *restrict e, ptrdiff_t es,
                   const double *restrict b, ptrdiff_t bs,
                   double *restrict rho, double *restrict si, ptrdiff_t sis,
                   double *restrict sij, ptrdiff_t sijs, double *restrict s,
                   ptrdiff_t npoints, double coef, double half, double tiny, double floor_,
                   long *counts)
{
    long bad = 0, low = 0;
    #pragma omp parallel for simd reduction(+:bad, low) schedule(static)
    for (ptrdiff_t n = 0; n < npoints; ++n) {
        double gxx = g[n], gxy = g[gs + n], gxz = g[2 * gs + n];
        double gyy = g[3 * gs + n], gyz = g[4 * gs + n], gzz = g[5 * gs + n];
        double one = half + half;
        double r1 = one / gxx, l21 = gxy * r1, l31 = gxz * r1;
        double d2 = gyy - l21 * gxy, e23 = gyz - l31 * gxy, l32 = e23 / d2;
        double d3 = gzz - l31 * gxz - l32 * e23;
        double sg = sqrt(gxx * d2) * sqrt(d3);
        double ex = e[n], ey = e[es + n], ez = e[2 * es + n];
        double bx = b[n], by = b[bs + n], bz = b[2 * bs + n];
        double exl = gxx * ex + gxy * ey + gxz * ez;
        double eyl = gxy * ex + gyy * ey + gyz * ez;
        double ezl = gxz * ex + gyz * ey + gzz * ez;
        double bxl = gxx * bx + gxy * by + gxz * bz;
        double byl = gxy * bx + gyy * by + gyz * bz;
        double bzl = gxz * bx + gyz * by + gzz * bz;
        double energy2 = ex * exl + ey * eyl + ez * ezl + bx * bxl + by * byl + bz * bzl;
        double r = coef * half * energy2, poynting = coef * sg, pressure = half * energy2;
        rho[n] = r;
        s[n] = r;
        si[n] = poynting * (ey * bz - ez * by);
        si[sis + n] = poynting * (ez * bx - ex * bz);
        si[2 * sis + n] = poynting * (ex * by - ey * bx);
        sij[n] = coef * (pressure * gxx - exl * exl - bxl * bxl);
        sij[sijs + n] = coef * (pressure * gxy - exl * eyl - bxl * byl);
        sij[2 * sijs + n] = coef * (pressure * gxz - exl * ezl - bxl * bzl);
        sij[3 * sijs + n] = coef * (pressure * gyy - eyl * eyl - byl * byl);
        sij[4 * sijs + n] = coef * (pressure * gyz - eyl * ezl - byl * bzl);
        sij[5 * sijs + n] = coef * (pressure * gzz - ezl * ezl - bzl * bzl);
        double trace = gxx + gyy + gzz, least = floor_ * trace;
        double bound = r * (one + trace);
        int valid = (gxx > least) & (d2 > least) & (d3 > least) & (fabs(bound) < INFINITY);
        double size = fabs(ex) + fabs(ey) + fabs(ez) + fabs(bx) + fabs(by) + fabs(bz);
        bad += !valid;
        low += (r < tiny) & (size > 0.0);
    }
    counts[0] = bad;
    counts[1] = low;
}
"""

FLAGS = ["-O3", "-march=native", "-fno-math-errno", "-fopenmp", "-shared", "-fPIC"]


def build():
    """(callable, description) of the compiled C kernel, or (None, why not)."""
    compiler = os.environ.get("CC") or shutil.which("cc") or shutil.which("gcc")
    if compiler is None:
        return None, "no C compiler found"
    folder = tempfile.mkdtemp(prefix="emsource-c-reference-")
    source = os.path.join(folder, "adm_sources_c.c")
    library = os.path.join(folder, "adm_sources_c.so")
    with open(source, "w") as file:
        file.write(SOURCE)
    result = subprocess.run([compiler, *FLAGS, source, "-o", library, "-lm"],
                            capture_output=True, text=True)
    if result.returncode != 0:
        return None, f"{compiler} failed: {result.stderr.strip()[:200]}"
    lib = ctypes.CDLL(library)
    function = lib.adm_sources_c
    pointer, size, real = ctypes.c_void_p, ctypes.c_ssize_t, ctypes.c_double
    function.argtypes = [pointer, size, pointer, size, pointer, size, pointer, pointer, size,
                         pointer, size, pointer, size, real, real, real, real, pointer]
    function.restype = None
    counts = np.zeros(2, np.int64)

    def call(gamma, E, B, rho, S_i, S_ij, S, coef, tiny, floor):
        """Arrays in the kernels' flat form: (ncomp, row stride) blocks and (npoints,) scalars."""
        row = lambda a: a.strides[0] // a.itemsize  # noqa: E731
        function(gamma.ctypes.data, row(gamma), E.ctypes.data, row(E), B.ctypes.data, row(B),
                 rho.ctypes.data, S_i.ctypes.data, row(S_i), S_ij.ctypes.data, row(S_ij),
                 S.ctypes.data, rho.shape[0], coef, 0.5, tiny, floor, counts.ctypes.data)
        return int(counts[0]), int(counts[1])

    version = subprocess.run([compiler, "--version"], capture_output=True, text=True).stdout
    return call, f"{version.splitlines()[0] if version else compiler} {' '.join(FLAGS[:3])} -fopenmp"
