"""``--workers N`` and ``--scheduler ADDRESS``: a snapshot command on a Dask cluster (not a command).

One call gives a command both options and routes it::

    parser.set_defaults(run=lambda args: run_guarded(_run, args))
    add_cluster_options(parser, on_cluster=_run_on_cluster)

With either option the command runs ``on_cluster(args)`` (through the same error handling as
``run_guarded``: exit 3 for bad input, 4 for outputs) inside :func:`emsource.distributed.dask_session`,
which prints the dashboard address on stderr; without them it runs as before. The positional
snapshot may then also be a directory of snapshots or a glob pattern (one time series, ordered
by time). Without the ``dask`` extra installed the options are a usage error (exit 2) saying how
to install it.
"""

from __future__ import annotations

from contextlib import ExitStack

from . import EXIT_USAGE
from ._snapshot_options import fail, run_guarded, whole_number_at_least

__all__ = ["add_cluster_options", "on_cluster", "block_bytes"]

INSTALL_HINT = "pip install 'emsource[dask]'"


def add_cluster_options(parser, on_cluster):
    """Add ``--workers`` and ``--scheduler`` to ``parser`` and run ``on_cluster(args)`` when
    one is given (call after ``parser.set_defaults(run=...)``)."""
    group = parser.add_argument_group(
        "Dask cluster", f"run on a Dask cluster (needs {INSTALL_HINT}); the snapshot may then "
        "also be a directory or a glob pattern of snapshot files, read as one time series")
    exclusive = group.add_mutually_exclusive_group()
    exclusive.add_argument("--workers", metavar="N", type=whole_number_at_least(1, "workers"),
                           help="start a local cluster of N worker processes")
    exclusive.add_argument("--scheduler", metavar="ADDRESS",
                           help="use a running Dask scheduler (e.g. tcp://host:8786)")
    plain = parser.get_default("run")

    def run(args):
        if args.workers is None and args.scheduler is None:
            return plain(args)
        return _on_cluster(on_cluster, args)

    parser.set_defaults(run=run)


def _on_cluster(function, args) -> int:
    try:
        from ..distributed import dask_session
    except ImportError:
        return fail(EXIT_USAGE, f"--workers and --scheduler need Dask: {INSTALL_HINT}")
    with ExitStack() as stack:
        try:
            stack.enter_context(dask_session(args.workers, args.scheduler))
        except ValueError as error:  # no scheduler at that address
            return fail(EXIT_USAGE, f"--scheduler: {error}")
        return run_guarded(function, args)


#: Bytes of values per task where a command has no ``--memory-limit`` (256 MiB).
DEFAULT_BLOCK_BYTES = 256 * 2**20


def block_bytes(args) -> int:
    """Bytes of values per task from ``--memory-limit``: half of it (a block's count already
    bounds its inputs, outputs and temporaries; a worker holds about one more, read ahead)."""
    limit = getattr(args, "memory_limit", None)
    return DEFAULT_BLOCK_BYTES if limit is None else max(1, int(limit) // 2)
