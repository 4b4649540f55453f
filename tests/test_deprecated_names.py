"""Old spellings of renamed names (glossary in DEVELOPERS.md) still work, with a warning.

Each keyword alias must give the same result as the new spelling and raise a DeprecationWarning
that names both; giving both spellings is a TypeError. Each command-line alias must parse to
the same option and stay out of the help. Physics is not checked here: the results under the
new names are checked against their sources in the modules' own test files.
"""

import numpy as np
import pytest

from emsource import conservation, constraints, convergence, exact, integrals, reductions, unit_audit
from emsource.cli import build_parser, main
from emsource.commands import EXIT_CHECK_FAILED, EXIT_OK
from emsource.grid import UniformGrid

BOX = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (11, 11, 11))


@pytest.fixture(scope="module")
def hole():
    # Box outside r+ except for an excised corner: excision_radius above the nearest corner's r.
    return exact.kerr_newman(BOX, mass=1.0, spin=0.6, charge=0.5, excision_radius=2.75)


def _warns(old, new):
    return pytest.warns(DeprecationWarning, match=rf"'{old}' is a deprecated name; use '{new}'")


def test_hole_fixture_has_excised_and_valid_points(hole):
    assert 0 < hole.valid_mask.sum() < hole.valid_mask.size


def test_kerr_newman_mask_radius(hole):
    for function in (exact.kerr_newman, exact.reissner_nordstrom, exact.kerr):
        params = dict(mass=1.0, charge=0.5, spin=0.6)
        if function is exact.reissner_nordstrom:
            params.pop("spin")
        if function is exact.kerr:
            params.pop("charge")
        new = function(BOX, excision_radius=2.75, **params)
        with _warns("mask_radius", "excision_radius"):
            old = function(BOX, mask_radius=2.75, **params)
        assert np.array_equal(old.valid_mask, new.valid_mask) and not new.valid_mask.all()
    with pytest.raises(TypeError, match="not both"):
        exact.kerr_newman(BOX, mass=1.0, excision_radius=2.0, mask_radius=2.0)


def test_time_level_fields_mask_and_slice_fields(hole):
    with _warns("mask", "valid_mask"):
        assert hole.mask is hole.valid_mask
    fields = {name: getattr(hole, name) for name in
              ("grid", "t", "alpha", "beta", "gamma", "K", "E", "B", "charge_density",
               "current_density")}
    with _warns("mask", "valid_mask"):
        old = exact.TimeLevelFields(mask=hole.valid_mask, **fields)
    assert old.valid_mask is hole.valid_mask
    with pytest.raises(TypeError, match="not both"):
        exact.TimeLevelFields(mask=hole.valid_mask, valid_mask=hole.valid_mask, **fields)
    with _warns("SliceFields", "TimeLevelFields"):
        assert exact.SliceFields is exact.TimeLevelFields
    with pytest.raises(AttributeError):
        exact.NoSuchName  # noqa: B018 - the module __getattr__ must not swallow typos


def test_adm_constraints_mask_and_evaluated(hole):
    new = constraints.adm_constraints(hole.gamma, hole.K, hole.E, hole.B, spacing=BOX.spacing,
                                      order=2, valid_mask=hole.valid_mask)
    with _warns("mask", "valid_mask"):
        old = constraints.adm_constraints(hole.gamma, hole.K, hole.E, hole.B, spacing=BOX.spacing,
                                          order=2, mask=hole.valid_mask)
    assert np.array_equal(old.hamiltonian, new.hamiltonian, equal_nan=True)
    everywhere = constraints.interior_points(np.ones(BOX.shape, bool), 2)
    assert np.array_equal(old.interior, new.interior) and new.interior.sum() < everywhere.sum()
    with _warns("evaluated", "interior"):
        assert new.evaluated is new.interior
    with _warns("evaluable_points", "interior_points"):
        old_points = constraints.evaluable_points(hole.valid_mask, 2)
    assert np.array_equal(old_points, new.interior)
    with _warns("mask", "valid_mask"):
        assert np.array_equal(constraints.interior_points(mask=hole.valid_mask, order=2),
                              new.interior)
    args = (new.hamiltonian, new.momentum, new.hamiltonian_scale, new.momentum_scale)
    with _warns("evaluated", "interior"):
        old_partial = constraints.norm_partial(*args, evaluated=new.interior)
    assert np.array_equal(old_partial.finalise(0).l2, new.hamiltonian_norms.l2)
    with _warns("evaluated", "interior"):
        old_norms = constraints.residual_norms(new.hamiltonian, new.hamiltonian_scale,
                                               evaluated=new.interior)
    assert old_norms.l2 == new.hamiltonian_norms.l2


def test_audit_units_mask_and_no_sources():
    grid = UniformGrid.from_bounds((2.5, 0.5, -0.5), (3.5, 1.5, 0.5), (21, 21, 21))
    d = exact.kerr_newman(grid, mass=1.0, spin=0.6, charge=0.5)
    new = unit_audit.audit_units(d.gamma, d.K, d.E, d.B, spacing=grid.spacing,
                                 valid_mask=d.valid_mask)
    with _warns("mask", "valid_mask"):
        old = unit_audit.audit_units(d.gamma, d.K, d.E, d.B, spacing=grid.spacing,
                                     mask=d.valid_mask)
    assert old.table() == new.table() and new.verdict == "gaussian"
    with _warns("no_sources", "vacuum"):
        assert new.result("no_sources") == new.result(unit_audit.VACUUM)
    with _warns("NO_SOURCES", "VACUUM"):
        assert unit_audit.NO_SOURCES == unit_audit.VACUUM == "vacuum"
    with pytest.raises(KeyError, match="found 'nothing'"):
        new.result("nothing")


def _charge(t, n=12):
    grid = UniformGrid.from_bounds((-1.2,) * 3, (1.2,) * 3, (n,) * 3)
    return exact.boosted_gaussian_charge(grid, t, charge=1.0, width=0.35, velocity=(0.4, 0.3, 0.2))


def test_conservation_mask_slices_and_slice_residual():
    now = _charge(0.1)
    valid = np.ones(now.grid.shape, bool)
    valid[5, 6, 4] = False
    new = conservation.level_residual(now, order=2, valid_mask=valid)
    with _warns("mask", "valid_mask"):
        old = conservation.level_residual(now, order=2, mask=valid)
    assert np.array_equal(old.energy, new.energy, equal_nan=True) and not new.interior[5, 6, 4]
    with _warns("slice_residual", "level_residual"):
        renamed = conservation.slice_residual
    assert np.array_equal(renamed(now, order=2, valid_mask=valid).energy, new.energy,
                          equal_nan=True)
    fields = dict(alpha=now.alpha, beta=now.beta, gamma=now.gamma, K=now.K, E=now.E, B=now.B,
                  spacing=now.grid.spacing, order=2, dt_E=now.dt_E, dt_B=now.dt_B,
                  dt_gamma=now.dt_gamma)
    with _warns("mask", "valid_mask"):
        direct = conservation.conservation_residual(mask=valid, **fields)
    assert np.array_equal(direct.interior, new.interior)
    levels = [_charge(t) for t in (0.0, 0.1)]
    with _warns("slices", "levels"):
        old_balance = conservation.global_balance(slices=levels, order=2)
    new_balance = conservation.global_balance(levels, order=2)
    assert old_balance.energy == new_balance.energy


def test_balance_partial_of_slice():
    totals, outflow, source = (reductions.Sum.of(np.arange(4.0) + k) for k in range(3))
    with _warns("of_slice", "of_level"):
        old = reductions.BalancePartial.of_slice((0.0, 1.0), 1, totals, outflow, source)
    new = reductions.BalancePartial.of_level((0.0, 1.0), 1, totals, outflow, source)
    assert np.array_equal(old.totals.value, new.totals.value)
    assert np.array_equal(new.totals.value, [[0.0] * 4, [6.0] * 4])  # sum of 0..3 in row 1


def test_integrals_mask_n_theta_and_excluded_points():
    grid = UniformGrid.from_bounds((-2.0,) * 3, (2.0,) * 3, (17,) * 3)
    d = exact.rotating_dipole(grid, 0.0, excision_radius=0.3)
    valid = d.valid_mask.astype(np.uint8)
    new = integrals.integrate_level_arrays(grid, d.gamma, d.E, d.B, valid_mask=valid,
                                           radii=(1.2,), theta_points=8)
    with _warns("n_theta", "theta_points"), _warns("mask", "valid_mask"):
        old = integrals.integrate_level_arrays(grid, d.gamma, d.E, d.B, mask=valid,
                                               radii=(1.2,), n_theta=8)
    assert (old.energy, old.luminosity) == (new.energy, new.luminosity) and new.excised_points > 0
    with _warns("excluded_points", "excised_points"):
        assert new.excluded_points == new.excised_points
    with _warns("n_theta", "theta_points"):
        old_nodes = integrals.sphere_quadrature(1.0, n_theta=5)
    for a, b in zip(old_nodes, integrals.sphere_quadrature(1.0, 5)):
        assert np.array_equal(a, b)
    whole = integrals.level_partial(grid, d.gamma, d.E, d.B, valid_mask=valid)
    with _warns("mask", "valid_mask"):
        old_partial = integrals.level_partial(grid, d.gamma, d.E, d.B, mask=valid)
    assert old_partial.energy.value == whole.energy.value
    with _warns("excluded_points", "excised_points"):
        assert whole.excluded_points == whole.excised_points == new.excised_points


def test_integrate_snapshot_n_theta(tmp_path):
    from emsource.snapshot import write_snapshot

    grid = UniformGrid.from_bounds((-2.0,) * 3, (2.0,) * 3, (17,) * 3)
    path = tmp_path / "dipole.h5"
    write_snapshot(path, [exact.rotating_dipole(grid, 0.0, excision_radius=0.3)])
    with _warns("n_theta", "theta_points"):
        old = integrals.integrate_snapshot(path, radii=(1.5,), n_theta=6)
    (old,), (new,) = old, integrals.integrate_snapshot(path, radii=(1.5,), theta_points=6)
    assert old.luminosity == new.luminosity and old.energy == new.energy


def test_convergence_make_slice():
    def make(n, t):
        grid = UniformGrid.from_bounds((0.0, 0.0), (1.0, 1.0), (n, n))
        return exact.plane_wave(grid, t, wave_vector=(2 * np.pi, np.pi, 0.0),
                                polarization=(0.0, 0.0, 1.0))

    new = convergence.residual_convergence(make, (12, 16), order=2)
    with _warns("make_slice", "make_level"):
        old = convergence.residual_convergence(make_slice=make, resolutions=(12, 16), order=2)
    assert old.errors.keys() == new.errors.keys()
    for name in new.errors:
        assert np.array_equal(old.errors[name], new.errors[name])
    with _warns("make_slice", "make_level"):
        case = convergence.Case("c", "a case", make_slice=make, resolutions=(12, 16))
    assert case.make_level is make
    with _warns("make_slice", "make_level"):
        assert case.make_slice is make


# --------------------------------------------------------------------------- command line

@pytest.mark.parametrize("command, old, new, value, dest", [
    (["integrate", "f.h5"], "--angular-points", "--theta-points", ["7"], "theta_points"),
    (["converge", "--case", "c"], "--resolutions", "--points", ["8", "12"], "points"),
    (["black-hole", "o.h5"], "--mask-radius", "--excision-radius", ["0.5"], "excision_radius"),
])
def test_hidden_option_aliases(command, old, new, value, dest, capsys):
    parser = build_parser()
    given = getattr(parser.parse_args(command + [new] + value), dest)
    assert getattr(parser.parse_args(command + [old] + value), dest) == given
    assert getattr(parser.parse_args(command), dest) != given  # the value is really read
    with pytest.raises(SystemExit):
        parser.parse_args([command[0], "--help"])
    text = capsys.readouterr().out
    assert new in text and old not in text


def test_sources_none_is_vacuum(tmp_path, capsys):
    path = str(tmp_path / "kn.h5")
    assert main(["black-hole", path, "--spin", "0.6", "--charge", "0.5", "--points", "11",
                 "--lower", "2.5", "0.5", "-0.5", "--upper", "3.5", "1.5", "0.5"]) == EXIT_OK
    capsys.readouterr()
    assert main(["constraints", path, "--order", "2", "--sources", "vacuum"]) == EXIT_OK
    new = capsys.readouterr().out
    assert main(["constraints", path, "--order", "2", "--sources", "none"]) == EXIT_OK
    captured = capsys.readouterr()
    assert captured.out == new and "sources vacuum" in new
    assert "deprecated spelling of --sources vacuum" in captured.err
    assert main(["constraints", path, "--order", "2", "--sources", "vacuum",
                 "--tolerance", "1e-9"]) == EXIT_CHECK_FAILED  # the vacuum run is really vacuum
    with pytest.raises(SystemExit):
        build_parser().parse_args(["constraints", "--help"])
    help_text = capsys.readouterr().out
    assert "{file,gaussian,heaviside_lorentz,vacuum}" in help_text and ",none" not in help_text


def test_a_bad_valid_mask_is_named_by_its_new_name(hole):
    # The error names the keyword the caller is told to use, whichever spelling was given.
    with pytest.raises(ValueError, match=r"adm_constraints: valid_mask must be a bool \(or integer\) "
                                         r"array of shape \(11, 11, 11\), found float64 of shape \(11, 11, 11\)"):
        constraints.adm_constraints(hole.gamma, hole.K, spacing=BOX.spacing, order=2,
                                    valid_mask=np.ones(BOX.shape))
