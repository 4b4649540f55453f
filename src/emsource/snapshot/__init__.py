"""Snapshot files: the native HDF5 layout, layout mappings of other codes, slab reading, writing.

Modules, each importing only those above it:

=====================  ===========================================================================
``errors``             :class:`SnapshotError`, :class:`MappingError`, :class:`OutputError`
``levels``             :class:`TimeLevel`, the ``DataSource`` protocol, ``build_level``, level choice
``native``             the native layout (its documentation) and its reader
``staggered``          staggered quantities of a mapping: their keys and ``StaggeredSource``
``mapping``            TOML layout mappings (its documentation) and their sources
``writing``            atomic output, overwrite and same-file checks, write failures, provenance,
                       :func:`write_snapshot`
``reading``            :func:`open_snapshot`, :class:`SnapshotFile`, :func:`read_level`
``slabs``              slab sizes under a memory bound, :class:`SlabBuffers`, :func:`slabs`
``sources_pipeline``   :func:`compute_sources`: the sources of whole files in bounded memory
=====================  ===========================================================================

The quantities (names, components, kinds, dimensions) come from :mod:`emsource.quantities`.
"""

from .errors import MappingError, OutputError, SnapshotError
from .levels import TimeLevel, choose_levels
from .mapping import LayoutMapping, load_mapping
from .native import FORMAT_NAME, FORMAT_VERSION, LEVELS_GROUP
from .reading import CHUNK_CACHE_BYTES, SnapshotFile, open_snapshot, read_level
from .slabs import SlabBuffers, slab_rows, slabs
from .writing import (atomic_output, check_output, chunk_shape, hdf5_output,
                      provenance_attributes, write_level_attributes, write_root_attributes,
                      write_snapshot)

__all__ = ["SnapshotError", "MappingError", "OutputError", "TimeLevel", "choose_levels",
           "LayoutMapping", "load_mapping", "FORMAT_NAME", "FORMAT_VERSION", "LEVELS_GROUP",
           "CHUNK_CACHE_BYTES", "SnapshotFile", "open_snapshot", "read_level", "SlabBuffers",
           "slab_rows", "slabs", "atomic_output", "check_output", "chunk_shape", "hdf5_output",
           "provenance_attributes", "write_level_attributes", "write_root_attributes",
           "write_snapshot"]
