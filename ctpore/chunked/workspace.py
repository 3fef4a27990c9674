"""A temporary folder of chunked arrays: the on-disk intermediates of a chunked run."""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

from ._blocks import grid_blocks
from .chunkstore import ChunkStore, create_store

__all__ = ["Workspace"]


class Workspace:
    """Chunked arrays (:class:`ChunkStore`) of one shape and chunk grid in a temporary folder.

    The folder is removed by :meth:`close` (or on leaving a ``with`` block).

    Parameters
    ----------
    shape : 3 ints
        Shape of the stack (z, y, x).
    chunks : 3 ints
        Chunk shape; every array of the workspace uses it, so tasks write whole chunks.
    parent : path, optional
        Folder in which the temporary folder is made (default: the system's temp folder).
    """

    def __init__(self, shape, chunks, *, parent=None):
        self.shape = tuple(int(s) for s in shape)
        self.chunks = tuple(int(min(c, n)) for c, n in zip(chunks, self.shape))
        if parent is not None:
            Path(parent).mkdir(parents=True, exist_ok=True)
        self.folder = Path(tempfile.mkdtemp(prefix="ctpore-chunked-", dir=parent))
        self.blocks = grid_blocks(self.shape, self.chunks)

    def view(self, shape) -> "Workspace":
        """A workspace of another shape (same folder and chunk shape), e.g. a padded grid."""
        other = object.__new__(Workspace)
        other.shape = tuple(int(s) for s in shape)
        other.chunks = tuple(int(min(c, n)) for c, n in zip(self.chunks, other.shape))
        other.folder = self.folder
        other.blocks = grid_blocks(other.shape, other.chunks)
        return other

    def path(self, name: str) -> str:
        return str(self.folder / name)

    def create(self, name: str, dtype, *, shape=None, chunks=None) -> str:
        """Create (or replace) an array of zeros; returns its path."""
        create_store(self.path(name), shape=shape or self.shape, chunks=chunks or self.chunks,
                     dtype=dtype)
        return self.path(name)

    def array(self, name: str, mode: str = "r") -> ChunkStore:
        """The array ``name`` (``mode`` is accepted for symmetry; stores are always writable)."""
        return ChunkStore(self.path(name))

    def remove(self, name: str) -> None:
        shutil.rmtree(self.path(name), ignore_errors=True)

    def close(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
