"""Thresholding and speck removal across chunks, equal to ``segment.pipeline.solid_at``.

The three cleaning steps of :func:`ctpore.segment.clean.clean_solid` (small solid specks,
small enclosed pore specks, keep the largest solid piece) need component sizes over the whole
stack; they are taken from the cross-chunk labelling of :mod:`ctpore.chunked.labels`, with the
same connectivities (26 for solid, 6 for gas), the same volume rule (voxel count × dz·dy·dx,
strictly below the limit) and the same tie rule for the largest piece (first in scan order).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..segment.threshold import solid_mask
from ..spacing import voxel_volume_um3
from ._tables import apply_table, map_blocks
from .labels import FACE, FULL, label_components

__all__ = ["chunked_solid_at", "chunked_clean"]


def chunked_solid_at(ws, runner, grey: str, value: float, *, spacing, recipe,
                     name="solid") -> str:
    """Solid at threshold ``value`` (global threshold only), then cleaned; returns its path."""
    if recipe.corrections.thin_walls != "none":
        raise InputError(
            f"corrections.thin_walls = '{recipe.corrections.thin_walls}' is not available in "
            "the chunked (--memory) path", "set corrections.thin_walls = 'none' or run in memory")
    raw = map_blocks(ws, runner, _threshold, [grey], f"{name}_raw", bool, float(value),
                     bool(recipe.threshold.solid_is_bright))
    return chunked_clean(ws, runner, raw, spacing=spacing, section=recipe.clean, name=name)


def chunked_clean(ws, runner, solid: str, *, spacing, section, name="solid") -> str:
    """:func:`ctpore.segment.clean.clean_solid` across chunks; returns the path of the result."""
    section.check()
    voxel_um3 = voxel_volume_um3(spacing)
    current = solid
    step = 0

    def fresh():
        nonlocal step
        step += 1
        return f"{name}_clean{step}"

    if section.min_solid_speck_um3 > 0:
        comps = label_components(ws, runner, _as_bool, [current], kind=FULL,
                                 name=f"{name}_labels")
        keep = ~(comps.size * voxel_um3 < section.min_solid_speck_um3)
        current = apply_table(ws, runner, comps, comps.node_table(keep, False), _take,
                              [], fresh(), bool)
    if section.min_pore_speck_um3 > 0:
        comps = label_components(ws, runner, _invert, [current], kind=FACE,
                                 name=f"{name}_labels")
        fill = (comps.size * voxel_um3 < section.min_pore_speck_um3) & ~comps.border
        current = apply_table(ws, runner, comps, comps.node_table(fill, False), _or_table,
                              [current], fresh(), bool)
    if section.keep_largest_solid:
        comps = label_components(ws, runner, _as_bool, [current], kind=FULL,
                                 name=f"{name}_labels", first=True)
        if comps.count > 1:
            # largest size, ties to the first in scan order (as np.argmax over ndimage labels)
            best = np.lexsort((comps.first, -comps.size))[0]
            keep = np.zeros(comps.count, dtype=bool)
            keep[best] = True
            current = apply_table(ws, runner, comps, comps.node_table(keep, False), _take,
                                  [], fresh(), bool)
    ws.remove(f"{name}_labels")
    return current


def _threshold(grey, value, bright):
    return solid_mask(grey, value, solid_is_bright=bright)


def _as_bool(x):
    return x.astype(bool, copy=False)


def _invert(x):
    return ~x.astype(bool, copy=False)


def _take(values):
    return values


def _or_table(values, current):
    return values | current.astype(bool, copy=False)
