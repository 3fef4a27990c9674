"""The segmentation figures of a chunked run, drawn from three slices read from disk.

:func:`ctpore.report.figures.save_segmentation_figures` takes the whole grey stack in memory;
this draws the same two figures (threshold histogram, middle slices with the phase outlines)
from the histogram and the three middle slices only, with the report module's helpers.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["save_chunked_figures"]


def save_chunked_figures(grey, phases, *, spacing_um, threshold: dict, histogram,
                         folder) -> list[Path]:
    """Write threshold_histogram.png and slices.png into ``folder``.

    ``grey`` and ``phases`` are (lazy) arrays sliced three times each; ``threshold`` is the
    summary's ``threshold`` dict and ``histogram`` the ``(counts, centres)`` pair.
    """
    from ..report.figures import PHASE_COLOURS, _figure, _rebin, _save

    folder = Path(folder)
    paths = []
    fig = _figure(6.4, 3.6)
    ax = fig.add_subplot()
    counts, edges = _rebin(np.asarray(histogram[0]), np.asarray(histogram[1], dtype=float), 256)
    ax.stairs(counts, edges, color="#555555", fill=True)
    thr = threshold
    ax.axvspan(thr["value"] - thr["delta"], thr["value"] + thr["delta"], color="#fdae61",
               alpha=0.4, label=f"band ±{thr['delta']:.4g}: porosity "
               f"{thr['porosity_low']:.3f}–{thr['porosity_high']:.3f}")
    ax.axvline(thr["value"], color="#d7191c", label=f"{thr['method']} threshold {thr['value']:.5g}")
    ax.set_yscale("log")
    ax.set_xlabel("grey value")
    ax.set_ylabel("voxels (log)")
    ax.legend(fontsize=7, loc="upper right")
    fig.tight_layout()
    paths.append(folder / "threshold_histogram.png")
    _save(fig, paths[-1])

    dz, dy, dx = spacing_um
    nz, ny, nx = phases.shape
    cuts = [(nz // 2, slice(None), slice(None)), (slice(None), ny // 2, slice(None)),
            (slice(None), slice(None), nx // 2)]
    extents = [((0, nx * dx, ny * dy, 0), ("x (µm)", "y (µm)")),
               ((0, nx * dx, nz * dz, 0), ("x (µm)", "z (µm)")),
               ((0, ny * dy, nz * dz, 0), ("y (µm)", "z (µm)"))]
    fig = _figure(12, 4.2)
    for i, (axis, cut, (extent, labels)) in enumerate(zip("zyx", cuts, extents)):
        g = np.asarray(grey[cut])
        p = np.asarray(phases[cut])
        ax = fig.add_subplot(1, 3, i + 1)
        ax.imshow(g, cmap="gray", extent=extent, interpolation="nearest")
        ax.contour(p == 2, levels=[0.5], colors=[PHASE_COLOURS["solid"]], linewidths=0.5,
                   extent=extent, origin="upper")
        ax.contour(p > 0, levels=[0.5], colors=[PHASE_COLOURS["pore"]], linewidths=1.0,
                   extent=extent, origin="upper")
        ax.set_title(f"middle slice across {axis}", fontsize=9)
        ax.set_xlabel(labels[0])
        ax.set_ylabel(labels[1])
    fig.suptitle("solid outline (orange), envelope (blue)", fontsize=9)
    fig.tight_layout()
    paths.append(folder / "slices.png")
    _save(fig, paths[-1])
    return paths
