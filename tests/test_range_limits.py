"""Overflow, underflow and non-finite input at the edges of the float32 and float64 ranges.

Facts used (IEEE 754 binary formats, common practice): float64 holds finite numbers up to
1.8e308 and normal numbers down to 2.2e-308; float32 up to 3.4e38 and down to 1.2e-38. A field
component of 1e160 (float64) or 1e20 (float32) is a finite input whose square overflows; one of
1e-160 or 1e-20 squares to a subnormal number or zero. Multiplying by a power of two is exact
unless the result leaves the normal range, so scaling gamma_ij by 2^(-2k) and E^i, B^i by 2^k
scales rho by 1, S_i by 2^-k (sqrt(gamma) 2^-3k times E x B 2^2k) and S_ij by 2^-2k, exactly,
as long as no intermediate value leaves the range.
"""

from __future__ import annotations

import numpy as np
import pytest

import emsource
from emsource.energy_flux import energy_fluxes
from conftest import random_curved_data

GRID = (4, 3, 5)


def _flat_metric(grid, dtype):
    gamma = np.zeros((6,) + grid, dtype)
    gamma[[0, 3, 5]] = 1
    return gamma


def _lapse_shift(grid, dtype):
    return np.ones(grid, dtype), np.full((3,) + grid, 0.1, dtype)


CALLS = {
    "adm_sources": lambda a, b, g, E, B, **kw: emsource.adm_sources(g, E, B, **kw),
    "stress_energy_4d": lambda a, b, g, E, B, **kw: emsource.stress_energy_4d(a, b, g, E, B, **kw),
    "stress_energy_4d upper": lambda a, b, g, E, B, **kw: emsource.stress_energy_4d(
        a, b, g, E, B, index="upper", **kw),
    "energy_fluxes": lambda a, b, g, E, B, **kw: energy_fluxes(a, b, g, E, B, **kw),
}


# ---- overflow ----

@pytest.mark.parametrize("call", CALLS)
@pytest.mark.parametrize("dtype, size", [(np.float64, 1e160), (np.float32, 1e20)])
def test_fields_whose_squares_overflow_raise_and_say_rescale(rng, call, dtype, size):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID, dtype)
    E[:, 2, 1, 3] = size          # finite inputs ...
    B[0, 3, 0, 0] = -size         # ... whose squares are above the largest finite number
    with pytest.raises(emsource.GridPointError) as info:
        CALLS[call](alpha, beta, gamma, E, B)
    err = info.value
    assert err.bad_count == 2 and err.first_index == (2, 1, 3)
    message = str(err)
    assert "overflow" in message and "rescale" in message, message
    assert "non-finite" not in message and "not positive definite" not in message
    # Switching to float64 is advice only for float32 data (the message is not wrong for float64).
    assert ("use float64" in message) == (dtype is np.float32), message


@pytest.mark.parametrize("dtype, size", [(np.float64, 1e160), (np.float32, 1e20)])
def test_overflow_of_covariant_input_is_reported_too(rng, dtype, size):
    _, _, gamma, E, B = random_curved_data(rng, GRID, dtype)
    E[1, 0, 2, 4] = size
    with pytest.raises(emsource.GridPointError, match="overflow") as info:
        emsource.adm_sources(gamma, E, B, field_index="lower")
    assert info.value.first_index == (0, 2, 4) and "rescale" in str(info.value)


def test_fields_just_below_the_overflow_edge_are_computed(rng):
    """1e150 squares to 1e300 < 1.8e308: representable, no error, rho to the usual accuracy
    (a few eps: the data are well conditioned, see test_metric_conditioning for the bound)."""
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    big = emsource.adm_sources(gamma, E * 1e150, B * 1e150)
    small = emsource.adm_sources(gamma, E, B)
    np.testing.assert_allclose(big.rho, small.rho * 1e300, rtol=1e-13)


# ---- intermediate values out of range: the metric's determinant ----

#: Powers of two such that det(gamma) ~ s^3 leaves the range while every output (and s^2)
#: stays inside it: float32 normal exponents reach +-126 (s = 2^+-50: s^3 = 2^+-150 is out,
#: outputs 2^+-50 are in); float64 +-1022 (s = 2^+-360: s^3 = 2^+-1080 out).
SCALES = [(np.float32, 25), (np.float32, -25), (np.float64, 180), (np.float64, -180)]


@pytest.mark.parametrize("dtype, k", [pytest.param(d, k, id=f"{d.__name__}-2^{k}")
                                      for d, k in SCALES])
def test_power_of_two_scaling_is_exact_while_outputs_are_representable(rng, dtype, k):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID, dtype)
    f = dtype(2.0) ** k
    s = dtype(2.0) ** (-2 * k)
    reference = emsource.adm_sources(gamma, E, B)
    scaled = emsource.adm_sources(gamma * s, E * f, B * f)
    # Every operation scales exactly (see the module docstring): the same roundings happen, so
    # 4 eps relative leaves room only for a different FMA contraction of the two calls.
    rtol = 4 * np.finfo(dtype).eps
    np.testing.assert_allclose(scaled.rho, reference.rho, rtol=rtol)
    np.testing.assert_allclose(scaled.S_i * f, reference.S_i, rtol=rtol)
    np.testing.assert_allclose(scaled.S_ij * f * f, reference.S_ij, rtol=rtol)
    fluxes = energy_fluxes(alpha, beta, gamma * s, E * f, B * f)
    np.testing.assert_allclose(fluxes.energy * f ** 3, energy_fluxes(alpha, beta, gamma, E, B).energy,
                               rtol=rtol)


# ---- underflow ----

@pytest.mark.parametrize("call", CALLS)
def test_float32_grid_of_tiny_fields_raises_underflow(rng, call):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID, np.float32)
    E *= np.float32(1e-20)   # squares ~ 1e-40: below the smallest normal float32, 1.2e-38
    B *= np.float32(1e-20)
    with pytest.raises(emsource.GridPointError) as info:
        CALLS[call](alpha, beta, gamma, E, B)
    message = str(info.value)
    assert "smallest normal" in message and "float64" in message, message
    assert info.value.first_index == (0, 0, 0)
    assert info.value.bad_count == int(np.prod(GRID))   # every point: E^2 + B^2 < 1.2e-38 * 8 pi


def test_float64_grid_of_tiny_fields_raises_underflow_without_suggesting_float64(rng):
    _, _, gamma, E, B = random_curved_data(rng, GRID)
    with pytest.raises(emsource.GridPointError, match="smallest normal float64") as info:
        emsource.adm_sources(gamma, E * 1e-160, B * 1e-160)
    assert "use float64" not in str(info.value) and "Rescale" in str(info.value)


def test_float32_gaussian_pulse_with_underflowing_tails_is_accepted():
    """The rule (src/emsource/sources.py, raise_for_counts): underflowing points are an error
    only when no output of the grid is above tiny / eps (9.9e-32 in float32), i.e. when the
    lost values are not negligible next to the largest one."""
    n = 17
    x = np.linspace(-1.0, 1.0, n)
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij")
    profile = np.exp(-(X**2 + Y**2 + Z**2) / 0.2**2)   # 1 at the centre, 2.6e-33 in the corners
    E = np.stack([profile, 0.5 * profile, 0 * profile]).astype(np.float32)
    B = np.stack([0 * profile, -0.3 * profile, profile]).astype(np.float32)
    gamma = _flat_metric((n, n, n), np.float32)
    alpha, beta = _lapse_shift((n, n, n), np.float32)
    # The data really have underflowing points: nonzero fields whose rho is below 1.2e-38.
    rho64 = ((E.astype(float) ** 2).sum(0) + (B.astype(float) ** 2).sum(0)) / (8 * np.pi)
    tiny = np.finfo(np.float32).tiny
    assert np.count_nonzero((rho64 < tiny) & (np.abs(E).sum(0) + np.abs(B).sum(0) > 0)) > 100
    src = emsource.adm_sources(gamma, E, B)
    energy_fluxes(alpha, beta, gamma, E, B)
    emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    # Where rho is normal it is accurate: float32 rounding of 6-term sums of squares, a few
    # eps (8 eps = 1e-6 relative); rho64 is computed from the same float32 inputs.
    normal = rho64 > tiny / np.finfo(np.float32).eps
    np.testing.assert_allclose(src.rho[normal], rho64[normal], rtol=1e-6)


@pytest.mark.parametrize("peak, raises", [(1e-14, False), (1e-17, True)])
def test_underflow_rule_threshold_tiny_over_eps(rng, peak, raises):
    """All fields 1e-20 (rho ~ 3e-40 / 8 pi: underflows) except E at one point. Peak 1e-14: rho
    there 3e-28 / 8 pi = 1.2e-29, above tiny / eps = 9.9e-32: accepted. Peak 1e-17: 1.2e-35, a
    normal number but every output is below 9.9e-32: the 23 other points are an error."""
    grid = (3, 4, 2)
    gamma = _flat_metric(grid, np.float32)
    E = np.full((3,) + grid, 1e-20, np.float32)
    B = np.full((3,) + grid, -1e-20, np.float32)
    E[:, 2, 3, 1] = peak
    if raises:
        with pytest.raises(emsource.GridPointError, match="smallest normal") as info:
            emsource.adm_sources(gamma, E, B)
        assert info.value.bad_count == int(np.prod(grid)) - 1  # all but the peak underflow
    else:
        src = emsource.adm_sources(gamma, E, B)
        assert src.rho.max() > np.finfo(np.float32).tiny / np.finfo(np.float32).eps


# ---- NaN and Inf, beyond tests/test_sources_errors.py ----

@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
@pytest.mark.parametrize("argument, component", [("alpha", None), ("beta", 1), ("gamma", 2),
                                                 ("E", 0), ("B", 2)])
def test_energy_fluxes_find_non_finite_values(rng, bad, argument, component):
    data = dict(zip(("alpha", "beta", "gamma", "E", "B"), random_curved_data(rng, GRID)))
    where = (2, 0, 4)
    if component is None:
        data[argument][where] = bad
        name = f"{argument} = {bad}"
    else:
        data[argument][(component,) + where] = bad
        data[argument][(component, 3, 2, 1)] = bad
        name = f"{argument}[{component}] = {bad}"
    with pytest.raises(emsource.GridPointError) as info:
        energy_fluxes(*data.values())
    err = info.value
    assert err.first_index == where and err.bad_count == (1 if component is None else 2)
    assert name in str(err) and "non-finite" in str(err)


@pytest.mark.parametrize("bad", [np.nan, np.inf])
@pytest.mark.parametrize("argument, component", [("gamma", 1), ("E", 2), ("B", 0)])
@pytest.mark.parametrize("call", CALLS)
def test_covariant_input_non_finite_values(rng, bad, argument, component, call):
    data = dict(zip(("alpha", "beta", "gamma", "E", "B"), random_curved_data(rng, GRID)))
    data[argument][component, 1, 2, 3] = bad
    with pytest.raises(emsource.GridPointError) as info:
        CALLS[call](*data.values(), field_index="lower")
    assert info.value.first_index == (1, 2, 3) and info.value.bad_count == 1
    assert f"{argument}[{component}] = {bad}" in str(info.value)


def test_energy_fluxes_reject_bad_lapse_and_metric(rng):
    alpha, beta, gamma, E, B = (a.copy() for a in random_curved_data(rng, GRID))
    alpha[1, 1, 1] = -0.5
    gamma[:, 3, 2, 0] = [1.0, 2.0, 0.0, 1.0, 0.0, 1.0]   # eigenvalues -1, 1, 3
    with pytest.raises(emsource.GridPointError, match=r"alpha = -0.5 is not positive") as info:
        energy_fluxes(alpha, beta, gamma, E, B)
    assert info.value.bad_count == 2 and info.value.first_index == (1, 1, 1)
    alpha[1, 1, 1] = 0.5
    with pytest.raises(emsource.GridPointError, match="not positive definite") as info:
        energy_fluxes(alpha, beta, gamma, E, B)
    assert info.value.first_index == (3, 2, 0)


def test_energy_fluxes_checks_can_be_turned_off(rng):
    alpha, beta, gamma, E, B = (a.copy() for a in random_curved_data(rng, GRID))
    B[2, 0, 1, 2] = np.nan
    out = energy_fluxes(alpha, beta, gamma, E, B, check=False)
    assert np.isnan(out.energy[0, 1, 2]) and np.isnan(out.flux[:, 0, 1, 2]).any()
    mask = np.ones(GRID, bool)
    mask[0, 1, 2] = False
    assert np.isfinite(out.energy[mask]).all() and np.isfinite(out.flux[:, mask]).all()
