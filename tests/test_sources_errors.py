"""Bad input: clear errors naming the argument, shapes, dtypes, values and grid indices.

The point checks run inside the compiled kernel; NaN and Inf are fed through it on purpose
(fast-math flags can compile finiteness tests away: see kernels/point_checks.py).
"""

import numpy as np
import pytest

import emsource
from conftest import random_curved_data

GRID = (5, 4, 3)


@pytest.fixture
def data(rng):
    return random_curved_data(rng, GRID)


def test_wrong_component_count_names_argument_and_shapes(data):
    alpha, beta, gamma, E, B = data
    with pytest.raises(ValueError, match=r"B must have shape \(3, 5, 4, 3\), found \(2, 5, 4, 3\)"):
        emsource.adm_sources(gamma, E, B[:2])
    with pytest.raises(ValueError, match=r"gamma must have shape \(6, 5, 4, 3\).*found \(5, 5, 4, 3\)"):
        emsource.adm_sources(gamma[:5], E, B)
    with pytest.raises(ValueError, match=r"E must have 3 components"):
        emsource.adm_sources(gamma, E[:2], B)


def test_mismatched_grids_name_both_shapes(data):
    alpha, beta, gamma, E, B = data
    with pytest.raises(ValueError, match=r"gamma must have shape \(6, 5, 4, 3\).*found \(6, 5, 4, 2\)"):
        emsource.adm_sources(gamma[..., :2], E, B)
    with pytest.raises(ValueError, match=r"alpha must have shape \(5, 4, 3\), found \(5, 4\)"):
        emsource.stress_energy_4d(alpha[..., 0], beta, gamma, E, B)


def test_integer_and_mixed_dtypes_are_rejected(data):
    alpha, beta, gamma, E, B = data
    with pytest.raises(TypeError, match="E must have dtype float32 or float64, found int64"):
        emsource.adm_sources(gamma, E.astype(np.int64), B)
    with pytest.raises(TypeError, match="share one float dtype, found gamma: float64, E: float32, B: float64"):
        emsource.adm_sources(gamma, E.astype(np.float32), B)
    with pytest.raises(TypeError, match="gamma must be a NumPy array"):
        emsource.adm_sources(gamma.tolist(), E, B)


def test_unknown_options(data):
    _, _, gamma, E, B = data
    with pytest.raises(ValueError, match="units must be one of"):
        emsource.adm_sources(gamma, E, B, units="si")
    with pytest.raises(ValueError, match="layout must be one of"):
        emsource.adm_sources(gamma, E, B, layout="soa")
    with pytest.raises(ValueError, match="field_index must be one of"):
        emsource.adm_sources(gamma, E, B, field_index="covariant")


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
@pytest.mark.parametrize("argument, component", [("E", 2), ("B", 0), ("gamma", 4)])
def test_non_finite_values_are_found_by_the_kernel(data, bad, argument, component):
    alpha, beta, gamma, E, B = (a.copy() for a in data)
    arrays = {"gamma": gamma, "E": E, "B": B}
    arrays[argument][component, 3, 1, 2] = bad
    arrays[argument][component, 4, 0, 0] = bad
    with pytest.raises(emsource.GridPointError) as info:
        emsource.adm_sources(gamma, E, B)
    err = info.value
    assert err.bad_count == 2 and err.first_index == (3, 1, 2)
    assert f"{argument}[{component}] = {bad}" in str(err) and "2 of 60 grid points" in str(err)
    with pytest.raises(emsource.GridPointError, match=r"first is grid index \(3, 1, 2\)"):
        emsource.stress_energy_4d(alpha, beta, gamma, E, B)


def test_metric_not_positive_definite(data):
    _, _, gamma, E, B = (a.copy() for a in data)
    gamma[:, 1, 2, 0] = [1.0, 2.0, 0.0, 1.0, 0.0, 1.0]   # eigenvalues -1, 1, 3: det < 0
    gamma[:, 2, 0, 0] = [-1.0, 0.0, 0.0, -1.0, 0.0, 1.0]  # det > 0 but not positive definite
    with pytest.raises(emsource.GridPointError, match="not positive definite") as info:
        emsource.adm_sources(gamma, E, B)
    assert info.value.bad_count == 2 and info.value.first_index == (1, 2, 0)


def test_lapse_not_positive_and_non_finite_shift(data):
    alpha, beta, gamma, E, B = (a.copy() for a in data)
    alpha[0, 0, 2] = 0.0
    beta[1, 4, 3, 2] = np.nan
    with pytest.raises(emsource.GridPointError, match=r"alpha = 0.0 is not positive") as info:
        emsource.stress_energy_4d(alpha, beta, gamma, E, B)
    assert info.value.bad_count == 2 and info.value.first_index == (0, 0, 2)


def test_strided_views_report_indices_of_the_view(data):
    _, _, gamma, E, B = (a.copy() for a in data)
    E[0, 3, 2, 1] = np.nan
    view = (slice(None), slice(1, None), slice(1, None), slice(None))
    with pytest.raises(emsource.GridPointError, match=r"grid index \(2, 1, 1\)"):
        emsource.adm_sources(gamma[view], E[view], B[view])


def test_checks_can_be_turned_off(data):
    _, _, gamma, E, B = (a.copy() for a in data)
    E[0, 0, 0, 0] = np.nan
    src = emsource.adm_sources(gamma, E, B, check=False)
    assert np.isnan(src.rho[0, 0, 0]) and np.isfinite(src.rho[1:]).all()


def test_inputs_are_never_modified(data):
    alpha, beta, gamma, E, B = data
    before = [a.copy() for a in data]
    emsource.adm_sources(gamma, E, B)
    emsource.stress_energy_4d(alpha, beta, gamma, E, B, index="upper")
    bad = E.copy()
    bad[1, 1, 1, 1] = np.nan
    with pytest.raises(emsource.GridPointError):
        emsource.adm_sources(gamma, bad, B)
    for a, b in zip(data, before):
        np.testing.assert_array_equal(a, b)


def test_bad_out_buffers(data):
    alpha, beta, gamma, E, B = data
    good = emsource.adm_sources(gamma, E, B)
    with pytest.raises(ValueError, match=r"out S_ij must have shape \(6, 5, 4, 3\) and dtype float64"):
        emsource.adm_sources(gamma, E, B, out=(good.rho, good.S_i, good.S_ij[:3], good.S))
    with pytest.raises(ValueError, match="out rho overlaps input E"):
        emsource.adm_sources(gamma, E, B, out=(E[0], good.S_i, good.S_ij, good.S))
    frozen = good.S.copy()
    frozen.flags.writeable = False
    with pytest.raises(ValueError, match="out S is read-only"):
        emsource.adm_sources(gamma, E, B, out=(good.rho, good.S_i, good.S_ij, frozen))
    with pytest.raises(TypeError, match="out must be an AdmSources"):
        emsource.adm_sources(gamma, E, B, out=good.rho)
    with pytest.raises(ValueError, match="dtype float64, found shape .* and dtype float32"):
        emsource.stress_energy_4d(alpha, beta, gamma, E, B, out=np.empty((10,) + GRID, np.float32))
