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
