"""The Scan: a grey-value stack with its voxel size and where it came from."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .spacing import as_spacing_um

__all__ = ["Scan"]


@dataclass
class Scan:
    """A reconstructed stack, axes (z, y, x), with voxel size in µm.

    Attributes
    ----------
    data : array-like, shape (nz, ny, nx)
        Grey values; may be lazy (a memory map or a zarr array) until :meth:`load` is called.
    spacing_um : tuple of 3 floats
        Voxel size (dz, dy, dx) in µm.
    source : str
        Path of the file or folder the stack was read from, or ``"<array>"``.
    spacing_source : str
        Where the voxel size came from: ``"ome"``, ``"imagej"``, ``"user"`` or ``"array"``.
    meta : dict
        Reader details (format, dtype, shape, file list) kept for provenance.
    """

    data: Any
    spacing_um: tuple[float, float, float]
    source: str = "<array>"
    spacing_source: str = "user"
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        self.spacing_um = as_spacing_um(self.spacing_um)

    @property
    def shape(self) -> tuple[int, int, int]:
        return tuple(int(s) for s in self.data.shape)

    @property
    def dtype(self) -> np.dtype:
        return np.dtype(self.data.dtype)

    def load(self) -> np.ndarray:
        """Return the grey values as an in-memory numpy array (reads lazy data once)."""
        if not isinstance(self.data, np.ndarray) or isinstance(self.data, np.memmap):
            self.data = np.asarray(self.data[...])
        return self.data
