"""Uniform Cartesian grids: shape, origin and spacing, and the coordinates of their points.

A grid point with index (i, j, k) sits at ``origin + (i, j, k) * spacing`` (vertex-centred);
axes are (x, y, z) in that order. Grids may be 1-, 2- or 3-dimensional; a 1D grid spans x,
a 2D grid spans (x, y), and the missing coordinates are zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["UniformGrid"]


@dataclass(frozen=True)
class UniformGrid:
    """A vertex-centred uniform Cartesian grid.

    Parameters
    ----------
    shape : tuple of int
        Number of points along each axis, 1 to 3 axes.
    origin : tuple of float
        Coordinates of point (0, 0, 0), one per axis, in code units.
    spacing : tuple of float
        Grid spacing along each axis, in code units; all positive.
    """

    shape: tuple[int, ...]
    origin: tuple[float, ...]
    spacing: tuple[float, ...]

    def __post_init__(self):
        shape = tuple(int(n) for n in self.shape)
        origin = tuple(float(o) for o in self.origin)
        spacing = tuple(float(h) for h in self.spacing)
        if not 1 <= len(shape) <= 3:
            raise ValueError(f"UniformGrid: shape must have 1 to 3 axes, found {shape}")
        if len(origin) != len(shape) or len(spacing) != len(shape):
            raise ValueError(
                f"UniformGrid: shape {shape}, origin {origin} and spacing {spacing} "
                "must have the same number of axes"
            )
        if any(n < 1 for n in shape):
            raise ValueError(f"UniformGrid: every axis needs at least one point, found shape {shape}")
        if not all(np.isfinite(h) and h > 0 for h in spacing):
            raise ValueError(f"UniformGrid: spacing must be finite and positive, found {spacing}")
        object.__setattr__(self, "shape", shape)
        object.__setattr__(self, "origin", origin)
        object.__setattr__(self, "spacing", spacing)

    @classmethod
    def from_bounds(cls, lower, upper, shape) -> "UniformGrid":
        """Grid whose first and last points sit at ``lower`` and ``upper`` on each axis."""
        lower = np.atleast_1d(np.asarray(lower, dtype=float))
        upper = np.atleast_1d(np.asarray(upper, dtype=float))
        shape = tuple(int(n) for n in np.atleast_1d(shape))
        spacing = tuple((u - l) / (n - 1) if n > 1 else 1.0 for l, u, n in zip(lower, upper, shape))
        return cls(shape, tuple(lower), spacing)

    @property
    def ndim(self) -> int:
        return len(self.shape)

    def axis(self, i: int) -> np.ndarray:
        """Coordinates of the points along axis ``i`` (1D array)."""
        return self.origin[i] + self.spacing[i] * np.arange(self.shape[i], dtype=float)

    def coordinates(self, dtype=np.float64) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Full arrays ``(x, y, z)`` of shape ``self.shape``; missing axes give zeros."""
        axes = np.meshgrid(*(self.axis(i) for i in range(self.ndim)), indexing="ij")
        coords = [a.astype(dtype, copy=False) for a in axes]
        while len(coords) < 3:
            coords.append(np.zeros(self.shape, dtype=dtype))
        return tuple(coords)
