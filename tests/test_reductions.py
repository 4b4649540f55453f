"""Mergeable reductions: grids split into 2, 3 and 7 uneven pieces give the single-piece results.

Each test cuts a grid along x into pieces (with the halo rows a piece needs for its stencils),
computes the partial result of every piece with the package's own per-piece function, combines
the partials in several orders and tree shapes, and compares with the partial of the whole grid.

Tolerance (derived, module docstring of emsource.reductions): a piece sums its terms in
extended precision and rounds once, 0.5 eps of the sum of the |terms| (its magnitude M); n pieces
add n - 1 float64 roundings, each at most eps of a partial magnitude <= M. The terms themselves
can differ by a rounding or two between a piece and the whole grid (a point can fall in the
vectorised body of a kernel loop in one run and in its scalar remainder in the other, and
NumPy's einsum picks its inner loop by array size), which adds at most 2 eps M. So
|combined - single| <= (n + 3) eps M: for n = 7 that is 2.2e-15 M, inside the 1e-14 asked.
For like-signed terms (energies, sums of squares) M is the value itself, so this is relative;
for sums with cancellation (net fluxes, momenta, luminosity node sums) it is relative to M.
Maxima and counts are exact.
"""

import math
from functools import reduce

import numpy as np
import pytest

from emsource import conservation, constraints, exact, integrals
from emsource.grid import UniformGrid
from emsource.reductions import (BalancePartial, NormPartial, Sum, combine, combine_all)

EPS = np.finfo(np.float64).eps
PIECES = (2, 3, 7)


def uneven_bounds(n, k):
    """k consecutive row ranges covering 0:n with sizes in the ratio 1 : 2 : ... : k (>= 1)."""
    weights = np.arange(1, k + 1, dtype=float)
    edges = np.round(np.concatenate([[0.0], np.cumsum(weights)]) / weights.sum() * n).astype(int)
    for i in range(1, k + 1):
        edges[i] = max(edges[i], edges[i - 1] + 1)
    edges[-1] = n
    assert len(set(np.diff(edges))) > 1 or k == 1  # really uneven
    return list(zip(edges[:-1], edges[1:]))


def tree(partials):
    """Balanced pairwise tree reduction (the shape of an MPI allreduce)."""
    while len(partials) > 1:
        partials = [combine(partials[i], partials[i + 1]) if i + 1 < len(partials)
                    else partials[i] for i in range(0, len(partials), 2)]
    return partials[0]


def orders_of_combination(partials, rng):
    """The same partials combined left to right, right to left, as a tree, shuffled."""
    shuffled = [partials[i] for i in rng.permutation(len(partials))]
    return {"left": combine_all(partials),
            "right": reduce(lambda a, b: combine(b, a), partials[::-1]),
            "tree": tree(list(partials)),
            "shuffled": combine_all(shuffled)}


def assert_sums_agree(combined: Sum, single: Sum, n):
    bound = (n + 3) * EPS * single.magnitude
    assert np.all(np.abs(combined.value - single.value) <= bound), (
        combined.value, single.value, bound)
    assert np.all(np.abs(combined.magnitude - single.magnitude) <= bound)


def assert_norms_agree(combined: NormPartial, single: NormPartial, n):
    assert combined.count == single.count
    np.testing.assert_array_equal(combined.maximum, single.maximum)
    np.testing.assert_array_equal(combined.scale_maximum, single.scale_maximum)
    # sums of squares: like-signed, so the bound is relative
    for a, b in ((combined.square_sum, single.square_sum),
                 (combined.scale_square_sum, single.scale_square_sum)):
        assert np.all(np.abs(a - b) <= (n + 3) * EPS * b), (a, b)
    f_c, f_s = combined.finalise(), single.finalise()
    for a, b in zip(f_c, f_s):
        # sqrt halves a relative error; the ratios add one more rounding each
        assert np.allclose(a, b, rtol=1e-14, atol=0)


def test_combine_changes_neither_partial_and_is_commutative():
    a = Sum.of(np.array([1.0, -2.0, 3.5]))
    b = Sum.of(np.array([0.25, 4.0]))
    before = (a.value.copy(), a.magnitude.copy(), b.value.copy())
    ab, ba = combine(a, b), combine(b, a)
    assert float(ab.value) == float(ba.value) == 6.75 and float(ab.magnitude) == 10.75
    assert (a.value, a.magnitude, b.value) == before
    with pytest.raises(ValueError):
        a.value[...] = 0.0  # partials are read-only
    n = NormPartial.of_points(np.array([[3.0, -4.0]]), np.array([[5.0, 5.0]]))
    m = NormPartial.of_points(np.array([[0.0]]), np.array([[1.0]]))
    nm = combine(n, m)
    assert (nm.count, float(nm.square_sum[0]), float(nm.maximum[0])) == (3, 25.0, 4.0)
    assert n.count == 2  # unchanged
    assert nm.finalise(0).l2 == pytest.approx(math.sqrt(25 / 3), rel=1e-15)


@pytest.fixture(scope="module")
def dipole_level():
    grid = UniformGrid.from_bounds((-3.0, -2.5, -2.0), (3.0, 2.5, 2.0), (37, 21, 17))
    data = exact.rotating_dipole(grid, 0.4, moment=1.0, omega=1.0, inclination=math.pi / 4,
                                 excision_radius=0.3)
    return grid, data


@pytest.mark.parametrize("n", PIECES)
def test_integrals_of_pieces_combine_to_the_whole(dipole_level, n, rng):
    # Rotating dipole (emsource.exact): energy, momentum, six face fluxes, two sphere
    # luminosities (each node counted by the piece holding its stencil start), excised points.
    grid, data = dipole_level
    p = 4
    spheres = [integrals.CoordinateSphere(R, grid, 16, p) for R in (1.2, 1.7)]
    mask = data.valid_mask.astype(np.uint8)
    whole = integrals.level_partial(grid, data.gamma, data.E, data.B, valid_mask=mask, spheres=spheres)
    pieces = []
    for start, stop in uneven_bounds(grid.shape[0], n):
        end = min(stop + p - 1, grid.shape[0])  # the interpolation halo
        rows = (slice(None), slice(start, end))
        cut = lambda x: np.ascontiguousarray(x[rows])  # noqa: E731
        pieces.append(integrals.level_partial(grid, cut(data.gamma), cut(data.E), cut(data.B),
                                              valid_mask=mask[start:end], spheres=spheres,
                                              start=start, stop=stop))
    assert whole.excised_points > 0 and float(whole.luminosity.magnitude.min()) > 0
    for name, combined in orders_of_combination(pieces, rng).items():
        for field in ("energy", "momentum", "face_flux", "luminosity"):
            assert_sums_agree(getattr(combined, field), getattr(whole, field), n)
        assert combined.points == whole.points and combined.excised_points == whole.excised_points
        assert combined.max_magnetic_field == whole.max_magnetic_field
        assert combined.max_electric_field == whole.max_electric_field
    # energy is a sum of positive terms: relative agreement to 1e-14
    assert abs(float(combined.energy.value) / float(whole.energy.value) - 1) < 1e-14


@pytest.mark.parametrize("n", PIECES)
def test_conservation_norms_of_pieces_combine_to_the_whole(n, rng):
    # Plane wave oblique to the grid (emsource.exact.plane_wave, Jackson sec. 7.1), order 4:
    # a piece of interior rows a:b is computed on rows a - r : b + r, whose own interior is a:b.
    grid = UniformGrid((40, 12, 10), (0.0, 0.0, 0.0), (0.05, 0.07, 0.09))
    s = exact.plane_wave(grid, 0.3, wave_vector=(2.0, 3.0, 1.5), polarization=(3.0, -2.0, 0.0))
    r = 2
    whole = conservation.level_residual(s, order=4).norm_partial
    fields = (s.alpha, s.beta, s.gamma, s.K, s.E, s.B)
    rates = (s.dt_E, s.dt_B, s.dt_gamma)
    pieces = []
    for a, b in uneven_bounds(grid.shape[0] - 2 * r, n):
        rows = slice(a, b + 2 * r)
        # C-ordered copies: the kernels' contiguous specialisation, shared with the other tests
        cut = lambda x: np.ascontiguousarray(x[rows] if x.ndim == 3 else x[:, rows])  # noqa: E731
        res = conservation.conservation_residual(
            *(cut(x) for x in fields), spacing=grid.spacing, order=4,
            dt_E=cut(rates[0]), dt_B=cut(rates[1]), dt_gamma=cut(rates[2]))
        pieces.append(res.norm_partial)
    assert float(whole.square_sum[0]) > 0  # the residual is truncation error, not zero
    for combined in orders_of_combination(pieces, rng).values():
        assert_norms_agree(combined, whole, n)


@pytest.mark.parametrize("n", PIECES)
def test_constraint_norms_of_pieces_combine_to_the_whole(n, rng):
    # Kerr-Newman (MTW ch. 33) on a box outside the horizon, order 4: the stencil reaches r = 2
    # points along every axis and in the coordinate planes, so a piece of evaluated rows a:b is
    # computed on rows a - 2 : b + 2.
    grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (27, 13, 11))
    d = exact.kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    r = 2
    whole = constraints.adm_constraints(d.gamma, d.K, d.E, d.B, spacing=grid.spacing).norm_partial
    pieces = []
    for a, b in uneven_bounds(grid.shape[0] - 2 * r, n):
        rows = (slice(None), slice(a, b + 2 * r))
        cut = lambda x: np.ascontiguousarray(x[rows])  # noqa: E731
        pieces.append(constraints.adm_constraints(
            cut(d.gamma), cut(d.K), cut(d.E), cut(d.B), spacing=grid.spacing).norm_partial)
    for combined in orders_of_combination(pieces, rng).values():
        assert_norms_agree(combined, whole, n)


@pytest.mark.parametrize("n", PIECES)
def test_global_balance_of_pieces_and_slices_combines_to_the_whole(n, rng):
    # Boosted Gaussian charge (Jackson sec. 11.10): the partials of every slice and every piece
    # of the box combine in any order to the balance of global_balance.
    grid = UniformGrid.from_bounds((-1.4,) * 3, (1.4,) * 3, (15, 11, 11))
    times = np.array([0.0, 0.3, 0.7])
    levels = [exact.boosted_gaussian_charge(grid, t, charge=1.0, width=0.35,
                                            velocity=(0.5, 0.1, 0.0), center=(0.2, 0.0, 0.0))
              for t in times]
    whole = conservation.global_balance(levels, order=2)
    single = combine_all([conservation.balance_partial(s, times, k, order=2)
                          for k, s in enumerate(levels)])
    box_rows = grid.shape[0] - 2
    partials = [conservation.balance_partial(s, times, k, order=2, rows=rows)
                for k, s in enumerate(levels) for rows in uneven_bounds(box_rows, n)]
    for combined in orders_of_combination(partials, rng).values():
        assert isinstance(combined, BalancePartial)
        for field in ("totals", "outflow_rates", "source_rates"):
            assert_sums_agree(getattr(combined, field), getattr(single, field), n)
        final = combined.finalise()
        assert final.energy.change == pytest.approx(whole.energy.change, rel=1e-14)
        scale = float(np.abs(whole.totals).max() + np.abs(whole.outflow_rates).max()
                      + np.abs(whole.source_rates).max())
        assert abs(final.energy.mismatch - whole.energy.mismatch) < 1e-14 * scale
