"""Output chunks of the sources pipeline divide its slabs without breaking the inputs' chunks."""

from types import SimpleNamespace

import numpy as np
import pytest

from emsource.snapshot.sources_pipeline import SOURCE_INPUTS, output_chunk_rows
from emsource.snapshot.writing import chunk_shape


def _level(storage_shape, input_chunk_rows):
    source = SimpleNamespace(chunk_rows=input_chunk_rows)
    return SimpleNamespace(storage_shape=storage_shape, source=lambda q: source)


@pytest.mark.parametrize("n0, input_chunk, rows, expected", [
    (80, 5, 15, (15, 5)), (80, 7, 21, (21, 7)), (80, 6, 12, (12, 6)), (80, 3, 13, (13, 1)),
    (80, 80, 15, (15, 5)), (80, 80, 13, (8, 8)), (30, 30, 30, (30, 8))])
def test_slabs_are_whole_output_chunks_and_keep_whole_input_chunks(n0, input_chunk, rows, expected):
    # planes of 128 x 128 float64 (128 KiB): the ~1 MiB target chunk is 8 planes
    shape = (n0, 128, 128)
    assert chunk_shape(shape, 8)[0] == 8
    slab, chunk = output_chunk_rows(_level(shape, input_chunk), np.float64, rows)
    assert (slab, chunk) == expected
    assert 1 <= chunk <= 8 and 1 <= slab <= rows
    if slab < n0:
        assert slab % chunk == 0  # every slab but the last fills whole output chunks
    if input_chunk < n0:
        assert slab == rows  # the slab plan_rows made of whole input chunks is kept
    else:
        assert 2 * chunk >= 8  # contiguous inputs: chunks of at least half the target size


def test_one_slab_of_the_whole_grid_keeps_the_target_chunk():
    level = _level((37, 64, 64), 37)  # planes of 32 KiB: 32 planes per ~1 MiB chunk
    assert output_chunk_rows(level, np.float64, 37) == (37, 32)
