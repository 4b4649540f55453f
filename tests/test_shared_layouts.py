"""Every mix of strided and contiguous caller arrays shares one compiled specialisation.

The conservation kernels take about a minute per compiled specialisation (DEVELOPERS.md,
"Adding a kernel"), and Numba compiles one per tuple of argument types, an array's layout and
writability included. The wrappers type the caller's arrays by dtype alone
(``kernels._compile.call_sharing_layouts``); these tests check that two different strided mixes,
ghost-zone slices and read-only inputs compile nothing new in this process and give the same
numbers as the contiguous path, and that data stored z, y, x (every array x-fastest, as a
snapshot stored in that order) run on the contiguous specialisation with the grid axes reversed.

Reference: the contiguous path (an independent route through another compiled loop, itself
checked against exact solutions in ``test_conservation.py``), on the plane wave of
``conservation_fixtures`` (Jackson, Classical Electrodynamics, 3rd ed. 1999, sec. 7.1) with a
perturbed metric, so that every term of the equations, the metric derivatives included, is on.
"""

from __future__ import annotations

import numpy as np

import conservation_fixtures as F
from conftest import assert_same_arithmetic
from emsource import adm_sources
from emsource.conservation import conservation_residual
from emsource.kernels import conservation as kernels
from emsource.kernels import sources as source_kernels
from emsource.kernels._compile import specialisations

NAMES = ("alpha", "beta", "gamma", "K", "E", "B", "dt_E", "dt_B", "dt_gamma")


def z_fastest(a):
    """The values of ``a`` (components first, grid axes x, y, z) stored as (components, z, y, x)
    and seen through a transposed view with axes (components, x, y, z): strided."""
    lead = a.ndim - 3
    stored = np.ascontiguousarray(np.moveaxis(a, (lead, lead + 2), (lead + 2, lead)))
    return np.moveaxis(stored, (lead, lead + 2), (lead + 2, lead))


def with_ghosts(a, g=2):
    """``a`` inside a larger array (``g`` extra layers on every face, filled with NaN) and seen
    through the slice that cuts them off: strided, as a solver's ghost-zone arrays."""
    lead = a.ndim - 3
    big = np.full(a.shape[:lead] + tuple(n + 2 * g for n in a.shape[lead:]), np.nan)
    inner = (slice(None),) * lead + (slice(g, -g),) * 3
    big[inner] = a
    return big[inner]


def read_only(a):
    view = a.view()
    view.flags.writeable = False
    return view


def residual_of(d, work=None):
    return conservation_residual(d["alpha"], d["beta"], d["gamma"], d["K"], d["E"], d["B"],
                                 spacing=SPACING, dt_E=d["dt_E"], dt_B=d["dt_B"],
                                 dt_gamma=d["dt_gamma"], work=work)


GRID = F.cube_grid(11, half_width=0.25)
SPACING = GRID.spacing


def wave_data():
    level = F.plane_wave(GRID, 0.37)
    d = {name: np.ascontiguousarray(getattr(level, name)) for name in NAMES}
    d["gamma"] = d["gamma"] + 0.01 * d["E"][[0, 0, 1, 1, 2, 2]] ** 2  # every metric term on
    return d


def own_signatures():
    """The signatures the conservation kernels compiled lazily (at call time) in this process."""
    return [list(kernels.fluxes_and_rates.signatures), list(kernels.residuals.signatures)]


def test_strided_mixes_share_one_specialisation_and_give_the_same_numbers():
    d = wave_data()
    mixes = {
        "fields z-fastest": {k: (z_fastest(v) if k in ("E", "B", "dt_E") else v)
                             for k, v in d.items()},
        "metric z-fastest, shift in ghost zones": {
            k: (z_fastest(v) if k in ("gamma", "K") else with_ghosts(v) if k == "beta" else v)
            for k, v in d.items()},
        "ghost zones, read-only metric": {k: (read_only(with_ghosts(v)) if k == "gamma"
                                              else with_ghosts(v)) for k, v in d.items()},
    }
    reference = residual_of(d)
    own_before = own_signatures()
    results = {}
    shared = []
    for name, mix in mixes.items():
        assert not all(a.flags.c_contiguous for a in mix.values()), name
        results[name] = residual_of(mix)
        shared.append([specialisations(k) for k in (kernels.fluxes_and_rates,
                                                    kernels.residuals)])
    # The lazily compiled specialisations do not grow with the mixes (on a wrapper that hands
    # each mix to Numba as it is, each mix adds one to both kernels).
    assert own_signatures() == own_before
    # The second and third mix reuse what the first one compiled.
    assert shared[1] == shared[0] and shared[2] == shared[0]
    for per_kernel in shared[0]:
        strided = [s for s in per_kernel
                   if any(getattr(t, "layout", "C") == "A" for t in s)]
        assert len(strided) == 1, per_kernel
    # One compiled code for every mix: the same bits. Against the contiguous path (its own
    # compiled loop), the FMA-contraction bound of conftest.assert_same_arithmetic.
    first = results["fields z-fastest"]
    for name, r in results.items():
        np.testing.assert_array_equal(r.energy, first.energy, err_msg=name)
        np.testing.assert_array_equal(r.momentum, first.momentum, err_msg=name)
        inner = reference.interior
        assert_same_arithmetic(r.energy[inner], reference.energy[inner])
        assert_same_arithmetic(r.momentum[:, inner], reference.momentum[:, inner])
        assert_same_arithmetic(r.momentum_scale[:, inner], reference.momentum_scale[:, inner])
    # The comparisons above were of finite residuals, not of NaN: the perturbed metric makes the
    # residual of order one (not a solution), and every interior value is finite.
    assert np.all(np.isfinite(reference.energy[reference.interior]))
    assert np.all(np.isfinite(reference.momentum[:, reference.interior]))
    assert reference.energy_norms.max > 1e-3 * np.max(reference.energy_scale[reference.interior])


def test_data_stored_z_y_x_run_on_the_contiguous_specialisation():
    # Every array stored z, y, x: the wrapper hands the kernels the arrays with the grid axes
    # reversed (C-contiguous views), so the strips run along x, the axis adjacent in memory,
    # on the specialisation the contiguous data compiled; no strided one is compiled for them.
    d = wave_data()
    reference = residual_of(d)
    before = [specialisations(k) for k in (kernels.fluxes_and_rates, kernels.residuals)]
    own_before = own_signatures()
    stored = {k: z_fastest(v) for k, v in d.items()}
    r = residual_of(stored)
    assert [specialisations(k) for k in (kernels.fluxes_and_rates, kernels.residuals)] == before
    assert own_signatures() == own_before
    # The same point code and stencils (each derivative the same terms in the same order, the
    # divergence summed x, y, z) on the same values: only the loop a point falls into (vector
    # body or remainder, along x now instead of z) differs, and with it the FMA contractions,
    # so the bound of conftest.assert_same_arithmetic. A wrong step or radius along an axis
    # gives differences of order one.
    inner = reference.interior
    for got, want in ((r.energy, reference.energy), (r.momentum, reference.momentum),
                      (r.energy_scale, reference.energy_scale),
                      (r.momentum_scale, reference.momentum_scale)):
        np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
        assert_same_arithmetic(got[..., inner], want[..., inner])
    # Norms: the same sums of squares in another order (rows along x instead of z), each
    # partial sum rounding at most eps of the running total: N eps relative for N points.
    count = np.count_nonzero(~np.isnan(reference.energy))
    eps = np.finfo(np.float64).eps
    for name in ("energy_norms", "momentum_norms"):
        for field in ("l2", "max"):
            np.testing.assert_allclose(getattr(getattr(r, name), field),
                                       getattr(getattr(reference, name), field),
                                       rtol=count * eps, atol=0, err_msg=f"{name}.{field}")
    # The outputs keep the inputs' storage order (x fastest): allocated for the reversed axes.
    assert r.energy.strides[0] < r.energy.strides[1] < r.energy.strides[2]
    # A caller's work array stored the same way keeps that path (the same compiled code on the
    # same values: the same bits); a C-ordered one sends the call down the strided path.
    nx, ny, nz = d["alpha"].shape
    stored_work = np.empty((16, nz, ny, nx)).transpose(0, 3, 2, 1)
    again = residual_of(stored, work=stored_work)
    np.testing.assert_array_equal(again.momentum, r.momentum)
    assert [specialisations(k) for k in (kernels.fluxes_and_rates, kernels.residuals)] == before


def test_inputs_are_not_modified_or_made_read_only():
    d = wave_data()
    mix = {k: z_fastest(v) for k, v in d.items()}
    copies = {k: v.copy() for k, v in mix.items()}
    residual_of(mix)
    for k, v in mix.items():
        assert v.flags.writeable, k
        np.testing.assert_array_equal(v, copies[k], err_msg=k)


def test_source_column_path_shares_one_specialisation():
    """The sources' column loop (strided views) shares one specialisation across mixes too."""
    d = wave_data()
    gamma, E, B = d["gamma"], d["E"], d["B"]
    own = list(source_kernels.adm_sources_grid.signatures)
    reference = adm_sources(gamma, E, B)
    mixes = [(z_fastest(gamma), z_fastest(E), z_fastest(B)),
             (gamma, z_fastest(E), B),
             (read_only(with_ghosts(gamma)), with_ghosts(E), read_only(with_ghosts(B)))]
    counts = []
    for mix in mixes:
        result = adm_sources(*mix)
        counts.append(len(specialisations(source_kernels.adm_sources_grid)))
        for got, expected in zip(result, reference):
            assert_same_arithmetic(got, expected)
    assert list(source_kernels.adm_sources_grid.signatures) == own
    assert counts[1] == counts[0] and counts[2] == counts[0]
