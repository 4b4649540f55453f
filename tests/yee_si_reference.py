"""A Yee-lattice Maxwell evolution in SI units, written for the tests (plain NumPy).

K. S. Yee, IEEE Trans. Antennas Propag. 14, 302 (1966): E on the edges, H on the faces of a
cubic lattice, leapfrog in time (H half a step after E). On a periodic box of
``cells`` x spacing h, with vertices at integer indices,

    E_x at ((i + 1/2) h, j h, k h),   H_x at (i h, (j + 1/2) h, (k + 1/2) h)   (cyclic in x, y, z),
    H^{n+1/2} = H^{n-1/2} - (dt / mu0) curl E^n,     E^{n+1} = E^n + (dt / eps0) curl H^{n+1/2},

(Faraday's and Ampere's laws in vacuum, Jackson, Classical Electrodynamics, 3rd ed., sec. 6.1;
from memory), each curl component a two-point difference across the cell it sits in.

File layout (invented here, nothing else writes it): one group per output step,
``/run/frame_<n>`` with attribute ``clock_s`` (time of E in seconds), datasets
``efield_x`` .. ``efield_z`` (V/m) trimmed to the points inside the stored box (E_x has
``cells_x - 1`` values along x), and ``hfield_x`` .. ``hfield_z`` (A/m) as the whole periodic
arrays (padded: ``cells`` values along every axis), at ``clock_s + dt / 2``. Root attributes
``cell_m`` (spacing, metres) and ``step_s`` (dt).
"""

from __future__ import annotations

import math

import h5py
import numpy as np
from scipy import constants

C, EPS0, MU0 = constants.c, constants.epsilon_0, constants.mu_0

#: Offsets of the components (x, y, z order), units of the spacing.
E_OFFSETS = ((0.5, 0, 0), (0, 0.5, 0), (0, 0, 0.5))
H_OFFSETS = ((0, 0.5, 0.5), (0.5, 0, 0.5), (0.5, 0.5, 0))


def plane_wave_si(points, t, box, amplitude=120.0, phase=0.3):
    """E (V/m) and H (A/m) of a vacuum plane wave periodic in ``box`` (metres), at ``points``.

    k = 2 pi (1/Lx, 1/Ly, 1/Lz) (oblique, unequal components), E along k x (0, 0, 1) plus a
    part along k x (k x z) (mixed polarisation), H = k_hat x E / (mu0 c) (Jackson sec. 7.1).
    """
    k = 2 * np.pi / np.asarray(box, float)
    khat = k / np.linalg.norm(k)
    e1 = np.cross(khat, (0.0, 0.0, 1.0))
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(khat, e1)
    s = np.tensordot(k, points, axes=1) - np.linalg.norm(k) * C * t + phase
    E = amplitude * (np.multiply.outer(e1, np.sin(s)) + 0.6 * np.multiply.outer(e2, np.cos(s)))
    H = np.cross(khat, E, axis=0) / (MU0 * C)
    return E, H


def _positions(cells, h, offset):
    axes = [(np.arange(n) + o) * h for n, o in zip(cells, offset)]
    return np.array(np.meshgrid(*axes, indexing="ij"))


def evolve_and_write(path, cells, h, steps, courant=0.4):
    """Evolve the plane wave ``steps`` leapfrog steps of dt = courant h / c; write every step.

    Returns (dt, box). ``cells`` cells per axis (periodic); the stored box is the vertex grid
    0..cells-1 along each axis.
    """
    cells = tuple(int(n) for n in cells)
    box = tuple(n * h for n in cells)
    dt = courant * h / C
    E = np.array([plane_wave_si(_positions(cells, h, o), 0.0, box)[0][c]
                  for c, o in enumerate(E_OFFSETS)])
    H = np.array([plane_wave_si(_positions(cells, h, o), dt / 2, box)[1][c]
                  for c, o in enumerate(H_OFFSETS)])

    def forward(a, axis):  # a[i + 1] - a[i], periodic
        return np.roll(a, -1, axis) - a

    def backward(a, axis):  # a[i] - a[i - 1], periodic
        return a - np.roll(a, 1, axis)

    with h5py.File(path, "w") as f:
        f.attrs["cell_m"] = (h, h, h)
        f.attrs["step_s"] = dt
        for n in range(steps + 1):
            g = f.create_group(f"run/frame_{n}")
            g.attrs["clock_s"] = n * dt
            for c, a in enumerate("xyz"):
                trim = tuple(slice(0, cells[ax] - 1) if ax == c else slice(None) for ax in range(3))
                g[f"efield_{a}"] = E[c][trim]
                g[f"hfield_{a}"] = H[c]
            if n == steps:
                break
            # E^{n+1} = E^n + dt/eps0 curl H^{n+1/2}: curl at the edges from the faces around them
            E[0] += dt / EPS0 * (backward(H[2], 1) - backward(H[1], 2)) / h
            E[1] += dt / EPS0 * (backward(H[0], 2) - backward(H[2], 0)) / h
            E[2] += dt / EPS0 * (backward(H[1], 0) - backward(H[0], 1)) / h
            # H^{n+3/2} = H^{n+1/2} - dt/mu0 curl E^{n+1}: curl at the faces from their edges
            H[0] -= dt / MU0 * (forward(E[2], 1) - forward(E[1], 2)) / h
            H[1] -= dt / MU0 * (forward(E[0], 2) - forward(E[2], 0)) / h
            H[2] -= dt / MU0 * (forward(E[1], 0) - forward(E[0], 1)) / h
    return dt, box


MAPPING = """mapping_version = 1
axis_order = "xyz"
units = "heaviside_lorentz"
interpolation_order = {order}

[time_levels]
pattern = "/run/frame_{{index}}"
time = {{ attribute = "clock_s", scale = {c!r} }}   # seconds -> metres of light travel (c = 1)

[grid]
spacing = {{ attribute = "cell_m", object = "/" }}
origin = [0.0, 0.0, 0.0]

[quantities.spatial_metric]
identity = true

[quantities.electric_field]
components = ["efield_x", "efield_y", "efield_z"]
centring = "edge"
scale = {e_scale!r}      # sqrt(eps0): V/m -> Heaviside-Lorentz, energy density in J/m^3

[quantities.magnetic_field]
components = ["hfield_x", "hfield_y", "hfield_z"]
centring = "face"
scale = {h_scale!r}      # sqrt(mu0): B = mu0 H, then B / sqrt(mu0)
time_offset = {half_step!r}   # seconds: H is half a step ahead of E
"""


def write_mapping(path, dt, order=2):
    """The mapping file of the layout above (only keys of the mapping format, no Python)."""
    with open(path, "w") as handle:
        handle.write(MAPPING.format(order=order, c=C, e_scale=math.sqrt(EPS0),
                                    h_scale=math.sqrt(MU0), half_step=dt / 2))
