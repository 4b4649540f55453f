"""Writing slabs of output datasets as whole chunks, gzip-compressed in worker threads.

The outputs of the slab pipelines are chunked along the slowest storage axis: one component and
whole planes per chunk (:func:`.writing.chunk_shape`), and each slab is a whole number of chunks.
Such a slab is written chunk by chunk with HDF5's direct chunk write (``H5Dwrite_chunk``), which
skips the selection and filter machinery of an ordinary write. For gzip, each chunk is compressed
here with :mod:`zlib` at the dataset's deflate level by a pool of worker threads (zlib releases
the GIL while it compresses), while the calling thread writes the chunks already done, in order;
HDF5's deflate filter writes and reads one zlib stream per chunk (RFC 1950, "ZLIB Compressed
Data Format Specification"; from memory of HDF5's filter, checked in
``tests/test_chunk_writing.py``: HDF5 itself reads these chunks back, and a chunk written by
HDF5's filter decompresses with ``zlib``). HDF5 compresses serially in the calling thread; on
the 2-core machine of the benchmarks zlib ran at 7-15 MB/s a thread on float64 data, the slowest
stage of a compressed output by far (``benchmarks/bench_snapshots.py``).

Any other case (a dataset chunked or filtered otherwise, a slab that does not start on a chunk
boundary, a buffer of another type or not C-contiguous) goes through h5py's ordinary write:
the result in the file is the same, only slower.

Memory: at most ``2 * workers`` compressed chunks wait to be written, plus one padded edge
chunk: :meth:`ChunkWriter.overhead_bytes` gives the bound that the memory plans count.
"""

from __future__ import annotations

import os
import zlib
from collections import deque
from concurrent.futures import ThreadPoolExecutor

import h5py
import numpy as np

__all__ = ["ChunkWriter", "worker_count"]

_DEFLATE = h5py.h5z.FILTER_DEFLATE


def worker_count() -> int:
    """Threads for compression: the cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - platforms without sched_getaffinity
        return max(1, os.cpu_count() or 1)


def _deflate_level(dataset):
    """The deflate level if the dataset's filter pipeline is deflate alone, 0 if it has no filter,
    None otherwise (shuffle, checksums, other codecs: left to HDF5)."""
    plist = dataset.id.get_create_plist()
    count = plist.get_nfilters()
    if count == 0:
        return 0
    if count == 1:
        code, _flags, values, _name = plist.get_filter(0)
        if code == _DEFLATE and len(values) == 1:
            return int(values[0])
    return None


class ChunkWriter:
    """Writes storage-order slabs into chunked datasets, whole chunks at a time.

    Use as a context manager (the worker threads stop on exit, also on an error or a stop
    request: the chunks being compressed are finished and dropped, none is written after).

    Parameters
    ----------
    workers : int, optional
        Compression threads (default :func:`worker_count`); 0 compresses in the calling thread.
    """

    def __init__(self, workers=None):
        self.workers = worker_count() if workers is None else int(workers)
        self._pool = None
        self._layouts = {}

    @staticmethod
    def overhead_bytes(chunk_bytes, workers=None) -> int:
        """Memory the writer holds beyond the slab buffers, for chunks of ``chunk_bytes``."""
        workers = worker_count() if workers is None else int(workers)
        # compressed chunks in flight (zlib's output is at most a few bytes per 16 KiB larger
        # than its input: RFC 1951's stored blocks), and one padded edge chunk
        return (2 * workers + 1) * (chunk_bytes + chunk_bytes // 1024 + 64)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def _layout(self, dataset):
        """(chunk rows, deflate level) if slabs of ``dataset`` can go chunk by chunk, else None."""
        key = dataset.id.id
        if key not in self._layouts:
            layout = None
            chunks, shape = dataset.chunks, dataset.shape
            lead = dataset.ndim - 3
            if chunks is not None and lead in (0, 1) and chunks[:lead] == (1,) * lead \
                    and tuple(chunks[lead + 1:]) == tuple(shape[lead + 1:]):
                level = _deflate_level(dataset)
                if level is not None:
                    layout = (int(chunks[lead]), level)
            self._layouts[key] = layout
        return self._layouts[key]

    def write(self, dataset, slab, start):
        """Write ``slab`` (storage order, component axis first if any) at rows ``start:``.

        ``dataset[..., start:start + rows, :, :] = slab`` in effect, for any dataset and slab.
        """
        nrows = slab.shape[-3]
        stop, n0 = start + nrows, dataset.shape[-3]
        layout = self._layout(dataset)
        direct = (layout is not None and start % layout[0] == 0
                  and (nrows % layout[0] == 0 or stop == n0) and stop <= n0
                  and slab.dtype == dataset.dtype and slab.flags.c_contiguous
                  and slab.shape[:-3] == dataset.shape[:-3] and slab.shape[-2:] == dataset.shape[-2:])
        if not direct:
            dataset[..., start:stop, :, :] = slab
            return
        rows, level = layout
        pieces = self._pieces(slab, start, rows)
        if level == 0:
            for offset, piece in pieces:
                dataset.id.write_direct_chunk(offset, piece)
        elif self.workers == 0:
            for offset, piece in pieces:
                dataset.id.write_direct_chunk(offset, zlib.compress(piece, level))
        else:
            self._write_compressed(dataset, pieces, level)

    @staticmethod
    def _pieces(slab, start, rows):
        """(chunk offset, contiguous chunk data) of every chunk of the slab, made one at a time
        (the edge chunk past the grid's end is stored whole: padded with zeros)."""
        for c, component in enumerate(slab.reshape((-1,) + slab.shape[-3:])):
            for first in range(0, slab.shape[-3], rows):
                piece = component[first:first + rows]
                if piece.shape[0] < rows:
                    padded = np.zeros((rows,) + piece.shape[1:], piece.dtype)
                    padded[:piece.shape[0]] = piece
                    piece = padded
                yield ((c,) if slab.ndim == 4 else ()) + (start + first, 0, 0), piece

    def _write_compressed(self, dataset, pieces, level):
        """Compress in the pool, at most ``2 * workers`` chunks ahead; write in order."""
        if self._pool is None:
            self._pool = ThreadPoolExecutor(self.workers, thread_name_prefix="emsource-deflate")
        waiting = deque()
        for offset, piece in pieces:
            waiting.append((offset, self._pool.submit(zlib.compress, piece, level)))
            if len(waiting) >= 2 * self.workers:
                offset, future = waiting.popleft()
                dataset.id.write_direct_chunk(offset, future.result())
        while waiting:
            offset, future = waiting.popleft()
            dataset.id.write_direct_chunk(offset, future.result())
