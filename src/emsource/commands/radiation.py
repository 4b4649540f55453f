"""``emsource radiation``: Newman-Penrose scalars, their modes and the radiated power on spheres."""

from __future__ import annotations

from . import EXIT_OK, EXIT_OUTPUT_ERROR, EXIT_USAGE
from ._cluster_options import add_cluster_options, block_bytes
from ._physical_scale import add_scale_options, chosen_scale
from ._snapshot_options import (add_input_options, check_new_output, fail, positive_number,
                               run_guarded, show_progress, whole_number_at_least)

HELP = "Newman-Penrose scalars, spin-weighted modes and radiated power on coordinate spheres"


def register(subparsers):
    parser = subparsers.add_parser(
        "radiation", help=HELP, description=HELP + ", time level by time level, streamed in "
        "slabs. Phi0, Phi1, Phi2 in the tetrad l, k = (n +- r)/sqrt2, m = (theta + i phi)/sqrt2 "
        "(r, theta, phi orthonormalised with the spatial metric, radial first); modes against "
        "spin-weighted harmonics of weight +1, 0, -1; power = kappa r^2 oint |Phi2|^2 dOmega "
        "with kappa = 1/(4 pi) (Gaussian) or 1 (Heaviside-Lorentz); net flux = the same with "
        "|Phi2|^2 - |Phi0|^2 (the Poynting luminosity in flat space).",
        epilog="Exit codes: 0 done, 2 usage (no --radius, --l-max above 24 or not below "
               "--theta-points, an --extrapolation-order with too few radii), 3 bad input (a "
               "sphere that does not fit in the grid or whose interpolation reaches excised "
               "points, non-finite data "
               "or a metric that is not positive definite on a sphere, a missing quantity), "
               "4 an output exists (use --force) or cannot be written, 130 interrupted. "
               "Nothing is written unless every level succeeds.")
    add_input_options(parser)
    parser.add_argument("--radius", metavar="R", action="append", default=[],
                        type=lambda text: positive_number(text, "a sphere radius"),
                        help="radius of an extraction sphere (code units); repeat for several")
    parser.add_argument("--l-max", metavar="L", default=4,
                        type=whole_number_at_least(1, "l-max"),
                        help="largest degree l of the modes (default 4; below --theta-points)")
    parser.add_argument("--theta-points", metavar="N", default=32,
                        type=whole_number_at_least(2, "theta points"),
                        help="Gauss-Legendre nodes in theta (2N in phi); default 32")
    parser.add_argument("--interpolation-points", metavar="P", default=4,
                        type=whole_number_at_least(2, "interpolation points", even=True),
                        help="Lagrange points per axis (even; default 4, cubic)")
    parser.add_argument("--extrapolation-order", metavar="K",
                        type=whole_number_at_least(0, "extrapolation order"),
                        help="fit the power at the radii by a polynomial of degree K in 1/r and "
                             "report its value at r -> infinity (default: min(2, radii - 1); "
                             "needs K + 1 radii)")
    add_scale_options(parser, "times, radii, power and net flux in cgs and SI")
    parser.add_argument("--csv", metavar="FILE", help="write modes and power as CSV")
    parser.add_argument("--hdf5", metavar="FILE", help="write modes and power as HDF5")
    parser.add_argument("--plot", metavar="PNG", help="plot power and Phi2 modes against time "
                        "(needs matplotlib: pip install 'emsource[plot]')")
    parser.add_argument("--force", action="store_true", help="replace existing output files")
    parser.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(parser, on_cluster=lambda args: _run(args, on_cluster=True))


#: What the radiation reads (for the provenance).
READ = ("spatial_metric", "electric_field", "magnetic_field", "valid_mask")


def _options(args, order, levels) -> dict:
    return {"radii": args.radius, "l_max": args.l_max, "theta_points": args.theta_points,
            "interpolation_points": args.interpolation_points, "extrapolation_order": order,
            "memory_limit_bytes": args.memory_limit, "levels": [lv.label for lv in levels]}


def _on_cluster(args, order, outputs):
    """(levels, provenance attributes, inputs, units, scale, origin, error) of a Dask run."""
    import json

    from ..distributed.radiation import radiation_series
    from ..distributed.series import choose_in_series, open_series
    from ..snapshot import open_snapshot, provenance_attributes

    series = open_series(args.snapshot, args.mapping)
    chosen = choose_in_series(series, args.levels, args.snapshot)
    files = sorted({level.path for level in chosen})
    inputs = tuple(files) + ((series[0].mapping,) if series[0].mapping else ())
    with open_snapshot(series[0].path, series[0].mapping) as snap:  # one mapping for all
        scale, origin, error = chosen_scale(args, snap.units, snap.physical_scale)
    if error:
        return None, None, inputs, None, scale, origin, error
    for path in outputs:
        check_new_output(path, args.force, inputs)
    levels = radiation_series(
        args.snapshot, mapping=args.mapping, radii=args.radius, l_max=args.l_max,
        theta_points=args.theta_points, interpolation_points=args.interpolation_points,
        levels=args.levels, block_bytes=block_bytes(args), progress=show_progress(args))
    used = [p for level in chosen for q in READ if level.has(q) for p in level.dataset_paths(q)]
    attributes = provenance_attributes(files[0], used, _options(args, order, levels),
                                       series[0].mapping)
    attributes["input_files"] = json.dumps(files)
    return levels, attributes, inputs, series[0].units, scale, origin, None


def _run(args, on_cluster=False) -> int:
    from ..radiation import radiation_open_snapshot
    from ..radiation_output import (write_radiation_csv, write_radiation_hdf5,
                                    write_radiation_plot)
    from ..snapshot import open_snapshot

    if not args.radius:
        return fail(EXIT_USAGE, "give at least one --radius R")
    from ..spin_harmonics import MAX_DEGREE

    if args.l_max > MAX_DEGREE:
        return fail(EXIT_USAGE, f"--l-max must be at most {MAX_DEGREE} (round-off of the "
                                f"spin-weighted harmonics), found {args.l_max}")
    if args.l_max >= args.theta_points:
        return fail(EXIT_USAGE, f"--l-max {args.l_max} needs --theta-points of at least "
                                f"{args.l_max + 1} (found {args.theta_points})")
    distinct = len(set(args.radius))
    order = args.extrapolation_order
    if order is None:
        order = min(2, distinct - 1) if distinct > 1 else None
    elif order + 1 > distinct:
        return fail(EXIT_USAGE, f"--extrapolation-order {order} needs at least {order + 1} "
                                f"distinct radii, found {distinct}")
    if args.mass is not None and args.code_scale is not None:
        return fail(EXIT_USAGE, "give --mass or --code-scale, not both")  # before any work
    outputs = [p for p in (args.csv, args.hdf5, args.plot) if p]
    if len(set(outputs)) != len(outputs):
        return fail(EXIT_OUTPUT_ERROR, "--csv, --hdf5 and --plot must name different files")
    if args.plot:
        try:
            import matplotlib  # noqa: F401
        except ImportError:
            return fail(EXIT_OUTPUT_ERROR, "--plot needs matplotlib: pip install 'emsource[plot]'")
    if on_cluster:
        levels, attributes, inputs, units, scale, origin, error = _on_cluster(args, order, outputs)
        if error:
            return fail(EXIT_USAGE, error)
    else:
        with open_snapshot(args.snapshot, args.mapping) as snap:
            scale, origin, error = chosen_scale(args, snap.units, snap.physical_scale)
            if error:
                return fail(EXIT_USAGE, error)
            for path in outputs:
                check_new_output(path, args.force, snap.inputs)
            levels = radiation_open_snapshot(
                snap, radii=args.radius, l_max=args.l_max, theta_points=args.theta_points,
                interpolation_points=args.interpolation_points, memory_limit=args.memory_limit,
                levels=args.levels, progress=show_progress(args))
            attributes = snap.provenance(snap.select(args.levels), READ,
                                         _options(args, order, levels))
            inputs = snap.inputs
            units = snap.units
    attributes.update(units=units, l_max=args.l_max, theta_points=args.theta_points,
                      interpolation_points=args.interpolation_points)
    if args.csv:
        write_radiation_csv(args.csv, levels, order, force=args.force, inputs=inputs,
                            scale=scale)
    if args.hdf5:
        write_radiation_hdf5(args.hdf5, levels, attributes, order, force=args.force,
                             inputs=inputs)
    if args.plot:
        write_radiation_plot(args.plot, levels, force=args.force, inputs=inputs)
    if not args.quiet:
        print(summary(args, levels, order, units, outputs, scale, origin))
    return EXIT_OK


def _complex(value) -> str:
    return f"{value.real:+.5e}{value.imag:+.5e}i"


def summary(args, levels, order, units, outputs, scale=None, origin="") -> str:
    lines = ["emsource radiation: done",
             f"  input        {args.snapshot}"
             + (f"  (mapping {args.mapping})" if args.mapping else "  (native layout)"),
             f"  spheres      r = {', '.join(format(r, 'g') for r in args.radius)}; l_max "
             f"{args.l_max}, {args.theta_points} theta points, {units} units",
             "  power = kappa r^2 oint |Phi2|^2, mode power = the same from the modes, net flux "
             "= kappa r^2 oint (|Phi2|^2 - |Phi0|^2)"]
    for level in levels:
        lines.append(f"  time level {level.label!r}, t = {level.time:.6g}")
        lines.append(f"    {'r':>8} {'power':>13} {'mode power':>13} {'net flux':>13}")
        for s in level.spheres:
            lines.append(f"    {s.radius:8.4g} {s.power:13.6e} {s.mode_power:13.6e} "
                         f"{s.net_flux:13.6e}")
        if order is not None:
            lines.append(f"    power extrapolated to r -> infinity (degree {order} in 1/r): "
                         f"{level.extrapolated_power(order):.6e}")
        if scale is not None:
            lines.append(f"    physical ({origin}): t = {level.time * scale.time_s:.6g} s")
            lines.append(f"    {'r [m]':>11} {'power [W]':>13} {'net flux [W]':>13} "
                         f"{'power [erg/s]':>13} {'net flux [erg/s]':>16}")
            for s in level.spheres:
                lines.append(f"    {s.radius * scale.length_m:11.5g} {s.power * scale.power_W:13.6e} "
                             f"{s.net_flux * scale.power_W:13.6e} "
                             f"{s.power * scale.power_erg_s:13.6e} "
                             f"{s.net_flux * scale.power_erg_s:16.6e}")
            if order is not None:
                lines.append(f"    extrapolated power: {level.extrapolated_power(order) * scale.power_W:.6e} W")
        for s in level.spheres:
            lines.append(f"    Phi2 modes at r = {s.radius:g} (spin weight -1):")
            indices = s.mode_indices("phi2")
            for l in range(1, s.l_max + 1):
                parts = [f"m={m:+d} {_complex(v)}" for (ll, m), v in zip(indices, s.modes["phi2"])
                         if ll == l]
                lines.append(f"      l={l}: " + "  ".join(parts))
    for path in outputs:
        lines.append(f"  wrote        {path}")
    return "\n".join(lines)
