"""Snapshot post-processing on a Dask cluster: one snapshot larger than memory, or many.

Needs the ``dask`` extra (``pip install 'emsource[dask]'``: dask.array and distributed); the
rest of emsource never imports this package. Modules, each importing only those above it:

===============  ==============================================================================
``series``       many files as one time series: :func:`open_series` (order, duplicates, grids)
``arrays``       quantities as stacked Dask arrays over the HDF5 datasets, whole stored chunks
``cluster``      local cluster / existing scheduler, in-order blocks, tree reductions
``sources``      :func:`compute_sources_dask` (``map_blocks``, native output)
``integrals``    :func:`integrate_series` (tree reduction of ``LevelPartial``)
``constraints``  :func:`constraint_norms` (``map_overlap``, depth = stencil radius)
``balance``      :func:`balance_series`, :func:`global_balance_series` (overlapping blocks)
``radiation``    :func:`radiation_series` (``SpherePartial`` per block, tree reduction)
``diagnosis``    :func:`diagnose_level` (the source diagnosis from per-block sums, two passes)
===============  ==============================================================================

Every number equals the single-process path's to the rounding of the reductions' combine
(:mod:`emsource.reductions`); the pointwise values are computed by the same kernels.
"""

try:
    import dask.array  # noqa: F401
except ImportError as error:  # pragma: no cover - the message is the point
    raise ImportError("emsource.distributed needs Dask: pip install 'emsource[dask]' "
                      f"({error})") from error

from .cluster import dask_session
from .series import open_series

__all__ = ["dask_session", "open_series"]
