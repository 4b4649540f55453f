"""Short import names for the snapshot functions that tests of other modules use.

Everything here is defined in :mod:`emsource.snapshot`; the package's own modules import it from
there, so that the snapshot package stays the one place that reads and writes files.
"""

from .snapshot import (OutputError, SnapshotError, atomic_output, open_snapshot, read_level,
                       write_snapshot)

__all__ = ["OutputError", "SnapshotError", "atomic_output", "open_snapshot", "read_level",
           "write_snapshot"]
