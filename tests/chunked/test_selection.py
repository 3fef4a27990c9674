"""Exact order statistics over chunks against numpy's (np.partition, np.median)."""

from __future__ import annotations

import numpy as np
import pytest

pytest.importorskip("dask")


def _block_values(block, data):
    return data[block]


@pytest.mark.parametrize("gather", [1 << 20, 64])
def test_kth_and_median_match_numpy(monkeypatch, gather):
    # gather = 64 forces every level of the 16-bit radix descent (Knuth vol. 3, §5.2.5)
    from ctpore.chunked import selection
    from ctpore.chunked._blocks import Runner

    monkeypatch.setattr(selection, "_GATHER", gather)
    rng = np.random.default_rng(0)
    values = np.concatenate([rng.normal(0, 1e3, 20_000), rng.integers(-5, 5, 3000),
                             [0.0, -0.0, 1e-300, -1e300, 7.5, 7.5, 7.5]])
    rng.shuffle(values)
    blocks = [slice(a, a + 2311) for a in range(0, values.size, 2311)]
    runner = Runner("synchronous")
    ranks = [0, 1, 11_503, 11_504, values.size - 1]
    got = selection.chunked_kth(runner, blocks, _block_values, (values,), ranks)
    expected = np.partition(values, ranks)[ranks]
    np.testing.assert_array_equal(got, expected)
    for n in (values.size, values.size - 1):
        sub = values[:n]
        sub_blocks = [slice(b.start, min(b.stop, n)) for b in blocks if b.start < n]
        assert selection.chunked_median(runner, sub_blocks, _block_values, (sub,), n) == \
            np.median(sub)
