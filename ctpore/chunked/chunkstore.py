"""A chunked array on disk: one ``.npy`` file per chunk in a folder, opened by its path.

The intermediates of a chunked run are written once per chunk by one task and read (with
halos) by later tasks; they need no compression, codecs or concurrency control beyond "one
writer per chunk". A folder of NumPy files does exactly that with little per-access cost: a
read takes the needed z rows of each chunk file it touches (one seek and one read, no memory
map, so nothing stays resident), a write saves whole chunks (to a temporary name, then
renamed, so a reader never sees half a chunk). Chunks never written read as zeros.
(zarr-python 3 arrays were tried first: each access costs a round trip through its event
loop, several milliseconds on a loaded machine, which dominated the run time of small
chunks.)
"""

from __future__ import annotations

import itertools
import json
import os
from pathlib import Path

import numpy as np

__all__ = ["ChunkStore", "create_store"]

_META = "meta.json"


def create_store(path, *, shape, chunks, dtype) -> "ChunkStore":
    """Create (or replace) an empty store; returns it opened for writing."""
    import shutil

    folder = Path(path)
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    meta = {"shape": [int(s) for s in shape], "chunks": [int(min(c, s)) for c, s in
                                                         zip(chunks, shape)],
            "dtype": np.dtype(dtype).str}
    (folder / _META).write_text(json.dumps(meta), encoding="utf-8")
    return ChunkStore(folder)


class ChunkStore:
    """A 3-D array stored as one ``.npy`` file per chunk (see the module notes).

    Supports ``store[box]`` and ``store[box] = values`` with integers, slices (step 1) and
    ``...``; ``shape``, ``chunks``, ``dtype`` and ``ndim`` as for arrays.
    """

    def __init__(self, path):
        self.path = str(path)
        meta = json.loads((Path(path) / _META).read_text(encoding="utf-8"))
        self.shape = tuple(meta["shape"])
        self.chunks = tuple(meta["chunks"])
        self.dtype = np.dtype(meta["dtype"])
        self.ndim = len(self.shape)
        self._headers = {}  # chunk index -> (data offset, shape) of files already read

    def __reduce__(self):
        return (ChunkStore, (self.path,))

    def _file(self, index) -> str:
        return os.path.join(self.path, "c_" + "_".join(str(i) for i in index) + ".npy")

    def _box(self, key):
        """(start, stop) per axis and the axes indexed by an integer (dropped on reading)."""
        if key is Ellipsis:
            key = ()
        if not isinstance(key, tuple):
            key = (key,)
        if any(k is Ellipsis for k in key):
            i = next(i for i, k in enumerate(key) if k is Ellipsis)
            key = key[:i] + (slice(None),) * (self.ndim - len(key) + 1) + key[i + 1:]
        key = key + (slice(None),) * (self.ndim - len(key))
        box, drop = [], []
        for axis, (k, n) in enumerate(zip(key, self.shape)):
            if isinstance(k, slice):
                start, stop, step = k.indices(n)
                if step != 1:
                    raise IndexError("ChunkStore supports slices with step 1 only")
                box.append((start, max(start, stop)))
            else:
                k = int(k)
                k = k + n if k < 0 else k
                if not 0 <= k < n:
                    raise IndexError(f"index {k} out of range for axis {axis} of size {n}")
                box.append((k, k + 1))
                drop.append(axis)
        return box, tuple(drop)

    def _chunks_of(self, box):
        ranges = [range(a // c, (b - 1) // c + 1) if b > a else range(0)
                  for (a, b), c in zip(box, self.chunks)]
        return itertools.product(*ranges)

    def __getitem__(self, key) -> np.ndarray:
        box, drop = self._box(key)
        out = np.zeros([b - a for a, b in box], dtype=self.dtype)
        for index in self._chunks_of(box):
            lo = [i * c for i, c in zip(index, self.chunks)]
            part = [(max(a, l), min(b, l + c)) for (a, b), l, c in zip(box, lo, self.chunks)]
            src = tuple(slice(p0 - l, p1 - l) for (p0, p1), l in zip(part, lo))
            data = self._read(index, src)
            if data is None:
                continue  # never written: zeros
            dst = tuple(slice(p0 - a, p1 - a) for (p0, p1), (a, _) in zip(part, box))
            out[dst] = data
        return out.squeeze(axis=drop) if drop else out

    def _read(self, index, src):
        """``chunk[src]`` read from the chunk file (only its z rows), or None if never written.

        The rows are read with one seek and read, not memory-mapped, so pages of earlier reads
        do not stay resident (slice-by-slice readers touch every chunk of a row of chunks).
        """
        name = self._file(index)
        try:
            f = open(name, "rb")
        except FileNotFoundError:
            return None
        with f:
            head = self._headers.get(index)
            if head is None:
                version = np.lib.format.read_magic(f)
                reader = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                          else np.lib.format.read_array_header_2_0)
                shape, fortran, dtype = reader(f)
                if fortran or np.dtype(dtype) != self.dtype:
                    raise ValueError(f"{name}: not a C-ordered {self.dtype} chunk")
                head = self._headers[index] = (f.tell(), tuple(shape))
            offset, shape = head
            z = src[0]
            row = int(np.prod(shape[1:])) * self.dtype.itemsize
            f.seek(offset + z.start * row)
            data = np.fromfile(f, dtype=self.dtype, count=(z.stop - z.start) * row
                               // self.dtype.itemsize)
        return data.reshape((z.stop - z.start,) + shape[1:])[(slice(None),) + src[1:]]

    def __setitem__(self, key, values) -> None:
        box, _ = self._box(key)
        values = np.broadcast_to(np.asarray(values, dtype=self.dtype),
                                 [b - a for a, b in box])
        for index in self._chunks_of(box):
            lo = [i * c for i, c in zip(index, self.chunks)]
            hi = [min(l + c, n) for l, c, n in zip(lo, self.chunks, self.shape)]
            part = [(max(a, l), min(b, h)) for (a, b), l, h in zip(box, lo, hi)]
            src = tuple(slice(p0 - a, p1 - a) for (p0, p1), (a, _) in zip(part, box))
            if all(p == (l, h) for p, l, h in zip(part, lo, hi)):
                chunk = np.ascontiguousarray(values[src])
            else:  # partial chunk: read, modify, write (single writer per chunk)
                chunk = self[tuple(slice(l, h) for l, h in zip(lo, hi))]
                chunk[tuple(slice(p0 - l, p1 - l) for (p0, p1), l in zip(part, lo))] = \
                    values[src]
            name = self._file(index)
            tmp = f"{name[:-4]}.{os.getpid()}.{id(chunk)}.tmp.npy"
            np.save(tmp, chunk)
            os.replace(tmp, name)
            self._headers.pop(index, None)
