"""The error raised when input values at grid points make a computation undefined."""

from __future__ import annotations

__all__ = ["GridPointError"]


class GridPointError(ValueError):
    """Input values at some grid points make the sources undefined.

    Attributes
    ----------
    bad_count : int
        How many grid points failed the point checks.
    first_index : tuple of int
        Grid index (C order) of the first bad point.
    reason : str
        What is wrong at that point.
    """

    def __init__(self, function: str, bad_count: int, npoints: int, first_index: tuple, reason: str):
        self.bad_count = bad_count
        self.first_index = first_index
        self.reason = reason
        super().__init__(
            f"{function}: {bad_count} of {npoints} grid points have invalid input; "
            f"the first is grid index {first_index}: {reason}"
        )
