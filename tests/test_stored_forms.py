"""Mapping key [forms] (emsource.snapshot.stored_forms): snapshots that store conformal metrics,
densitized fields, a Faraday tensor or B with a fluid velocity give, through a mapping file
alone, the sources of the physical E^i, B^i, gamma_ij (adm_sources on data converted here in
NumPy from each form's defining relation; the forms themselves are checked against the 4D route
in test_faraday.py, test_ideal_mhd.py, test_conformal.py).

Tolerance: float64 data of order one (random_curved_data, kappa ~ 10); each route rounds to a
few tens of eps kappa of rho, so 1e-11 (1 + max |rho|) has a wide margin, while a form read as
another (e.g. densitized as plain) differs by order one.
"""

import h5py
import numpy as np
import pytest

import emsource
from emsource import snapshot
from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT
from emsource.faraday import faraday_tensor
from emsource.ideal_mhd import ideal_mhd_fields
from emsource.snapshot import MappingError, load_mapping
from emsource.snapshot.sources_pipeline import compute_sources
from conftest import random_curved_data, unpack_symmetric

GRID = (4, 3, 5)

HEAD = """mapping_version = 1
axis_order = "xyz"
units = "gaussian"
[time_levels]
pattern = "/run/step_{index}"
[grid]
spacing = [0.1, 0.2, 0.3]
origin = [0.0, 0.0, 0.0]
"""


def _case(rng, name):
    """(datasets to store, [quantities] + [forms] text, E^i, B^i, gamma_ij of the truth)."""
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    beta *= 0.3
    sg = np.sqrt(np.linalg.det(np.moveaxis(unpack_symmetric(gamma), (0, 1), (-2, -1))))
    chi = sg ** (-2.0 / 3.0)          # det tilde-gamma = 1
    q = '[quantities.{0}]\ndataset = "{1}"\n'
    if name == "densitized_chi":
        data = {"gt": gamma * chi, "chi": chi, "E": sg * E, "B": sg * B}
        text = (q.format("conformal_metric", "gt") + q.format("conformal_factor", "chi")
                + q.format("electric_field", "E") + q.format("magnetic_field", "B")
                + '[forms]\nfields = "densitized"\nmetric = "chi"\n')
    elif name == "faraday_phi":
        data = {"gt": gamma * chi, "phi": -np.log(chi) / 4, "alpha": alpha, "beta": beta,
                "F": faraday_tensor(alpha, beta, gamma, E, B, index="upper")}
        text = (q.format("conformal_metric", "gt") + q.format("conformal_factor", "phi")
                + q.format("lapse", "alpha") + q.format("shift", "beta")
                + q.format("faraday_tensor", "F")
                + '[forms]\nfields = "faraday_upper"\nmetric = "phi"\n')
    else:  # ideal_mhd with u^i
        norm = np.sqrt(np.einsum("ij...,i...,j...->...", unpack_symmetric(gamma), E, E))
        v = 0.8 * E / norm
        fluid = ideal_mhd_fields(alpha, beta, gamma, B, v)
        E = fluid.E
        data = {"g": gamma, "alpha": alpha, "beta": beta, "B": B,
                "u": np.ascontiguousarray(fluid.u[1:])}
        text = (q.format("spatial_metric", "g") + q.format("lapse", "alpha")
                + q.format("shift", "beta") + q.format("magnetic_field", "B")
                + q.format("fluid_velocity", "u")
                + '[forms]\nfields = "ideal_mhd"\nvelocity = "four_velocity"\n')
    return data, text, E, B, gamma


def _write(path, data):
    with h5py.File(path, "w") as f:
        group = f.create_group("run/step_0")
        for name, values in data.items():
            group[name] = values


@pytest.mark.parametrize("name", ["densitized_chi", "faraday_phi", "ideal_mhd_u"])
def test_stored_forms_give_the_physical_sources(rng, tmp_path, name):
    data, text, E, B, gamma = _case(rng, name)
    _write(tmp_path / "in.h5", data)
    (tmp_path / "map.toml").write_text(HEAD + text)
    assert main(["sources", str(tmp_path / "in.h5"), "--mapping", str(tmp_path / "map.toml"),
                 "-o", str(tmp_path / "out.h5"), "--quiet"]) == 0
    got = snapshot.read_level(tmp_path / "out.h5")
    ref = emsource.adm_sources(gamma, E, B)
    tol = 1e-11 * (1 + np.abs(ref.rho).max())
    np.testing.assert_allclose(got["energy_density"], ref.rho, rtol=0, atol=tol)
    np.testing.assert_allclose(got["momentum_density"], ref.S_i, rtol=0, atol=tol)
    np.testing.assert_allclose(got["spatial_stress"], ref.S_ij, rtol=0, atol=3 * tol)


@pytest.mark.parametrize("forms, message", [
    ('fields = "faraday_lower"\n', "needs [quantities.faraday_tensor], which is missing"),
    ('metric = "chi"\n', "needs [quantities.conformal_metric], which is missing"),
    ('metric = "psi"\n', "[forms] metric must be one of"),
    ('fields = 3\n', "[forms] fields must be a non-empty string, found 3"),
    ('speed = 1\n', "unknown key(s) ['speed'] in [forms]"),
    ('velocity = "eulerian"\n', "velocity applies to fields = 'ideal_mhd' only"),
    ('fields = "ideal_mhd"\n', "[forms] fields = 'ideal_mhd' computes electric_field: remove "
                               "[quantities.electric_field]"),
])
def test_bad_forms_are_named(rng, tmp_path, capsys, forms, message):
    alpha, beta, gamma, E, B = random_curved_data(rng, GRID)
    _write(tmp_path / "in.h5", {"g": gamma, "E": E, "B": B, "v": 0 * E, "a": alpha, "b": beta})
    text = "".join(f'[quantities.{q}]\ndataset = "{d}"\n' for q, d in (
        ("spatial_metric", "g"), ("electric_field", "E"), ("magnetic_field", "B"),
        ("fluid_velocity", "v"), ("lapse", "a"), ("shift", "b")))
    (tmp_path / "map.toml").write_text(HEAD + text + "[forms]\n" + forms)
    with pytest.raises(MappingError) as info:
        load_mapping(tmp_path / "map.toml")
    assert message in str(info.value) and "map.toml" in str(info.value)
    capsys.readouterr()
    assert main(["sources", str(tmp_path / "in.h5"), "--mapping", str(tmp_path / "map.toml"),
                 "-o", str(tmp_path / "out.h5"), "--quiet"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert err.startswith("emsource: error:") and err.count("\n") == 1 and message in err, err
    assert not (tmp_path / "out.h5").exists()


def test_excised_points_are_not_converted(rng, tmp_path):
    # NaN at an excised point (valid_mask = 0) of a conformal, densitized file: the conversion
    # fills it like the pipeline does, the output holds NaN there and the truth elsewhere.
    data, text, E, B, gamma = _case(rng, "densitized_chi")
    mask = np.ones(GRID, np.uint8)
    mask[1, 2, 3] = 0
    data["chi"][1, 2, 3] = np.nan
    data["E"][:, 1, 2, 3] = np.nan
    data["mask"] = mask
    _write(tmp_path / "in.h5", data)
    (tmp_path / "map.toml").write_text(HEAD + text.replace(
        "[forms]", '[quantities.valid_mask]\ndataset = "mask"\n[forms]'))
    assert main(["sources", str(tmp_path / "in.h5"), "--mapping", str(tmp_path / "map.toml"),
                 "-o", str(tmp_path / "out.h5"), "--quiet"]) == 0
    rho = snapshot.read_level(tmp_path / "out.h5")["energy_density"]
    ref = emsource.adm_sources(gamma, E, B).rho
    assert np.isnan(rho[1, 2, 3]) and np.isnan(rho).sum() == 1
    valid = mask.astype(bool)
    np.testing.assert_allclose(rho[valid], ref[valid], rtol=0, atol=1e-11 * (1 + ref.max()))


def test_bad_point_in_a_stored_form_is_bad_input(rng, tmp_path, capsys):
    data, text, _, _, _ = _case(rng, "ideal_mhd_u")
    data["u"][:, 2, 1, 3] = 0.0
    data["beta"][:, 2, 1, 3] = [50.0, 0.0, 0.0]   # |beta| > alpha: u^i does not fix u^t
    _write(tmp_path / "in.h5", data)
    (tmp_path / "map.toml").write_text(HEAD + text)
    assert main(["sources", str(tmp_path / "in.h5"), "--mapping", str(tmp_path / "map.toml"),
                 "-o", str(tmp_path / "out.h5"), "--quiet"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "electric_field" in err and "(2, 1, 3)" in err and "not below alpha" in err, err
    assert not (tmp_path / "out.h5").exists()


@pytest.mark.parametrize("axis_order", ["xyz", "zyx"])
def test_form_outputs_of_the_sources_command(rng, tmp_path, axis_order):
    # A conformal (phi) file storing F^ab: --outputs writes A_ij, F_ab, F^ab and the invariants,
    # equal to the Python functions on the physical data (tolerance as above).
    from emsource.conformal import conformal_sources
    from emsource.faraday import field_invariants
    data, text, E, B, gamma = _case(rng, "faraday_phi")
    if axis_order == "zyx":  # grid axes stored as (z, y, x); components stay (x, y, z)
        data = {k: np.ascontiguousarray(np.swapaxes(v, -1, -3)) for k, v in data.items()}
    _write(tmp_path / "in.h5", data)
    (tmp_path / "map.toml").write_text(HEAD.replace('"xyz"', f'"{axis_order}"') + text)
    asked = ["energy_density", "conformal_tracefree_stress", "faraday_lower", "faraday_upper",
             "field_invariant", "dual_invariant"]
    assert main(["sources", str(tmp_path / "in.h5"), "--mapping", str(tmp_path / "map.toml"),
                 "-o", str(tmp_path / "out.h5"), "--quiet", "--outputs", *asked]) == 0
    got = snapshot.read_level(tmp_path / "out.h5")
    alpha, beta = data["alpha"], data["beta"]
    if axis_order == "zyx":
        alpha, beta = np.swapaxes(alpha, -1, -3), np.swapaxes(beta, -1, -3)
    chi = np.exp(-4 * (np.swapaxes(data["phi"], -1, -3) if axis_order == "zyx" else data["phi"]))
    expected = {
        "conformal_tracefree_stress": conformal_sources(
            -np.log(chi) / 4, gamma * chi, E, B, decomposition="phi").A_ij,
        "faraday_lower": faraday_tensor(alpha, beta, gamma, E, B),
        "faraday_upper": faraday_tensor(alpha, beta, gamma, E, B, index="upper"),
        "field_invariant": field_invariants(gamma, E, B).square,
        "dual_invariant": field_invariants(gamma, E, B).dual,
    }
    for name, values in expected.items():
        np.testing.assert_allclose(got[name], values, rtol=0,
                                   atol=1e-11 * (1 + np.abs(values).max()), err_msg=name)
    assert set(got) >= set(asked) and "spatial_stress" not in got


def test_form_output_that_cannot_be_made_is_bad_input(rng, tmp_path):
    data, text, _, _, _ = _case(rng, "ideal_mhd_u")  # physical metric: no conformal factor
    _write(tmp_path / "in.h5", data)
    (tmp_path / "map.toml").write_text(HEAD + text)
    assert main(["sources", str(tmp_path / "in.h5"), "--mapping", str(tmp_path / "map.toml"),
                 "-o", str(tmp_path / "out.h5"), "--quiet", "--outputs",
                 "conformal_tracefree_stress"]) == EXIT_BAD_INPUT
    assert not (tmp_path / "out.h5").exists()
