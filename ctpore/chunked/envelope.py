"""The "closing" envelope across chunks, equal to :func:`ctpore.segment.envelope.envelope`.

The in-memory envelope pads the solid with ``p = ceil(r / spacing) + 1`` voxels of gas per axis,
closes it with a ball of radius r (dilation: distance to the solid ≤ r; erosion: distance to the
non-dilated voxels > r, both exact Euclidean distances) and fills the holes of the padded
result (gas 6-connected to the padded border is exterior). Here the same is done on the padded
grid, chunk by chunk:

* Closing, in two passes. Whether a voxel is dilated depends only on the solid within r of
  it, i.e. within ``h = ceil(r / spacing) + 1`` voxels per axis: the dilation pass reads each
  chunk of the padded grid with a halo of h voxels of solid (beyond the image: gas) and is
  exact. Whether a dilated voxel stays after the erosion depends only on the dilated voxels
  within r: the erosion pass reads the dilated chunks with a halo of h and is exact too.
  (Beyond the padded array the in-memory transform sees nothing; its outermost layer is never
  dilated, so reading non-dilated voxels there gives the same distances.) A block holding no
  solid (or nothing but dilated voxels) is answered directly: the distance transform of an
  all-foreground block is not "infinitely far".
* Hole filling needs the exterior's connectivity over the whole padded grid: the gas of the
  closed mask is labelled across chunks (:mod:`ctpore.chunked.labels`, 6-connectivity) and the
  components touching the padded grid's border are the exterior.

Only ``envelope.method = "closing"`` is chunked; the others raise an InputError.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..segment.envelope import _within
from ._blocks import open_array
from .labels import FACE, label_components
from ._tables import apply_table

__all__ = ["chunked_envelope", "envelope_halo", "envelope_padding"]


def envelope_padding(section, spacing) -> tuple[int, int, int]:
    """The gas padding per axis that the in-memory envelope adds (``ceil(r/spacing) + 1``)."""
    r = float(section.radius_um)
    return tuple(int(math.ceil(r / s)) + 1 for s in spacing)


def envelope_halo(section, spacing) -> tuple[int, int, int]:
    """Halo of each of the two closing passes: ceil(r/spacing) + 1 voxels per axis."""
    return envelope_padding(section, spacing)


def chunked_envelope(ws, runner, solid: str, *, spacing, section, name="envelope") -> str:
    """The envelope (bool, image grid) of the cleaned solid at ``solid``; returns its path."""
    section.check()
    if section.method != "closing":
        raise InputError(
            f"envelope.method = '{section.method}' is not available in the chunked (--memory) "
            "path", "use envelope.method = 'closing', or run without --memory")
    pad = envelope_padding(section, spacing)
    halo = envelope_halo(section, spacing)
    padded = ws.view(tuple(n + 2 * p for n, p in zip(ws.shape, pad)))
    dilated = padded.create(f"{name}_dilated", bool)
    runner.map(_dilate_block, padded.blocks, solid, dilated, pad, halo, tuple(spacing),
               float(section.radius_um))
    closed = padded.create(f"{name}_closed", bool)
    runner.map(_erode_block, padded.blocks, dilated, closed, halo, tuple(spacing),
               float(section.radius_um))
    padded.remove(f"{name}_dilated")
    comps = label_components(padded, runner, _invert, [closed], kind=FACE,
                             name=f"{name}_labels")
    inside = apply_table(padded, runner, comps, comps.node_table(~comps.border, True), _take,
                         [], f"{name}_padded", bool)
    padded.remove(f"{name}_labels")
    padded.remove(f"{name}_closed")
    out = ws.create(name, bool)
    runner.map(_crop_block, ws.blocks, inside, out, pad)
    padded.remove(f"{name}_padded")
    return out


def _dilate_block(block, solid, dilated, pad, halo, spacing, r):
    """Voxels within r of the solid, on the padded grid (the solid is read shifted by pad)."""
    shifted = type(block)(index=block.index, lo=tuple(a - p for a, p in zip(block.lo, pad)),
                          hi=tuple(b - p for b, p in zip(block.hi, pad)))
    data, core = _read_shifted(open_array(solid), shifted, halo)
    if not data.any():  # edt of an all-True mask is not "infinitely far": guard
        result = np.zeros(block.shape, dtype=bool)
    else:
        result = _within(data, spacing, r)[core]
    open_array(dilated, "r+")[block.slices] = result


def _erode_block(block, dilated, closed, halo, spacing, r):
    """Dilated voxels farther than r from every non-dilated voxel (beyond the grid: none)."""
    data, core = _read_shifted(open_array(dilated), block, halo)
    if not data[core].any():  # closed ⊂ dilated
        result = np.zeros(block.shape, dtype=bool)
    elif data.all():
        result = np.ones(block.shape, dtype=bool)
    else:
        result = ~_within(~data, spacing, r)[core]
    open_array(closed, "r+")[block.slices] = result


def _read_shifted(source, block, halo):
    """``read_halo`` for a block that may lie partly or wholly outside the image (gas there)."""
    shape = source.shape
    lo = [a - h for a, h in zip(block.lo, halo)]
    hi = [b + h for b, h in zip(block.hi, halo)]
    clo = [min(max(0, v), n) for v, n in zip(lo, shape)]
    chi = [min(max(0, v), n) for v, n in zip(hi, shape)]
    out = np.zeros([b - a for a, b in zip(lo, hi)], dtype=bool)
    if all(b > a for a, b in zip(clo, chi)):
        dst = tuple(slice(a - o, b - o) for a, b, o in zip(clo, chi, lo))
        out[dst] = np.asarray(source[tuple(slice(a, b) for a, b in zip(clo, chi))])
    core = tuple(slice(h, h + (b - a)) for h, a, b in zip(halo, block.lo, block.hi))
    return out, core


def _crop_block(block, inside, out, pad):
    src = open_array(inside)
    box = tuple(slice(a + p, b + p) for a, b, p in zip(block.lo, block.hi, pad))
    open_array(out, "r+")[block.slices] = np.asarray(src[box])


def _invert(x):
    return ~x.astype(bool, copy=False)


def _take(values):
    return values

