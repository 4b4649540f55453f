"""Tests of emsource.convergence and the ``emsource converge`` command.

Observed order p = log(e1/e2)/log(h1/h2) (common practice; P. J. Roache, Verification and
Validation in Computational Science and Engineering (1998), ch. 5, from memory). Physics
cases use the flat-space fixtures of ``conservation_fixtures.py`` (Jackson 1999, sec. 7.1)
and the package's exact data (``emsource.exact``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

import conservation_fixtures as F
from emsource import commands
from emsource.cli import main
from emsource.convergence import (CASES, Case, convergence_study, observed_orders, register_case,
                                  residual_convergence)

K_WAVE = 2.0 * np.pi * np.array([1.0, 0.5, 0.0])


def fixture_wave(n, t):
    return F.plane_wave(F.square_grid(n), t, k=K_WAVE)


def test_observed_orders_of_exact_power_laws():
    h = np.array([0.1, 0.05, 0.025, 0.02])
    np.testing.assert_allclose(observed_orders(3.0 * h ** 4, h), 4.0, rtol=1e-12)
    assert np.isnan(observed_orders([1.0, 0.0], [0.2, 0.1])[0])


def test_convergence_study_table_text_and_data():
    table = convergence_study(lambda n: (1.0 / n, {"err": 2.0 / n ** 2, "other": 1.0 / n,
                                                   "size": 7.0}),
                              (10, 20, 40), case="synthetic", design_order=2, extra_names=("size",))
    np.testing.assert_allclose(table.orders["err"], 2.0, rtol=1e-12)
    np.testing.assert_allclose(table.orders["other"], 1.0, rtol=1e-12)
    assert "size" not in table.orders and table.extra["size"].tolist() == [7.0] * 3
    assert not table.within(0.3)  # "other" converges at first order only
    assert table.within(0.3, expected=1.5) is False and table.within(1.01)
    text = table.format()
    lines = text.splitlines()
    assert lines[0] == "convergence of synthetic (design order 2)"
    assert lines[1].split() == ["points", "spacing", "err", "order", "other", "order", "size"]
    assert lines[3].split()[3] == "2.00" and len(lines) == 5
    data = json.loads(json.dumps(table.to_dict()))
    assert data["resolutions"] == [10, 20, 40] and data["orders"]["err"] == pytest.approx([2, 2])
    with pytest.raises(ValueError, match="at least two resolutions"):
        convergence_study(lambda n: (1.0, {}), (10,))
    with pytest.raises(ValueError, match="spacings must decrease"):
        convergence_study(lambda n: (float(n), {"e": 1.0}), (10, 20))


def test_residual_convergence_reaches_design_order_and_plots(tmp_path):
    table = residual_convergence(fixture_wave, (24, 32, 48), order=4, case="wave")
    assert table.design_order == 4 and table.within(0.3)
    assert np.all(table.extra["normalised"] > 1e-10)  # above round-off (testing notes, trap 2)
    path = table.plot(tmp_path / "wave.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_residual_convergence_with_time_levels_is_second_order():
    table = residual_convergence(fixture_wave, (24, 32, 48), order=4, time_derivatives="levels")
    assert table.design_order == 2 and table.within(0.3)
    with pytest.raises(ValueError, match="time_derivatives"):
        residual_convergence(fixture_wave, (24, 32), time_derivatives="exact")


@pytest.fixture
def registered_cases():
    saved = dict(CASES)
    register_case(Case("fixture_wave", "test fixture: oblique plane wave", fixture_wave, (24, 32, 48)))

    def flipped(n, t):
        s = fixture_wave(n, t)
        return s.__class__(**{**s.__dict__, "B": -s.B, "dt_B": -s.dt_B})

    register_case(Case("fixture_flipped", "test fixture: B of the wrong sign", flipped, (24, 32, 48)))
    yield
    CASES.clear()
    CASES.update(saved)


def test_command_prints_the_table_and_writes_plot_and_json(registered_cases, tmp_path, capsys):
    plot = tmp_path / "c.png"
    data = tmp_path / "c.json"
    code = main(["converge", "--case", "fixture_wave", "--order", "4", "--plot", str(plot),
                 "--json", str(data)])
    out = capsys.readouterr().out
    assert code == commands.EXIT_OK
    assert "convergence of fixture_wave (design order 4)" in out and "energy L2" in out
    assert plot.read_bytes()[:4] == b"\x89PNG"
    assert json.loads(data.read_text())["design_order"] == 4


def test_command_verdicts(registered_cases, capsys):
    # A wrong field does not converge: the command says so with exit code 1.
    assert main(["converge", "--case", "fixture_flipped", "--no-plot"]) == commands.EXIT_CHECK_FAILED
    assert "NOT within" in capsys.readouterr().out
    assert main(["converge", "--case", "no_such_case", "--no-plot"]) == commands.EXIT_BAD_INPUT
    assert main(["converge", "--case", "fixture_wave", "--points", "32", "24",
                 "--no-plot"]) == commands.EXIT_BAD_INPUT
    assert main(["converge", "--list"]) == commands.EXIT_OK
    assert "fixture_wave" in capsys.readouterr().out
    assert main(["converge", "--no-plot"]) == commands.EXIT_BAD_INPUT


def test_builtin_cases_run_from_the_command_line(tmp_path, capsys):
    """The named cases on the package's exact data (emsource.exact; sources in its docstrings)."""
    assert main(["converge", "--list"]) == commands.EXIT_OK
    listed = capsys.readouterr().out
    for name in ("plane_wave", "boosted_charge", "moving_frame", "gauge_wave"):
        assert name in listed
    plot = tmp_path / "gauge.png"
    assert main(["converge", "--case", "gauge_wave", "--order", "4", "--plot", str(plot)]) == commands.EXIT_OK
    out = capsys.readouterr().out
    assert "design order 4" in out and "ok" in out and plot.exists()
    assert main(["converge", "--case", "plane_wave", "--order", "2", "--time-levels",
                 "--no-plot"]) == commands.EXIT_OK


def test_command_without_plot_does_not_need_matplotlib(registered_cases, monkeypatch, capsys):
    # README: "emsource converge --case gauge_wave --order 4" prints its table; no plot was
    # asked for, so a machine without matplotlib must still exit 0 (None in sys.modules makes
    # "import matplotlib" raise ImportError).
    import sys

    monkeypatch.setitem(sys.modules, "matplotlib", None)
    assert main(["converge", "--case", "fixture_wave", "--order", "4"]) == commands.EXIT_OK
    assert "plot written" not in capsys.readouterr().out
    assert main(["converge", "--case", "fixture_wave", "--plot"]) == commands.EXIT_OUTPUT_ERROR
    assert "matplotlib" in capsys.readouterr().err
