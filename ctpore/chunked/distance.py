"""Exact Euclidean distances chunk by chunk, with the halo grown until the block proves exact.

The distance transform of a block read with a halo of ``h`` voxels per axis equals the whole
stack's at a core voxel whenever the value found is below ``(h_i + 1)·spacing_i`` for every side
i of the block that is not the image border: a background voxel outside the extended block is
at least that far from any core voxel, so it cannot be nearer than the one found. (Equality is
not accepted: a background voxel at the same distance would give the same value only up to
rounding.) A block that fails the test is read again with twice the halo (at most the cap
``max_halo_um``), until it passes; if it fails with the cap itself, an InputError names the cap
and the fix. The rule is the one for any distance ≤ d: it needs a halo of
``ceil(d / spacing) + 1`` voxels.

Distances are those of ``edt.edt(mask, anisotropy=spacing, black_border=False)`` [1]_ (float32),
computed on the extended block.

References
----------
.. [1] Felzenszwalb, P. F. & Huttenlocher, D. P. (2012). Distance transforms of sampled
   functions. Theory Comput. 8:415-428. :doi:`10.4086/toc.2012.v008a019`
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ._blocks import open_array, read_halo

__all__ = ["block_distance", "chunked_max_distance"]


def block_distance(block, sources, mask_fn, spacing, *, fill, start_halo_um, max_halo_um):
    """Exact distance map of the mask on the block's core (float32), and the halo used.

    ``fill`` is the mask value beyond the image (``None``: nothing there, the image border is
    not background). Returns ``(distance, halo_voxels)``; ``distance`` is None when the core
    holds no mask voxel.
    """
    import edt

    halo_um = min(float(start_halo_um), float(max_halo_um))
    arrays = [open_array(p) for p in sources]
    while True:
        halo = tuple(int(math.ceil(halo_um / s)) for s in spacing)
        blocks = [read_halo(a, block, halo, fill=None if fill is None else 0) for a in arrays]
        where = blocks[0][1]
        mask = mask_fn(*[b[0] for b in blocks])
        if fill is not None:
            mask = _apply_fill(mask, where, block, arrays[0].shape, fill)
        core = mask[where.core]
        if not core.any():
            return None, halo
        whole = _covers(where, mask, arrays)
        if mask.all() and not whole:
            halo_um = _grow(halo_um, max_halo_um)  # no background in reach yet
        else:
            if mask.all():
                raise InputError(
                    "the mask holds no background voxel: distances are unbounded",
                    "check the segmentation (the phase fills the whole stack)")
            dist = edt.edt(np.ascontiguousarray(mask), anisotropy=spacing,
                           black_border=False, parallel=1)[where.core]
            bound = _bound(where, halo, spacing, mask.shape, arrays[0].shape)
            if whole or float(dist.max()) < bound:
                return dist, halo
            halo_um = _grow(halo_um, max_halo_um)
        if halo_um is None:
            raise InputError(
                f"an exact distance needs a halo of more than {max_halo_um:g} µm around a chunk "
                "(the structure is thicker than the chunked path allows)",
                "give a larger --memory budget (bigger chunks and halos) or run in memory")


def _grow(halo_um, max_halo_um):
    """Twice the halo, but not beyond the cap (tried once); None once the cap was tried."""
    if halo_um >= max_halo_um:
        return None
    return min(2 * halo_um, max_halo_um)


def _apply_fill(mask, where, block, shape, fill):
    """Set the voxels beyond the image (read as 0) to ``fill``."""
    out = mask.copy()
    for axis in range(3):
        n = out.shape[axis]
        lo = -where.origin[axis]  # voxels before index 0
        hi = where.origin[axis] + n - shape[axis]  # voxels past the end
        if lo > 0:
            idx = [slice(None)] * 3
            idx[axis] = slice(0, lo)
            out[tuple(idx)] = fill
        if hi > 0:
            idx = [slice(None)] * 3
            idx[axis] = slice(n - hi, n)
            out[tuple(idx)] = fill
    return out


def _covers(where, mask, arrays):
    """True when the extended block is the whole image (clipped on every side)."""
    shape = arrays[0].shape
    return all(o <= 0 and o + n >= s for o, n, s in zip(where.origin, mask.shape, shape))


def _bound(where, halo, spacing, mask_shape, shape):
    """Distance from the core beyond which background outside the extended block may lie."""
    bound = math.inf
    for axis in range(3):
        lo_open = where.origin[axis] > 0  # the image continues before the extended block
        hi_open = where.origin[axis] + mask_shape[axis] < shape[axis]  # or after it
        if lo_open or hi_open:
            bound = min(bound, (halo[axis] + 1) * spacing[axis])
    return bound


def chunked_max_distance(ws, runner, mask_fn, sources, spacing, *, fill=None,
                         max_halo_um=math.inf) -> float:
    """Largest exact distance of the mask over the stack (0.0 for an empty mask)."""
    start = 0.5 * min(c * s for c, s in zip(ws.chunks, spacing))
    maxima = runner.map(_block_max, ws.blocks, tuple(sources), mask_fn, tuple(spacing), fill,
                        start, max_halo_um)
    return float(max(maxima)) if maxima else 0.0


def _block_max(block, sources, mask_fn, spacing, fill, start, max_halo_um):
    dist, _ = block_distance(block, sources, mask_fn, spacing, fill=fill, start_halo_um=start,
                             max_halo_um=max_halo_um)
    return np.float32(0.0) if dist is None else dist.max()
