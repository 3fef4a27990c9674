"""--memory parsing, chunk choice and the RSS sampler."""

from __future__ import annotations

import sys

import numpy as np
import pytest


@pytest.mark.parametrize("text, expected", [
    ("4GB", 4 * 10**9), ("512MiB", 512 * 2**20), ("1.5GiB", int(1.5 * 2**30)),
    ("800000000", 800_000_000), ("2 g", 2 * 10**9), ("64kb", 64_000), (10**9, 10**9)])
def test_parse_memory(text, expected):
    # SI prefixes are powers of 1000, IEC binary prefixes powers of 1024 (IEC 80000-13).
    from ctpore.chunked import parse_memory

    assert parse_memory(text) == expected


@pytest.mark.parametrize("text", ["", "four GB", "4 parsecs", "-1GB", "0", "GB", True])
def test_parse_memory_rejects_bad_text(text):
    from ctpore.chunked import parse_memory
    from ctpore.errors import InputError

    with pytest.raises(InputError, match="--memory"):
        parse_memory(text)


def test_choose_chunks_fits_the_budget():
    from ctpore.chunked.memory import BASELINE_BYTES, TASK_BYTES_PER_VOXEL, choose_chunks
    from ctpore.errors import InputError

    shape = (2000, 2048, 2048)
    for budget in (2 * 10**9, 4 * 10**9, 16 * 10**9):
        c = choose_chunks(shape, np.uint16, budget, halo=(16, 16, 16), workers=2)
        assert all(v % 16 == 0 and v >= 32 for v in c)
        cost = 2 * (TASK_BYTES_PER_VOXEL + 2) * (max(c) + 32) ** 3 + BASELINE_BYTES
        assert cost <= budget
    assert choose_chunks(shape, np.uint16, 4 * 10**9, workers=2) < \
        choose_chunks(shape, np.uint16, 16 * 10**9, workers=2)
    assert choose_chunks((50, 60, 70), np.uint8, 16 * 10**9) == (50, 60, 70)
    assert choose_chunks((500, 600, 700), np.uint8, None) == (256, 256, 256)
    with pytest.raises(InputError, match="too small"):
        choose_chunks(shape, np.uint16, 300 * 2**20)


def test_in_memory_estimate():
    from ctpore.chunked import in_memory_peak_bytes

    assert in_memory_peak_bytes((100, 100, 100)) == 55 * 10**6
    assert in_memory_peak_bytes((100, 100, 100), structure=False) == 20 * 10**6


def test_peak_memory_sees_an_allocation():
    pytest.importorskip("psutil")
    from ctpore.chunked.memory import PeakMemory

    with PeakMemory(interval_s=0.005) as m:
        block = np.ones(200 * 2**20, dtype=np.uint8)  # 200 MiB, touched
        block[::4096] = 2
        import time

        time.sleep(0.05)
        del block
    assert m.peak_bytes - m.start_bytes > 150 * 2**20
    assert m.peak_anonymous_bytes > 150 * 2**20


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="psutil's 'shared' is Linux")
def test_anonymous_peak_leaves_out_a_memory_mapped_file(tmp_path):
    # Reading a memory-mapped file fills the page cache mapped into the process: RSS rises by
    # the file's size, the anonymous part does not (Linux /proc accounting, proc(5) RssFile).
    pytest.importorskip("psutil")
    from ctpore.chunked.memory import PeakMemory

    path = tmp_path / "stack.raw"
    size = 160 * 2**20
    with open(path, "wb") as f:
        for _ in range(size // 2**20):
            f.write(b"\x01" * 2**20)
    mapped = np.memmap(path, dtype=np.uint8, mode="r")
    with PeakMemory(interval_s=0.005) as m:
        total = int(mapped.sum(dtype=np.int64))
        import time

        time.sleep(0.05)
    assert total == size
    assert m.peak_bytes - m.start_bytes > 100 * 2**20
    assert m.peak_anonymous_bytes - m.start_anonymous_bytes < 60 * 2**20
    del mapped


def test_analyze_goes_chunked_from_the_recipes_estimate():
    # 10⁶ voxels under a 30 MB budget: the whole analysis
    # (55 B/voxel) goes chunked, the one without structure measures (20 B/voxel) stays.
    from ctpore.analysis import _use_chunked

    shape = (100, 100, 100)
    assert _use_chunked(shape, 30 * 10**6, None, structure=True)
    assert not _use_chunked(shape, 30 * 10**6, None, structure=False)
    assert _use_chunked(shape, 10**15, "synchronous", structure=False)  # a scheduler asks
