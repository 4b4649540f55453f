"""Time series of integrated quantities across time levels: CSV, HDF5 and an optional plot.

One row per time level. Columns (code units, G = c = 1, the snapshot's unit system):
``level, time, energy, momentum_x, momentum_y, momentum_z, flux_x_lower, flux_x_upper,
flux_y_lower, flux_y_upper, flux_z_lower, flux_z_upper, net_flux, max_electric_field,
max_magnetic_field`` and ``luminosity_r<R>`` for each sphere radius R. With a physical scale
(:class:`emsource.physical_units.PhysicalScale`), every code column but ``level`` gets its value
in cgs and in SI units, in columns named ``<column>_<unit>`` after the code columns
(:data:`PHYSICAL_COLUMNS`): ``time_s``; ``energy_erg, energy_J``; ``momentum_x_g_cm_s,
momentum_x_kg_m_s`` (and y, z); ``flux_<face>_erg_s, flux_<face>_W`` and ``net_flux_erg_s,
net_flux_W``; ``max_electric_field_statV_cm, max_electric_field_V_m``; ``max_magnetic_field_G,
max_magnetic_field_T``; ``luminosity_r<R>_erg_s, luminosity_r<R>_W``. The radius R in a column
name stays in code units.

The HDF5 file holds one 1D dataset per column under the root, with attributes ``columns`` (the
order), ``mass_scale_solar`` (0 if none) and the provenance attributes of
:func:`emsource.snapshot.provenance_attributes`. Files are written atomically
(:func:`emsource.snapshot.atomic_output`); ``inputs`` names files an output must not replace.
"""

from __future__ import annotations

import csv

import h5py
import numpy as np

from .integrals import FACES
from .snapshot import atomic_output, hdf5_output

__all__ = ["PHYSICAL_COLUMNS", "add_physical_columns", "time_series_table", "write_csv",
           "write_hdf5", "write_plot"]

#: Code column (or its prefix, for momentum, fluxes and luminosities) -> the (unit suffix,
#: PhysicalScale attribute) pairs of its physical columns, cgs first.
PHYSICAL_COLUMNS = {
    "time": (("s", "time_s"),),
    "energy": (("erg", "energy_erg"), ("J", "energy_J")),
    "momentum_": (("g_cm_s", "momentum_g_cm_s"), ("kg_m_s", "momentum_kg_m_s")),
    "flux_": (("erg_s", "power_erg_s"), ("W", "power_W")),
    "net_flux": (("erg_s", "power_erg_s"), ("W", "power_W")),
    "max_electric_field": (("statV_cm", "electric_field_statV_cm"),
                           ("V_m", "electric_field_V_m")),
    "max_magnetic_field": (("G", "magnetic_field_G"), ("T", "magnetic_field_T")),
    "luminosity_r": (("erg_s", "power_erg_s"), ("W", "power_W")),
    # kinds used by other commands' tables (``add_physical_columns(kind_of=...)``)
    "power": (("erg_s", "power_erg_s"), ("W", "power_W")),
    "length": (("cm", "length_cm"), ("m", "length_m")),
    "power_density": (("erg_s_cm3", "power_density_erg_s_cm3"), ("W_m3", "power_density_W_m3")),
}


def add_physical_columns(table, scale, kind_of=None) -> dict:
    """Append the ``<column>_<unit>`` columns (cgs first, then SI) of every code column of
    ``table`` that has a physical kind, multiplied by the :class:`PhysicalScale` factor.

    ``kind_of(column)`` gives the column's key of :data:`PHYSICAL_COLUMNS` (or None for a
    column without a unit: labels, counts, ratios); the default reads it from the column name
    as the integrate table names its columns. The one conversion every command's CSV shares.
    """
    if scale is None:
        return table
    for column in list(table):
        pairs = (_physical_units_of(column) if kind_of is None
                 else PHYSICAL_COLUMNS.get(kind_of(column), ()))
        for suffix, attribute in pairs:
            factor = getattr(scale, attribute)
            # "" stands for "no value" (a level without neighbours) and stays so
            table[f"{column}_{suffix}"] = [v if isinstance(v, str) else v * factor
                                           for v in table[column]]
    return table


def _physical_units_of(column):
    """The (suffix, attribute) pairs of a code column ("" for ``level``)."""
    if column in PHYSICAL_COLUMNS:
        return PHYSICAL_COLUMNS[column]
    for prefix in ("momentum_", "flux_", "luminosity_r"):
        if column.startswith(prefix):
            return PHYSICAL_COLUMNS[prefix]
    return ()


def _radius_name(r: float) -> str:
    return f"luminosity_r{r:g}"


def time_series_table(results, scale=None) -> dict:
    """Column name -> list of values (strings for ``level``), in column order."""
    table = {"level": [r.label for r in results], "time": [r.time for r in results],
             "energy": [r.energy for r in results]}
    for i, axis in enumerate("xyz"):
        table[f"momentum_{axis}"] = [float(r.momentum[i]) for r in results]
    for face in FACES:
        table[f"flux_{face}"] = [r.face_flux[face] for r in results]
    table["net_flux"] = [r.net_flux for r in results]
    table["max_electric_field"] = [r.max_electric_field for r in results]
    table["max_magnetic_field"] = [r.max_magnetic_field for r in results]
    radii = list(results[0].luminosity) if results else []
    for radius in radii:
        table[_radius_name(radius)] = [r.luminosity[radius] for r in results]
    return add_physical_columns(table, scale)


def write_csv(path, table, *, force=False, inputs=()):
    """One header line, then one row per time level (``repr`` precision floats)."""
    columns = list(table)
    with atomic_output(path, force=force, inputs=inputs) as temporary:
        with open(temporary, "w", newline="") as handle:
            writer = csv.writer(handle)
            writer.writerow(columns)
            for row in zip(*(table[c] for c in columns)):
                writer.writerow([v if isinstance(v, str) else repr(float(v)) for v in row])


def write_hdf5(path, table, attributes, *, force=False, inputs=()):
    columns = list(table)
    with atomic_output(path, force=force, inputs=inputs) as temporary:
        with hdf5_output(temporary, path) as f:
            for key, value in attributes.items():
                f.attrs[key] = value
            f.attrs["columns"] = columns
            for c in columns:
                values = table[c]
                if c == "level":
                    f.create_dataset(c, data=np.array(values, dtype=h5py.string_dtype()))
                else:
                    f.create_dataset(c, data=np.asarray(values, dtype=np.float64))


def write_plot(path, table, *, force=False, inputs=()):
    """Energy and luminosities against time (needs matplotlib, the ``plot`` extra)."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    figure, (top, bottom) = plt.subplots(2, 1, sharex=True, figsize=(6, 5))
    top.plot(table["time"], table["energy"], "o-")
    top.set_ylabel("energy (code units)")
    for name in table:
        if name.startswith("luminosity_r") and not name.endswith(("_W", "_erg_s")):
            bottom.plot(table["time"], table[name], "o-", label=f"sphere r = {name[12:]}")
    bottom.plot(table["time"], table["net_flux"], "s--", label="box faces")
    bottom.set_ylabel("energy flux out (code units)")
    bottom.set_xlabel("time (code units)")
    bottom.legend()
    figure.tight_layout()
    with atomic_output(path, force=force, inputs=inputs) as temporary:
        figure.savefig(temporary, format="png", dpi=100)
    plt.close(figure)
