"""Small snapshots for the snapshot tests: random curved data and the rotating dipole."""

import numpy as np

from emsource.grid import UniformGrid

from conftest import random_curved_data


def curved_levels(rng, shape=(9, 8, 7), times=(0.0, 0.5), dtype=np.float64):
    """Dict levels with random positive-definite metrics and order-one fields."""
    grid = UniformGrid(shape, (-1.0, -0.5, 0.25), (0.25, 0.2, 0.3))
    levels = []
    for t in times:
        alpha, beta, gamma, E, B = random_curved_data(rng, shape, dtype)
        levels.append({"lapse": alpha, "shift": beta, "spatial_metric": gamma,
                       "electric_field": E, "magnetic_field": B, "time": t, "grid": grid,
                       "units": "gaussian"})
    return levels


def run_cli(*arguments, timeout=300, **kwargs):
    """``python -m emsource ARGUMENTS`` in a fresh interpreter: (return code, stdout, stderr)."""
    import subprocess
    import sys

    result = subprocess.run([sys.executable, "-m", "emsource", *map(str, arguments)],
                            capture_output=True, text=True, timeout=timeout, **kwargs)
    return result.returncode, result.stdout, result.stderr


def start_cli(*arguments, **kwargs):
    """``python -m emsource ARGUMENTS`` started in the background (a Popen with pipes)."""
    import subprocess
    import sys

    return subprocess.Popen([sys.executable, "-m", "emsource", *map(str, arguments)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kwargs)


def checksums(directory):
    """File name -> SHA-256 of every file in ``directory`` (hidden ones included)."""
    import hashlib
    import os

    def digest(path):
        with open(path, "rb") as handle:
            return hashlib.sha256(handle.read()).hexdigest()

    return {name: digest(os.path.join(directory, name)) for name in sorted(os.listdir(directory))
            if os.path.isfile(os.path.join(directory, name))}
