"""The counting kernels in front of the diagnostics' point checks (``emsource.kernels.input_checks``,
``emsource._arguments._suspect_points``) never let through a point that the NumPy check
(``_arguments.check_points`` on its own, the reference) rejects, and count nothing on good data,
so that the fast answer is the common one."""

import numpy as np
import pytest

from emsource import _arguments as arg
from emsource.errors import GridPointError
from conftest import random_curved_data

GRID = (5, 6, 7)
INDEX = arg.PACKED_METRIC_INDEX


def numpy_verdict(monkeypatch, named, valid, grid=GRID):
    """True where the NumPy check alone rejects the data (the counting kernels bypassed)."""
    with monkeypatch.context() as m:
        m.setattr(arg, "_suspect_points", lambda *a: 1)
        try:
            arg.check_points("f", grid, named, valid=valid, lapse="alpha",
                             metric=("gamma", named["gamma"], INDEX))
        except GridPointError:
            return True
    return False


def counted(named, valid, grid=GRID):
    where = np.ones(grid, bool) if valid is None else valid
    return arg._suspect_points(grid, named, where, "alpha", ("gamma", named["gamma"], INDEX))


def near_singular_metric(rng, last_pivot_over_trace):
    """A rotated metric whose smallest eigenvalue is ``last_pivot_over_trace`` times its trace,
    so that its last pivot lies near the NumPy floor (16 eps of the trace)."""
    q, _ = np.linalg.qr(rng.standard_normal((3, 3)))
    full = q @ np.diag([1.0, 1.3, 0.0]) @ q.T
    trace = np.trace(full)
    full += last_pivot_over_trace * trace * np.outer(q[:, 2], q[:, 2])
    return full[[0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]]


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_nothing_counted_on_good_data(rng, dtype):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID, dtype)
    named = {"alpha": alpha, "beta": beta, "gamma": gamma, "E": E, "B": B}
    assert counted(named, None) == 0
    arg.check_points("f", GRID, named, lapse="alpha", metric=("gamma", gamma, INDEX))


@pytest.mark.parametrize("case", ["NaN in E", "inf in beta", "zero lapse", "negative lapse",
                                  "NaN lapse", "indefinite metric", "NaN metric"])
@pytest.mark.parametrize("at_valid_point", [True, False])
def test_every_point_numpy_rejects_is_counted(rng, monkeypatch, case, at_valid_point):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    point = (2, 3, 4)
    if case == "NaN in E":
        E[(1,) + point] = np.nan
    elif case == "inf in beta":
        beta[(2,) + point] = -np.inf
    elif case == "zero lapse":
        alpha[point] = 0.0
    elif case == "negative lapse":
        alpha[point] = -1.0
    elif case == "NaN lapse":
        alpha[point] = np.nan
    elif case == "indefinite metric":
        gamma[(5,) + point] = -gamma[(5,) + point]
    else:
        gamma[(4,) + point] = np.nan
    named = {"alpha": alpha, "beta": beta, "gamma": gamma, "E": E, "B": B}
    valid = np.ones(GRID, bool)
    if not at_valid_point:
        valid[point] = False  # an excised point: neither check may look at it
    rejected = numpy_verdict(monkeypatch, named, valid)
    assert rejected == at_valid_point
    assert (counted(named, valid) > 0) == at_valid_point
    if at_valid_point:  # the public check raises, naming the point
        with pytest.raises(GridPointError, match=r"\(2, 3, 4\)"):
            arg.check_points("f", GRID, named, valid=valid, lapse="alpha",
                             metric=("gamma", gamma, INDEX))


def test_metrics_near_the_floor_are_counted_when_numpy_rejects_them(rng, monkeypatch):
    # Smallest eigenvalue from 0 to 1000 eps of the trace, around the NumPy floor (16 eps): the
    # NumPy pivots and the kernel's (other order of operations, fast-math) round apart there,
    # which the kernel's margin must cover. Count both outcomes so the sweep is seen to
    # straddle the floor.
    eps = np.finfo(np.float64).eps
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    outcomes = {True: 0, False: 0}
    for ratio in np.concatenate([np.linspace(0, 40, 41), [100, 1000]]) * eps:
        g = gamma.copy()
        g[(slice(None), 1, 1, 1)] = near_singular_metric(rng, ratio)
        named = {"alpha": alpha, "beta": beta, "gamma": g, "E": E, "B": B}
        rejected = numpy_verdict(monkeypatch, named, None)
        outcomes[rejected] += 1
        if rejected:
            assert counted(named, None) > 0, ratio / eps
    assert outcomes[True] > 0 and outcomes[False] > 0


def test_one_and_two_dimensional_grids_and_strided_views(rng, monkeypatch):
    alpha, beta, gamma, E, B = random_curved_data(rng, (6, 8, 1))
    for grid, take in (((6, 8), lambda a: a[..., 0]), ((6,), lambda a: a[..., 0, 0]),
                       ((6, 8), lambda a: np.swapaxes(a[..., 0], -1, -2).swapaxes(-1, -2))):
        named = {n: take(a) for n, a in zip(("alpha", "beta", "gamma", "E", "B"),
                                              (alpha, beta, gamma, E, B))}
        assert counted(named, None, grid) == 0
        named["E"] = named["E"].copy()
        named["E"][(0,) + (1,) * len(grid)] = np.inf
        assert numpy_verdict(monkeypatch, named, None, grid)
        assert counted(named, None, grid) > 0


def test_other_dtypes_go_to_the_numpy_check(rng, monkeypatch):
    # float16 and long double are not types the kernels take: the NumPy check decides alone.
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    for dtype in (np.float16, np.longdouble):
        named = {"alpha": alpha, "beta": beta, "gamma": gamma, "E": E.astype(dtype), "B": B}
        assert counted(named, None) == 1
        arg.check_points("f", GRID, named, lapse="alpha", metric=("gamma", gamma, INDEX))
        named["E"][(0, 1, 1, 1)] = np.inf
        assert numpy_verdict(monkeypatch, named, None)
