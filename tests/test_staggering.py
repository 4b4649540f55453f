"""Staggered data to the vertices (emsource.staggering): exactness, design order, time stencils.

Outside references: Lagrange interpolation through p points reproduces polynomials of degree
p - 1 exactly and has error O(h^p) for smooth data (M. Abramowitz and I. A. Stegun, Handbook of
Mathematical Functions (1964), sec. 25.2, the Lagrange formula 25.2.2 and its remainder; from
memory); exact solutions of emsource.exact (a vacuum plane wave, Jackson sec. 7.1) sampled at
the staggered positions of a Yee lattice (K. S. Yee, IEEE Trans. Antennas Propag. 14, 302 (1966)).
"""

from __future__ import annotations

import numpy as np
import pytest

from emsource.exact import boosted_gaussian_charge, plane_wave
from emsource.grid import UniformGrid
from emsource.staggering import (centring_offsets, lagrange_weights, time_stencil, to_vertices,
                                 vertex_stencils)

#: Round-off bound for an interpolated value: p weights of size <= 2.5 (one-sided stencils
#: extrapolating half a cell), each product and sum rounding once, on values of size <= V:
#: about 2 p * 2.5 * eps * V; 64 eps * V leaves room for the polynomial's own evaluation.
EPS = np.finfo(float).eps


def _polynomial(degree, rng):
    """A random trivariate polynomial of total degree ``degree`` (coefficients O(1))."""
    terms = [(a, b, c) for a in range(degree + 1) for b in range(degree + 1)
             for c in range(degree + 1) if a + b + c <= degree]
    coefficients = rng.uniform(-1, 1, len(terms))

    def f(x, y, z):
        return sum(k * x**a * y**b * z**c for k, (a, b, c) in zip(coefficients, terms))
    return f


def _sample(f, points, h, offset, stored):
    axes = [(np.arange(m) + o) * hh for m, o, hh in zip(stored, offset, h)]
    return f(*np.meshgrid(*axes, indexing="ij"))


@pytest.mark.parametrize("order", [2, 4])
@pytest.mark.parametrize("offset", [(0.5, 0, 0), (0, 0.5, 0.5), (0.5, 0.5, 0.5), (0, 0, 0.5)])
@pytest.mark.parametrize("padded", [False, True])
def test_exact_on_polynomials_of_degree_order_minus_one(order, offset, padded, rng):
    """Order p reproduces every polynomial of degree p - 1, at every vertex (the one-sided
    stencils at the faces included): A&S 25.2 (common practice)."""
    points, h = (9, 7, 8), (0.3, 0.25, 0.2)
    stored = tuple(n - (0 if (o == 0 or padded) else 1) for n, o in zip(points, offset))
    f = _polynomial(order - 1, rng)
    values = _sample(f, points, h, offset, stored)
    got = to_vertices(values, offset, points=points, order=order)
    want = _sample(f, points, h, (0, 0, 0), points)
    scale = np.abs(want).max()
    assert np.abs(got - want).max() <= 64 * EPS * scale


@pytest.mark.parametrize("order", [2, 4])
def test_not_exact_one_degree_higher(order, rng):
    """The check above can fail: degree p is not reproduced (the remainder of A&S 25.2 is
    proportional to the p-th derivative), at the interior and at the faces."""
    points, h = (9, 7, 8), (0.3, 0.25, 0.2)
    f = _polynomial(order, rng)
    offset = (0.5, 0.5, 0)
    values = _sample(f, points, h, offset, (8, 6, 8))
    error = np.abs(to_vertices(values, offset, points=points, order=order)
                   - _sample(f, points, h, (0, 0, 0), points))
    assert error.max() > 1e-6


def test_centred_weights_are_the_textbook_midpoint_values():
    """Midpoint weights: (1/2, 1/2) for 2 points and (-1, 9, 9, -1)/16 for 4 (common practice;
    from the Lagrange formula at t = 1/2 and t = 3/2)."""
    starts, w2 = vertex_stencils(6, 5, 0.5, 2)
    assert np.allclose(w2[2], [0.5, 0.5], rtol=0, atol=EPS) and starts[2] == 1
    starts, w4 = vertex_stencils(9, 8, 0.5, 4)
    assert np.allclose(w4[4], np.array([-1, 9, 9, -1]) / 16, rtol=0, atol=EPS)
    assert starts[4] == 2
    # one-sided at the faces: half a cell outside the first stored point, inside the box
    assert starts[0] == 0 and np.allclose(w2[0], [1.5, -0.5], rtol=0, atol=EPS)
    assert np.allclose(lagrange_weights([0.0, 1.0, 3.0], 2.0), [-1 / 3, 1.0, 1 / 3])


def _plane(grid, t):
    k = np.array([2.3, 1.4, 0.9])
    return plane_wave(grid, t, wave_vector=k, polarization=np.cross(k, (0.3, -1.0, 0.5)))


def _staggered_fields(make, points, h, t):
    """E on Yee edges and B on faces (exact values there), trimmed to inside the box."""
    out = {}
    for name, centring in (("E", "edge"), ("B", "face")):
        comps = []
        for c, offset in enumerate(centring_offsets(centring, 3)):
            stored = tuple(n - 1 if o else n for n, o in zip(points, offset))
            grid = UniformGrid(stored, tuple(o * hh for o, hh in zip(offset, h)), h)
            comps.append((getattr(make(grid, t), name)[c], offset))
        out[name] = comps
    return out


@pytest.mark.parametrize("order", [2, 4])
@pytest.mark.parametrize("case", ["plane_wave", "boosted_charge"])
def test_design_order_on_exact_solutions(order, case):
    """Error at the vertices (max over the whole grid, faces included) falls as h^order.

    Acceptance band for the observed order over the finer pair of three resolutions: the
    error is C h^p (1 + O(h)) (the one-sided face stencils add an h^(p+1) term), and the
    coarsest grid resolves the fields with k h <= 0.5, so the correction changes the ratio of
    successive errors by at most ~25 %: |observed - p| <= log2(1.25) ~ 0.32; we take 0.35.
    """
    if case == "plane_wave":
        make, box = _plane, (1.0, 0.8, 0.9)
    else:
        def make(grid, t):
            return boosted_gaussian_charge(grid, t, charge=1.0, width=0.3,
                                           velocity=(0.3, 0.2, -0.1), center=(0.3, 0.25, 0.3))
        box = (0.7, 0.6, 0.5)
    errors = []
    for n in (11, 21, 41):
        points = (n, n - 2, n + 2)
        h = tuple(L / (m - 1) for L, m in zip(box, points))
        fields = _staggered_fields(make, points, h, 0.2)
        exact = make(UniformGrid(points, (0, 0, 0), h), 0.2)
        err = 0.0
        for name in ("E", "B"):
            for c, (values, offset) in enumerate(fields[name]):
                got = to_vertices(values, offset, points=points, order=order)
                err = max(err, np.abs(got - getattr(exact, name)[c]).max()
                          / np.abs(getattr(exact, name)).max())
        errors.append(err)
    errors = np.array(errors)
    observed = np.log2(errors[:-1] / errors[1:])
    assert errors[-1] > 1e3 * EPS  # well above round-off: the order is not noise
    assert abs(observed[-1] - order) <= 0.35, (errors, observed)


@pytest.mark.parametrize("order", [2, 4])
def test_time_stencil_exact_on_polynomials_in_t(order, rng):
    """Interpolation in time through ``order`` levels reproduces polynomials of degree
    order - 1 in t (A&S 25.2, common practice), also at the first and last levels
    (extrapolation by half a step) and for unequal steps."""
    times = np.cumsum(rng.uniform(0.5, 1.5, 7))
    coefficients = rng.uniform(-1, 1, order)
    f = np.polynomial.Polynomial(coefficients)
    for target in (times[0] - 0.3, times[3], times[-1] + 0.4, 0.5 * (times[2] + times[3])):
        indices, weights = time_stencil(times, target, order)
        assert len(indices) == order
        bound = 64 * EPS * np.abs(coefficients).sum() * max(1, abs(target)) ** (order - 1)
        assert abs(weights @ f(times[indices]) - f(target)) <= bound


def test_time_stencil_levels_are_centred_where_they_exist():
    times = np.arange(6) + 0.5  # H stored half a step after each level at 0, 1, ..., 5
    assert time_stencil(times, 3.0, 2)[0].tolist() == [2, 3]      # t^{n-1/2}, t^{n+1/2}
    assert np.allclose(time_stencil(times, 3.0, 2)[1], [0.5, 0.5])
    assert time_stencil(times, 3.0, 4)[0].tolist() == [1, 2, 3, 4]
    assert time_stencil(times, 0.0, 2)[0].tolist() == [0, 1]      # first level: one-sided
    assert time_stencil(times[:3], 1.0, 4)[0].tolist() == [0, 1, 2]  # fewer levels: all of them


def test_bad_arguments_name_what_is_wrong():
    with pytest.raises(ValueError, match="offset must be 0 or 0.5"):
        to_vertices(np.zeros((4, 4, 4)), (0.25, 0, 0))
    with pytest.raises(ValueError, match="interpolation order must be one of"):
        to_vertices(np.zeros((4, 4, 4)), (0.5, 0, 0), order=3)
    with pytest.raises(ValueError, match=r"axis 1 .*5 stored points do not fit 8 vertices"):
        to_vertices(np.zeros((4, 5, 4)), (0, 0.5, 0), points=(4, 8, 4))
    with pytest.raises(ValueError, match="needs at least 4 stored points"):
        to_vertices(np.zeros((3, 4, 4)), (0.5, 0, 0), order=4)
    with pytest.raises(ValueError, match="at least 2 time levels"):
        time_stencil([1.0], 0.5, 2)
    with pytest.raises(ValueError, match="applies to vectors"):
        centring_offsets("face", 6)


def test_float32_stays_float32_and_input_untouched():
    values = np.linspace(0, 1, 5 * 4 * 3, dtype=np.float32).reshape(5, 4, 3)
    before = values.copy()
    got = to_vertices(values, (0.5, 0, 0))
    assert got.dtype == np.float32 and got.shape == (6, 4, 3)
    assert np.array_equal(values, before)
