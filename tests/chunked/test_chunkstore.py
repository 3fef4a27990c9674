"""The on-disk chunk store behaves like a numpy array for the indexing the chunked path uses."""

from __future__ import annotations

import pickle

import numpy as np


def test_store_round_trip(tmp_path):
    from ctpore.chunked.chunkstore import ChunkStore, create_store

    store = create_store(tmp_path / "a", shape=(50, 40, 30), chunks=(16, 16, 16),
                         dtype=np.float32)
    assert np.array_equal(store[...], np.zeros((50, 40, 30), np.float32))  # unwritten: zeros
    x = np.random.default_rng(0).random((50, 40, 30)).astype(np.float32)
    store[...] = x
    again = ChunkStore(tmp_path / "a")
    for key in [(Ellipsis,), (3,), (slice(None), -1), (slice(1, 20), slice(5, 39), 29),
                (slice(48, 60), slice(None), slice(None))]:
        np.testing.assert_array_equal(again[key], x[key])
    again[2:5, 3:4, 0:30] = 7  # a write that covers parts of chunks
    x[2:5, 3:4, :] = 7
    np.testing.assert_array_equal(ChunkStore(tmp_path / "a")[...], x)
    np.testing.assert_array_equal(again[...], x)  # its cached headers stay right
    clone = pickle.loads(pickle.dumps(again))
    assert clone.shape == (50, 40, 30) and clone.dtype == np.float32
    np.testing.assert_array_equal(clone[10:12], x[10:12])
