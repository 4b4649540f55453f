"""Tests of emsource.unit_audit: naming the unit system from the Einstein constraints.

Sources: C. W. Misner, K. S. Thorne, J. A. Wheeler, Gravitation (1973), ch. 33 (Kerr-Newman
solves the Einstein-Maxwell equations with the Gaussian stress-energy); J. D. Jackson,
Classical Electrodynamics, 3rd ed. (1999), appendix on units (Heaviside-Lorentz fields are the
Gaussian ones over sqrt(4 pi), the stress-energy loses its 1/(4 pi)).
Box [2.5, 3.5] x [0.5, 1.5] x [-0.5, 0.5], 21^3 points (h = 1/20), outside r+ = 1.62.
"""

import pytest

from emsource.exact import kerr, kerr_newman
from emsource.grid import UniformGrid
from emsource.unit_audit import VACUUM, audit_units

GRID = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (21, 21, 21))


def _audit(d, scale=1.0, **kw):
    return audit_units(d.gamma, d.K, scale * d.E, scale * d.B, spacing=GRID.spacing, **kw)


@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
def test_names_the_system_the_data_were_written_in(units):
    d = kerr_newman(GRID, mass=1.0, spin=0.6, charge=0.5, units=units)
    audit = _audit(d)
    assert audit.verdict == units and audit.smallest == units
    right = audit.result(units)
    # The right system converges at the design order 4 (observed 3.99-4.00 here; we require
    # above 3.5) and the wrong ones converge to a non-zero value (order ~0, residual > 1e-3).
    assert right.fits and right.hamiltonian_order > 3.5 and right.momentum_order > 3.5
    for r in audit.results:
        if r.name != units:
            assert not r.fits
            assert abs(r.hamiltonian_order) < 0.3 and r.hamiltonian_fine > 1e-3
    assert units in audit.table() and "fits" in audit.message


def test_test_field_on_an_uncharged_metric_fits_vacuum():
    # Kerr (vacuum) metric carrying the Kerr-Newman field as a test field: the metric does not
    # feel the field, so only the source-free constraints converge.
    d = kerr(GRID, mass=1.0, spin=0.6)
    f = kerr_newman(GRID, mass=1.0, spin=0.6, charge=0.5)
    audit = audit_units(d.gamma, d.K, f.E, f.B, spacing=GRID.spacing)
    assert audit.verdict == VACUUM


@pytest.mark.parametrize("scale", [0.5, 2.0])
def test_says_none_fits_when_no_system_fits(scale):
    # Fields rescaled by 1/2 or 2: rho is off by 1/4 or 4 in Gaussian units, by pi or 16 pi in
    # Heaviside-Lorentz units, and it is not zero: no hypothesis can make H converge.
    d = kerr_newman(GRID, mass=1.0, spin=0.6, charge=0.5)
    audit = _audit(d, scale)
    assert audit.verdict == "none fits"
    assert not any(r.fits for r in audit.results)
    assert "none fits" in audit.table()


def test_zero_field_is_ambiguous_and_says_why():
    d = kerr(GRID, mass=1.0, spin=0.6)
    audit = _audit(d)
    assert audit.verdict == "ambiguous" and all(r.fits for r in audit.results)
    assert "field is zero" in audit.message


def test_too_small_grid_is_refused():
    small = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (9, 9, 9))
    d = kerr_newman(small, mass=1.0, spin=0.6, charge=0.5)
    with pytest.raises(ValueError, match="at least 10 points"):
        audit_units(d.gamma, d.K, d.E, d.B, spacing=small.spacing)


def test_a_coarse_spacing_that_was_not_doubled_does_not_fit():
    # Every second point evaluated with the fine spacing h instead of 2 h: the coarse second
    # derivatives are 4x too large, so the coarse residual is O(1) and the "observed order"
    # log2(res(2h) / res(h)) comes out far above the design order 4 (measured 18.4 for H
    # and 13.8 for M). Such a ratio is no evidence of convergence: it must not fit, however
    # small the fine residual. The same data with the genuine 2 h fit (control).
    from emsource.constraints import adm_constraints
    from emsource.unit_audit import ORDER_TOLERANCE, hypothesis_result

    d = kerr_newman(GRID, mass=1.0, spin=0.6, charge=0.5)
    sub = (slice(None),) + (slice(None, None, 2),) * 3
    fine = adm_constraints(d.gamma, d.K, d.E, d.B, spacing=GRID.spacing, order=4)
    coarse_args = (d.gamma[sub], d.K[sub], d.E[sub], d.B[sub])
    wrong = adm_constraints(*coarse_args, spacing=GRID.spacing, order=4)
    right = adm_constraints(*coarse_args, spacing=tuple(2 * h for h in GRID.spacing), order=4)
    bad = hypothesis_result("gaussian", fine, wrong, order=4)
    assert bad.hamiltonian_order > 4 + ORDER_TOLERANCE + 5 and not bad.fits
    good = hypothesis_result("gaussian", fine, right, order=4)
    assert good.fits and abs(good.hamiltonian_order - 4) < ORDER_TOLERANCE


def test_fit_is_bounded_on_both_sides_of_the_design_order():
    from emsource.unit_audit import order_fits

    # Derived window [p - 0.81, p + 0.42] (module docstring) inside |p_obs - p| <= 1.
    assert order_fits(3.2, 1e-6, 4) and order_fits(4.4, 1e-6, 4)
    assert not order_fits(2.5, 1e-6, 4) and not order_fits(17.0, 1e-6, 4)
    assert not order_fits(12.0, 1e-6, 4) and order_fits(12.0, 1e-13, 4)  # round-off fits
