"""A user's own source code with convention differences, written independently of the package.

``user_sources(state, names)`` computes rho, S_i, S_ij the way a code with the convention
differences ``names`` (catalogue names of :mod:`emsource.diagnosis`) would: from the formulas
themselves (explicit Levi-Civita symbol, explicit index lowering and raising with
``np.linalg.inv``), and T_tt, T_ti by the brute-force 4D contraction of
``tests/reference_stress_energy.py``. Nothing is shared with the package's kernels or with the
catalogue's transformations, so a recovered candidate is checked against an independent route.

The steps run in the order a code would take them: how the stored fields are read, the formulas,
the 4D components, lapse factors, the unit factor, then storage (packing, component-last memory,
axis order). Formulas: E. Gourgoulhon, 3+1 Formalism in General Relativity (2012), sec. 5.2;
T. W. Baumgarte and S. L. Shapiro, Numerical Relativity (2010), sec. 5.2.
"""

import itertools
import math

import numpy as np

from conftest import unpack_symmetric
from reference_stress_energy import grid_reference

PACKED = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
AXIS = {"x": 0, "y": 1, "z": 2}
#: packing orders of the stress_packing_* candidates, as (row, column) pairs
PACKINGS = {
    "stress_packing_diagonal_first": ["xx", "yy", "zz", "xy", "xz", "yz"],
    "stress_packing_voigt": ["xx", "yy", "zz", "yz", "xz", "xy"],
    "stress_packing_cyclic": ["xx", "yy", "zz", "xy", "yz", "zx"],
    "stress_packing_lower_triangle": ["xx", "yx", "yy", "zx", "zy", "zz"],
}


def levi_civita_symbol3():
    eps = np.zeros((3, 3, 3))
    for i, j, k in itertools.permutations(range(3)):
        eps[i, j, k] = np.linalg.det(np.eye(3)[[i, j, k]])
    return eps


def lapse_powers(names):
    """{output: total power of alpha} from the lapse candidates among ``names``."""
    powers = {"rho": 0, "S_i": 0, "S_ij": 0}
    for name in names:
        if "*" in name:
            label, outputs = name.split("*")
            power = {"alpha": 1, "alpha^-1": -1, "alpha^2": 2}[label]
            for o in outputs.split(","):
                powers[o] += power
    return powers


def user_sources(alpha, beta, gamma, E, B, names, *, units="gaussian", amplitude=1.0):
    """(rho, S_i, S_ij) of a code with the convention differences ``names``."""
    names = set(names)
    k = 1 / (4 * math.pi) if units == "gaussian" else 1.0
    G = np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))        # (*grid, 3, 3)
    Ginv = np.linalg.inv(G)
    e, b = np.moveaxis(E, 0, -1), np.moveaxis(B, 0, -1)                # (*grid, 3)
    if "fields_covariant" in names:                                     # the stored E are E_i
        e, b = np.einsum("...ij,...j->...i", Ginv, e), np.einsum("...ij,...j->...i", Ginv, b)
    e_low, b_low = np.einsum("...ij,...j->...i", G, e), np.einsum("...ij,...j->...i", G, b)
    square = np.einsum("...i,...i->...", e, e_low) + np.einsum("...i,...i->...", b, b_low)
    rho = k * square / 2
    volume = np.sqrt(np.linalg.det(G))
    if "levi_civita_without_sqrt_det" in names:
        volume = np.ones_like(volume)
    elif "levi_civita_upper" in names:
        volume = 1 / volume
    s_i = k * volume[..., None] * np.einsum("ijk,...j,...k->...i", levi_civita_symbol3(), e, b)
    if "momentum_sign" in names:
        s_i = -s_i
    if "momentum_upper" in names:
        s_i = np.einsum("...ij,...j->...i", Ginv, s_i)
    trace_metric = G
    if "stress_without_trace_term" in names:
        trace_metric = np.zeros_like(G)
    elif "stress_trace_term_flat" in names:
        trace_metric = np.broadcast_to(np.eye(3), G.shape)
    s_ij = k * (-e_low[..., :, None] * e_low[..., None, :] - b_low[..., :, None] * b_low[..., None, :]
                + 0.5 * trace_metric * square[..., None, None])
    if "stress_upper" in names:
        s_ij = Ginv @ s_ij @ Ginv
    if names & {"energy_as_T_tt", "momentum_as_T_ti"}:
        fields = (np.moveaxis(e, -1, 0), np.moveaxis(b, -1, 0))
        t_low = grid_reference(alpha, beta, gamma, *fields, k)[3]       # packed (tt, tx, ...)
        if "energy_as_T_tt" in names:
            rho = t_low[0]
        if "momentum_as_T_ti" in names:
            s_i = np.moveaxis(t_low[1:4], 0, -1)
    powers = lapse_powers(names)
    rho = rho * alpha ** powers["rho"] * amplitude
    s_i = s_i * (alpha ** powers["S_i"])[..., None] * amplitude
    s_ij = s_ij * (alpha ** powers["S_ij"])[..., None, None] * amplitude
    order = PACKED
    for name in names & set(PACKINGS):
        order = [(AXIS[c[0]], AXIS[c[1]]) for c in PACKINGS[name]]
    s_i = np.moveaxis(s_i, -1, 0)
    s_ij = np.stack([s_ij[..., r, c] for r, c in order])
    if "components_last_reshaped" in names:   # memory written (*grid, n), read as (n, *grid)
        s_i = np.ascontiguousarray(np.moveaxis(s_i, 0, -1)).reshape(s_i.shape)
        s_ij = np.ascontiguousarray(np.moveaxis(s_ij, 0, -1)).reshape(s_ij.shape)
    if "grid_axes_reversed" in names:
        rho = np.ascontiguousarray(rho.T)
        s_i = np.stack([c.T for c in s_i])
        s_ij = np.stack([c.T for c in s_ij])
    return rho, s_i, s_ij


#: Catalogue entries the reference cannot combine (one flag each): two Levi-Civita variants,
#: two trace variants, two packings.
EXCLUSIVE = (
    {"levi_civita_without_sqrt_det", "levi_civita_upper"},
    {"stress_without_trace_term", "stress_trace_term_flat"},
    set(PACKINGS),
)


def combinable(a, b):
    return a != b and not any(a in group and b in group for group in EXCLUSIVE)
