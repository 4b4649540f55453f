"""``emsource constraint-convergence``: constraint residuals of Kerr-Newman data versus h.

Samples the exact Kerr-Newman data (emsource.exact.kerr_schild) on a box at several
resolutions, evaluates the Hamiltonian and momentum constraints at each finite-difference order
with Gaussian electromagnetic sources and without them, prints the table (CSV) and, with
``--plot``, draws it (needs matplotlib, the ``plot`` extra).
"""

from __future__ import annotations

from .._arguments import DIFFERENCE_ORDERS
from . import EXIT_BAD_INPUT, EXIT_OK, EXIT_OUTPUT_ERROR


def register(subparsers):
    p = subparsers.add_parser(
        "constraint-convergence",
        help="convergence of the ADM constraints on exact Kerr-Newman data (table, plot)",
        description="Evaluate the Hamiltonian and momentum constraints of exact Kerr-Newman "
                    "data on a box at several resolutions and finite-difference orders, with "
                    "and without the electromagnetic sources, and print (and plot) the "
                    "normalised residuals against the grid spacing.",
    )
    p.add_argument("--mass", type=float, default=1.0)
    p.add_argument("--spin", type=float, default=0.6)
    p.add_argument("--charge", type=float, default=0.5)
    p.add_argument("--lower", type=float, nargs=3, default=[2.5, 0.5, -0.5], metavar="X",
                   help="lower box corner (default 2.5 0.5 -0.5; keep it outside the horizon)")
    p.add_argument("--upper", type=float, nargs=3, default=[3.5, 1.5, 0.5], metavar="X")
    p.add_argument("--points", type=int, nargs="+", default=[13, 17, 25, 33],
                   help="points per axis, one run each (default 13 17 25 33)")
    p.add_argument("--orders", type=int, nargs="+", default=list(DIFFERENCE_ORDERS),
                   choices=DIFFERENCE_ORDERS)
    p.add_argument("--plot", default=None, metavar="PNG", help="write a plot to this PNG file")
    p.set_defaults(run=run)


def convergence_tables(mass, spin, charge, lower, upper, points, orders):
    """One :class:`emsource.convergence.ConvergenceTable` per (order, sources) for Kerr-Newman.

    Errors "hamiltonian" (normalised l2 norm of H) and "momentum" (the largest over i of that
    of M_i), through :func:`emsource.convergence.convergence_study`; with Gaussian sources the
    design order is the finite-difference order, without them there is none (the residual
    tends to the missing source term).
    """
    from ..constraints import adm_constraints
    from ..convergence import convergence_study
    from ..exact import kerr_newman
    from ..grid import UniformGrid

    data = {}

    def level_at(n):
        if n not in data:
            grid = UniformGrid.from_bounds(lower, upper, (n, n, n))
            data[n] = (grid, kerr_newman(grid, mass=mass, spin=spin, charge=charge))
        return data[n]

    tables = {}
    for order in orders:
        for sources in ("gaussian", "vacuum"):
            def compute(n, order=order, sources=sources):
                grid, d = level_at(n)
                fields = (d.E, d.B) if sources == "gaussian" else ()
                res = adm_constraints(d.gamma, d.K, *fields, spacing=grid.spacing, order=order,
                                      valid_mask=d.valid_mask)
                return grid.spacing[0], {
                    "hamiltonian": res.hamiltonian_norms.normalised_l2,
                    "momentum": float(max(res.momentum_norms.normalised_l2))}

            tables[order, sources] = convergence_study(
                compute, points, case=f"Kerr-Newman constraints, order {order}, sources {sources}",
                design_order=order if sources == "gaussian" else None)
    return tables


def convergence_table(mass, spin, charge, lower, upper, points, orders):
    """Rows (order, sources, n, h, H, M) of :func:`convergence_tables`."""
    rows = []
    tables = convergence_tables(mass, spin, charge, lower, upper, points, orders)
    for k, n in enumerate(points):
        for order in orders:
            for sources in ("gaussian", "vacuum"):
                t = tables[order, sources]
                rows.append((order, sources, n, float(t.spacings[k]),
                             float(t.errors["hamiltonian"][k]), float(t.errors["momentum"][k])))
    return rows


def run(args) -> int:
    try:
        rows = convergence_table(args.mass, args.spin, args.charge, args.lower, args.upper,
                                 args.points, args.orders)
    except ValueError as exc:
        print(f"emsource constraint-convergence: {exc}")
        return EXIT_BAD_INPUT
    print("order,sources,points,h,hamiltonian_normalised_l2,momentum_normalised_l2_max")
    for order, sources, n, h, hn, mn in rows:
        print(f"{order},{sources},{n},{h:.6g},{hn:.6e},{mn:.6e}")
    if args.plot:
        try:
            import matplotlib

            matplotlib.use("Agg")
            import matplotlib.pyplot as plt
        except ImportError:
            print("emsource constraint-convergence: --plot needs matplotlib (pip install emsource[plot])")
            return EXIT_BAD_INPUT
        fig, axes = plt.subplots(1, 2, figsize=(10, 4.2), sharex=True)
        colours = {2: "tab:blue", 4: "tab:orange", 6: "tab:green"}
        for ax, column, title in ((axes[0], 4, "Hamiltonian constraint"),
                                  (axes[1], 5, "momentum constraint")):
            for order in args.orders:
                for sources, style in (("gaussian", "-o"), ("vacuum", ":x")):
                    sel = [r for r in rows if r[0] == order and r[1] == sources]
                    label = (f"order {order}, " +
                             ("EM sources (Gaussian)" if sources == "gaussian" else "no EM sources"))
                    ax.loglog([r[3] for r in sel], [r[column] for r in sel], style,
                              color=colours[order], label=label)
                sel = [r for r in rows if r[0] == order and r[1] == "gaussian"]
                h0, v0 = sel[-1][3], sel[-1][column]
                hs = [r[3] for r in sel]
                ax.loglog(hs, [v0 * (h / h0) ** order for h in hs], color="grey", lw=0.6)
            ax.set_title(title)
            ax.set_xlabel("grid spacing h / M")
            ax.grid(True, which="major", lw=0.3)
        axes[0].set_ylabel("l2 of residual / l2 of its largest term")
        axes[1].legend(fontsize=7, loc="lower right")
        fig.suptitle(f"Kerr-Newman (M = {args.mass:g}, a = {args.spin:g}, Q = {args.charge:g}), "
                     "Kerr-Schild slice; grey: h^order")
        fig.tight_layout()
        try:
            fig.savefig(args.plot, dpi=110)
        except OSError as exc:
            print(f"emsource constraint-convergence: cannot write {args.plot}: {exc}")
            return EXIT_OUTPUT_ERROR
        print(f"wrote {args.plot}")
    return EXIT_OK
