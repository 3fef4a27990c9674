"""The phase image: exterior, pore and solid labels in one uint8 array."""

from __future__ import annotations

import numpy as np

__all__ = ["make_phases", "EXTERIOR", "PORE", "SOLID"]

EXTERIOR = 0
"""Gas outside the envelope (air around the piece)."""
PORE = 1
"""Gas inside the envelope."""
SOLID = 2
"""Solid inside the envelope."""


def make_phases(solid, envelope) -> np.ndarray:
    """Combine a solid mask and its envelope into one label image.

    Parameters
    ----------
    solid : (nz, ny, nx) array_like of bool
        Solid voxels (cleaned).
    envelope : (nz, ny, nx) array_like of bool
        The piece's envelope; it must contain every solid voxel.

    Returns
    -------
    phases : (nz, ny, nx) ndarray of uint8
        ``EXTERIOR`` (0) outside the envelope, ``PORE`` (1) for envelope without solid,
        ``SOLID`` (2) for solid.

    Raises
    ------
    ValueError
        If the shapes differ or a solid voxel lies outside the envelope.
    """
    solid = np.asarray(solid, dtype=bool)
    envelope = np.asarray(envelope, dtype=bool)
    if solid.shape != envelope.shape:
        raise ValueError(f"solid mask shape {solid.shape} differs from envelope shape "
                         f"{envelope.shape}")
    outside = np.count_nonzero(solid & ~envelope)
    if outside:
        raise ValueError(f"{outside} solid voxel(s) lie outside the envelope; the envelope must "
                         "contain all solid")
    phases = envelope.astype(np.uint8)  # EXTERIOR 0, PORE 1
    phases[solid] = SOLID
    return phases
