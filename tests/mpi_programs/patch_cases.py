"""The global quantities compared between one process and MPI ranks (shared by both sides).

Each case builds exact data on ``place(global_grid)`` (the whole grid in one process, the rank's
:class:`emsource.patches.PatchGrid` under MPI) and returns named float arrays of global results,
plus "magnitude" entries: the sums of |terms| that bound a sum's round-off
(:mod:`emsource.reductions`). The single-process side (``comm=None``) is the reference; the
grids are small and of uneven sizes, so that 2 and 3 ranks split them unevenly.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from emsource import exact
from emsource.constraints import adm_constraints
from emsource.conservation import global_balance, level_residual
from emsource.convergence import residual_convergence
from emsource.grid import UniformGrid
from emsource.integrals import FACES, integrate_level_arrays

#: Global grids: unequal sides, no axis a multiple of 2 or 3 ranks everywhere.
DIPOLE_GRID = UniformGrid.from_bounds((-1.5, -1.6, -1.6), (1.5, 1.6, 1.6), (14, 13, 11))
WAVE_GRID = UniformGrid.from_bounds((0.0, 0.0, 0.0), (1.0, 0.9, 0.7), (13, 12, 11))
CHARGE_GRID = UniformGrid.from_bounds((-1.2, -1.1, -1.0), (1.2, 1.3, 1.0), (13, 14, 11))
HOLE_GRID = UniformGrid.from_bounds((3.0, 1.0, 0.5), (4.0, 2.0, 1.5), (13, 12, 11))
CHARGE = {"charge": 1.0, "width": 0.35, "velocity": (0.4, 0.3, 0.2),
          "center": (0.013, -0.021, 0.017)}
RADII = (1.0, 1.2)  # both spheres cross the patch boundaries of every decomposition used


def _norms(prefix, norms):
    return {f"{prefix} {name}": np.atleast_1d(np.asarray(getattr(norms, name), float))
            for name in ("l2", "max", "normalised_l2", "normalised_max", "scale_l2", "scale_max")}


def spoil_outer_ghosts(grid, arrays, valid_ghosts):
    """NaN in the ghost layers beyond the first ``valid_ghosts`` (copies): data a rank must not
    read when the caller says only ``valid_ghosts`` layers are valid."""
    inner = grid.valid_extent(valid_ghosts)
    out = []
    for a in arrays:
        spoiled = np.full_like(a, np.nan)
        index = (Ellipsis,) + inner
        spoiled[index] = a[index]
        out.append(spoiled)
    return out


def integrals_case(place, comm, valid_ghosts=None):
    """Energy, momentum, face fluxes, luminosity, extreme fields of a rotating dipole with an
    excised core (valid_mask), on a grid whose patches the spheres cross."""
    d = exact.rotating_dipole(place(DIPOLE_GRID), 0.3, excision_radius=0.25)
    fields = [d.gamma, d.E, d.B, d.alpha, d.beta]
    if valid_ghosts is not None:
        fields = spoil_outer_ghosts(d.grid, fields, valid_ghosts)
    gamma, E, B, alpha, beta = fields
    r = integrate_level_arrays(d.grid, gamma, E, B, lapse=alpha, shift=beta,
                               valid_mask=d.valid_mask, radii=RADII, theta_points=8,
                               comm=comm, valid_ghosts=valid_ghosts)
    return {"energy": [r.energy], "momentum": r.momentum,
            "face flux": [r.face_flux[f] for f in FACES],
            "luminosity": [r.luminosity[x] for x in RADII],
            "excised points": [r.excised_points],
            "max fields": [r.max_electric_field, r.max_magnetic_field]}


def residual_cases(place, comm, valid_ghosts=None):
    """Conservation norms: a gauge-wave level (lapse, metric, K; supplied time derivatives),
    a moving charge (charge and current terms; time derivatives from three levels) and a
    rotating dipole with an excised core (valid_mask)."""
    out = {}
    wave = exact.plane_wave_gauge_wave(place(WAVE_GRID), 0.21)
    if valid_ghosts is not None:
        names = ("alpha", "beta", "gamma", "K", "E", "B", "dt_E", "dt_B", "dt_gamma")
        spoiled = spoil_outer_ghosts(wave.grid, [getattr(wave, q) for q in names], valid_ghosts)
        wave = replace(wave, **dict(zip(names, spoiled)))
    r = level_residual(wave, order=4, comm=comm, valid_ghosts=valid_ghosts)
    out.update(_norms("wave energy", r.energy_norms))
    out.update(_norms("wave momentum", r.momentum_norms))
    grid = place(CHARGE_GRID)
    levels = [exact.boosted_gaussian_charge(grid, t, **CHARGE) for t in (0.06, 0.1, 0.14)]
    r = level_residual(levels[1], order=2, before=levels[0], after=levels[2], comm=comm)
    out.update(_norms("charge energy", r.energy_norms))
    out.update(_norms("charge momentum", r.momentum_norms))
    out["charge interior points"] = [r.norm_partial.count]
    # An excised core (valid_mask) that several patches share: interior points need their
    # whole stencil on valid points, on whichever rank the neighbours live.
    dipole = exact.rotating_dipole(place(DIPOLE_GRID), 0.3, excision_radius=0.6)
    r = level_residual(dipole, order=2, valid_mask=dipole.valid_mask, comm=comm)
    out.update(_norms("dipole energy", r.energy_norms))
    out.update(_norms("dipole momentum", r.momentum_norms))
    out["dipole interior points"] = [r.norm_partial.count]
    return out


def constraints_case(place, comm, valid_ghosts=None):
    """Hamiltonian and momentum constraint norms of Kerr-Newman data (curved metric, K, E, B)."""
    d = exact.kerr_newman(place(HOLE_GRID), mass=1.0, spin=0.6, charge=0.5)
    r = adm_constraints(d.gamma, d.K, d.E, d.B, spacing=d.grid.spacing, order=4,
                        patch=d.grid if comm is not None else None, comm=comm)
    out = _norms("hamiltonian", r.hamiltonian_norms)
    out.update(_norms("momentum constraint", r.momentum_norms))
    return out


def balance_case(place, comm, valid_ghosts=None):
    """The global energy-momentum balance of a moving charge over three time levels."""
    grid = place(CHARGE_GRID)
    levels = [exact.boosted_gaussian_charge(grid, t, **CHARGE) for t in (0.0, 0.05, 0.1)]
    b = global_balance(levels, order=4, comm=comm)
    return {"totals": b.totals.ravel(), "outflow rates": b.outflow_rates.ravel(),
            "source rates": b.source_rates.ravel(),
            "energy mismatch": [b.energy.mismatch], "momentum mismatch": b.momentum.mismatch}


def convergence_case(place, comm, valid_ghosts=None):
    """A convergence table of the gauge-wave residual at three resolutions."""
    def make_level(n, t):
        grid = UniformGrid.from_bounds((0.0, 0.0, 0.0), (1.0, 0.8, 0.3), (n, n - 2, 7))
        return exact.plane_wave_gauge_wave(place(grid), t)

    table = residual_convergence(make_level, (12, 16, 20), order=4, comm=comm)
    out = {f"errors {k}": v for k, v in table.errors.items()}
    out.update({f"orders {k}": v for k, v in table.orders.items()})
    return out


def named_case(place, comm, valid_ghosts=None):
    """``convergence.run_case`` of the named moving-frame case (shift terms; observed orders
    3.89, 3.95 against the design order 4 in one process), which decomposes each resolution's
    grid itself (``place`` is not used)."""
    from emsource.convergence import run_case

    table = run_case("moving_frame", order=4, resolutions=(16, 24, 32), comm=comm)
    out = {f"errors {k}": v for k, v in table.errors.items()}
    out.update({f"orders {k}": v for k, v in table.orders.items()})
    return out


CASES = {"integrals": integrals_case, "residuals": residual_cases,
         "constraints": constraints_case, "balance": balance_case,
         "convergence": convergence_case, "named convergence": named_case}


def run_all(place, comm, cases=tuple(CASES), valid_ghosts=None):
    """The results of ``cases``, as a dict of name -> list of floats (JSON-ready)."""
    results = {}
    for name in cases:
        for key, value in CASES[name](place, comm, valid_ghosts).items():
            results[f"{name}: {key}"] = [float(v) for v in np.ravel(np.asarray(value, float))]
    return results


def reference_magnitudes():
    """Sums of |terms| of the single-process sums (the scale of their round-off), by the keys
    of :func:`run_all`: from the mergeable partials of the whole grid."""
    from emsource.conservation import balance_partial
    from emsource.integrals import CoordinateSphere, level_partial
    from emsource.reductions import combine_all

    d = exact.rotating_dipole(DIPOLE_GRID, 0.3, excision_radius=0.25)
    spheres = [CoordinateSphere(r, DIPOLE_GRID, 8, 4) for r in RADII]
    p = level_partial(DIPOLE_GRID, d.gamma, d.E, d.B, lapse=d.alpha, shift=d.beta,
                      valid_mask=d.valid_mask, spheres=spheres)
    levels = [exact.boosted_gaussian_charge(CHARGE_GRID, t, **CHARGE) for t in (0.0, 0.05, 0.1)]
    times = [s.t for s in levels]
    b = combine_all(balance_partial(s, times, k, order=4) for k, s in enumerate(levels))
    return {"integrals: energy": [float(p.energy.magnitude)],
            "integrals: momentum": p.momentum.magnitude.tolist(),
            "integrals: face flux": p.face_flux.magnitude.tolist(),
            "integrals: luminosity": p.luminosity.magnitude.tolist(),
            "balance: totals": b.totals.magnitude.ravel().tolist(),
            "balance: outflow rates": b.outflow_rates.magnitude.ravel().tolist(),
            "balance: source rates": b.source_rates.magnitude.ravel().tolist()}
