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
    function : str
        The function that checked the points.
    npoints : int
        How many points were checked.
    where : str
        Where the data came from (file, time level, slab), or "" for arrays given directly.
    """

    def __init__(self, function: str, bad_count: int, npoints: int, first_index: tuple, reason: str,
                 where: str = ""):
        self.bad_count = bad_count
        self.first_index = first_index
        self.reason = reason
        self.function = function
        self.npoints = npoints
        self.where = where
        super().__init__(
            (f"{where}: " if where else "")
            + f"{function}: {bad_count} of {npoints} grid points have invalid input; "
            f"the first is grid index {first_index}: {reason}"
        )

    def __reduce__(self):
        # Rebuilt from the constructor's arguments: the default (the message alone) cannot be
        # unpickled, and a process pool (a Dask worker) sends the error back pickled.
        return (type(self), (self.function, self.bad_count, self.npoints, self.first_index,
                             self.reason, self.where))

    def relocated(self, axis: int = 0, offset: int = 0, where: str = "") -> "GridPointError":
        """The same error for a piece of a larger grid, in the larger grid's terms.

        The piece (a slab, a patch) starts at row ``offset`` along ``axis`` of the whole grid:
        the first index moves by that much, and ``where`` (file, time level, rows) is put in
        front of the message. Count and reason stay those of the piece.
        """
        index = self.first_index
        if index is not None:
            index = tuple(i + offset if a == axis else i for a, i in enumerate(index))
        return GridPointError(self.function, self.bad_count, self.npoints, index, self.reason,
                              where)
