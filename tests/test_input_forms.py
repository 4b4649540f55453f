"""The input-form table (src/emsource/input_forms.py): every form against the contravariant one.

For each form in FORMS, contravariant data E^i, B^i are converted to that form by a plain-NumPy
reference converter written here (below), and adm_sources, stress_energy_4d (both index
positions) and energy_fluxes on the converted data must give the results of the contravariant
form on the original data. A form added to the table without a reference converter here
fails ``test_every_form_has_a_reference_converter``.

Tolerance, per point, from the bounds derived in test_metric_conditioning.py: each of the two
results is within C eps kappa rho of the exact value for its own inputs in metric norms, with
C <= 160 for every quantity and form (the covariant T^ab, C_4D_UPPER) and a factor
(1 + |beta|_g / alpha)^2 for the 4D components; the converted inputs differ from exact
lowering by one rounding per component (a relative change u, which moves rho by at most
3 u kappa rho by (a) there). A metric norm bounds the components: |w_i| <= sqrt(lambda_max) |w|_g,
|M_ij| <= lambda_max |M|_g, and the 4D components pick up alpha^2 and |beta| as well, so the
allowed difference per component is
    2 * 160 * eps * kappa * rho * max(1, lambda_max) * max(1, alpha)^2 * (1 + |beta|_g / alpha)^2.
On random_curved_data (kappa ~ 10) that is ~ 1e-11 rho in float64.
"""

from __future__ import annotations

import numpy as np
import pytest

import emsource
from emsource import _arguments
from emsource.energy_flux import energy_fluxes
from emsource.input_forms import FORMS, InputForm, input_form
from conftest import random_curved_data, unpack_symmetric

GRID = (3, 5, 4)


def _lower(gamma, V):
    """V_i = gamma_ij V^j with einsum in float64, rounded to the data's dtype."""
    return np.einsum("ij...,j...->i...", unpack_symmetric(gamma.astype(np.float64)),
                     V.astype(np.float64)).astype(V.dtype)


def _densitize(gamma, V):
    """sqrt(gamma) V^i, det gamma_ij by numpy.linalg.det in float64, rounded to the data's dtype."""
    full = np.moveaxis(unpack_symmetric(gamma.astype(np.float64)), (0, 1), (-2, -1))
    return (np.sqrt(np.linalg.det(full)) * V.astype(np.float64)).astype(V.dtype)


#: The reference converter of every form: (gamma, E^i, B^i) -> the stored (E, B) of the form.
REFERENCE_CONVERTERS = {
    "upper": lambda gamma, E, B: (E, B),
    "lower": lambda gamma, E, B: (_lower(gamma, E), _lower(gamma, B)),
    "densitized": lambda gamma, E, B: (_densitize(gamma, E), _densitize(gamma, B)),
}


def test_every_form_has_a_reference_converter():
    assert set(REFERENCE_CONVERTERS) == set(FORMS)


def test_every_form_has_its_vectorised_drivers():
    # One compiled loop per form, with the form a constant in it (kernels/sources.py): a form
    # added to the table without its drivers would fail at its first call.
    from emsource.kernels import sources
    codes = {form.code for form in FORMS.values()}
    assert set(sources.INPUT_FORMS) == codes
    assert set(sources.ADM_SOURCES_FLAT) == codes and set(sources.ADM_SOURCES_WINDOW) == codes
    pairs = {(code, upper) for code in codes for upper in (False, True)}
    assert set(sources.STRESS_ENERGY_FLAT) == pairs and set(sources.STRESS_ENERGY_WINDOW) == pairs


def test_table_names_are_the_field_index_choices():
    assert tuple(FORMS) == _arguments.FIELD_INDICES
    for name, form in FORMS.items():
        assert isinstance(form, InputForm) and form.name == name
        assert [a for a, _ in form.arguments] == ["E", "B"]
    codes = [form.code for form in FORMS.values()]
    assert len(set(codes)) == len(codes), "two forms share a converter code"


@pytest.mark.parametrize("bad", ["covariant", "Upper", "", None, 1, ["lower"]])
def test_unknown_form_lists_the_choices(rng, bad):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    calls = (lambda: emsource.adm_sources(gamma, E, B, field_index=bad),
             lambda: emsource.stress_energy_4d(alpha, beta, gamma, E, B, field_index=bad),
             lambda: energy_fluxes(alpha, beta, gamma, E, B, field_index=bad))
    for call in calls:
        with pytest.raises(ValueError) as info:
            call()
        message = str(info.value)
        assert "field_index must be one of" in message and repr(bad) in message
        assert all(repr(name) in message for name in FORMS), message
    with pytest.raises(ValueError, match="field_index"):
        input_form("a_function", bad)


def _allowance(alpha, beta, gamma, rho, dtype):
    """Per-point allowed difference (module docstring), broadcastable to component arrays."""
    g = np.moveaxis(unpack_symmetric(gamma.astype(np.float64)), (0, 1), (-2, -1))
    lam = np.linalg.eigvalsh(g)
    b = np.moveaxis(beta.astype(np.float64), 0, -1)
    a = alpha.astype(np.float64)
    speed = np.sqrt(np.einsum("...ij,...i,...j->...", g, b, b)) / a
    return (2 * 160 * np.finfo(dtype).eps * lam[..., -1] / lam[..., 0] * rho.astype(np.float64)
            * np.maximum(1, lam[..., -1]) * np.maximum(1, a) ** 2 * (1 + speed) ** 2)


def _assert_close(found, expected, allowance, what):
    excess = np.abs(found.astype(np.float64) - expected.astype(np.float64)) / allowance
    assert np.all(excess <= 1), f"{what}: difference / allowance = {np.max(excess):.3g}"


@pytest.mark.parametrize("name", list(FORMS))
@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_each_form_equals_the_contravariant_form(rng, name, dtype):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID, dtype)
    E_form, B_form = REFERENCE_CONVERTERS[name](gamma, E, B)
    base = emsource.adm_sources(gamma, E, B)
    allowance = _allowance(alpha, beta, gamma, base.rho, dtype)
    for units in ("gaussian", "heaviside_lorentz"):
        ref = emsource.adm_sources(gamma, E, B, units=units)
        got = emsource.adm_sources(gamma, E_form, B_form, units=units, field_index=name)
        scale = 1.0 if units == "gaussian" else 4 * np.pi
        for field in ("rho", "S_i", "S_ij", "S"):
            _assert_close(getattr(got, field), getattr(ref, field), allowance * scale, f"{name} {field}")
    for index in ("lower", "upper"):
        ref = emsource.stress_energy_4d(alpha, beta, gamma, E, B, index=index)
        got = emsource.stress_energy_4d(alpha, beta, gamma, E_form, B_form, index=index,
                                        field_index=name)
        _assert_close(got, ref, allowance, f"{name} T index={index}")
    ref = energy_fluxes(alpha, beta, gamma, E, B)
    got = energy_fluxes(alpha, beta, gamma, E_form, B_form, field_index=name)
    sg = np.sqrt(np.linalg.det(np.moveaxis(unpack_symmetric(gamma.astype(np.float64)), (0, 1), (-2, -1))))
    for field in ("energy", "momentum", "flux"):
        _assert_close(getattr(got, field), getattr(ref, field), allowance * sg, f"{name} {field}")
    # The comparison is not vacuous: a form whose fields were not converted (read as if
    # contravariant) is far outside the allowance.
    if name != "upper":
        wrong = emsource.adm_sources(gamma, E_form, B_form)
        with pytest.raises(AssertionError):
            _assert_close(wrong.rho, base.rho, allowance, "control")
