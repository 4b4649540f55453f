"""The command line can be started as ``python -m emsource`` as well as by its script."""

import subprocess
import sys


def test_python_dash_m_runs_the_command_line():
    done = subprocess.run([sys.executable, "-m", "emsource", "--version"], capture_output=True,
                          text=True, timeout=120)
    assert done.returncode == 0 and done.stdout.startswith("emsource "), done
