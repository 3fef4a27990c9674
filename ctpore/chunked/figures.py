"""The segmentation figures of a chunked run, drawn from three slices read from disk.

:func:`ctpore.report.figures.save_segmentation_figures` takes the whole grey stack in memory;
this draws the same two figures (threshold histogram, middle slices with the phase outlines)
from the histogram and the three middle slices only, with
:func:`ctpore.report.figures.draw_segmentation_figures`.
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["save_chunked_figures"]


def save_chunked_figures(grey, phases, *, spacing_um, threshold: dict, histogram,
                         folder) -> list[Path]:
    """Write threshold_histogram.png and slices.png into ``folder``.

    ``grey`` and ``phases`` are (lazy) arrays sliced three times each; ``threshold`` is the
    summary's ``threshold`` dict and ``histogram`` the ``(counts, centres)`` pair.
    """
    from ..report.figures import draw_segmentation_figures, middle_slices

    return draw_segmentation_figures(histogram, threshold, middle_slices(grey, phases),
                                     spacing_um=spacing_um, folder=folder)
