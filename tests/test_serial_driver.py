"""The serial flat driver of adm_sources (small grids) gives what the parallel one gives.

Independent route: the parallel flat driver, itself checked against the brute-force 4D
contraction in tests/test_sources_reference.py. Same point function, same loop shape (one flat
loop), so the results agree to the few roundings FMA contraction may move between two compiled
loops: a relative tolerance of 8 eps (a handful of roundings in sums of order-one terms).
"""

import numpy as np
import pytest

import emsource
import emsource.sources
from emsource.kernels import sources as kernels

from conftest import random_curved_data


class _Count:
    def __init__(self, real):
        self.real, self.calls = real, 0

    def __call__(self, *args):
        self.calls += 1
        return self.real(*args)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_serial_driver_matches_parallel_driver(rng, monkeypatch, dtype):
    _, _, gamma, E, B = random_curved_data(rng, (6, 5, 4), dtype=dtype)
    parallel = emsource.adm_sources(gamma, E, B)  # SERIAL_POINTS = 0 (conftest)
    spy = _Count(kernels.adm_sources_flat_serial)
    monkeypatch.setattr(kernels, "adm_sources_flat_serial", spy)
    monkeypatch.setattr(emsource.sources, "SERIAL_POINTS", 6 * 5 * 4 + 1)
    out = emsource.AdmSources(*(np.full_like(a, np.nan) for a in parallel))
    serial = emsource.adm_sources(gamma, E, B, out=out)
    assert spy.calls == 1  # the serial driver ran, once
    eps = np.finfo(dtype).eps
    for a, b in zip(serial, parallel):
        np.testing.assert_allclose(a, b, rtol=8 * eps, atol=8 * eps * np.max(np.abs(b)))


def test_serial_driver_counts_and_names_the_bad_point(rng, monkeypatch):
    _, _, gamma, E, B = random_curved_data(rng, (4, 4, 4))
    E[1, 2, 3, 1] = np.nan
    monkeypatch.setattr(emsource.sources, "SERIAL_POINTS", 10**6)
    with pytest.raises(emsource.GridPointError) as error:
        emsource.adm_sources(gamma, E, B)
    message = str(error.value)
    assert "(2, 3, 1)" in message and "E[1] = nan" in message
    # check=False skips the counts: no error, the bad point's outputs are NaN
    src = emsource.adm_sources(gamma, E, B, check=False)
    assert np.isnan(src.rho[2, 3, 1]) and np.isfinite(np.delete(src.rho.ravel(), 2 * 16 + 3 * 4 + 1)).all()
