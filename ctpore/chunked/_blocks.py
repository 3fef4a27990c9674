"""The chunk grid, halo reads from on-disk chunked arrays, and the task runner of the chunked path.

Every chunked step is a set of independent tasks, one per chunk of a regular grid. A task opens
its input arrays (chunk folders in a temporary folder, by path, so the same task runs in a thread,
a process or on a dask.distributed worker of the same machine), reads its chunk plus a halo of
neighbouring voxels, computes, and writes exactly its own chunk of the output array (chunk
aligned, so concurrent tasks never write the same chunk file). Reductions return small values.

Halos are read explicitly (``read_halo``) rather than through ``dask.array.map_overlap``: the
same exactness argument applies (the halo covers the reach of the operation), but a halo may be
larger than a chunk without the array being rechunked, a task reads only the voxels it needs,
and the side of a block that lies on the image border is known exactly (see ``Halo.at_border``).
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

__all__ = ["Block", "grid_blocks", "read_halo", "open_array", "Runner"]


@dataclass(frozen=True)
class Block:
    """One chunk of the grid: global start ``lo`` and stop ``hi`` per axis, grid ``index``."""

    index: tuple
    lo: tuple
    hi: tuple

    @property
    def slices(self) -> tuple:
        return tuple(slice(a, b) for a, b in zip(self.lo, self.hi))

    @property
    def shape(self) -> tuple:
        return tuple(b - a for a, b in zip(self.lo, self.hi))


def grid_blocks(shape, chunks) -> list[Block]:
    """The chunks of a regular grid in C order (the last chunk per axis may be smaller)."""
    axes = [[(i, s, min(s + c, n)) for i, s in enumerate(range(0, n, c))]
            for n, c in zip(shape, chunks)]
    out = []
    for combo in itertools.product(*axes):
        out.append(Block(index=tuple(c[0] for c in combo), lo=tuple(c[1] for c in combo),
                         hi=tuple(c[2] for c in combo)))
    return out


def open_array(path: str, mode: str = "r"):
    """Open an array of the workspace (a :class:`~ctpore.chunked.chunkstore.ChunkStore`)."""
    from .chunkstore import ChunkStore

    return ChunkStore(path)


@dataclass(frozen=True)
class Halo:
    """Where the core block sits inside the extended block read with its halo.

    ``core`` indexes the block's own voxels inside the extended array; ``origin`` is the global
    index of the extended array's first voxel (negative when filled beyond the image);
    ``at_border[axis] = (low, high)`` is True where the block's side is the image border.
    """

    core: tuple
    origin: tuple
    at_border: tuple


def read_halo(array, block: Block, halo, *, fill=None):
    """Read ``block`` with ``halo`` voxels per axis and side from a chunked (or numpy) array.

    Parameters
    ----------
    array : array with ``shape`` and slicing
    block : Block
    halo : 3 ints
    fill : scalar or None
        Value for the voxels beyond the image; ``None`` clips the extended block at the image
        instead (the result is then smaller on the sides that lie on the border).

    Returns
    -------
    data : ndarray
    where : Halo
    """
    shape = array.shape
    lo = [b - h for b, h in zip(block.lo, halo)]
    hi = [b + h for b, h in zip(block.hi, halo)]
    clo = [max(0, v) for v in lo]
    chi = [min(n, v) for n, v in zip(shape, hi)]
    data = np.asarray(array[tuple(slice(a, b) for a, b in zip(clo, chi))])
    at_border = tuple((block.lo[i] == 0, block.hi[i] == shape[i]) for i in range(3))
    if fill is None:
        origin = tuple(clo)
    else:
        pad = [(a - b, d - c) for a, b, c, d in zip(clo, lo, chi, hi)]
        if any(p != (0, 0) for p in pad):
            data = np.pad(data, pad, mode="constant", constant_values=fill)
        origin = tuple(lo)
    core = tuple(slice(b - o, c - o) for b, c, o in zip(block.lo, block.hi, origin))
    return data, Halo(core=core, origin=origin, at_border=at_border)


class Runner:
    """Runs lists of independent tasks with one dask scheduler.

    Parameters
    ----------
    scheduler : None, str or dask.distributed.Client
        ``None`` or ``"threads"``: dask's threaded scheduler; ``"synchronous"`` (one thread,
        for debugging); ``"processes"``; a ``Client``; or a scheduler address such as
        ``"tcp://127.0.0.1:8786"`` (a Client is connected to it here and closed by
        :meth:`close`).
    """

    def __init__(self, scheduler=None):
        self._own_client = None
        if scheduler is None:
            scheduler = "threads"
        if isinstance(scheduler, str) and "://" in scheduler:
            from dask.distributed import Client  # only when a cluster is asked for

            self._own_client = Client(scheduler)
            scheduler = self._own_client
        self.scheduler = scheduler

    @property
    def name(self) -> str:
        """Scheduler description for summary.json."""
        if isinstance(self.scheduler, str):
            return self.scheduler
        address = getattr(self.scheduler, "scheduler", None)
        address = getattr(address, "address", None) or "?"
        return f"dask.distributed {address}"

    def task_budget(self, memory_limit_bytes=None) -> tuple[int | None, int | None]:
        """Concurrent tasks per process and that process's memory budget, for the chunk choice.

        Local schedulers: ``(None, memory_limit_bytes)`` — the CPUs of this machine run the
        tasks within the given budget. A ``dask.distributed`` Client: the largest thread count
        of a worker (its tasks run at once and share its memory) and the smallest worker
        memory limit, capped by ``memory_limit_bytes`` when that is given (the budget is then
        read per worker). Workers without a memory limit impose none.
        """
        if isinstance(self.scheduler, str):
            return None, memory_limit_bytes
        from ..errors import InputError

        workers = list(self.scheduler.scheduler_info(n_workers=-1).get("workers", {}).values())
        if not workers:
            raise InputError(f"the dask cluster at {self.name} has no workers",
                             "start workers (dask worker ADDRESS) before the analysis")
        threads = max(int(w.get("nthreads") or 1) for w in workers)
        limits = [int(w["memory_limit"]) for w in workers if w.get("memory_limit")]
        budgets = [b for b in (memory_limit_bytes, min(limits, default=None)) if b]
        return threads, (min(budgets) if budgets else None)

    def share(self, value):
        """Wrap a large argument once so that every task refers to one graph key."""
        import dask

        return dask.delayed(value, pure=True)

    def map(self, func, items, *args) -> list:
        """``[func(item, *args) for item in items]``, run as dask tasks; results in order."""
        import dask

        tasks = [dask.delayed(func, pure=False)(item, *args) for item in items]
        if not tasks:
            return []
        return list(dask.compute(*tasks, scheduler=self.scheduler))

    def close(self):
        if self._own_client is not None:
            self._own_client.close()
            self._own_client = None
