"""The development-time sympy derivation of the Kerr-Schild closed forms still holds.

``tests/derivations/kerr_newman_kerr_schild.py`` derives the first derivatives and algebraic
identities that ``emsource.exact.kerr_schild`` evaluates in NumPy, and compares them with the
forms written in that module's docstring (Kerr-Schild form after Misner, Thorne & Wheeler,
Gravitation (1973), ch. 33, from memory). Running it here keeps docstring and derivation honest.
"""

import pathlib
import subprocess
import sys

SCRIPT = pathlib.Path(__file__).parent / "derivations" / "kerr_newman_kerr_schild.py"


def test_sympy_derivation_of_the_kerr_schild_forms_passes():
    run = subprocess.run([sys.executable, str(SCRIPT)], capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stdout + run.stderr
    assert "FAIL" not in run.stdout
    assert run.stdout.count("ok  ") >= 5
