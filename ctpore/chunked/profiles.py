"""Porosity profiles from chunks, equal to :func:`ctpore.profiles.profiles_for_result`.

* The piece frame needs the envelope's three 2-D projections (integer counts, summed over
  chunks) and the extreme projections of its voxel centres (minima and maxima over chunks):
  both are exact, and the moments are computed from the projections with the same arithmetic
  as :mod:`ctpore.piece_frame`, so the frame is the in-memory one to the last bit.
* Radial, axial and r–z profiles bin every envelope voxel by its position in the frame; each
  voxel's coordinates are computed with the same expression (plane + table), so the per-chunk
  bin counts add up to the in-memory tables exactly.
* The depth profile needs each envelope voxel's distance to the exterior (the image padded with
  one exterior layer): exact per chunk with a halo grown until the block proves exact
  (:mod:`ctpore.chunked.distance`), up to ``max_halo_um``. A piece whose depth exceeds the cap
  gets no depth profile (the driver says so in the summary's warnings) rather than an
  approximate one.
"""

from __future__ import annotations

import math

import numpy as np

from ..piece_frame import (PieceFrame, _principal_axes, _projection_tables,
                           moments_from_projections)
from ..profiles import (_axial_binner, _axial_table, _bin_width, _n_bins, _radial_binner,
                        _rz_binner, _rz_table, _table, _trim, _window)
from ..errors import InputError
from ._blocks import open_array
from .distance import block_distance

__all__ = ["chunked_piece_frame", "chunked_profiles"]


def chunked_piece_frame(ws, runner, classes: str, *, spacing, long_axis="auto") -> PieceFrame:
    """The envelope's :class:`PieceFrame` (envelope = non-zero classes)."""
    nz, ny, nx = ws.shape
    p_zy = np.zeros((nz, ny), dtype=np.int64)
    p_zx = np.zeros((nz, nx), dtype=np.int64)
    p_yx = np.zeros((ny, nx), dtype=np.int64)
    for block, (a, b, c) in zip(ws.blocks, runner.map(_projections, ws.blocks, classes)):
        (z0, z1), (y0, y1), (x0, x1) = zip(block.lo, block.hi)
        p_zy[z0:z1, y0:y1] += a
        p_zx[z0:z1, x0:x1] += b
        p_yx[y0:y1, x0:x1] += c
    centroid, cov, n = moments_from_projections(p_zy, p_zx, p_yx, ws.shape, spacing)
    axes = _principal_axes(cov, long_axis)
    sd = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", axes, cov, axes), 0.0))
    planes, tables = _projection_tables(ws.shape, spacing, centroid, axes)
    parts = runner.map(_extents, ws.blocks, classes, runner.share((planes, tables)))
    lo = np.min([p[0] for p in parts], axis=0)
    hi = np.max([p[1] for p in parts], axis=0)
    extents = np.stack([lo, hi], axis=1)
    for arr in (axes, extents, sd):
        arr.setflags(write=False)
    return PieceFrame(centroid_um=tuple(float(c) for c in centroid), axes=axes,
                      extents_um=extents, sd_um=sd, long_axis=long_axis, spacing_um=spacing,
                      voxels=n, shape=tuple(ws.shape))


def _projections(block, classes):
    env = np.asarray(open_array(classes)[block.slices]) != 0
    return (np.count_nonzero(env, axis=2), np.count_nonzero(env, axis=1),
            np.count_nonzero(env, axis=0))


def _extents(block, classes, planes_tables):
    planes, tables = planes_tables
    env = np.asarray(open_array(classes)[block.slices]) != 0
    (z0, _), (y0, y1), (x0, x1) = zip(block.lo, block.hi)
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    for k in range(env.shape[0]):
        inside = env[k]
        if not inside.any():
            continue
        for axis in range(3):
            p = planes[axis][y0:y1, x0:x1][inside]
            lo[axis] = min(lo[axis], p.min() + tables[axis][z0 + k])
            hi[axis] = max(hi[axis], p.max() + tables[axis][z0 + k])
    return lo, hi


def chunked_profiles(ws, runner, classes: str, *, spacing, section=None,
                     max_depth_halo_um=math.inf) -> dict:
    """Depth, radial, axial profiles, r–z map and frame, as ``profiles_for_result`` gives them.

    ``classes`` is the uint8 array of :func:`ctpore.chunked.porosity.chunked_porosity`
    (0 exterior, 1 closed pore, 2 solid, 3 open pore). ``"depth"`` is None (and
    ``"depth_note"`` says why) when the depth exceeds ``max_depth_halo_um``.
    """
    from ..recipe import ProfilesSection

    section = ProfilesSection() if section is None else section
    section.check()
    frame = chunked_piece_frame(ws, runner, classes, spacing=spacing,
                                long_axis=section.long_axis)
    depth_bin = _bin_width("profiles.depth_bin_um", section.depth_bin_um, spacing)
    radial_bin = _bin_width("profiles.radial_bin_um", section.radial_bin_um, spacing)
    axial_bin = _bin_width("profiles.axial_bin_um", section.axial_bin_um, spacing)
    window = _window("profiles.axial_window_um", section.axial_window_um)
    rz_binner, rz_shape = _rz_binner(frame, radial_bin, axial_bin,
                                     ("profiles.radial_bin_um", "profiles.axial_bin_um"))
    binners = [_radial_binner(frame, radial_bin, window, "profiles.radial_bin_um"),
               _axial_binner(frame, axial_bin, "profiles.axial_bin_um"), rz_binner]
    planes, tables = _projection_tables(ws.shape, spacing, frame.centroid_um, frame.axes)
    parts = runner.map(_frame_counts, ws.blocks, classes, runner.share((planes, tables)),
                       binners)
    radial, axial, rz = [sum(p[i] for p in parts).reshape(-1, 4) for i in range(3)]
    out = {
        "radial": _table(_trim(radial, "profiles.axial_window_um"), radial_bin, spacing),
        "axial": _axial_table(axial, axial_bin, spacing, frame),
        "rz_map": _rz_table(rz, rz_shape, radial_bin, axial_bin, spacing),
        "frame": frame,
    }
    try:
        counts = _depth_counts(ws, runner, classes, spacing, depth_bin, max_depth_halo_um)
        out["depth"] = _table(counts, depth_bin, spacing)
    except InputError as err:
        out["depth"] = None
        out["depth_note"] = f"no depth profile: {err.what}"
    return out


def _frame_counts(block, classes, planes_tables, binners):
    planes, tables = planes_tables
    cls = np.asarray(open_array(classes)[block.slices])
    (z0, _), (y0, y1), (x0, x1) = zip(block.lo, block.hi)
    pl = [p[y0:y1, x0:x1] for p in planes]
    need_r = any(b[2] for b in binners)
    counts = [np.zeros(4 * n, dtype=np.int64) for n, _, _ in binners]
    for k in range(cls.shape[0]):
        c = cls[k]
        inside = c != 0
        if not inside.any():
            continue
        code = c[inside].astype(np.intp)
        a = pl[0][inside] + tables[0][z0 + k]
        r = None
        if need_r:
            r = np.hypot(pl[1][inside] + tables[1][z0 + k], pl[2][inside] + tables[2][z0 + k])
        for (n, binner, _), acc in zip(binners, counts):
            idx, keep = binner(a, r)
            key = 4 * idx + code
            acc += np.bincount(key if keep is None else key[keep], minlength=4 * n)
    return counts


def _inside(cls):
    return cls != 0


def _depth_counts(ws, runner, classes, spacing, bin_um, max_halo_um):
    """(n_bins, 4) class counts per depth bin, from exact per-chunk distances."""
    depth = ws.create("depth", np.float32)
    start = 0.5 * min(c * s for c, s in zip(ws.chunks, spacing))
    maxima = runner.map(_depth_block, ws.blocks, classes, tuple(spacing), start, max_halo_um,
                        depth)
    offset = 0.5 * min(spacing)
    n = _n_bins("profiles.depth_bin_um", (float(max(maxima)) - offset) / bin_um)
    parts = runner.map(_depth_bins, ws.blocks, classes, depth, offset, bin_um, n)
    ws.remove("depth")
    return sum(parts).reshape(n, 4)


def _depth_block(block, classes, spacing, start, max_halo_um, depth):
    dist, _ = block_distance(block, [classes], _inside, spacing, fill=False,
                             start_halo_um=start, max_halo_um=max_halo_um)
    if dist is None:
        dist = np.zeros(block.shape, dtype=np.float32)
    open_array(depth, "r+")[block.slices] = dist
    return float(dist.max())


def _depth_bins(block, classes, depth, offset, bin_um, n):
    cls = np.asarray(open_array(classes)[block.slices])
    dist = np.asarray(open_array(depth)[block.slices])
    inside = cls != 0
    d = dist[inside].astype(np.float64) - offset
    idx = np.minimum(np.floor(np.maximum(d, 0.0) / bin_um).astype(np.intp), n - 1)
    return np.bincount(4 * idx + cls[inside], minlength=4 * n)
