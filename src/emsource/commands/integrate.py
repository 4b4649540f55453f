"""``emsource integrate``: energy, momentum, fluxes and luminosity of every time level."""

from __future__ import annotations

import argparse
import math

from . import EXIT_OK, EXIT_OUTPUT_ERROR
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
    parser.add_argument("--mass", metavar="MSUN",
                        type=lambda text: positive_number(text, "mass", " of solar masses"),
                        help="mass scale in solar masses: also report cgs and SI values")
    parser.add_argument("--csv", metavar="FILE", help="write the time series as CSV")
    parser.add_argument("--hdf5", metavar="FILE", help="write the time series as HDF5")
    parser.add_argument("--plot", metavar="PNG", help="plot energy and fluxes against time "
                        "(needs matplotlib: pip install 'emsource[plot]')")
    parser.add_argument("--force", action="store_true", help="replace existing output files")
    parser.set_defaults(run=lambda args: run_guarded(_run, args))


def _run(args) -> int:
    from ..integrals import integrate_open_snapshot
    from ..snapshot import open_snapshot
    from ..physical_units import physical_scale
    from ..time_series import time_series_table, write_csv, write_hdf5, write_plot

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
    # One open file serves the description, the grid, the integration and the provenance.
    with open_snapshot(args.snapshot, args.mapping) as snap:
        description, units, grid = snap.description, snap.units, snap.grid
        count = len(snap.levels)
        chosen = snap.select(args.levels)
        results = integrate_open_snapshot(
            snap, radii=args.radius, theta_points=args.theta_points,
            interpolation_points=args.interpolation_points, memory_limit=args.memory_limit,
            levels=args.levels, progress=show_progress(args))
        options = {"radii": args.radius, "theta_points": args.theta_points,
                   "interpolation_points": args.interpolation_points, "mass_solar": args.mass,
                   "memory_limit_bytes": args.memory_limit, "levels": [r.label for r in results]}
        attributes = snap.provenance(chosen, ("spatial_metric", "electric_field",
                                              "magnetic_field", "lapse", "shift", "valid_mask"),
                                     options)
    scale = physical_scale(args.mass, units) if args.mass is not None else None
    table = time_series_table(results, scale)
    attributes["mass_scale_solar"] = float(args.mass or 0.0)
    attributes["units"] = units
    if args.csv:
        write_csv(args.csv, table, force=args.force)
    if args.hdf5:
        write_hdf5(args.hdf5, table, attributes, force=args.force)
    if args.plot:
        write_plot(args.plot, table, force=args.force)
    if not args.quiet:
        print(summary(args, results, scale, description, units, grid, count, outputs))
    return EXIT_OK


def summary(args, results, scale, description, units, grid, count, outputs) -> str:
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
    last = results[-1]
    if scale is not None:
        lines.append(f"  physical units for M = {scale.mass_solar:g} M_sun (length unit "
                     f"{scale.length_cm:.4g} cm, time unit {scale.time_s:.4g} s), last level:")
        lines.append(f"    {'energy':<17}{last.energy * scale.energy_erg:.4g} erg = "
                     f"{last.energy * scale.energy_J:.4g} J")
        for radius in radii:
            value = last.luminosity[radius]
            lines.append(f"    {'L(r=' + format(radius, 'g') + ')':<17}{value * scale.luminosity_erg_s:.4g} erg/s = "
                         f"{value * scale.luminosity_W:.4g} W   (r = {radius * scale.length_cm:.4g} cm)")
        lines.append(f"    {'max |B|':<17}{last.max_magnetic_field * scale.magnetic_field_G:.4g} G "
                     f"= {last.max_magnetic_field * scale.magnetic_field_T:.4g} T")
        lines.append(f"    {'max |E|':<17}{last.max_electric_field * scale.electric_field_statV_cm:.4g}"
                     f" statV/cm = {last.max_electric_field * scale.electric_field_V_m:.4g} V/m")
    else:
        lines.append("  (give --mass MSUN for cgs and SI values)")
    for path in outputs:
        lines.append(f"  wrote        {path}")
    return "\n".join(lines)
