"""Phases and gas/open/closed porosity across chunks, equal to ``measure.porosity.porosity``.

Open pores are pore voxels whose 6-connected component of non-solid voxels holds an exterior
voxel or reaches the image border (the in-memory rule pads the image with exterior, so both are
the same thing there). The components are labelled across chunks
(:mod:`ctpore.chunked.labels`); voxel counts are sums of per-chunk counts, so every number is
the in-memory one exactly.
"""

from __future__ import annotations

import numpy as np

from ..measure.porosity import check_phase_counts, porosity_from_counts
from ..spacing import voxel_volume_um3
from ._blocks import open_array
from ._tables import apply_table, count_blocks, map_blocks
from .labels import FACE, label_components

__all__ = ["chunked_phases", "chunked_porosity"]

EXTERIOR, PORE, SOLID, OPEN = 0, 1, 2, 3
_UM3_PER_MM3 = 1e9


def chunked_phases(ws, runner, solid: str, envelope: str, *, name="phases") -> str:
    """uint8 phases (0 exterior, 1 pore, 2 solid) from solid and envelope masks."""
    outside = count_blocks(ws, runner, _outside, [solid, envelope])
    if outside:
        raise ValueError(f"{outside} solid voxel(s) lie outside the envelope; the envelope must "
                         "contain all solid")
    return map_blocks(ws, runner, _phases, [solid, envelope], name, np.uint8)


def chunked_porosity(ws, runner, phases: str, *, spacing_um, classes_name="classes"):
    """Porosity numbers (the keys of :func:`ctpore.measure.porosity.porosity`) and the path of
    a uint8 class array: phases with open pore voxels relabelled 3 (for the profiles)."""
    voxel_mm3 = voxel_volume_um3(spacing_um) / _UM3_PER_MM3
    counts = count_blocks(ws, runner, _phase_counts, [phases])
    n_pore, n_solid = int(counts[PORE]), int(counts[SOLID])
    check_phase_counts(n_pore, n_solid)
    comps = label_components(ws, runner, _nonsolid, [phases], kind=FACE, name="nonsolid_labels",
                             marker_fn=_exterior)
    is_open = comps.marked | comps.border
    classes = apply_table(ws, runner, comps, comps.node_table(is_open, False), _classes,
                          [phases], classes_name, np.uint8)
    ws.remove("nonsolid_labels")
    n_open = int(count_blocks(ws, runner, _count_value, [classes], OPEN))
    closed_count = int(np.count_nonzero(~is_open))
    touches = any(runner.map(_touches_border, ws.blocks, phases, ws.shape))
    return porosity_from_counts(n_pore, n_solid, n_open, closed_count=closed_count,
                                touches_border=touches, voxel_mm3=voxel_mm3), classes


def _outside(solid, envelope):
    return int(np.count_nonzero(solid.astype(bool) & ~envelope.astype(bool)))


def _phases(solid, envelope):
    out = envelope.astype(np.uint8)
    out[solid.astype(bool)] = SOLID
    return out


def _phase_counts(phases):
    return np.bincount(phases.ravel(), minlength=3)[:3].astype(np.int64)


def _nonsolid(phases):
    return phases != SOLID


def _exterior(phases):
    return phases == EXTERIOR


def _classes(is_open, phases):
    out = phases.astype(np.uint8, copy=True)
    out[is_open & (phases == PORE)] = OPEN
    return out


def _count_value(block, value):
    return int(np.count_nonzero(block == value))


def _touches_border(block, phases, shape):
    """True when the envelope reaches an image face inside this block."""
    sides = [(axis, end) for axis in range(3) for end in (0, 1)
             if (block.lo[axis] == 0 if end == 0 else block.hi[axis] == shape[axis])]
    if not sides:
        return False
    data = np.asarray(open_array(phases)[block.slices])
    return any(bool(np.take(data, 0 if end == 0 else -1, axis=axis).any()) for axis, end in sides)
