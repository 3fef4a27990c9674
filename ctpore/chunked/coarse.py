"""The coarse-grained porosity field chunk by chunk, equal to ``continuum.coarse.coarsen``.

The normalised average ``(K*P)/(K*E)`` at a voxel depends on the indicators within the
kernel's support, ``Kernel.radius_voxels(spacing)`` voxels per axis; outside the image both
indicators are 0 (the in-memory ``mode="constant"``). Each chunk is read with that halo (zeros
beyond the image), averaged with the same kernel code, and its part kept. Gaussian kernels give
the in-memory numbers exactly (direct sums); the box's running sums and the ball's FFT round
differently on a smaller block (relative differences of order 1e-7).

Only the field on the scan grid is chunked (no resampling grid, no sampling uncertainty).
"""

from __future__ import annotations

import numpy as np

from ..continuum.coarse import CoarseField, _averaged, _check_kernel, _porosity
from ..continuum.kernels import Kernel
from ..errors import InputError
from ._blocks import open_array, read_halo

__all__ = ["chunked_coarsen"]

PORE, EXTERIOR = 1, 0


def chunked_coarsen(ws, runner, phases: str, *, spacing, kernel: Kernel,
                    min_coverage: float = 0.5, name="coarse") -> CoarseField:
    """Kernel-averaged porosity of the phases at ``phases`` (a workspace path).

    Returns a :class:`CoarseField` whose ``porosity`` and ``coverage`` are the workspace's chunked
    arrays (read them slice by slice, or whole with ``[...]`` when they fit in memory).
    """
    _check_kernel(kernel, min_coverage)
    halo = kernel.radius_voxels(spacing)
    por = ws.create(f"{name}_porosity", np.float32)
    cov = ws.create(f"{name}_coverage", np.float32)
    any_piece = runner.map(_coarse_block, ws.blocks, phases, tuple(spacing), kernel,
                           float(min_coverage), halo, por, cov)
    if not any(any_piece):
        raise InputError("the phases hold no piece (no pore or solid voxel)",
                         "check the segmentation and envelope")
    return CoarseField(porosity=open_array(por), coverage=open_array(cov), kernel=kernel,
                       spacing_um=tuple(spacing), origin_um=(0.0, 0.0, 0.0),
                       min_coverage=float(min_coverage))


def _coarse_block(block, phases, spacing, kernel, min_coverage, halo, por, cov):
    data, where = read_halo(open_array(phases), block, halo, fill=EXTERIOR)
    envelope = data != EXTERIOR
    num = _averaged(data == PORE, kernel, spacing)[where.core]
    den = _averaged(envelope, kernel, spacing)[where.core]
    porosity = _porosity(num, den, min_coverage)
    open_array(por, "r+")[block.slices] = porosity
    open_array(cov, "r+")[block.slices] = np.asarray(den, np.float32)
    return bool(envelope[where.core].any())
