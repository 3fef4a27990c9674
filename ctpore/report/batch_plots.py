"""Figures of a batch report: piece values per batch, thickness envelopes, individuals chart.

matplotlib is used through its object API (no pyplot state) with the Agg canvas; PNG files
carry no software or date metadata, so the same report gives the same bytes. Batch colours are
the Okabe–Ito set, distinct for the common colour-vision deficiencies (Okabe & Ito 2008, Color
Universal Design; from memory); the reference batch is drawn in black.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

__all__ = ["measures_figure", "control_chart_figure", "envelopes_figure", "save_batch_figures",
           "batch_colours"]

_PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442")
_REFERENCE_COLOUR = "#000000"
_SHORT = {"equivalent": "equivalent", "different": "different",
          "inconclusive (too few pieces)": "inconclusive", "no margin set": "no margin"}


def _figure(width_in, height_in):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100)


def _save(fig, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.partial")
    fig.savefig(tmp, format="png", metadata={"Software": None})
    tmp.replace(path)
    return path


def batch_colours(batches, reference) -> dict:
    """Colour per batch: black for the reference, the Okabe–Ito colours in turn for the rest."""
    out, k = {}, 0
    for b in batches:
        if b == reference:
            out[b] = _REFERENCE_COLOUR
        else:
            out[b] = _PALETTE[k % len(_PALETTE)]
            k += 1
    return out


def _float(v):
    try:
        return float(v) if v not in (None, "") else math.nan
    except (TypeError, ValueError):
        return math.nan


def _offsets(n, width=0.5):
    """Evenly spread horizontal offsets for n points (deterministic, no random jitter)."""
    if n <= 1:
        return np.zeros(n)
    return np.linspace(-width / 2, width / 2, n)


def measures_figure(report: dict):
    """Strip and box plot of the piece values of each measure, per batch.

    The reference mean is a black line and, where a margin is set, the band mean ± margin is
    shaded; tick labels carry each batch's verdict.
    """
    measures = report["measures"]
    batches = list(report["batches"])
    ref = report["reference"]
    colours = batch_colours(batches, ref)
    ncols = min(4, max(1, len(measures)))
    nrows = math.ceil(len(measures) / ncols)
    fig = _figure(3.2 * ncols, 3.0 * nrows + 0.4)
    for i, measure in enumerate(measures):
        ax = fig.add_subplot(nrows, ncols, i + 1)
        groups = []
        for j, batch in enumerate(batches):
            vals = np.array([_float(r.get(measure)) for r in report["pieces"]
                             if r["batch"] == batch])
            vals = vals[np.isfinite(vals)]
            groups.append(vals)
            if vals.size:
                ax.scatter(j + _offsets(vals.size), vals, s=14, color=colours[batch],
                           zorder=3, edgecolors="white", linewidths=0.4)
        filled = [j for j, g in enumerate(groups) if g.size >= 3]
        if filled:
            ax.boxplot([groups[j] for j in filled], positions=filled, widths=0.6,
                       showfliers=False, medianprops={"color": "#777777"},
                       boxprops={"color": "#999999"}, whiskerprops={"color": "#999999"},
                       capprops={"color": "#999999"}, manage_ticks=False)
        ref_vals = groups[0]
        margin = report["margins"].get(measure)
        if ref_vals.size:
            centre = float(ref_vals.mean())
            ax.axhline(centre, color=_REFERENCE_COLOUR, linewidth=0.8, zorder=1)
            if margin:
                ax.axhspan(centre - margin, centre + margin, color="#BBBBBB", alpha=0.35,
                           zorder=0, linewidth=0)
        labels = []
        for batch in batches:
            if batch == ref:
                labels.append(f"{batch}\n(reference)")
            else:
                v = report["verdicts"].get(batch, {}).get(measure, {}).get("verdict", "")
                labels.append(f"{batch}\n{_SHORT.get(v, v)}")
        ax.set_xticks(range(len(batches)))
        ax.set_xticklabels(labels, fontsize=7)
        ax.set_xlim(-0.6, len(batches) - 0.4)
        title = measure if not margin else f"{measure} (margin ±{margin:g})"
        ax.set_title(title, fontsize=8)
        ax.tick_params(axis="y", labelsize=7)
    fig.suptitle(f"piece values per batch; band: reference mean ± margin "
                 f"(reference: {ref})", fontsize=9)
    fig.tight_layout()
    return fig


def control_chart_figure(report: dict):
    """Individuals (I) chart of the control measure, limits from the reference batch."""
    chart = report.get("control_chart") or {}
    points = chart.get("points", [])
    batches = list(report["batches"])
    colours = batch_colours(batches, report["reference"])
    fig = _figure(max(6.4, 0.18 * len(points) + 2.5), 3.8)
    ax = fig.add_subplot()
    x = np.arange(len(points))
    y = np.array([p["value"] if p["value"] is not None else math.nan for p in points],
                 dtype=float)
    if len(points):
        ax.plot(x, y, color="#AAAAAA", linewidth=0.8, zorder=1)
    for batch in batches:
        idx = [i for i, p in enumerate(points) if p["batch"] == batch]
        if idx:
            ax.scatter(x[idx], y[idx], s=18, color=colours[batch], label=batch, zorder=3)
    out_idx = [i for i, p in enumerate(points) if p["outside"]]
    if out_idx:
        ax.scatter(x[out_idx], y[out_idx], s=80, facecolors="none", edgecolors="#D55E00",
                   linewidths=1.5, zorder=4, label="outside the limits")
    for key, style in (("centre", "-"), ("ucl", "--"), ("lcl", "--")):
        v = chart.get(key)
        if v is not None and math.isfinite(v):
            ax.axhline(v, color=_REFERENCE_COLOUR, linestyle=style, linewidth=0.9)
            ax.annotate(f"{key.upper() if key != 'centre' else 'centre'} {v:.4g}",
                        (1.0, v), xycoords=("axes fraction", "data"), fontsize=7,
                        ha="right", va="bottom")
    if len(points) <= 40:
        ax.set_xticks(x)
        ax.set_xticklabels([p["sample_id"] for p in points], rotation=90, fontsize=6)
    ax.set_xlabel("piece (in manifest order)")
    ax.set_ylabel(chart.get("measure", ""))
    ax.set_title("individuals (I) chart: limits = reference mean ± 3·MR̄/1.128", fontsize=9)
    if batches and points:
        ax.legend(fontsize=7, loc="best")
    fig.tight_layout()
    return fig


def envelopes_figure(report: dict):
    """Per-batch median and 10–90 % band of the per-piece cumulative thickness curves."""
    dist = report.get("distributions") or {}
    batches = list(report["batches"])
    colours = batch_colours(batches, report["reference"])
    fig = _figure(10, 3.8)
    for i, (phase, title) in enumerate((("pore", "pores (cell size)"), ("wall", "walls"))):
        ax = fig.add_subplot(1, 2, i + 1)
        env = dist.get(phase, {}).get("envelopes", {})
        grid = np.asarray(env.get("grid_um", []), dtype=float)
        for batch in batches:
            e = env.get("batches", {}).get(batch)
            if not e or not e["n"]:
                continue
            c = colours[batch]
            ax.fill_between(grid, e["low"], e["high"], color=c, alpha=0.2, linewidth=0)
            ax.plot(grid, e["median"], color=c, linewidth=1.5, label=f"{batch} (n={e['n']})")
        tops = [grid[np.flatnonzero(np.asarray(e["low"]) < 0.999)[-1]]
                for e in env.get("batches", {}).values()
                if e and e["n"] and np.any(np.asarray(e["low"]) < 0.999)]
        if tops and max(tops) > 0:
            ax.set_xlim(0, 1.1 * max(tops))  # leave out the flat tail above every curve
        ax.set_xlabel("local thickness (µm)")
        ax.set_ylabel("cumulative volume fraction")
        ax.set_ylim(0, 1)
        ax.set_title(f"{title}: median and 10–90 % of pieces", fontsize=9)
        if ax.lines:
            ax.legend(fontsize=7, loc="lower right")
    fig.tight_layout()
    return fig


def save_batch_figures(report: dict, folder) -> list[Path]:
    """Save batch_measures.png, batch_control_chart.png and (with distributions)
    batch_thickness_envelopes.png into ``folder``."""
    folder = Path(folder)
    paths = [_save(measures_figure(report), folder / "batch_measures.png")]
    if report.get("control_chart"):
        paths.append(_save(control_chart_figure(report), folder / "batch_control_chart.png"))
    if report.get("distributions"):
        paths.append(_save(envelopes_figure(report), folder / "batch_thickness_envelopes.png"))
    return paths
