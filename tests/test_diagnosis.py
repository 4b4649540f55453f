"""Diagnosis of a user's own sources (``emsource.diagnosis``).

The "user's data" come from ``tests/diagnosis_reference.py``: an independent implementation of
the sources with each convention difference (explicit Levi-Civita symbol and index gymnastics,
T_tt and T_ti by brute-force 4D contraction), against the formulas of E. Gourgoulhon, 3+1
Formalism in General Relativity (2012), sec. 5.2, and T. W. Baumgarte and S. L. Shapiro,
Numerical Relativity (2010), sec. 5.2. States are curved and random (positive-definite gamma with
condition number of a few, lapse in [0.5, 2], shift of order 0.5) so that the candidates differ;
special states (flat metric, constant lapse) are used on purpose where coincidences are tested.
Time budget: about 10 s warm (each diagnosis with the pair search takes ~0.3 s on a 60-point grid).
"""

import itertools
import json
import math

import numpy as np
import pytest

from emsource import diagnosis as D
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK
from emsource.errors import GridPointError

from conftest import random_curved_data
from diagnosis_reference import combinable, user_sources

GRID = (3, 4, 5)


def _state(seed, grid=GRID):
    return random_curved_data(np.random.default_rng(seed), grid)


def _diagnose(inputs, data, **kwargs):
    rho, S_i, S_ij = data
    return D.diagnose_sources(*inputs, rho=rho, S_i=S_i, S_ij=S_ij, **kwargs)


def _reproduces(explanation, names, amplitude, seed=77, grid=GRID):
    """The found explanation, applied by the package on an independent random state, equals the
    reference user code with ``names`` there (round-off tolerance of that state)."""
    inputs = _state(seed, grid)
    state = D.InputState.of(*inputs, "gaussian")
    found = D.apply_candidates(explanation.names, state, explanation.amplitude)
    truth = user_sources(*inputs, names, amplitude=amplitude)
    tau = D.round_off_tolerance(state, D.OUTPUTS, np.finfo(np.float64).eps)
    if any(f.shape != t.shape for f, t in zip(found, truth)):
        return False
    diff = math.sqrt(sum(np.sum((f - t) ** 2) for f, t in zip(found, truth)))
    return diff <= tau * math.sqrt(sum(np.sum(t ** 2) for t in truth))


# ----------------------------------------------------------------------------- agreement
@pytest.mark.parametrize("units", ["gaussian", "heaviside_lorentz"])
def test_correct_sources_agree(units):
    inputs = _state(1)
    data = user_sources(*inputs, (), units=units)
    d = _diagnose(inputs, data, units=units)
    assert d.verdict == "agree" and d.explained
    # An independent route differs by rounding only: not bit for bit, well inside tau.
    assert d.agreement <= d.tolerance
    assert d.untestable == ()      # a curved random state hides no candidate
    assert d.pairs == ()           # nothing searched beyond agreement


def test_float32_data_agree_with_a_float32_tolerance():
    inputs = _state(2)
    data = [a.astype(np.float32) for a in user_sources(*inputs, ())]
    d = _diagnose(inputs, data)
    assert d.verdict == "agree"
    # The tolerance is eps-proportional: the same state with float64 data has eps64/eps32 of it.
    d64 = _diagnose(inputs, user_sources(*inputs, ()))
    ratio = np.finfo(np.float32).eps / np.finfo(np.float64).eps
    assert d.tolerance == pytest.approx(d64.tolerance * ratio, rel=1e-12)
    # ... and float32 round-off (~1e-7) is far above the float64 tolerance.
    assert d.agreement > d64.tolerance


def test_tolerance_is_round_off_sized():
    """tau = 32 eps kappa chi (module docstring): a few hundred eps on a well-conditioned state,
    far below any convention difference (order one)."""
    inputs = _state(3)
    d = _diagnose(inputs, user_sources(*inputs, ()))
    assert 32 * np.finfo(float).eps <= d.tolerance < 1e-11
    wrong = [x for x in d.singles if x.names != ("unit_factor",)]
    assert min(x.residual for x in wrong) > 1e6 * d.tolerance


# ----------------------------------------------------------------------------- singles
@pytest.mark.parametrize("name", [c.name for c in D.CATALOGUE])
def test_every_catalogue_entry_is_recovered(name):
    inputs = _state(4)
    amplitude = 8 * math.pi if D.BY_NAME[name].amplitude else 1.0
    d = _diagnose(inputs, user_sources(*inputs, (name,), amplitude=amplitude))
    assert d.verdict == "explained", d.message
    assert d.explanations[0].names == (name,), d.message
    assert d.best.residual <= d.tolerance
    if name == "unit_factor":
        assert d.explanations[0].factor_name(d.tolerance) == "8 pi"


@pytest.mark.parametrize("factor", [n for n in D.NAMED_FACTORS if n != "1"])
def test_unit_factors_are_named(factor):
    inputs = _state(5)
    value = D.NAMED_FACTORS[factor]
    d = _diagnose(inputs, user_sources(*inputs, (), amplitude=value))
    assert d.verdict == "explained"
    assert d.explanations[0].names == ("unit_factor",)
    assert d.explanations[0].factor_name(d.tolerance) == factor


def test_axis_reversal_is_found_from_the_values_on_a_cubic_grid():
    # On a cube the reversed arrays have the grid's own shape: only the values tell.
    inputs = _state(6, (4, 4, 4))
    d = _diagnose(inputs, user_sources(*inputs, ("grid_axes_reversed",)))
    assert d.verdict == "explained" and d.explanations[0].names == ("grid_axes_reversed",)


# ----------------------------------------------------------------------------- pairs
def _pair_sample():
    """All ordered pairs are searched by every diagnosis; recovering each of the ~700
    combinable pairs would take minutes, so the tests use a documented sample: pairs chosen to
    cross every stage (fields, point physics, storage) and a seeded random draw of 14 more."""
    chosen = [("unit_factor", "momentum_upper"), ("fields_covariant", "stress_upper"),
              ("momentum_sign", "stress_packing_voigt"), ("alpha^2*rho", "momentum_as_T_ti"),
              ("stress_without_trace_term", "grid_axes_reversed"),
              ("levi_civita_without_sqrt_det", "components_last_reshaped"),
              ("energy_as_T_tt", "alpha^-1*S_i,S_ij")]
    names = [c.name for c in D.CATALOGUE]
    combinable_pairs = [p for p in itertools.combinations(names, 2) if combinable(*p)]
    rng = np.random.default_rng(14)
    drawn = [combinable_pairs[i] for i in rng.choice(len(combinable_pairs), 14, replace=False)]
    return chosen + drawn


@pytest.mark.parametrize("names", _pair_sample(), ids="+".join)
def test_pairs_are_recovered(names):
    inputs = _state(7)
    amplitude = 4 * math.pi if any(D.BY_NAME[n].amplitude for n in names) else 1.0
    d = _diagnose(inputs, user_sources(*inputs, names, amplitude=amplitude))
    # Some pairs compose to a single candidate (two lapse factors on disjoint outputs, a step
    # that overrides the other): the verdict must then be that single one. Either way the
    # explanation found must be the same transformation as the user's code on a fresh state.
    assert d.verdict in ("explained", "agree"), d.message
    assert _reproduces(d.explanations[0], names, amplitude), d.message


# ----------------------------------------------------------------------------- noise
def test_noise_below_and_above_the_tolerance():
    inputs = _state(8)
    data = user_sources(*inputs, ("momentum_sign",))
    tau = _diagnose(inputs, data).tolerance
    noise_rng = np.random.default_rng(9)

    def noisy(level):
        # relative noise of l2 size `level` of the whole data vector
        size = math.sqrt(sum(np.sum(a ** 2) for a in data))
        count = sum(a.size for a in data)
        return [a + level * size / math.sqrt(count) * noise_rng.standard_normal(a.shape)
                for a in data]

    quiet = _diagnose(inputs, noisy(1e-3 * tau))
    assert quiet.verdict == "explained" and quiet.explanations[0].names == ("momentum_sign",)
    loud = _diagnose(inputs, noisy(1e-6))
    assert loud.verdict == "not explained" and not loud.explained
    assert loud.best.names == ("momentum_sign",)
    assert 1e-7 < loud.best.residual < 1e-5
    assert "does not explain the data to round-off" in loud.message
    assert len(loud.pairs) == len(D.PAIRS)   # the pairs were searched before giving up


def test_a_difference_outside_the_catalogue_is_not_explained():
    inputs = _state(10)
    rho, S_i, S_ij = user_sources(*inputs, ())
    S_ij = S_ij.copy()
    S_ij[0] *= 1.5      # one component scaled: no entry of the catalogue does that
    d = _diagnose(inputs, (rho, S_i, S_ij))
    assert d.verdict == "not explained" and d.explanations == ()


# ----------------------------------------------------------------------------- coincidences
def test_constant_lapse_makes_lapse_factor_and_unit_factor_ambiguous():
    alpha, beta, gamma, E, B = _state(11)
    alpha = np.full_like(alpha, 1.7)
    names = ("alpha*rho,S_i,S_ij",)
    d = _diagnose((alpha, beta, gamma, E, B), user_sources(alpha, beta, gamma, E, B, names))
    assert d.verdict == "ambiguous" and not d.explained
    found = {e.names for e in d.explanations}
    assert {("alpha*rho,S_i,S_ij",), ("unit_factor",)} <= found
    assert "constant" in d.message


def test_flat_metric_hides_index_placement_and_says_so():
    alpha, beta, gamma, E, B = _state(12)
    gamma = np.zeros_like(gamma)
    gamma[[0, 3, 5]] = 1.0
    inputs = (alpha, beta, gamma, E, B)
    d = _diagnose(inputs, user_sources(*inputs, ("momentum_upper", "stress_upper")))
    # S^i = S_i and S^ij = S_ij when gamma = delta: the data agree, and the verdict says what
    # could not be tested and why.
    assert d.verdict == "agree"
    for hidden in ("momentum_upper", "stress_upper", "fields_covariant",
                   "levi_civita_without_sqrt_det"):
        assert hidden in d.untestable
    assert "identity" in d.message and "index placement" in d.message
    signed = _diagnose(inputs, user_sources(*inputs, ("momentum_sign", "momentum_upper")))
    assert signed.verdict == "explained" and signed.explanations[0].names == ("momentum_sign",)
    assert "momentum_upper" in signed.untestable and "index placement" in signed.message


def test_missing_lapse_makes_lapse_factors_untestable():
    alpha, beta, gamma, E, B = _state(13)
    data = user_sources(np.ones_like(alpha), np.zeros_like(beta), gamma, E, B, ())
    d = D.diagnose_sources(None, None, gamma, E, B, rho=data[0], S_i=data[1], S_ij=data[2])
    assert d.verdict == "agree"
    assert "alpha*rho" in d.untestable and "no lapse was given" in d.message


def test_only_the_given_outputs_are_compared():
    inputs = _state(14)
    rho = user_sources(*inputs, ("alpha^2*rho",))[0]
    d = D.diagnose_sources(*inputs, rho=rho)
    assert d.verdict == "explained" and d.given == ("rho",)
    # Factors on rho together with outputs that were not given are the same explanation here.
    assert d.explanations[0].names == ("alpha^2*rho",)
    assert "alpha^2*rho,S_i" in d.equivalent


# ----------------------------------------------------------------------------- bad input
def test_bad_input_is_named():
    inputs = _state(15)
    rho, S_i, S_ij = user_sources(*inputs, ())
    with pytest.raises(ValueError, match="at least one of rho, S_i, S_ij"):
        D.diagnose_sources(*inputs)
    with pytest.raises(ValueError, match=r"S_ij must have shape \(6, 3, 4, 5\) or \(6, 5, 4, 3\), "
                                         r"found \(3, 3, 4, 5\)"):
        D.diagnose_sources(*inputs, S_ij=S_i)
    bad = S_ij.copy()
    bad[2, 1, 2, 3] = np.nan
    with pytest.raises(GridPointError, match=r"diagnose_sources.*\(1, 2, 3\).*S_ij\[2\] = nan"):
        D.diagnose_sources(*inputs, S_ij=bad)
    alpha = inputs[0].copy()
    alpha[0, 1, 1] = -1.0
    with pytest.raises(GridPointError, match=r"\(0, 1, 1\).*lapse alpha = -1"):
        D.diagnose_sources(alpha, *inputs[1:], rho=rho)
    with pytest.raises(TypeError, match="rho must be a NumPy array"):
        D.diagnose_sources(*inputs, rho=rho.tolist())
    with pytest.raises(ValueError, match="units must be one of"):
        D.diagnose_sources(*inputs, rho=rho, units="si")


def test_inputs_are_not_modified_and_excised_points_are_ignored():
    alpha, beta, gamma, E, B = _state(16)
    mask = np.ones(GRID, bool)
    mask[0, 0, :2] = False
    data = [a.copy() for a in user_sources(alpha, beta, gamma, E, B, ("stress_upper",))]
    for a in (alpha, beta, gamma, E, B, *data):
        a[..., 0, 0, 0] = np.nan               # fill values at an excised point
    copies = [a.copy() for a in (alpha, beta, gamma, E, B, *data)]
    d = _diagnose((alpha, beta, gamma, E, B), data, valid_mask=mask)
    assert d.verdict == "explained" and d.explanations[0].names == ("stress_upper",)
    for before, after in zip(copies, (alpha, beta, gamma, E, B, *data)):
        np.testing.assert_array_equal(before, after)


# ----------------------------------------------------------------------------- command line
def _snapshot(tmp_path, names, *, noise=0.0, nan_at=None,
              outputs=("energy_density", "momentum_density", "spatial_stress")):
    from emsource.grid import UniformGrid
    from emsource.snapshot import write_snapshot

    alpha, beta, gamma, E, B = _state(17)
    rho, S_i, S_ij = user_sources(alpha, beta, gamma, E, B, names)
    S_i = S_i + noise * np.random.default_rng(3).standard_normal(S_i.shape)
    if nan_at is not None:
        S_i[(0,) + nan_at] = np.nan
    level = {"lapse": alpha, "shift": beta, "spatial_metric": gamma, "electric_field": E,
             "magnetic_field": B, "time": 0.0, "grid": UniformGrid(GRID, (0, 0, 0), (0.1,) * 3),
             "units": "gaussian"}
    level.update({q: v for q, v in zip(("energy_density", "momentum_density", "spatial_stress"),
                                       (rho, S_i, S_ij)) if q in outputs})
    path = tmp_path / "user.h5"
    write_snapshot(path, [level])
    return path


def test_command_explains_and_writes_json(tmp_path, capsys):
    path = _snapshot(tmp_path, ("fields_covariant", "stress_packing_diagonal_first"))
    out = tmp_path / "diagnosis.json"
    assert main(["diagnose-sources", str(path), "--json", str(out)]) == EXIT_OK
    text = capsys.readouterr().out
    assert "explained: fields_covariant + stress_packing_diagonal_first" in text
    report = json.loads(out.read_text())
    assert report["verdict"] == "explained"
    assert report["explanations"][0]["candidates"] == ["fields_covariant",
                                                      "stress_packing_diagonal_first"]


def test_command_exit_codes_for_none_fits_and_bad_input(tmp_path, capsys):
    path = _snapshot(tmp_path, ("momentum_sign",), noise=1e-6)
    assert main(["diagnose-sources", str(path), "--no-pairs"]) == EXIT_CHECK_FAILED
    assert "not explained" in capsys.readouterr().out
    (tmp_path / "user.h5").unlink()
    path = _snapshot(tmp_path, (), outputs=())
    out = tmp_path / "diagnosis.json"
    assert main(["diagnose-sources", str(path), "--json", str(out)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "needs at least one of energy_density" in err and "Traceback" not in err
    assert err.count("\n") == 1
    assert sorted(p.name for p in tmp_path.iterdir()) == ["user.h5"]   # nothing written
    (tmp_path / "user.h5").unlink()
    path = _snapshot(tmp_path, (), nan_at=(2, 1, 3))
    assert main(["diagnose-sources", str(path), "--json", str(out)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "time level 0" in err and "(2, 1, 3)" in err and "S_i = momentum_density" in err
    assert "S_i[0] = nan" in err and not out.exists()



def test_command_reads_the_users_sources_through_a_mapping(tmp_path, capsys):
    """Another code's layout: grid stored (z, y, x), one dataset per momentum component, the
    stress component-last; the user's sources carry the Heaviside-Lorentz formula's missing
    1/(4 pi) (so 4 pi times the Gaussian sources)."""
    import h5py

    alpha, beta, gamma, E, B = _state(19)
    rho, S_i, S_ij = user_sources(alpha, beta, gamma, E, B, (), amplitude=4 * math.pi)

    def zyx(a):   # (n, x, y, z) -> (n, z, y, x); scalars (x, y, z) -> (z, y, x)
        return np.ascontiguousarray(a.T if a.ndim == 3 else np.swapaxes(a, 1, 3))

    path = tmp_path / "foreign.h5"
    with h5py.File(path, "w") as f:
        g = f.create_group("run/step_4")
        g["lapse"], g["shift"], g["metric"] = zyx(alpha), zyx(beta), zyx(gamma)
        g["efield"], g["bfield"], g["rho"] = zyx(E), zyx(B), zyx(rho)
        for c, axis in enumerate("xyz"):
            g[f"mom_{axis}"] = zyx(S_i[c][None])[0]
        g["stress"] = np.moveaxis(zyx(S_ij), 0, -1)
    mapping = tmp_path / "foreign.toml"
    mapping.write_text("""
mapping_version = 1
axis_order = "zyx"
units = "gaussian"
[time_levels]
pattern = "run/step_{index}"
time = { per_index = 0.5 }
[grid]
spacing = [0.1, 0.1, 0.1]
origin = [0.0, 0.0, 0.0]
[quantities.lapse]
dataset = "lapse"
[quantities.shift]
dataset = "shift"
[quantities.spatial_metric]
dataset = "metric"
[quantities.electric_field]
dataset = "efield"
[quantities.magnetic_field]
dataset = "bfield"
[quantities.energy_density]
dataset = "rho"
[quantities.momentum_density]
components = ["mom_x", "mom_y", "mom_z"]
[quantities.spatial_stress]
dataset = "stress"
component_axis = "last"
""")
    assert main(["diagnose-sources", str(path), "--mapping", str(mapping)]) == EXIT_OK
    out = capsys.readouterr().out
    assert "explained: unit_factor" in out and "[amplitude 4 pi]" in out


def test_ill_conditioned_metric_still_recovers_index_placement():
    """kappa(gamma) = 1e4: raising indices with gamma^ij loses up to kappa eps relative accuracy
    in either route, which the kappa factor of the tolerance covers (module docstring)."""
    alpha, beta, gamma, E, B = _state(20)
    rng = np.random.default_rng(21)
    q, _ = np.linalg.qr(rng.standard_normal((3, 3)))
    full = q @ np.diag([1e-2, 1.0, 1e2]) @ q.T          # eigenvalues 1e-2, 1, 1e2
    gamma = np.broadcast_to(full[[0, 0, 0, 1, 1, 2], [0, 1, 2, 1, 2, 2]][:, None, None, None],
                            gamma.shape).copy()
    gamma *= 1 + 0.01 * rng.standard_normal(gamma.shape[1:])   # not constant on the grid
    inputs = (alpha, beta, gamma, E, B)
    for names in (("stress_upper",), ("momentum_upper",), ()):
        d = _diagnose(inputs, user_sources(*inputs, names))
        assert d.explained and (d.explanations[0].names == names), d.message
        assert d.tolerance > 1e3 * 32 * np.finfo(float).eps   # kappa ~ 1e4 is in it
