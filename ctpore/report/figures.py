"""Figures of a segmentation: grey histogram with the threshold band, orthogonal slices.

matplotlib's Agg backend is used through the object API (no pyplot state), and metadata that
would change between runs (software version, dates) is left out, so the same input gives the
same files.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["save_segmentation_figures", "save_structure_figures", "PHASE_COLOURS",
           "draw_segmentation_figures", "middle_slices"]

#: Phase overlay colours (pore, solid), chosen to stay distinct for the common colour-vision
#: deficiencies (blue / orange pair).
PHASE_COLOURS = {"pore": "#2c7bb6", "solid": "#fdae61", "envelope": "#111111"}


def _figure(width_in, height_in):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100)


def _save(fig, path: Path):
    path.parent.mkdir(parents=True, exist_ok=True)
    fig.savefig(path, metadata={"Software": None})


def _rebin(counts, centres, n_bins):
    """Sum a fine histogram into at most ``n_bins`` equal groups of bins, for display."""
    step = centres[1] - centres[0] if len(centres) > 1 else 1.0
    group = max(1, int(np.ceil(len(counts) / n_bins)))
    pad = (-len(counts)) % group
    grouped = np.pad(counts, (0, pad)).reshape(-1, group).sum(axis=1)
    edges = centres[0] - step / 2 + np.arange(len(grouped) + 1) * group * step
    return grouped, edges


def save_segmentation_figures(result, folder: Path) -> list[Path]:
    """Save threshold_histogram.png and slices.png for an AnalysisResult into ``folder``."""
    grey = np.asarray(result.scan.data)
    # the histogram is of the grey values the threshold was applied to
    return draw_segmentation_figures(result.histogram, result.summary["threshold"],
                                     middle_slices(grey, result.phases),
                                     spacing_um=result.scan.spacing_um, folder=folder)


def middle_slices(grey, phases) -> list[tuple[np.ndarray, np.ndarray]]:
    """The middle slices across z, y and x of ``grey`` and ``phases`` as (grey, phases) pairs.

    Only the three slices are read, so lazy arrays (zarr, dask, memory-mapped) work too.
    """
    nz, ny, nx = phases.shape
    cuts = [(nz // 2, slice(None), slice(None)), (slice(None), ny // 2, slice(None)),
            (slice(None), slice(None), nx // 2)]
    return [(np.asarray(grey[cut]), np.asarray(phases[cut])) for cut in cuts]


def draw_segmentation_figures(histogram, threshold: dict, slices, *, spacing_um,
                              folder) -> list[Path]:
    """Save threshold_histogram.png and slices.png into ``folder`` from reduced inputs.

    Parameters
    ----------
    histogram : (counts, centres)
        Fine grey-value histogram (rebinned to at most 256 bins for display).
    threshold : dict
        The summary's ``threshold`` entry (``value``, ``delta``, ``method``, ``porosity_low``,
        ``porosity_high``).
    slices : list of 3 (grey, phases) pairs
        The middle slices across z, y and x, as from :func:`middle_slices`.
    spacing_um : 3 floats
        Voxel size (dz, dy, dx) in µm, for the axes.
    folder : path
        Output folder.
    """
    folder = Path(folder)
    thr = threshold
    paths = []

    fig = _figure(6.4, 3.6)
    ax = fig.add_subplot()
    counts, centres = histogram
    counts, edges = _rebin(np.asarray(counts), np.asarray(centres, dtype=float), 256)
    ax.stairs(counts, edges, color="#555555", fill=True)
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
    (g_z, _), (g_y, _), _ = slices
    ny, nx = g_z.shape
    nz = g_y.shape[0]
    views = [("z", (0, nx * dx, ny * dy, 0), ("x (µm)", "y (µm)")),
             ("y", (0, nx * dx, nz * dz, 0), ("x (µm)", "z (µm)")),
             ("x", (0, ny * dy, nz * dz, 0), ("y (µm)", "z (µm)"))]
    fig = _figure(12, 4.2)
    for i, ((axis, extent, labels), (g, p)) in enumerate(zip(views, slices)):
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


def save_structure_figures(structure, folder: Path) -> list[Path]:
    """Save thickness_distributions.png: volume-weighted pore and wall thickness."""
    t = structure.thickness_table
    fig = _figure(6.4, 3.6)
    ax = fig.add_subplot()
    edges = np.append(t["bin_lower_um"], t["bin_upper_um"][-1:]) if len(t["bin_lower_um"]) \
        else np.array([0.0, 1.0])
    for key, label, colour in (("pore_volume_fraction", "pores (cell size)", PHASE_COLOURS["pore"]),
                               ("wall_volume_fraction", "walls", PHASE_COLOURS["solid"])):
        values = t[key] if len(t[key]) else np.zeros(1)
        ax.stairs(values, edges, label=label, color=colour, linewidth=1.5)
    s = structure.summary
    ax.set_title(f"local thickness: pores D50 {s['pore_thickness_d50_um']:.0f} µm, "
                 f"walls D50 {s['wall_thickness_d50_um']:.0f} µm", fontsize=9)
    ax.set_xlabel("local thickness (µm)")
    ax.set_ylabel("volume fraction per bin")
    ax.legend(fontsize=8)
    fig.tight_layout()
    path = Path(folder) / "thickness_distributions.png"
    _save(fig, path)
    return [path]
