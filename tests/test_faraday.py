"""emsource.faraday: F_ab, F^ab, the field from F, and the invariants, against the brute-force
4D route of tests/reference_stress_energy.py (g_ab, eps_abcd = sqrt(-g) [abcd], F^ab built
from n^a, E^a, B^a by the conventions' definitions; nothing shared with the kernels).

Derivation of the coordinate formulas (checked here numerically): with n_c = (-alpha, 0, 0, 0)
and epsilon^abcd = -[abcd] / (alpha sg), the term epsilon^abcd n_c B_d of F^ab is
[ab0d] B_d / sg, which vanishes for a = t and is [ijk] B_k / sg for spatial a, b; n^i = -beta^i/alpha
gives the rest. Lowering all indices, F_ij = epsilon_ij0k n^0 B^k = sg [ijk] B^k and
F_ti = -alpha E_i + epsilon_0ilk n^l B^k = -alpha E_i + sg [ijk] B^j beta^k.

Tolerance: every quantity is a sum of a few products of order-one values (random_curved_data
keeps the metric's eigenvalues in about [0.3, 3], alpha in [0.5, 2], |beta| ~ 1); the kernel and
the reference (np.linalg.inv of the 4-metric, condition number ~ 10-100) each round to
~kappa * eps times the largest term, so 1e-12 * (1 + max |value|) leaves a margin of ~10x over
100 * 10 * eps = 2e-13 while a sign or index error is of order one.
"""

import numpy as np
import pytest

import emsource
from emsource import GridPointError
from emsource.faraday import FARADAY_COMPONENTS, faraday_tensor, field_invariants, fields_from_faraday
from conftest import assert_computed_in_float32, random_curved_data, unpack_symmetric
from reference_stress_energy import point_faraday, point_geometry

GRID = (3, 2, 4)
PAIRS = [("txyz".index(c[0]), "txyz".index(c[1])) for c in FARADAY_COMPONENTS]


def _tol(values):
    return 1e-12 * (1.0 + np.max(np.abs(values)))


def _reference(alpha, beta, gamma, E, B):
    """Packed F_ab, F^ab and the two invariants point by point (brute force)."""
    full = unpack_symmetric(gamma)
    lower = np.empty((6,) + alpha.shape)
    upper = np.empty_like(lower)
    square = np.empty(alpha.shape)
    dual = np.empty(alpha.shape)
    for index in np.ndindex(alpha.shape):
        s = (slice(None),) + index
        g3 = full[(slice(None), slice(None)) + index]
        F_up = point_faraday(alpha[index], beta[s], g3, E[s], B[s])
        g, _, _, _, eps_up = point_geometry(alpha[index], beta[s], g3)
        F_low = g @ F_up @ g
        star = 0.5 * np.einsum("abcd,cd->ab", eps_up, F_low)   # *F^ab
        lower[s] = [F_low[p] for p in PAIRS]
        upper[s] = [F_up[p] for p in PAIRS]
        square[index] = np.einsum("ab,ab->", F_low, F_up)
        dual[index] = np.einsum("ab,ab->", F_low, star)
    return lower, upper, square, dual


def test_faraday_and_invariants_match_the_4d_route(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    lower, upper, square, dual = _reference(alpha, beta, gamma, E, B)
    for index, expected in (("lower", lower), ("upper", upper)):
        found = faraday_tensor(alpha, beta, gamma, E, B, index=index)
        np.testing.assert_allclose(found, expected, rtol=0, atol=_tol(expected))
    inv = field_invariants(gamma, E, B)
    np.testing.assert_allclose(inv.square, square, rtol=0, atol=_tol(square))
    # F_ab *F^ab = +4 E_i B^i with epsilon_0123 = +sqrt(-g) (derived in emsource.faraday)
    np.testing.assert_allclose(inv.dual, dual, rtol=0, atol=_tol(dual))
    E_low = np.einsum("ij...,j...->i...", unpack_symmetric(gamma), E)
    np.testing.assert_allclose(dual, 4 * np.einsum("i...,i...->...", E_low, B), rtol=0,
                               atol=_tol(dual))
    assert np.max(np.abs(dual)) > 1, "the invariant is not vacuous"


@pytest.mark.parametrize("index", ["lower", "upper"])
def test_fields_from_faraday_invert_the_tensor(rng, index):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    lower, upper, _, _ = _reference(alpha, beta, gamma, E, B)
    E2, B2 = fields_from_faraday(alpha, beta, gamma, lower if index == "lower" else upper,
                                 index=index)
    np.testing.assert_allclose(E2, E, rtol=0, atol=_tol(E))
    np.testing.assert_allclose(B2, B, rtol=0, atol=_tol(B))
    # and the sources from F equal those from E, B (the route a code storing F takes)
    ref = emsource.adm_sources(gamma, E, B)
    got = emsource.adm_sources(gamma, E2, B2)
    np.testing.assert_allclose(got.S_ij, ref.S_ij, rtol=0, atol=_tol(ref.S_ij))


def test_invariants_take_every_input_form(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    full = np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))
    sg = np.sqrt(np.linalg.det(full))
    base = field_invariants(gamma, E, B)
    dens = field_invariants(gamma, sg * E, sg * B, field_index="densitized")
    np.testing.assert_allclose(dens.square, base.square, rtol=0, atol=_tol(base.square))
    np.testing.assert_allclose(dens.dual, base.dual, rtol=0, atol=_tol(base.dual))
    F = faraday_tensor(alpha, beta, gamma, sg * E, sg * B, field_index="densitized")
    np.testing.assert_allclose(F, faraday_tensor(alpha, beta, gamma, E, B), rtol=0,
                               atol=_tol(F))


def test_bad_input_is_named(rng):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    with pytest.raises(ValueError, match=r"fields_from_faraday: F must have shape \(6, \*grid\).*found \(3, 3, 2, 4\)"):
        fields_from_faraday(alpha, beta, gamma, E)
    with pytest.raises(ValueError, match="index must be one of"):
        faraday_tensor(alpha, beta, gamma, E, B, index="mixed")
    with pytest.raises(ValueError, match=r"faraday_tensor: alpha must have shape \(3, 2, 4\)"):
        faraday_tensor(alpha[:1], beta, gamma, E, B)
    bad = alpha.copy()
    bad[1, 0, 2] = -1.0
    with pytest.raises(GridPointError, match=r"grid index \(1, 0, 2\).*lapse alpha") as info:
        faraday_tensor(bad, beta, gamma, E, B)
    assert info.value.bad_count == 1
    F = faraday_tensor(alpha, beta, gamma, E, B)
    F[3, 2, 1, 0] = np.nan
    with pytest.raises(GridPointError, match=r"grid index \(2, 1, 0\).*F\[3\] = nan"):
        fields_from_faraday(alpha, beta, gamma, F)
    E_bad = E.copy()
    E_bad[0, 0, 0, 0] = np.inf
    with pytest.raises(GridPointError, match=r"field_invariants.*\(0, 0, 0\).*E\[0\] = inf"):
        field_invariants(gamma, E_bad, B)


def test_float32_arithmetic_against_float64(rng):
    """float32 input is computed in float32 (DEVELOPERS.md "Adding a kernel" item 2: constants in
    the data's dtype). Against the float64 result of the same (float32-rounded) input: within
    200 eps32 of the largest value (a few dozen roundings of the metric factorisation, the index
    lowering and the products, times the random metric's condition number of order 3); and
    float32 arithmetic shows: somewhere the difference exceeds the half unit in the last place
    that float64 arithmetic rounded once to float32 could not exceed."""
    alpha, beta, gamma, E, B = (a.astype(np.float32) for a in random_curved_data(rng, (4, 5, 6)))
    results = []
    for index in ("lower", "upper"):
        single = faraday_tensor(alpha, beta, gamma, E, B, index=index)
        double = faraday_tensor(*(a.astype(np.float64) for a in (alpha, beta, gamma, E, B)),
                                index=index)
        results.append((single, double))
    inv32 = field_invariants(gamma, E, B)
    inv64 = field_invariants(*(a.astype(np.float64) for a in (gamma, E, B)))
    results += [(inv32.square, inv64.square), (inv32.dual, inv64.dual)]
    assert_computed_in_float32(results, roundings=200)
