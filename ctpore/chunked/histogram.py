"""Streaming grey-value histogram and threshold over the chunks of an on-disk stack.

The in-memory threshold module already accumulates its histogram slab by slab
(:func:`ctpore.segment.threshold.grey_histogram`); here it is fed the stack chunk by chunk
instead of z-slab by z-slab (a view of the chunks as rows), so each chunk is read once
per pass and the histogram, and every threshold computed from it, is the in-memory one exactly
(counts are sums of per-value bin indices, independent of the order of the voxels).

Methods that need every grey value at once (``li`` on the values, ``triangle``) are refused in
chunked mode with an error naming the recipe key.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..segment.threshold import ThresholdChoice, grey_histogram, threshold_value

__all__ = ["ChunkRows", "chunked_threshold", "chunked_histogram", "STREAMING_METHODS"]

#: Threshold methods that work from the histogram alone ("li" on integer stacks only: on float
#: stacks it needs every grey value and :func:`chunked_threshold` refuses it).
STREAMING_METHODS = ("otsu", "isodata", "li", "triangle", "multiotsu", "peak_midpoint",
                     "manual")


class ChunkRows:
    """A chunked array seen as one row per chunk, for the threshold module's slab-wise histogram.

    ``rows[a:b]`` returns the voxels of chunks ``a .. b-1`` as one 1-D array; ``shape`` is
    ``(number of chunks, voxels per full chunk)``. Only the histogram code should use it: the
    row layout is not an image.
    """

    def __init__(self, array, blocks):
        self._array = array
        self._blocks = blocks
        self.dtype = np.dtype(array.dtype)
        self.shape = (len(blocks), max(math.prod(b.shape) for b in blocks))

    def __getitem__(self, item):
        if not isinstance(item, slice):
            raise TypeError("ChunkRows only supports row slices")
        start, stop, step = item.indices(len(self._blocks))
        parts = [np.asarray(self._array[b.slices]).ravel()
                 for b in self._blocks[start:stop:step]]
        if not parts:
            return np.zeros(0, dtype=self.dtype)
        return np.concatenate(parts)


def chunked_threshold(grey, blocks, *, section) -> ThresholdChoice:
    """The recipe's threshold of an on-disk grey stack, equal to the in-memory one.

    Raises
    ------
    InputError
        For a method outside :data:`STREAMING_METHODS`, and for "li" on a float stack (it needs
        all grey values in memory).
    """
    section.check()
    if section.method not in STREAMING_METHODS:
        raise InputError(
            f"threshold.method = '{section.method}' needs every grey value in memory at once, "
            "which the chunked (--memory) path does not do",
            f"use one of {list(STREAMING_METHODS)} in the recipe's [threshold] section, or run "
            "without --memory on a machine with enough memory")
    return threshold_value(ChunkRows(grey, blocks), section=section, values_in_memory=False)


def chunked_histogram(grey, blocks):
    """``(counts, bin centres)`` of the grey values, as :func:`grey_histogram` gives them."""
    return grey_histogram(ChunkRows(grey, blocks))
