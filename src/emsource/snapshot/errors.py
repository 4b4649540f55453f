"""The errors of the snapshot package (imported by every other module of it, importing none)."""

from __future__ import annotations

__all__ = ["SnapshotError", "MappingError", "OutputError"]


class SnapshotError(ValueError):
    """An input snapshot or mapping is missing, unreadable or inconsistent (exit code 3)."""


class MappingError(SnapshotError):
    """A layout mapping file is malformed or does not fit the snapshot."""


class OutputError(OSError):
    """An output cannot be written: it exists without ``force``, it is an input, its directory
    is missing or not writable, or a write failed (no space, I/O error). Exit code 4."""
