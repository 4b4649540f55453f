"""The sample snapshots shipped in ``sample_grids/``, generated from exact data.

Scenarios of our own (code units, G = c = 1, Gaussian unless said otherwise):

``rotating_dipole.h5`` (native layout)
    A spinning magnetized compact star modelled as a point magnetic dipole at the origin,
    |m| = 1, spin omega = 1 about z, inclination chi = 60 degrees, exact vacuum fields in the
    near, intermediate and wave zones (:func:`emsource.exact.rotating_dipole`), excised inside
    r = 0.3 (``valid_mask``), on 33^3 points over [-4, 4]^3, time levels t = 0, 1, 2.
    Expected luminosity through any centred sphere: (2/3) m^2 omega^4 sin^2 chi = 0.5.
``rotating_dipole_foreign.h5`` with ``rotating_dipole_foreign.toml``
    The t = 0 level of the same star in an invented foreign layout: one dataset per component
    under ``/run/step_0000/fields``, grid axes stored (z, y, x), fields in Heaviside-Lorentz
    units, no metric stored (flat), spacing and corner as attributes in (z, y, x) order. The
    mapping file tells emsource how to read it.
``boosted_charge.h5`` (native layout)
    A Gaussian ball of charge q = 1, rest width sigma = 0.4, moving at v = 0.6 along x
    (:func:`emsource.exact.boosted_gaussian_charge`), 33^3 points over [-3, 3]^3, t = 0, 1, 2.

Data are stored as float32 with gzip compression to keep the files small (a few MB in all);
``emsource samples`` rewrites them.
"""

from __future__ import annotations

import math
import os

import numpy as np

from .grid import UniformGrid
from .quantities import heaviside_lorentz_factor
from .snapshot import OutputError, atomic_output, check_output, chunk_shape, hdf5_output, write_snapshot

__all__ = ["DIPOLE", "BOOSTED_CHARGE", "write_sample_grids", "FOREIGN_MAPPING_TEXT"]

DIPOLE = dict(moment=1.0, omega=1.0, inclination=math.pi / 3, excision_radius=0.3,
              bounds=(-4.0, 4.0), points=33, times=(0.0, 1.0, 2.0))
BOOSTED_CHARGE = dict(charge=1.0, width=0.4, velocity=(0.6, 0.0, 0.0), bounds=(-3.0, 3.0),
                      points=33, times=(0.0, 1.0, 2.0))

FOREIGN_MAPPING_TEXT = '''\
# How emsource reads rotating_dipole_foreign.h5, a snapshot in an invented foreign layout.
mapping_version = 1
axis_order = "zyx"            # every array is stored as (nz, ny, nx)
units = "heaviside_lorentz"   # the fields are stored in Heaviside-Lorentz units

[time_levels]
pattern = "/run/step_{index}"
time = { attribute = "sim_time" }

[grid]
spacing = { attribute = "cell_size" }   # (dz, dy, dx), storage order
origin = { attribute = "corner" }       # (z0, y0, x0)

[quantities.spatial_metric]
identity = true                         # flat space: no metric stored

[quantities.electric_field]
components = ["fields/Ex", "fields/Ey", "fields/Ez"]

[quantities.magnetic_field]
components = ["fields/Bx", "fields/By", "fields/Bz"]

[quantities.valid_mask]
components = ["fields/inside_domain"]
'''


def _as_float32(level, keep):
    """The dict form of a TimeLevelFields with the quantities in ``keep``, float32."""
    names = {"lapse": level.alpha, "shift": level.beta, "spatial_metric": level.gamma,
             "electric_field": level.E, "magnetic_field": level.B,
             "charge_density": level.charge_density, "current_density": level.current_density}
    entry = {q: names[q].astype(np.float32) for q in keep}
    if level.valid_mask is not None:
        entry["valid_mask"] = level.valid_mask.astype(np.uint8)
    entry.update(time=level.t, grid=level.grid, units=level.units)
    return entry


def dipole_levels():
    from .exact import rotating_dipole

    p = DIPOLE
    grid = UniformGrid.from_bounds((p["bounds"][0],) * 3, (p["bounds"][1],) * 3, (p["points"],) * 3)
    return [rotating_dipole(grid, t, moment=p["moment"], omega=p["omega"],
                            inclination=p["inclination"], excision_radius=p["excision_radius"])
            for t in p["times"]]


def boosted_charge_levels():
    from .exact import boosted_gaussian_charge

    p = BOOSTED_CHARGE
    grid = UniformGrid.from_bounds((p["bounds"][0],) * 3, (p["bounds"][1],) * 3, (p["points"],) * 3)
    return [boosted_gaussian_charge(grid, t, charge=p["charge"], width=p["width"],
                                    velocity=p["velocity"]) for t in p["times"]]


def write_foreign_dipole(path, level, *, force=False):
    """The invented foreign layout of one dipole level (see the module docstring)."""
    # E_HL = E_G / sqrt(4 pi) (Jackson, appendix, table 2), for E and B alike
    to_hl = heaviside_lorentz_factor("electric_field")
    with atomic_output(path, force=force) as temporary:
        with hdf5_output(temporary, path) as f:
            f.attrs["code"] = "an invented evolution code (sample data of emsource)"
            g = f.create_group("run/step_0000")
            g.attrs["sim_time"] = level.t
            g.attrs["cell_size"] = np.asarray(level.grid.spacing[::-1])
            g.attrs["corner"] = np.asarray(level.grid.origin[::-1])
            fields = g.create_group("fields")
            for name, vector in (("E", level.E), ("B", level.B)):
                for c, axis in enumerate("xyz"):
                    data = np.ascontiguousarray((vector[c] * to_hl).astype(np.float32).T)
                    fields.create_dataset(f"{name}{axis}", data=data, compression="gzip",
                                          chunks=chunk_shape(data.shape, 4))
            fields.create_dataset("inside_domain", data=np.ascontiguousarray(
                level.valid_mask.astype(np.uint8).T), compression="gzip")


def write_sample_grids(directory, *, force=False, with_boosted_charge=True) -> list:
    """Write every sample file into ``directory``; returns the paths written."""
    names = ["rotating_dipole.h5", "rotating_dipole_foreign.h5", "rotating_dipole_foreign.toml"]
    names += ["boosted_charge.h5"] if with_boosted_charge else []
    existing = [n for n in names if os.path.exists(os.path.join(directory, n))]
    if existing and not force:
        raise OutputError(f"{', '.join(existing)} exist(s) in {directory!r}; use --force")
    if os.path.exists(directory) and not os.path.isdir(directory):
        raise OutputError(f"output directory {directory!r} is not a directory")
    try:
        os.makedirs(directory, exist_ok=True)
    except OSError as error:
        raise OutputError(f"cannot create output directory {directory!r}: {error}") from error
    for name in names:
        check_output(os.path.join(directory, name), force=force)
    written = []
    dipole = dipole_levels()
    keep = ("lapse", "shift", "spatial_metric", "electric_field", "magnetic_field")
    p = DIPOLE
    luminosity = 2.0 / 3.0 * p["moment"] ** 2 * p["omega"] ** 4 * math.sin(p["inclination"]) ** 2
    path = os.path.join(directory, "rotating_dipole.h5")
    write_snapshot(path, [_as_float32(lv, keep) for lv in dipole], force=force,
                   compression="gzip", attributes={"description": (
                       f"rotating point magnetic dipole, m = {p['moment']}, omega = {p['omega']}, "
                       f"inclination = {math.degrees(p['inclination']):.0f} deg, excised r < "
                       f"{p['excision_radius']}; expected luminosity through any centred sphere "
                       f"(2/3) m^2 omega^4 sin^2(chi) = {luminosity:.6g}")})
    written.append(path)
    path = os.path.join(directory, "rotating_dipole_foreign.h5")
    write_foreign_dipole(path, dipole[0], force=force)
    written.append(path)
    path = os.path.join(directory, "rotating_dipole_foreign.toml")
    with atomic_output(path, force=force) as temporary:
        with open(temporary, "w") as handle:
            handle.write(FOREIGN_MAPPING_TEXT)
    written.append(path)
    if with_boosted_charge:
        q = BOOSTED_CHARGE
        path = os.path.join(directory, "boosted_charge.h5")
        write_snapshot(path, [_as_float32(lv, keep + ("charge_density", "current_density"))
                              for lv in boosted_charge_levels()], force=force, compression="gzip",
                       attributes={"description": (
                           f"Gaussian ball of charge q = {q['charge']}, rest width "
                           f"{q['width']}, moving at v = {q['velocity']} (c = 1)")})
        written.append(path)
    return written
