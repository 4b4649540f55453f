"""Compatibility names for :mod:`emsource.snapshot` (tests of other modules import them here).

New code imports from :mod:`emsource.snapshot`.
"""

from .snapshot import (OutputError, SnapshotError, atomic_output, open_snapshot, read_level,
                       write_snapshot)

__all__ = ["OutputError", "SnapshotError", "atomic_output", "open_snapshot", "read_level",
           "write_snapshot"]
