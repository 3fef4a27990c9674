"""Blockwise maps used by several chunked steps: per-component look-ups and voxel-wise maps."""

from __future__ import annotations

import numpy as np

from ._blocks import open_array

__all__ = ["apply_table", "map_blocks", "count_blocks"]


def apply_table(ws, runner, comps, table, combine, sources, out_name, dtype) -> str:
    """Write ``combine(table[node id of each voxel], *source blocks)`` for every chunk.

    ``table`` maps node ids (chunk-local label + the chunk's offset; 0 for background) to
    values, e.g. from :meth:`Components.node_table`.
    """
    out = ws.create(out_name, dtype)
    runner.map(_apply_block, list(enumerate(ws.blocks)), comps.labels_path,
               runner.share(comps.offsets), runner.share(table), combine, tuple(sources), out)
    return out


def _apply_block(item, labels_path, offsets, table, combine, sources, out):
    i, block = item
    labels = np.asarray(open_array(labels_path)[block.slices]).astype(np.int64)
    node = np.where(labels > 0, labels + offsets[i], 0)
    values = table[node]
    arrays = [np.asarray(open_array(p)[block.slices]) for p in sources]
    open_array(out, "r+")[block.slices] = combine(values, *arrays)


def map_blocks(ws, runner, func, sources, out_name, dtype, *args) -> str:
    """Write ``func(*source blocks, *args)`` for every chunk (no halo)."""
    out = ws.create(out_name, dtype)
    runner.map(_map_block, ws.blocks, func, tuple(sources), out, args)
    return out


def _map_block(block, func, sources, out, args):
    arrays = [np.asarray(open_array(p)[block.slices]) for p in sources]
    open_array(out, "r+")[block.slices] = func(*arrays, *args)


def count_blocks(ws, runner, func, sources, *args):
    """Sum over the chunks of ``func(*source blocks, *args)`` (numbers or int arrays)."""
    parts = runner.map(_count_block, ws.blocks, func, tuple(sources), args)
    total = parts[0]
    for p in parts[1:]:
        total = total + p
    return total


def _count_block(block, func, sources, args):
    arrays = [np.asarray(open_array(p)[block.slices]) for p in sources]
    return func(*arrays, *args)
