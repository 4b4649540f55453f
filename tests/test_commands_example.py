"""The ``emsource example`` command: it runs, prints its checks, and its exit code means something."""

import numpy as np

from emsource.cli import main
from emsource.commands import EXIT_CHECK_FAILED, EXIT_OK
from emsource.exact import sheared_circular_wave


def test_example_passes_its_checks(capsys):
    assert main(["example", "--points", "12"]) == EXIT_OK
    text = capsys.readouterr().out
    assert text.count("ok  ") == 5 and "FAIL" not in text


def test_example_reports_a_wrong_source(monkeypatch, capsys):
    """A deliberately wrong kernel (sources doubled) must make the command fail."""
    import emsource

    real = emsource.adm_sources

    def doubled(*args, **kwargs):
        result = real(*args, **kwargs)
        for a in result:
            a *= 2.0
        return result

    monkeypatch.setattr(emsource, "adm_sources", doubled)
    assert main(["example", "--points", "12"]) == EXIT_CHECK_FAILED
    assert "FAIL" in capsys.readouterr().out


def test_example_field_is_the_textbook_null_wave():
    """The command's own data: in Cartesian components |E| = |B| = 1 and E.B = 0 (Jackson 7.1)."""
    gamma, E, B, gamma_full, k_low, _ = sheared_circular_wave(6, dtype=np.float64)
    E2 = np.einsum("ij,i...,j...->...", gamma_full, E, E)
    B2 = np.einsum("ij,i...,j...->...", gamma_full, B, B)
    EB = np.einsum("ij,i...,j...->...", gamma_full, E, B)
    np.testing.assert_allclose(E2, 1.0, rtol=1e-14)
    np.testing.assert_allclose(B2, 1.0, rtol=1e-14)
    np.testing.assert_allclose(EB, 0.0, atol=1e-14)
