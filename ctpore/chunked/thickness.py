"""Local thickness chunk by chunk, exact: a halo of twice the largest ball radius.

With ``D`` the distance map of the phase and ``R = max D`` over the whole stack, the local
thickness at x is ``2·max{D(c) : |x − c|² ≤ D(c)²(1 + 1e-6)}`` (see
:mod:`ctpore.measure.local_thickness`); only centres c within ``R' = R·(1 + 1e-6)`` of x count,
and their distance values need the background within ``R`` of them. So:

1. ``R`` is found exactly first (:func:`ctpore.chunked.distance.chunked_max_distance`: each
   block's halo is grown until its distances provably equal the whole stack's).
2. Each chunk is read with a halo of ``ceil(2R'/spacing) + 1`` voxels per axis (twice the
   largest radius). Its distance map is exact at every centre within R' of the chunk; centres
   farther out may be too large for lack of background beyond the halo, so the map is capped at
   ``R`` (which changes no exact value, as none exceeds R): their balls then reach at most R' and
   cannot touch the chunk. The balls are painted on the extended block by the in-memory
   module's exact painter and the chunk's part is kept, so the result is the in-memory one
   voxel for voxel.

The thickness statistics are merged from per-chunk counts of distinct values, so quantiles,
maximum and histogram are exact; mean and standard deviation are sums in another order
(relative differences of order 1e-15).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..measure import local_thickness as _lt
from ._blocks import open_array, read_halo
from .distance import chunked_max_distance

__all__ = ["chunked_local_thickness", "thickness_halo", "chunked_thickness_statistics",
           "chunked_thickness_histogram"]

_TOL = 1e-6


def thickness_halo(radius_um: float, spacing) -> tuple[int, int, int]:
    """Halo per axis for an exact chunked local thickness with largest radius ``radius_um``."""
    reach = 2.0 * radius_um * (1 + _TOL)
    return tuple(int(math.ceil(reach / s)) + 1 for s in spacing)


def chunked_local_thickness(ws, runner, mask_fn, sources, *, spacing, name):
    """Local thickness map (µm, float32) of ``mask_fn(*sources)``; returns (path, R, halo)."""
    radius = chunked_max_distance(ws, runner, mask_fn, sources, spacing)
    out = ws.create(name, np.float32)
    if radius == 0.0:
        return out, 0.0, (0, 0, 0)
    halo = thickness_halo(radius, spacing)
    full = runner.map(_thickness_block, ws.blocks, tuple(sources), mask_fn, tuple(spacing),
                      np.float32(radius), halo, out)
    if all(full):
        raise InputError(
            "mask holds no background voxel: with the image border not counted as background, "
            "every ball fits and the local thickness is unbounded",
            "give a mask with background (e.g. the other phase inside the image)")
    return out, radius, halo


def _thickness_block(block, sources, mask_fn, spacing, radius, halo, out):
    import edt

    blocks = [read_halo(open_array(p), block, halo, fill=None) for p in sources]
    where = blocks[0][1]
    mask = np.ascontiguousarray(mask_fn(*[b[0] for b in blocks]))
    target = open_array(out, "r+")
    if not mask[where.core].any():
        target[block.slices] = np.zeros(block.shape, dtype=np.float32)
        return False
    if mask.all():
        return True
    dist = edt.edt(mask, anisotropy=spacing, black_border=False, parallel=1)
    np.minimum(dist, radius, out=dist)
    index, values = _lt._index_distances(dist, 1)
    del dist
    result = _lt._paint(index, values, spacing, 1)
    target[block.slices] = result[where.core]
    return False


def _merged_values(ws, runner, thickness, mask_fn, sources):
    parts = runner.map(_distinct_block, ws.blocks, thickness, mask_fn, tuple(sources))
    values = np.concatenate([p[0] for p in parts]) if parts else np.zeros(0, np.float32)
    counts = np.concatenate([p[1] for p in parts]) if parts else np.zeros(0, np.int64)
    uniq, inverse = np.unique(values, return_inverse=True)
    total = np.bincount(inverse.ravel(), weights=counts, minlength=uniq.size).astype(np.int64)
    return uniq.astype(np.float64), total


def _distinct_block(block, thickness, mask_fn, sources):
    t = np.asarray(open_array(thickness)[block.slices])
    mask = mask_fn(*[np.asarray(open_array(p)[block.slices]) for p in sources])
    return np.unique(t[mask], return_counts=True)


def chunked_thickness_statistics(ws, runner, thickness, mask_fn, sources) -> dict:
    """:func:`ctpore.measure.local_thickness.thickness_statistics` from chunks."""
    values, counts = _merged_values(ws, runner, thickness, mask_fn, sources)
    n = int(counts.sum())
    if n == 0:
        nan = float("nan")
        return {"mean_um": nan, "sd_um": nan, "d10_um": nan, "d50_um": nan, "d90_um": nan,
                "max_um": nan, "voxels": 0}
    mean = float(np.dot(values, counts) / n)
    sd = float(math.sqrt(np.dot(counts, (values - mean) ** 2) / n))
    cum = np.cumsum(counts)
    quant = {}
    for q in (0.1, 0.5, 0.9):
        # numpy's "inverted_cdf": the value at sorted position ceil(n·q) − 1
        pos = max(int(math.ceil(n * q)) - 1, 0)
        quant[q] = float(values[np.searchsorted(cum, pos + 1, side="left")])
    return {"mean_um": mean, "sd_um": sd, "d10_um": quant[0.1], "d50_um": quant[0.5],
            "d90_um": quant[0.9], "max_um": float(values[-1]), "voxels": n}


def chunked_thickness_histogram(ws, runner, thickness, mask_fn, sources, *, bin_width_um):
    """:func:`ctpore.measure.local_thickness.thickness_histogram` from chunks (exact)."""
    values, counts = _merged_values(ws, runner, thickness, mask_fn, sources)
    width = float(bin_width_um)
    if values.size == 0:
        empty = np.zeros(0)
        return {"bin_lower_um": empty, "bin_upper_um": empty.copy(),
                "volume_fraction": empty.copy()}
    bins = np.floor(values / width).astype(np.int64)
    per_bin = np.bincount(bins, weights=counts, minlength=int(bins.max()) + 1)
    lower = np.arange(per_bin.size) * width
    return {"bin_lower_um": lower, "bin_upper_um": lower + width,
            "volume_fraction": per_bin / counts.sum()}
