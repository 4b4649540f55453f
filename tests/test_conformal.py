"""emsource.conformal: sources from conformal variables against adm_sources on the physical
metric, rebuilt here in NumPy from each decomposition's defining relation (T. W. Baumgarte and
S. L. Shapiro, Numerical Relativity (2010), sec. 11.5; M. Alcubierre, Introduction to 3+1
Numerical Relativity (2008), sec. 2.8; both from memory):

    chi: gamma_ij = tilde-gamma_ij / chi,  W: gamma_ij = tilde-gamma_ij / W^2,
    phi: gamma_ij = e^{4 phi} tilde-gamma_ij,

and A_ij = c (S_ij - gamma_ij S / 3) with c = chi, W^2, e^{-4 phi}, whose gamma^ij-trace
must vanish. Tolerance: the kernel forms gamma_ij = tilde-gamma_ij * (1/c) (two roundings per
component against the reference's one division), which moves each source by a few eps kappa
of rho (kappa ~ 10 on random_curved_data, chi in [0.2, 2]): 1e-12 (1 + max|value|) leaves a
margin of ~10x; a wrong power of the factor changes the results by order one.
"""

import numpy as np
import pytest

import emsource
from emsource import GridPointError
from emsource.conformal import conformal_sources, physical_metric
from emsource.metric_forms import DECOMPOSITIONS
from conftest import assert_computed_in_float32, random_curved_data, unpack_symmetric

GRID = (2, 3, 4)

#: factor and physical metric for each decomposition, from chi and tilde-gamma.
REFERENCES = {
    "chi": lambda chi, gt: (chi, gt / chi),
    "w": lambda chi, gt: (np.sqrt(chi), gt / np.sqrt(chi) ** 2),
    "phi": lambda chi, gt: (-np.log(chi) / 4, np.exp(4 * (-np.log(chi) / 4)) * gt),
}


def test_every_decomposition_has_a_reference():
    assert set(REFERENCES) == set(DECOMPOSITIONS)


def _tol(values):
    return 1e-12 * (1.0 + np.max(np.abs(values)))


@pytest.mark.parametrize("name", list(DECOMPOSITIONS))
@pytest.mark.parametrize("field_index", ["upper", "densitized"])
def test_conformal_sources_equal_the_physical_route(rng, name, field_index):
    _, _, gt, E, B = random_curved_data(rng, GRID)
    chi = rng.uniform(0.2, 2.0, GRID)
    factor, gamma = REFERENCES[name](chi, gt)
    np.testing.assert_allclose(physical_metric(factor, gt, decomposition=name), gamma,
                               rtol=1e-14, atol=0)
    ref = emsource.adm_sources(gamma, E, B)
    if field_index == "densitized":
        sg = np.sqrt(np.linalg.det(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))))
        E, B = sg * E, sg * B
    got = conformal_sources(factor, gt, E, B, decomposition=name, field_index=field_index)
    np.testing.assert_allclose(got.rho, ref.rho, rtol=0, atol=_tol(ref.rho))
    np.testing.assert_allclose(got.S, ref.S, rtol=0, atol=_tol(ref.S))
    np.testing.assert_allclose(got.S_i, ref.S_i, rtol=0, atol=_tol(ref.S_i))
    c = {"chi": chi, "w": chi, "phi": chi}[name]  # chi = W^2 = e^{-4 phi}
    A = c * (ref.S_ij - gamma * ref.S / 3)       # packed: gamma_ij S / 3 on all six
    np.testing.assert_allclose(got.A_ij, A, rtol=0, atol=_tol(A))
    inverse = np.linalg.inv(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1)))
    trace = np.einsum("...ij,ij...->...", inverse, unpack_symmetric(got.A_ij))
    assert np.abs(trace).max() < _tol(A), "A_ij is not trace-free"
    assert np.abs(A).max() > 0.1


def test_bad_conformal_input(rng):
    _, _, gt, E, B = random_curved_data(rng, GRID)
    chi = rng.uniform(0.2, 2.0, GRID)
    with pytest.raises(ValueError, match=r"decomposition must be one of \('chi', 'w', 'phi'\), "
                                         r"found 'psi'"):
        conformal_sources(chi, gt, E, B, decomposition="psi")
    with pytest.raises(ValueError, match=r"conformal_factor must have shape \(2, 3, 4\), "
                                         r"found \(2, 3\)"):
        conformal_sources(chi[..., 0], gt, E, B, decomposition="chi")
    with pytest.raises(ValueError, match=r"gamma_tilde must have shape"):
        conformal_sources(chi, gt[:5], E, B, decomposition="chi")
    bad = chi.copy()
    bad[1, 2, 3] = 0.0
    with pytest.raises(GridPointError, match=r"grid index \(1, 2, 3\).*conformal_factor = 0.0 "
                                             r"is not positive") as info:
        conformal_sources(bad, gt, E, B, decomposition="w")
    assert info.value.bad_count == 1


def test_float32_arithmetic_against_float64(rng):
    """float32 input is computed in float32: A_ij, rho, S_i within 200 eps32 of the float64
    result of the same rounded input (a few dozen roundings: the rescaling, the metric
    factorisation, the products; random metrics with condition numbers of order 3), and a
    difference beyond half an ulp somewhere (see ``assert_computed_in_float32``)."""
    _, _, gt, E, B = random_curved_data(rng, (4, 5, 6))
    chi = rng.uniform(0.2, 2.0, (4, 5, 6))
    for name in DECOMPOSITIONS:
        factor, _ = REFERENCES[name](chi, gt)
        inputs32 = [a.astype(np.float32) for a in (factor, gt, E, B)]
        single = conformal_sources(*inputs32, decomposition=name)
        double = conformal_sources(*(a.astype(np.float64) for a in inputs32), decomposition=name)
        metric32 = physical_metric(*inputs32[:2], decomposition=name)
        metric64 = physical_metric(*(a.astype(np.float64) for a in inputs32[:2]),
                                   decomposition=name)
        assert_computed_in_float32(list(zip(single, double)) + [(metric32, metric64)])
