"""Memory budgets: parse "4GB", choose chunk shapes, estimate the in-memory peak, measure RSS."""

from __future__ import annotations

import math
import os
import re
import threading
import time
from contextlib import contextmanager

from ..errors import InputError

__all__ = ["parse_memory", "choose_chunks", "in_memory_peak_bytes", "PeakMemory",
           "IN_MEMORY_BYTES_PER_VOXEL", "IN_MEMORY_BYTES_PER_VOXEL_NO_STRUCTURE",
           "TASK_BYTES_PER_VOXEL"]

#: Peak bytes per voxel of the in-memory ``analyze`` (measured on the default recipe, with
#: structure measures and profiles), used to decide when to switch to the chunked path.
IN_MEMORY_BYTES_PER_VOXEL = 55
#: The same without the structure measures (segmentation, porosity, partial volume,
#: profiles): 16 measured at 384³ (bench/scale.py's in-memory steps, local thickness of pores
#: and walls included), with margin.
IN_MEMORY_BYTES_PER_VOXEL_NO_STRUCTURE = 20
#: Working bytes per voxel of one chunked task on its extended block (the largest are the
#: local-thickness tasks: mask, float32 distances, distance index, float32 result, and the label
#: tasks with int32 labels widened to int64 node ids). Measured, with margin.
TASK_BYTES_PER_VOXEL = 32
#: What the Python process holds before any chunk is read (interpreter, numpy, scipy, dask).
BASELINE_BYTES = 400 * 2**20

_UNITS = {"": 1, "b": 1, "k": 10**3, "kb": 10**3, "m": 10**6, "mb": 10**6, "g": 10**9,
          "gb": 10**9, "t": 10**12, "tb": 10**12, "kib": 2**10, "mib": 2**20, "gib": 2**30,
          "tib": 2**40}


def parse_memory(text) -> int:
    """Bytes from a size such as ``"4GB"``, ``"512MiB"``, ``"1.5 G"`` or ``"800000000"``.

    Decimal units (kB, MB, GB, TB and the bare letters K, M, G, T) are powers of 1000; binary
    units (KiB, MiB, GiB, TiB) powers of 1024; case is ignored.

    Raises
    ------
    InputError
        If the text is not a positive number with one of those units.

    Examples
    --------
    >>> parse_memory("4GB"), parse_memory("512MiB")
    (4000000000, 536870912)
    """
    if isinstance(text, bool):
        raise InputError(f"--memory {text!r} is not a size", "write e.g. 4GB or 512MiB")
    if isinstance(text, (int, float)):
        value, unit = float(text), ""
    else:
        m = re.fullmatch(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?[0-9]+)?)\s*([a-zA-Z]*)\s*", str(text))
        if not m or m.group(2).lower() not in _UNITS:
            raise InputError(f"--memory {text!r} is not a size",
                             "write a number with a unit, e.g. 4GB, 512MiB or 1.5GiB")
        value, unit = float(m.group(1)), m.group(2).lower()
    size = value * _UNITS[unit]
    if not (math.isfinite(size) and size >= 1):
        raise InputError(f"--memory {text!r} must be a positive size",
                         "write e.g. 4GB or 512MiB")
    return int(size)


def in_memory_peak_bytes(shape, *, structure: bool = True) -> int:
    """Estimated peak memory of the in-memory ``analyze`` for a stack of this shape.

    ``structure`` is the recipe's ``[structure] enabled``: cells, surface, topology,
    anisotropy and chords need about 2.7 times the memory of the rest.
    """
    per_voxel = IN_MEMORY_BYTES_PER_VOXEL if structure else IN_MEMORY_BYTES_PER_VOXEL_NO_STRUCTURE
    return per_voxel * math.prod(int(s) for s in shape)


def _workers(workers):
    if workers is not None:
        return max(1, int(workers))
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def choose_chunks(shape, dtype=None, memory_limit_bytes=None, *, halo=(16, 16, 16),
                  workers=None) -> tuple[int, int, int]:
    """A chunk shape whose tasks fit the memory budget.

    Each of ``workers`` concurrent tasks holds about ``TASK_BYTES_PER_VOXEL`` bytes per voxel
    of its chunk extended by ``halo`` voxels per side; the budget left after the process's
    baseline is shared between them. Chunks are cubes in voxels, a multiple of 16 voxels, at
    least 32 and at most the stack (then whole axes).

    Parameters
    ----------
    shape : 3 ints
        The stack's shape (z, y, x).
    dtype : numpy dtype, optional
        The stack's dtype (its bytes per voxel add to a task's cost).
    memory_limit_bytes : int, optional
        The budget; ``None`` gives 256³ chunks (the size the labelling works best with).
    halo : 3 ints
        Halo voxels per side expected around a chunk.
    workers : int, optional
        Concurrent tasks (default: the CPUs available).

    Raises
    ------
    InputError
        If even 32³ chunks do not fit the budget.
    """
    import numpy as np

    shape = tuple(int(s) for s in shape)
    if memory_limit_bytes is None:
        return tuple(min(256, n) for n in shape)
    per_voxel = TASK_BYTES_PER_VOXEL + (np.dtype(dtype).itemsize if dtype is not None else 2)
    per_task = (memory_limit_bytes - BASELINE_BYTES) / _workers(workers)
    side = 0
    if per_task > 0:
        side = int((per_task / per_voxel) ** (1 / 3)) - 2 * max(halo)
    side = side // 16 * 16
    if side < 32:
        need = BASELINE_BYTES + _workers(workers) * per_voxel * (32 + 2 * max(halo)) ** 3
        raise InputError(f"--memory {memory_limit_bytes} bytes is too small for the chunked "
                         f"path (it needs about {need / 1e9:.2f} GB with "
                         f"{_workers(workers)} workers)", "give a larger --memory budget")
    return tuple(min(side, n) for n in shape)


class PeakMemory:
    """Samples the resident memory (RSS) of this process and its children in a thread.

    Use as a context manager; ``peak_bytes`` is the largest sum seen, ``start_bytes`` the value
    on entry. ``peak_anonymous_bytes`` is the largest sum of the anonymous part (RSS minus
    file-backed and shared pages, psutil's ``rss - shared`` on Linux): the memory the work
    itself holds, without the page cache of memory-mapped input stacks and work files, which
    the kernel can drop and re-read. Sampling every ``interval_s`` seconds may miss peaks
    shorter than that.
    """

    def __init__(self, interval_s: float = 0.02):
        self.interval_s = interval_s
        self.peak_bytes = 0
        self.peak_anonymous_bytes = 0
        self.start_bytes = 0
        self.start_anonymous_bytes = 0
        self.window_peak_bytes = 0
        self.by_step: dict[str, int] = {}
        self._stop = threading.Event()
        self._thread = None

    def _sample(self) -> tuple[int, int]:
        """(RSS, anonymous RSS) of this process and its children."""
        import psutil

        proc = psutil.Process()
        total = anonymous = 0
        for p in [proc, *proc.children(recursive=True)]:
            try:
                info = p.memory_info()
            except psutil.Error:
                continue
            total += info.rss
            anonymous += info.rss - getattr(info, "shared", 0)
        return total, anonymous

    def _rss(self) -> int:
        return self._sample()[0]

    def _record(self) -> int:
        rss, anonymous = self._sample()
        self.peak_bytes = max(self.peak_bytes, rss)
        self.peak_anonymous_bytes = max(self.peak_anonymous_bytes, anonymous)
        self.window_peak_bytes = max(self.window_peak_bytes, rss)
        return rss

    def _run(self):
        while not self._stop.is_set():
            self._record()
            time.sleep(self.interval_s)

    @contextmanager
    def step(self, name: str):
        """Record the peak RSS while the block runs in ``by_step[name]``."""
        self.window_peak_bytes = self._rss()
        try:
            yield
        finally:
            self.by_step[name] = max(self.window_peak_bytes, self._rss())

    def __enter__(self):
        self.start_bytes, self.start_anonymous_bytes = self._sample()
        self.peak_bytes, self.peak_anonymous_bytes = self.start_bytes, self.start_anonymous_bytes
        self._thread = threading.Thread(target=self._run, name="ctpore-rss", daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()
        self._record()
