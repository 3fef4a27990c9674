"""Denoising chunk by chunk with a halo sized from the filter's reach (exact).

A filtered voxel depends only on the voxels within the filter's footprint: for the median the
ball of :func:`ctpore.segment.denoise.ball_footprint` (``floor(r / spacing)`` voxels per axis),
for the Gaussian ``int(4·σ/spacing + 0.5)`` voxels per axis (scipy's truncation at 4σ). Each
chunk is read with that halo; on the sides where the chunk lies on the image border no halo is
read, so scipy's ``mode="reflect"`` reflects at the same place as for the whole stack. The
separable Gaussian passes on the extended block compute the same sums for the core voxels as on
the whole stack, so the result is identical, not approximate.
"""

from __future__ import annotations

import numpy as np
from ..errors import InputError
from ..segment.denoise import ball_footprint, denoise
from ._blocks import open_array, read_halo

__all__ = ["denoise_halo", "chunked_denoise"]


def denoise_halo(section, spacing) -> tuple[int, int, int]:
    """Halo in voxels per axis that makes the chunked filter exact."""
    if section.method == "median":
        return tuple((n - 1) // 2 for n in ball_footprint(section.radius_um,
                                                          spacing_um=spacing).shape)
    if section.method == "gaussian":
        return tuple(int(4.0 * (section.sigma_um / s) + 0.5) for s in spacing)
    return (0, 0, 0)


def chunked_denoise(ws, runner, source: str, *, spacing, section, name="grey") -> str:
    """Write the denoised stack (float32) of the chunked array at ``source``; returns its path."""
    section.check()
    if section.method == "none":
        raise InputError("chunked_denoise called with denoise.method = 'none'",
                         "use the raw stack directly")
    out = ws.create(name, np.float32)
    halo = denoise_halo(section, spacing)
    runner.map(_denoise_block, ws.blocks, source, out, halo, tuple(spacing), section)
    return out


def _denoise_block(block, source, out, halo, spacing, section):
    data, where = read_halo(open_array(source), block, halo, fill=None)
    filtered = denoise(data, spacing_um=spacing, section=section)
    open_array(out, "r+")[block.slices] = filtered[where.core]

