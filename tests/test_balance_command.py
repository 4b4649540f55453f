"""``emsource balance`` on a Yee-lattice evolution in SI units, read with nothing but a mapping file.

The evolution (tests/yee_si_reference.py; K. S. Yee, IEEE Trans. Antennas Propag. 14, 302
(1966)) stores E (V/m) on the edges and H (A/m) on the faces, half a step later, in its own
layout, times in seconds and lengths in metres. The mapping converts with the `scale` keys
(sqrt(eps0), sqrt(mu0)) and a time scale c (scipy.constants, CODATA), so that the code-unit
energy is the SI energy in joules. Checks against outside references:

- Poynting's theorem (J. D. Jackson, Classical Electrodynamics, 3rd ed., sec. 6.7): the change
  of the box energy equals minus the time-integrated outflow through its faces; for the Yee
  data the mismatch falls at second order in the spacing (dt = 0.4 h / c), and so does the
  local conservation residual;
- the box energy equals u = (eps0 E^2 + mu0 H^2) / 2 (Jackson sec. 6.7) integrated here with
  the test's own averages of the stored arrays: the SI -> code-unit conversion to round-off.
"""

from __future__ import annotations

import csv
import re

import h5py
import numpy as np
import pytest

from emsource.cli import main
from emsource.commands import EXIT_BAD_INPUT, EXIT_CHECK_FAILED, EXIT_OK

from snapshot_data import run_cli
from yee_si_reference import EPS0, MU0, evolve_and_write, write_mapping

#: Cells per axis at refinement 1 (unequal sides, oblique wave), spacing 5 cm / refinement,
#: and leapfrog steps (a fixed physical time of 0.1 m / c: 5 steps per refinement).
CELLS, SPACING, STEPS = (12, 10, 8), 0.05, 5
REFINEMENTS = (1, 2, 4)


@pytest.fixture(scope="module")
def yee_runs(tmp_path_factory):
    """The Yee evolution at three resolutions, each with mappings of order 2 and 4."""
    directory = tmp_path_factory.mktemp("yee")
    runs = {}
    for r in REFINEMENTS:
        path = directory / f"yee{r}.h5"
        dt, _ = evolve_and_write(path, tuple(n * r for n in CELLS), SPACING / r, STEPS * r)
        mappings = {}
        for order in (2, 4):
            mappings[order] = directory / f"yee{r}_order{order}.toml"
            write_mapping(mappings[order], dt, order)
        runs[r] = (path, mappings, dt)
    return runs


@pytest.fixture(scope="module")
def balance_rows(yee_runs, tmp_path_factory):
    """CSV rows of ``emsource balance`` per (refinement, interpolation order), each run once."""
    directory = tmp_path_factory.mktemp("balance")
    cache = {}

    def rows(r, order):
        if (r, order) not in cache:
            path, mappings, _ = yee_runs[r]
            code, table = _balance(path, mappings[order], directory / f"{r}_{order}.csv",
                                   "--tolerance", "1")
            assert code == EXIT_OK
            cache[r, order] = table
        return cache[r, order]
    return rows


def _balance(path, mapping, csv_path, *extra):
    code = main(["balance", str(path), "--mapping", str(mapping), "--csv", str(csv_path),
                 "--quiet", *extra])
    with open(csv_path, newline="") as handle:
        rows = list(csv.DictReader(handle))
    return code, rows


def _orders(errors):
    errors = np.asarray(errors, float)
    return np.log2(errors[:-1] / errors[1:])


def test_energy_balance_closes_at_second_order(balance_rows):
    """Interpolation of order 2 in space and time. Mismatch = change + time integral of the
    outflow (no sources in vacuum), recomputed here from the CSV's per-level box energies and
    outflow rates with the trapezoid rule, over the largest box energy.

    Acceptance band for the observed order over the finer pair: the mismatch is C h^2 (1 + e)
    with e the relative size of the higher terms: O((k h)^2) from the Yee scheme and the
    quadratures, and O(h) from the one-sided interpolation at the box faces and at the first
    level (a stencil whose error constant differs from its neighbours'). With k h <= 0.6 on the
    middle grid |e| <= 0.25, so |observed - 2| <= log2(1.25) = 0.32; we take 0.35.
    """
    mismatch = []
    for r in REFINEMENTS:
        rows = balance_rows(r, 2)
        t = np.array([float(row["t"]) for row in rows])
        energy = np.array([float(row["energy"]) for row in rows])
        outflow = np.array([float(row["energy_outflow_rate"]) for row in rows])
        assert np.all(np.array([float(row["energy_source_rate"]) for row in rows]) == 0.0)
        mismatch.append(abs(energy[-1] - energy[0] + np.trapezoid(outflow, t)) / energy.max())
    observed = _orders(mismatch)
    assert mismatch[-1] > 1e-10  # far above round-off (1e-16 of the energy): a real order
    assert abs(observed[-1] - 2) <= 0.35, (mismatch, observed)
    assert observed[0] > 1.5, (mismatch, observed)


def test_conservation_residual_converges_at_second_order(balance_rows):
    """Local residual (centred differences of order 2 in space, three levels in time) with
    interpolation of order 4, so that the interpolation error (O(h^4), and O(h^3) in a
    difference across a face stencil) stays below the scheme's O(h^2): the largest normalised
    l2 residual over the levels falls as h^2. Band as above: |observed - 2| <= 0.35.

    With interpolation of order 2 the residual next to the faces and at the second level sees
    the jump in error constant of the one-sided stencils as an O(h) term in a difference: its
    l2 over the box then converges more slowly (h^1.5 asymptotically); the test shows it."""
    worst = {2: [], 4: []}
    for order in (2, 4):
        for r in REFINEMENTS:
            rows = balance_rows(r, order)
            values = [float(row[key]) for row in rows for key in
                      ("energy_norm_l2", "momentum_x_norm_l2", "momentum_y_norm_l2",
                       "momentum_z_norm_l2") if row[key] != ""]
            assert len(values) == 4 * (len(rows) - 2)  # every level with two neighbours
            worst[order].append(max(values))
    observed = _orders(worst[4])
    assert worst[4][-1] > 1e-8
    assert abs(observed[-1] - 2) <= 0.35, (worst[4], observed)
    assert _orders(worst[2])[-1] < observed[-1]  # the slower order-2 case described above


def test_box_energy_equals_the_si_formula(yee_runs, balance_rows):
    """Energy of level 3 (code units, mapping scales only) against (eps0 E^2 + mu0 H^2) / 2 in
    J/m^3, integrated over the balance box (interior points, trapezoid rule) from the stored
    arrays: E averaged over the 2 edges around each vertex, H over the 4 faces and over the
    two half steps around the level (2-point averages: the order-2 Lagrange weights). Equal up
    to round-off: a few operations per point, 1e-12 relative."""
    path, _, _ = yee_runs[1]
    rows = balance_rows(1, 2)
    total = _si_box_energy(path, 3)
    assert abs(float(rows[3]["energy"]) - total) <= 1e-12 * total


def _si_box_energy(path, level):
    """The test's own SI box energy in J of a level (docstring of the test above)."""
    with h5py.File(path) as f:
        def stored(name, k):
            return [f[f"run/frame_{k}/{name}_{a}"][()] for a in "xyz"]
        E = stored("efield", level)
        H = [0.5 * (a + b) for a, b in zip(stored("hfield", level - 1), stored("hfield", level))]
    n = E[1].shape  # (nx, ny, nz) vertices: E_y is on the vertices along x and z
    n = (n[0], E[0].shape[1], E[0].shape[2])

    def avg(a, axis):  # mean of the two values either side of each interior vertex
        lo = [slice(None)] * 3
        hi = [slice(None)] * 3
        lo[axis], hi[axis] = slice(0, n[axis] - 2), slice(1, n[axis] - 1)
        return 0.5 * (a[tuple(lo)] + a[tuple(hi)])

    inner = tuple(slice(1, m - 1) for m in n)
    e2 = 0.0
    for c in range(3):
        a = avg(E[c], c)  # along its own axis: the n - 1 edge values either side
        e2 = e2 + a[tuple(slice(None) if ax == c else slice(1, n[ax] - 1) for ax in range(3))] ** 2
    h2 = 0.0
    for c in range(3):
        a = H[c]
        for axis in range(3):
            if axis != c:
                a = avg(a, axis)
            else:
                a = a[tuple(slice(1, n[axis] - 1) if ax == axis else slice(None) for ax in range(3))]
        h2 = h2 + a ** 2
    u = 0.5 * (EPS0 * e2 + MU0 * h2)
    h = SPACING
    weights = [np.full(m - 2, h) for m in n]
    for w in weights:
        w[0] = w[-1] = 0.5 * h
    return np.einsum("ijk,i,j,k->", u, *weights)


def test_exit_status_follows_the_tolerance_and_bad_input_is_exit_3(yee_runs, tmp_path):
    """Exit 0 when the relative mismatch is within --tolerance, 1 when not (the rule in the
    epilog); a missing mapping, a single level or a bad option value is named on one line."""
    path, mappings, _ = yee_runs[1]  # relative mismatch 0.087 (see the order test)
    assert main(["balance", str(path), "--mapping", str(mappings[2]), "--quiet",
                 "--tolerance", "0.1"]) == EXIT_OK
    assert main(["balance", str(path), "--mapping", str(mappings[2]), "--quiet",
                 "--tolerance", "0.05"]) == EXIT_CHECK_FAILED
    assert main(["balance", str(path), "--mapping", str(mappings[2]), "--quiet",
                 "--tolerance", "0.1", "--residual-tolerance", "1e-6"]) == EXIT_CHECK_FAILED
    assert main(["balance", str(path), "--mapping", str(mappings[2]), "--quiet",
                 "--levels", "3"]) == EXIT_BAD_INPUT
    code, out, err = run_cli("balance", path, "--mapping", tmp_path / "missing.toml")
    assert code == EXIT_BAD_INPUT and len(err.strip().splitlines()) == 1
    assert "missing.toml" in err and "Traceback" not in err and out == ""


def test_human_readable_table(yee_runs, capsys):
    path, mappings, _ = yee_runs[1]
    assert main(["balance", str(path), "--mapping", str(mappings[2])]) == EXIT_CHECK_FAILED
    text = capsys.readouterr().out
    assert "global balance over t = 0 to 0.1" in text
    assert "absent, taken as empty flat space: lapse, shift, extrinsic_curvature" in text
    assert "the balance does NOT close (largest relative mismatch" in text


def test_physical_unit_keys_give_the_balance_of_the_scale_keys(yee_runs, balance_rows, tmp_path):
    """The same SI file read through the mapping's ``[physical_units]`` keys (one code length of
    1 m, times in s, E in V/m, H in A/m) instead of hand-computed ``scale`` keys: a second,
    independent conversion route (c, G, eps0, mu0 from scipy.constants, CODATA). Code energies
    then come in units of c^4/G * 1 m; times the package's energy unit in joules they equal the
    scale-key route's energies in joules. Tolerance 1e-11: CODATA's eps0 mu0 c^2 = 1 holds only
    to about 1.2e-12 in scipy's values, and a few roundings per conversion add to it. The time
    offset (a half step in seconds) goes through the same time unit, so the times agree too."""
    from emsource.physical_units import physical_scale

    path, mappings, dt = yee_runs[1]
    text = mappings[2].read_text()
    text = re.sub(r"time = \{ attribute = \"clock_s\", scale = [^}]*\}",
                  'time = { attribute = "clock_s" }', text)
    text = re.sub(r"\nscale = [^\n]*", "", text)
    text = text.replace('centring = "edge"', 'centring = "edge"\nunit = "V/m"')
    text = text.replace('centring = "face"', 'centring = "face"\nunit = "A/m"')
    text = text.replace("[time_levels]", '[physical_units]\ncode_scale = { value = 1.0, unit = "m" }\n'
                        'length_unit = "m"\ntime_unit = "s"\n\n[time_levels]')
    assert "scale =" not in text.replace("code_scale =", "")
    mapping = tmp_path / "units.toml"
    mapping.write_text(text)
    code, rows = _balance(path, mapping, tmp_path / "units.csv", "--tolerance", "1")
    assert code == EXIT_OK
    reference = balance_rows(1, 2)
    joules = physical_scale(length_m=1.0, units="heaviside_lorentz").energy_J
    assert len(rows) == len(reference)
    for row, ref in zip(rows, reference):
        assert float(row["t"]) == pytest.approx(float(ref["t"]), rel=1e-13)
        assert float(row["energy"]) * joules == pytest.approx(float(ref["energy"]), rel=1e-11)


def test_code_scale_gives_joules_in_the_csv_and_the_summary(yee_runs, balance_rows, tmp_path,
                                                             capsys):
    """Issue 11 item 7: with the mapping's ``code_scale = {value = 1.0, unit = "m"}`` (and E in
    V/m, H in A/m, metres, seconds) ``balance`` reports physical values: ``energy_J`` equals the
    test's own SI integral of (eps0 E^2 + mu0 H^2) / 2 (Jackson sec. 6.7; eps0, mu0 from
    scipy.constants) and ``t_s`` the stored seconds. Tolerance 1e-11 as in the test above (CODATA
    eps0 mu0 c^2 = 1 to ~1e-12, a few roundings per conversion). The outflow rate in W equals the
    scale-key route's rate (J per metre of light travel) times c; the giving of a second,
    different scale on the command line is a usage error (exit 2)."""
    from scipy.constants import c

    path, mappings, dt = yee_runs[1]
    mapping = tmp_path / "units.toml"
    mapping.write_text(_units_mapping(mappings[2].read_text()))
    code, rows = _balance(path, mapping, tmp_path / "si.csv", "--tolerance", "1")
    assert code == EXIT_OK
    total = _si_box_energy(path, 3)
    assert float(rows[3]["energy_J"]) == pytest.approx(total, rel=1e-11)
    assert float(rows[3]["energy_erg"]) == pytest.approx(1e7 * total, rel=1e-11)
    assert float(rows[3]["t_s"]) == pytest.approx(3 * dt, rel=1e-13)
    reference = balance_rows(1, 2)
    for row, ref in zip(rows, reference):
        assert float(row["energy_outflow_rate_W"]) == pytest.approx(
            c * float(ref["energy_outflow_rate"]), rel=1e-11, abs=1e-11 * c * total)
        assert float(row["momentum_x_kg_m_s"]) == pytest.approx(
            float(ref["momentum_x"]) / c, rel=1e-11, abs=1e-11 * total / c)
    assert "energy_norm_l2_J" not in rows[0] and "level_s" not in rows[0]
    assert main(["balance", str(path), "--mapping", str(mapping), "--tolerance", "1"]) == EXIT_OK
    text = capsys.readouterr().out
    assert "physical units (the mapping's code_scale)" in text and "energy [J] change" in text
    code, out, err = run_cli("balance", path, "--mapping", mapping, "--code-scale", "2", "m")
    assert code == 2 and "mapping's code_scale" in err and out == ""


def _units_mapping(text):
    """The scale-key mapping rewritten to the ``[physical_units]`` keys (test above)."""
    text = re.sub(r"time = \{ attribute = \"clock_s\", scale = [^}]*\}",
                  'time = { attribute = "clock_s" }', text)
    text = re.sub(r"\nscale = [^\n]*", "", text)
    text = text.replace('centring = "edge"', 'centring = "edge"\nunit = "V/m"')
    text = text.replace('centring = "face"', 'centring = "face"\nunit = "A/m"')
    return text.replace("[time_levels]", '[physical_units]\ncode_scale = { value = 1.0, unit = "m" }\n'
                        'length_unit = "m"\ntime_unit = "s"\n\n[time_levels]')
