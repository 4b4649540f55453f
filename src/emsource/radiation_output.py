"""Files of the radiation time series: CSV, HDF5 and an optional plot.

CSV: one row per (time level, radius), the columns of :func:`emsource.radiation.table_columns`
(written by :func:`emsource.time_series.write_csv`).

HDF5 (root of the file; L levels, R radii, M modes of a scalar):

- ``level`` (L,) strings, ``time`` (L,), ``radius`` (R,);
- ``power``, ``mode_power``, ``net_flux`` (L, R) and ``power_extrapolated`` (L,) (NaN if
  not computed);
- ``phi0_modes``, ``phi1_modes``, ``phi2_modes`` (L, R, M) complex128, with ``<scalar>_l``,
  ``<scalar>_m`` (M,) integers naming the modes;
- attributes ``units``, ``l_max``, ``theta_points``, ``interpolation_points``,
  ``extrapolation_order`` (-1: none), ``tetrad`` and ``power_normalisation`` (text), and the
  provenance attributes of :func:`emsource.snapshot.provenance_attributes`.

Every file is written atomically (:func:`emsource.snapshot.atomic_output`): complete or absent.
"""

from __future__ import annotations

import h5py
import numpy as np

from .radiation import SCALARS, table_columns
from .snapshot import atomic_output, hdf5_output
from .time_series import add_physical_columns, write_csv

__all__ = ["TETRAD_TEXT", "POWER_TEXT", "write_radiation_csv", "write_radiation_hdf5",
           "write_radiation_plot"]

TETRAD_TEXT = ("l = (n + r)/sqrt2, k = (n - r)/sqrt2, m = (theta + i phi)/sqrt2; r, theta, phi "
               "from x/r, d_theta, d_phi by Gram-Schmidt with gamma_ij in that order; "
               "Phi0 = F(l,m), Phi1 = F(l,k)/2 + F(mbar,m)/2, Phi2 = F(mbar,k)")
POWER_TEXT = ("power = kappa r^2 oint |Phi2|^2 dOmega, kappa = 1/(4 pi) gaussian, "
              "1 heaviside_lorentz")


#: CSV column -> its kind in :data:`emsource.time_series.PHYSICAL_COLUMNS`; the mode columns
#: stay in code units.
_KINDS = {"time": "time", "radius": "length", "power": "power", "mode_power": "power",
          "net_flux": "power", "power_extrapolated": "power"}


def write_radiation_csv(path, levels, extrapolation_order=None, *, force=False, inputs=(),
                        scale=None):
    """With a :class:`emsource.physical_units.PhysicalScale`, also the ``<column>_<unit>``
    columns (cgs, SI) of time, radius and the powers (``time_s``, ``radius_cm``, ``radius_m``,
    ``power_erg_s``, ``power_W``, ...)."""
    table = add_physical_columns(table_columns(levels, extrapolation_order), scale, _KINDS.get)
    write_csv(path, table, force=force, inputs=inputs)


def write_radiation_hdf5(path, levels, attributes, extrapolation_order=None, *, force=False,
                         inputs=()):
    """The layout of the module docstring; ``attributes`` (provenance, options) go on the root."""
    radii = levels[0].radii if levels else []
    with atomic_output(path, force=force, inputs=inputs) as temporary:
        with hdf5_output(temporary, path) as f:
            for key, value in attributes.items():
                f.attrs[key] = value
            f.attrs["tetrad"] = TETRAD_TEXT
            f.attrs["power_normalisation"] = POWER_TEXT
            f.attrs["extrapolation_order"] = -1 if extrapolation_order is None else int(
                extrapolation_order)
            f.create_dataset("level", data=np.array([lv.label for lv in levels],
                                                    dtype=h5py.string_dtype()))
            f.create_dataset("time", data=np.array([lv.time for lv in levels], dtype=float))
            f.create_dataset("radius", data=np.array(radii, dtype=float))
            for name in ("power", "mode_power", "net_flux"):
                f.create_dataset(name, data=np.array(
                    [[getattr(s, name) for s in lv.spheres] for lv in levels], dtype=float))
            extrapolated = [lv.extrapolated_power(extrapolation_order)
                            if extrapolation_order is not None
                            and len(set(lv.radii)) > extrapolation_order else np.nan
                            for lv in levels]
            f.create_dataset("power_extrapolated", data=np.array(extrapolated, dtype=float))
            for name in SCALARS:
                f.create_dataset(f"{name}_modes", data=np.array(
                    [[s.modes[name] for s in lv.spheres] for lv in levels], dtype=np.complex128))
                indices = levels[0].spheres[0].mode_indices(name) if levels else []
                f.create_dataset(f"{name}_l", data=np.array([lm[0] for lm in indices], dtype=int))
                f.create_dataset(f"{name}_m", data=np.array([lm[1] for lm in indices], dtype=int))


def write_radiation_plot(path, levels, *, force=False, inputs=()):
    """Power per radius, and |Phi2 lm| of the l = 1, 2 modes on the outermost sphere, against
    time (needs matplotlib, the ``plot`` extra)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    times = [lv.time for lv in levels]
    figure, (top, bottom) = plt.subplots(2, 1, sharex=True, figsize=(6, 5))
    for i, radius in enumerate(levels[0].radii):
        top.plot(times, [lv.spheres[i].power for lv in levels], "o-", label=f"r = {radius:g}")
    top.set_ylabel("power from Phi2 (code units)")
    top.legend()
    outer = int(np.argmax(levels[0].radii))
    sphere = levels[0].spheres[outer]
    for k, (l, m) in enumerate(sphere.mode_indices("phi2")):
        if l <= 2:
            bottom.semilogy(times, [max(abs(lv.spheres[outer].modes["phi2"][k]), 1e-300)
                                    for lv in levels], "o-", label=f"l={l}, m={m}")
    bottom.set_ylabel(f"|Phi2 lm| at r = {sphere.radius:g}")
    bottom.set_xlabel("time (code units)")
    bottom.legend(fontsize="small", ncol=2)
    figure.tight_layout()
    with atomic_output(path, force=force, inputs=inputs) as temporary:
        figure.savefig(temporary, format="png", dpi=100)
    plt.close(figure)
