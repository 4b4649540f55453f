"""Where the tasks run, and how their results come back: clusters, ordered blocks, tree reductions.

:func:`dask_session` starts a local cluster of worker processes (``workers``), connects to an
existing scheduler (``scheduler``, an address such as ``tcp://host:8786``), or, with neither,
runs on Dask's local threaded scheduler in this process. The dashboard address goes to stderr.

Two ways results come back, both with bounded memory whatever the data size:

- :func:`in_order`: the blocks of an output, computed a few at a time (``window`` in flight)
  and handed back in order, so that one process writes them to one HDF5 file (HDF5 files are
  written by one process; the computing runs on every worker);
- :func:`tree_reduce`: the partial results of the blocks (:mod:`emsource.reductions`) merged
  in a tree of :func:`emsource.reductions.combine_all` tasks, ``split_every`` at a node, and
  ``finalise()`` called by the caller on the root. ``combine`` is associative and commutative,
  so the tree gives the single-process result to within the rounding bound stated in
  :mod:`emsource.reductions` ((n + 1) eps of the magnitude for n pieces).
"""

from __future__ import annotations

import logging
import os
import sys
from collections import deque
from contextlib import contextmanager

import dask
from dask import delayed

from ..reductions import combine_all
from ..snapshot.slabs import progress_bar

__all__ = ["dask_session", "in_order", "tree_reduce", "compute_reductions", "current_client"]


def current_client():
    """The distributed client in use, or None (local schedulers)."""
    try:
        from distributed import get_client
        return get_client()
    except (ImportError, ValueError):
        return None


@contextmanager
def dask_session(workers=None, scheduler=None, *, announce=True, silence_logs=logging.ERROR):
    """Run the enclosed computations on a cluster; yields the ``distributed.Client`` or None.

    Parameters
    ----------
    workers : int, optional
        Start a local cluster of this many worker processes, one thread each; each worker's
        Numba kernels use cores / workers threads (``NUMBA_NUM_THREADS``).
    scheduler : str, optional
        Address of a running scheduler to connect to (exclusive with ``workers``).
    announce : bool
        Print the dashboard address (and the cluster) on stderr.
    """
    if workers is not None and scheduler is not None:
        raise ValueError("give workers (a local cluster) or scheduler (an existing one), not both")
    if workers is None and scheduler is None:
        yield None
        return
    from distributed import Client, LocalCluster

    if scheduler is not None:
        try:
            client = Client(scheduler, timeout="5s")
        except (OSError, TimeoutError) as error:
            raise ValueError(f"cannot connect to the Dask scheduler at {scheduler!r}: "
                             f"{error}") from None
        cluster = None
    else:
        workers = int(workers)
        if workers < 1:
            raise ValueError(f"workers must be at least 1, found {workers}")
        threads = max(1, (os.cpu_count() or 1) // workers)
        cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                               dashboard_address=":0", silence_logs=silence_logs,
                               env={"NUMBA_NUM_THREADS": str(threads)})
        client = Client(cluster)
    try:
        if announce:
            where = scheduler or f"local cluster of {workers} worker process(es)"
            link = getattr(client, "dashboard_link", None)
            print(f"emsource: dask: {where}; dashboard {link or 'not available'}",
                  file=sys.stderr, flush=True)
        with client.as_current():
            yield client
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def in_order(blocks, *, window=4, progress=False, description="blocks"):
    """Compute the delayed ``blocks`` (a list) and yield their values in order.

    At most ``window`` blocks are in flight (computed but not yet consumed), which bounds the
    memory of the process that consumes them.
    """
    client = current_client()
    bar = progress_bar(len(blocks), description, progress)
    try:
        if client is None:
            for first in range(0, len(blocks), window):
                for value in dask.compute(*blocks[first:first + window]):
                    yield value
                    bar.update(1)
            return
        pending = deque()
        remaining = iter(blocks)
        try:
            for block in remaining:
                pending.append(client.compute(block))
                if len(pending) >= window:
                    break
            while pending:
                value = pending.popleft().result()
                following = next(remaining, None)
                if following is not None:
                    pending.append(client.compute(following))
                yield value
                bar.update(1)
        finally:
            if pending:
                client.cancel(list(pending))
    finally:
        bar.close()


def tree_reduce(partials, split_every=8):
    """A delayed tree of :func:`emsource.reductions.combine_all` over delayed ``partials``."""
    layer = list(partials)
    if not layer:
        raise ValueError("tree_reduce: no partial results")
    merge = delayed(combine_all, pure=True)
    while len(layer) > 1:
        layer = [merge(layer[i:i + split_every]) if len(layer[i:i + split_every]) > 1
                 else layer[i] for i in range(0, len(layer), split_every)]
    return layer[0]


def compute_reductions(groups, *, split_every=8, progress=False, description="blocks") -> list:
    """The combined partial of each list of delayed leaves in ``groups`` (one list per level,
    say), each by :func:`tree_reduce`, all in one computation.

    On a distributed cluster with ``progress`` the leaves are computed first (a progress bar
    counts them, and the first failure is raised at once), then the trees run on the workers
    over their results.
    """
    groups = [list(g) for g in groups]
    client = current_client()
    if client is not None and progress:
        from distributed import as_completed, futures_of

        flat = client.persist([leaf for g in groups for leaf in g])
        sizes, groups = [len(g) for g in groups], []
        for size in sizes:
            groups.append(flat[:size])
            flat = flat[size:]
        futures = futures_of(groups)
        bar = progress_bar(len(futures), description, progress)
        try:
            for future in as_completed(futures):
                future.result()
                bar.update(1)
        finally:
            bar.close()
    return list(dask.compute(*[tree_reduce(g, split_every) for g in groups]))
