"""The direct chunk writer of the slab pipelines (emsource.snapshot.chunk_writing).

The reference is HDF5 itself: what the writer puts in a file must read back through HDF5's own
filter pipeline (its deflate filter for gzip) exactly as h5py's ordinary write of the same slabs
does, bit for bit (writing moves bytes; no tolerance applies).
"""

import threading
import zlib

import h5py
import numpy as np
import pytest

from emsource.snapshot.chunk_writing import ChunkWriter
from emsource.snapshot.slabs import slabs


def _write_both(path, data, chunk_rows, rows, compression, workers, **options):
    """Write ``data`` slab by slab through the writer ("direct") and through h5py ("plain")."""
    lead = data.ndim - 3
    chunks = (1,) * lead + (chunk_rows,) + data.shape[-2:]
    with h5py.File(path, "w", rdcc_nbytes=0) as f, ChunkWriter(workers) as writer:
        for name in ("direct", "plain"):
            f.create_dataset(name, data.shape, data.dtype, chunks=chunks,
                             compression=compression, **options)
        for start, stop in slabs(data.shape[-3], rows):
            slab = np.ascontiguousarray(data[..., start:stop, :, :])
            writer.write(f["direct"], slab, start)
            f["plain"][..., start:stop, :, :] = slab


@pytest.mark.parametrize("compression, workers", [(None, 2), ("gzip", 0), ("gzip", 1),
                                                  ("gzip", 2)])
@pytest.mark.parametrize("shape, dtype", [((3, 11, 5, 4), np.float64), ((11, 5, 4), np.float32),
                                          ((11, 5, 4), np.uint8)])
def test_slabs_read_back_through_hdf5_as_written(tmp_path, rng, shape, dtype, compression,
                                                 workers):
    # 11 rows in chunks of 3 and slabs of 6: whole chunks, and an edge chunk past the grid's end
    data = (100 * rng.standard_normal(shape)).astype(dtype)
    path = tmp_path / "out.h5"
    _write_both(path, data, chunk_rows=3, rows=6, compression=compression, workers=workers)
    with h5py.File(path, "r") as f:
        np.testing.assert_array_equal(f["direct"][...], data)
        np.testing.assert_array_equal(f["plain"][...], data)
        assert f["direct"].compression == compression


def test_hdf5_deflate_stores_one_zlib_stream_per_chunk(tmp_path, rng):
    # The writer's premise (RFC 1950 zlib streams, one per chunk; from memory of HDF5's filter):
    # a chunk that HDF5's own deflate filter wrote decompresses with zlib to the chunk's bytes,
    # and a chunk the writer compressed is decompressed by HDF5 (previous test).
    data = rng.standard_normal((6, 4, 3))
    path = tmp_path / "h5.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("x", data=data, chunks=(2, 4, 3), compression="gzip", compression_opts=4)
    with h5py.File(path, "r") as f:
        mask, raw = f["x"].id.read_direct_chunk((2, 0, 0))
    assert mask == 0
    assert zlib.decompress(raw) == data[2:4].tobytes()


@pytest.mark.parametrize("case", ["shuffle", "mid-chunk start", "not contiguous", "other chunks"])
def test_other_layouts_fall_back_to_an_ordinary_write(tmp_path, rng, case):
    data = rng.standard_normal((3, 10, 4, 5))
    path = tmp_path / "out.h5"
    with h5py.File(path, "w", rdcc_nbytes=0) as f, ChunkWriter(2) as writer:
        options = {"shuffle": True} if case == "shuffle" else {}
        chunks = (3, 2, 4, 5) if case == "other chunks" else (1, 2, 4, 5)
        d = f.create_dataset("x", data.shape, data.dtype, chunks=chunks, compression="gzip",
                             **options)
        bounds = [(0, 3), (3, 10)] if case == "mid-chunk start" else [(0, 4), (4, 10)]
        for start, stop in bounds:
            slab = data[:, start:stop]
            if case == "not contiguous":
                slab = np.asfortranarray(slab)
            else:
                slab = np.ascontiguousarray(slab)
            writer.write(d, slab, start)
    with h5py.File(path, "r") as f:
        np.testing.assert_array_equal(f["x"][...], data)


def test_worker_threads_stop_when_the_writing_fails(tmp_path, rng):
    data = rng.standard_normal((3, 8, 16, 16))
    path = tmp_path / "out.h5"
    with h5py.File(path, "w", rdcc_nbytes=0) as f:
        d = f.create_dataset("x", data.shape, data.dtype, chunks=(1, 2, 16, 16), compression="gzip")
        with pytest.raises(KeyboardInterrupt):
            with ChunkWriter(2) as writer:
                writer.write(d, np.ascontiguousarray(data[:, :4]), 0)
                raise KeyboardInterrupt
    assert not [t for t in threading.enumerate() if t.name.startswith("emsource-deflate")]


class _Recording:
    """A stand-in for an h5py dataset that passes the writer's direct chunk writes on to a real
    one and counts the compressed chunks held between compression and writing."""

    def __init__(self, real, held, lock):
        self.real, self.id, self.held, self.lock = real, self, held, lock
        self.chunks, self.shape, self.dtype, self.ndim = real.chunks, real.shape, real.dtype, real.ndim

    def get_create_plist(self):
        return self.real.id.get_create_plist()

    def write_direct_chunk(self, offset, data):
        self.real.id.write_direct_chunk(offset, data)
        with self.lock:
            self.held[0] -= 1


def test_compressed_chunks_in_flight_stay_within_the_counted_bound(tmp_path, rng, monkeypatch):
    # The memory plan counts (2 workers + 1) chunks: the writer never holds more than
    # 2 * workers compressed chunks before writing the oldest.
    from emsource.snapshot import chunk_writing

    held, peak, lock = [0], [0], threading.Lock()

    class CountingZlib:
        @staticmethod
        def compress(data, level):
            with lock:
                held[0] += 1
                peak[0] = max(peak[0], held[0])
            return zlib.compress(data, level)

    monkeypatch.setattr(chunk_writing, "zlib", CountingZlib)
    data = rng.standard_normal((6, 12, 8, 8))
    path = tmp_path / "out.h5"
    with h5py.File(path, "w", rdcc_nbytes=0) as f, ChunkWriter(2) as writer:
        d = f.create_dataset("x", data.shape, data.dtype, chunks=(1, 1, 8, 8), compression="gzip")
        writer.write(_Recording(d, held, lock), np.ascontiguousarray(data), 0)
    assert held[0] == 0 and 1 <= peak[0] <= 2 * 2  # 72 chunks went through
    with h5py.File(path, "r") as f:
        np.testing.assert_array_equal(f["x"][...], data)
