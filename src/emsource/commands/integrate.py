"""``emsource integrate``: energy, momentum, fluxes and luminosity of every time level."""

from __future__ import annotations

import argparse
import math

from . import EXIT_OK, EXIT_OUTPUT_ERROR, EXIT_USAGE
from ._cluster_options import add_cluster_options, block_bytes
from ._physical_scale import add_scale_options, chosen_scale
from ._snapshot_options import (add_input_options, check_new_output, fail, positive_number,
                               run_guarded, show_progress, whole_number_at_least)

HELP = "integrate energy, momentum, face fluxes and sphere luminosities over a snapshot file"


def radius(text: str) -> float:
    """``--radius``: a positive finite number (anything else is a usage error, exit 2)."""
    return positive_number(text, "a sphere radius")


def register(subparsers):
    parser = subparsers.add_parser(
        "integrate", help=HELP, description=HELP + ", time level by time level, streamed in "
        "slabs. Energy and momentum are volume integrals with sqrt(gamma) (trapezoidal rule); "
        "fluxes use F^i = sqrt(gamma) (alpha S^i - rho beta^i); a luminosity is the flux out "
        "through a coordinate sphere centred on the origin (Lagrange interpolation, "
        "Gauss-Legendre in theta times uniform in phi).",
        epilog="Exit codes: 0 done, 2 usage (for instance a --radius that is not a positive "
               "finite number), 3 bad input (message says what the file holds: a non-finite "
               "value, a metric that is not positive definite or a lapse that is not positive "
               "at a valid point, or a sphere that does not fit in the grid), 4 an output "
               "exists (use --force) or cannot be written, 130 interrupted. Points with "
               "valid_mask = 0 are neither checked nor used.")
    add_input_options(parser)
    parser.add_argument("--radius", metavar="R", type=radius, action="append", default=[],
                        help="radius of a luminosity sphere (code units); repeat for several")
    parser.add_argument("--theta-points", metavar="N", default=32,
                        type=whole_number_at_least(2, "theta points"),
                        help="Gauss-Legendre nodes in theta (2N in phi); default 32")
    # Deprecated spelling of --theta-points, still accepted.
    parser.add_argument("--angular-points", dest="theta_points",
                        type=whole_number_at_least(2, "theta points"),
                        default=argparse.SUPPRESS, help=argparse.SUPPRESS)
    parser.add_argument("--interpolation-points", metavar="P", default=4,
                        type=whole_number_at_least(2, "interpolation points", even=True),
                        help="Lagrange points per axis (even; default 4, cubic)")
    add_scale_options(parser)
    parser.add_argument("--csv", metavar="FILE", help="write the time series as CSV")
    parser.add_argument("--hdf5", metavar="FILE", help="write the time series as HDF5")
    parser.add_argument("--plot", metavar="PNG", help="plot energy and fluxes against time "
                        "(needs matplotlib: pip install 'emsource[plot]')")
    parser.add_argument("--force", action="store_true", help="replace existing output files")
    parser.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(parser, on_cluster=lambda args: _run(args, on_cluster=True))


#: What the integrals read (for the provenance).
READ = ("spatial_metric", "electric_field", "magnetic_field", "lapse", "shift", "valid_mask")


def _options(args, results) -> dict:
    options = {"radii": args.radius, "theta_points": args.theta_points,
               "interpolation_points": args.interpolation_points, "mass_solar": args.mass,
               "memory_limit_bytes": args.memory_limit, "levels": [r.label for r in results]}
    if args.code_scale is not None:
        options["code_scale"] = list(map(str, args.code_scale))
    return options


def _integrate_on_cluster(args):
    """(description, units, grid, level count, results, attributes, the mapping's physical
    scale) of a Dask run."""
    import json

    from ..distributed.integrals import integrate_series
    from ..distributed.series import choose_in_series, open_series
    from ..snapshot import open_snapshot, provenance_attributes

    series = open_series(args.snapshot, args.mapping)
    chosen = choose_in_series(series, args.levels, args.snapshot)
    results = integrate_series(
        args.snapshot, mapping=args.mapping, radii=args.radius, theta_points=args.theta_points,
        interpolation_points=args.interpolation_points, levels=args.levels,
        block_bytes=block_bytes(args), progress=show_progress(args))
    files = sorted({level.path for level in chosen})
    used = [p for level in chosen for q in READ if level.has(q) for p in level.dataset_paths(q)]
    attributes = provenance_attributes(files[0], used, _options(args, results), series[0].mapping)
    attributes["input_files"] = json.dumps(files)
    with open_snapshot(series[0].path, series[0].mapping) as snap:  # one mapping for all
        mapping_scale = snap.physical_scale
    return "", series[0].units, series[0].grid, len(series), results, attributes, mapping_scale


def _run(args, on_cluster=False) -> int:
    from ..integrals import integrate_open_snapshot
    from ..snapshot import open_snapshot
    from ..time_series import time_series_table, write_csv, write_hdf5, write_plot

    if args.mass is not None and args.code_scale is not None:
        return fail(EXIT_USAGE, "give --mass or --code-scale, not both")  # before any work
    outputs = [p for p in (args.csv, args.hdf5, args.plot) if p]
    if len(set(outputs)) != len(outputs):
        return fail(EXIT_OUTPUT_ERROR, "--csv, --hdf5 and --plot must name different files")
    for path in outputs:
        check_new_output(path, args.force)
    if args.plot:
        try:
            import matplotlib  # noqa: F401
        except ImportError:
            return fail(EXIT_OUTPUT_ERROR, "--plot needs matplotlib: pip install 'emsource[plot]'")
    if on_cluster:
        (description, units, grid, count, results, attributes,
         mapping_scale) = _integrate_on_cluster(args)
    else:
        # One open file serves the description, the grid, the integration and the provenance.
        with open_snapshot(args.snapshot, args.mapping) as snap:
            description, units, grid = snap.description, snap.units, snap.grid
            count = len(snap.levels)
            chosen = snap.select(args.levels)
            results = integrate_open_snapshot(
                snap, radii=args.radius, theta_points=args.theta_points,
                interpolation_points=args.interpolation_points, memory_limit=args.memory_limit,
                levels=args.levels, progress=show_progress(args))
            attributes = snap.provenance(chosen, READ, _options(args, results))
            mapping_scale = snap.physical_scale
    scale, origin, error = chosen_scale(args, units, mapping_scale)
    if error:
        return fail(EXIT_USAGE, error)
    table = time_series_table(results, scale)
    attributes["mass_scale_solar"] = float(scale.mass_solar if scale is not None else 0.0)
    attributes["units"] = units
    if args.csv:
        write_csv(args.csv, table, force=args.force)
    if args.hdf5:
        write_hdf5(args.hdf5, table, attributes, force=args.force)
    if args.plot:
        write_plot(args.plot, table, force=args.force)
    if not args.quiet:
        print(summary(args, results, scale, description, units, grid, count, outputs, origin))
    return EXIT_OK


def summary(args, results, scale, description, units, grid, count, outputs, origin="--mass") -> str:
    nx, ny, nz = grid.shape
    lines = ["emsource integrate: done",
             f"  input        {args.snapshot}"
             + (f"  (mapping {args.mapping})" if args.mapping else "  (native layout)")]
    if description:
        lines.append(f"  scenario     {description}")
    lower = [o for o in grid.origin]
    upper = [o + (n - 1) * h for o, n, h in zip(grid.origin, grid.shape, grid.spacing)]
    lines.append(f"  grid         {nx} x {ny} x {nz} points, box [{lower[0]:g}, {upper[0]:g}] x "
                 f"[{lower[1]:g}, {upper[1]:g}] x [{lower[2]:g}, {upper[2]:g}], {units} units")
    lines.append(f"  time levels  {len(results)} of {count}")
    radii = list(results[0].luminosity)
    header = f"  {'t':>8} {'energy':>12} {'|momentum|':>12} {'flux out':>12}"
    header += "".join(f" {'L(r=' + format(r, 'g') + ')':>12}" for r in radii)
    lines.append("  code units (G = c = 1): flux out = through the six box faces, L = through a sphere")
    lines.append(header)
    for r in results:
        p = math.sqrt(float(sum(v * v for v in r.momentum)))
        row = f"  {r.time:8.4g} {r.energy:12.6g} {p:12.6g} {r.net_flux:12.6g}"
        row += "".join(f" {r.luminosity[radius]:12.6g}" for radius in radii)
        lines.append(row)
    if any(r.excised_points for r in results):
        lines.append(f"  excised      {results[0].excised_points} points (valid_mask = 0) "
                     "left out of the volume integrals")
    if scale is not None:
        lines.extend(physical_lines(results, scale, radii, origin))
    else:
        lines.append("  (give --mass MSUN or --code-scale VALUE UNIT, or a mapping's code_scale, "
                     "for cgs and SI values)")
    for path in outputs:
        lines.append(f"  wrote        {path}")
    return "\n".join(lines)


#: (heading, unit, PhysicalScale attribute) of each summary column in SI and in cgs.
_PHYSICAL_SUMMARY = {
    "SI": (("t", "s", "time_s"), ("energy", "J", "energy_J"),
           ("|momentum|", "kg m/s", "momentum_kg_m_s"), ("flux out", "W", "power_W"),
           ("max |E|", "V/m", "electric_field_V_m"), ("max |B|", "T", "magnetic_field_T")),
    "cgs": (("t", "s", "time_s"), ("energy", "erg", "energy_erg"),
            ("|momentum|", "g cm/s", "momentum_g_cm_s"), ("flux out", "erg/s", "power_erg_s"),
            ("max |E|", "statV/cm", "electric_field_statV_cm"),
            ("max |B|", "G", "magnetic_field_G")),
}


def physical_lines(results, scale, radii, origin) -> list:
    """The summary's SI and cgs tables: every reported quantity of every level."""
    lines = [f"  physical units ({origin}): M = {scale.mass_solar:.6g} M_sun, code length "
             f"{scale.length_m:.6g} m = {scale.length_cm:.6g} cm, code time {scale.time_s:.6g} s"]
    for system, columns in _PHYSICAL_SUMMARY.items():
        power = columns[3]
        headings = [f"{name} [{unit}]" for name, unit, _ in columns]
        headings += [f"L(r={r:g}) [{power[1]}]" for r in radii]
        lines.append(f"  {system}:" + "".join(f" {h:>19}" for h in headings))
        for r in results:
            p = math.sqrt(float(sum(v * v for v in r.momentum)))
            values = [r.time, r.energy, p, r.net_flux, r.max_electric_field, r.max_magnetic_field]
            row = [v * getattr(scale, attribute) for v, (_, _, attribute) in zip(values, columns)]
            row += [r.luminosity[radius] * getattr(scale, power[2]) for radius in radii]
            lines.append("      " + "".join(f" {v:>19.6g}" for v in row))
    if radii:
        lines.append("  sphere radii: " + ", ".join(f"r = {r:g} (code) = {r * scale.length_m:.6g} m"
                                                   for r in radii))
    return lines
