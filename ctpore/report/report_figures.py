"""Figures made for the HTML report from what a result folder holds (no grey stack needed).

* :func:`porosity_estimates_figure`: the segmented porosity with its threshold band, the
  segmentation-uncertainty range and the partial-volume (threshold-free) porosity, side by side.
* :func:`cupping_figure`: the solid's median grey value against depth below the surface, before
  and after the beam-hardening correction, with :func:`contrast_trend` in the legend.
* :func:`thickness_cumulative_figure`: cumulative volume fraction of pore and wall local
  thickness, with the medians.
* :func:`field_slice_figure`: the middle z slice of a coarse porosity field.

Call each inside :func:`ctpore.report.svg_png.figure_style` and save with
:func:`ctpore.report.svg_png.figure_bytes` for reproducible files.
"""

from __future__ import annotations

import math

import numpy as np

from .svg_png import new_figure

__all__ = ["porosity_estimates_figure", "cupping_figure", "contrast_trend",
           "thickness_cumulative_figure", "field_slice_figure", "COLOURS"]

#: Colours shared with the other ctpore figures (blue / orange pair for pore / solid, distinct
#: for the common colour-vision deficiencies) and greys.
COLOURS = {"pore": "#2c7bb6", "solid": "#fdae61", "segmented": "#d7191c", "ensemble": "#555555",
           "partial_volume": "#2c7bb6", "before": "#d7191c", "after": "#2c7bb6",
           "trend": "#888888"}

#: Depth bins with fewer solid voxels are left out of the contrast trend, and so are bins less
#: than this many voxels deep (the skin mixes with the exterior air): the rule of
#: ctpore.segment.cupping's fit (common practice, no source).
MIN_BIN_VOXELS = 20
MIN_DEPTH_VOXELS = 2.0


def _num(value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return math.nan
    return v


def porosity_estimates_figure(summary: dict):
    """Interval chart of the porosity estimates of one result; None when there is only one.

    Rows: segmented porosity with the threshold band (re-runs at threshold ± delta, envelope
    fixed); the uncertainty ensemble's range (threshold ± delta × two envelope methods) when
    present; the partial-volume porosity ± 2 SD (linear mixing of the pure-phase grey values).
    """
    rows = []
    phi = _num(summary.get("porosity_gas"))
    thr = summary.get("threshold") or {}
    lo, hi = _num(thr.get("porosity_low")), _num(thr.get("porosity_high"))
    if math.isfinite(phi):
        rows.append(("segmented, threshold ± delta", phi, min(lo, hi), max(lo, hi),
                     COLOURS["segmented"]))
    unc = summary.get("uncertainty") or {}
    ulo, uhi = _num(unc.get("porosity_gas_min")), _num(unc.get("porosity_gas_max"))
    if math.isfinite(ulo) and math.isfinite(uhi):
        rows.append(("ensemble: threshold ± delta,\ntwo envelope methods", phi, ulo, uhi,
                     COLOURS["ensemble"]))
    pv = _num(summary.get("porosity_partial_volume"))
    sd = _num((summary.get("partial_volume") or {}).get("porosity_partial_volume_uncertainty"))
    if math.isfinite(pv):
        half = 2.0 * sd if math.isfinite(sd) else math.nan
        rows.append(("partial volume (mean grey), ± 2 SD", pv, pv - half, pv + half,
                     COLOURS["partial_volume"]))
    if len(rows) < 2:
        return None
    fig = new_figure(6.4, 0.7 * len(rows) + 1.3)
    ax = fig.add_subplot()
    for i, (label, centre, low, high, colour) in enumerate(rows):
        y = len(rows) - 1 - i
        if math.isfinite(low) and math.isfinite(high):
            ax.plot([low, high], [y, y], color=colour, linewidth=6, alpha=0.35,
                    solid_capstyle="butt")
        ax.plot([centre], [y], "o", color=colour, markersize=6)
        ax.annotate(f"{centre:.4f}", (centre, y), textcoords="offset points", xytext=(0, 7),
                    ha="center", fontsize=7)
    ax.set_yticks(range(len(rows)))
    ax.set_yticklabels([r[0] for r in rows][::-1], fontsize=8)
    ax.set_ylim(-0.7, len(rows) - 0.3)
    ax.set_xlabel("gas porosity (fraction of the envelope)")
    ax.grid(True, axis="x", linewidth=0.3)
    ax.set_title("porosity estimates and their ranges", fontsize=9)
    fig.tight_layout()
    return fig


def contrast_trend(profile: dict, *, gas_grey: float, reference_grey: float,
                   voxel_um: float) -> float:
    """Change of the solid's contrast over the depth range of a cupping profile, as a fraction.

    The contrast of depth bin k is ``c_k = (m_k − g_gas) / (g_ref − g_gas)`` with ``m_k`` the
    bin's median solid grey value. A straight line is fitted to ``c_k`` against depth by least
    squares with weights √(voxels) (as the cupping fit weights its bins), over bins with at
    least :data:`MIN_BIN_VOXELS` solid voxels that lie at least :data:`MIN_DEPTH_VOXELS`
    voxels deep. The result is the slope times the fitted depth span: −0.1 means the solid
    reads 10 % less bright (over gas) in the core than at the skin.

    Parameters
    ----------
    profile : dict
        ``depth_um``, ``solid_grey_median``, ``solid_voxels`` (as in summary.json's
        ``cupping.profile_before`` / ``profile_after``).
    gas_grey, reference_grey : float
        Grey value of gas, and of the solid at the shallowest fitted depth.
    voxel_um : float
        Largest voxel side in µm (sets the skin left out).

    Returns
    -------
    float
        NaN with fewer than two usable bins.
    """
    d = np.asarray(profile.get("depth_um", []), dtype=float)
    m = np.asarray([_num(v) for v in profile.get("solid_grey_median", [])], dtype=float)
    n = np.asarray(profile.get("solid_voxels", []), dtype=float)
    if not (d.size == m.size == n.size) or reference_grey == gas_grey:
        return math.nan
    use = np.isfinite(m) & (n >= MIN_BIN_VOXELS) & (d >= MIN_DEPTH_VOXELS * voxel_um)
    if np.count_nonzero(use) < 2 or np.ptp(d[use]) == 0:
        return math.nan
    c = (m[use] - gas_grey) / (reference_grey - gas_grey)
    slope = np.polyfit(d[use], c, 1, w=np.sqrt(n[use]))[0]
    return float(slope * np.ptp(d[use]))


def cupping_figure(cupping: dict, *, voxel_um: float):
    """Solid median grey against depth, before and after the cupping correction."""
    fig = new_figure(6.4, 3.8)
    ax = fig.add_subplot()
    gas, ref = _num(cupping.get("gas_grey")), _num(cupping.get("reference_grey"))
    for key, label in (("profile_before", "before correction"),
                       ("profile_after", "after correction")):
        prof = cupping.get(key)
        if not prof:
            continue
        d = np.asarray(prof["depth_um"], dtype=float)
        m = np.asarray([_num(v) for v in prof["solid_grey_median"]], dtype=float)
        change = contrast_trend(prof, gas_grey=gas, reference_grey=ref, voxel_um=voxel_um)
        text = f"{label} (trend {round(100 * change, 1) + 0.0:+.1f} % of contrast)" \
            if math.isfinite(change) else label
        colour = COLOURS["before" if key == "profile_before" else "after"]
        ax.plot(d, m, "o-", markersize=3, linewidth=1.2, color=colour, label=text)
    coef = cupping.get("trend_coefficients")
    before = cupping.get("profile_before") or {}
    if coef and before.get("depth_um"):
        d = np.asarray(before["depth_um"], dtype=float)
        n = np.asarray(before.get("solid_voxels", []), dtype=float)
        use = (n >= MIN_BIN_VOXELS) & (d >= MIN_DEPTH_VOXELS * voxel_um) if n.size == d.size \
            else np.ones(d.size, bool)
        if use.any():
            dd = np.linspace(d[use].min(), d[use].max(), 60)
            ax.plot(dd, np.polyval(coef, dd), "--", color=COLOURS["trend"], linewidth=1,
                    label="fitted trend")
    ax.set_xlabel("depth below the envelope surface (µm)")
    ax.set_ylabel("median grey value of the solid")
    ax.set_title("beam-hardening (cupping) check: solid grey value against depth", fontsize=9)
    ax.legend(fontsize=7, loc="best")
    ax.grid(True, linewidth=0.3)
    fig.tight_layout()
    return fig


def thickness_cumulative_figure(table: dict, summary: dict | None = None):
    """Cumulative volume fraction of pore and wall local thickness; None without bins.

    Parameters
    ----------
    table : dict of str to sequence
        Columns of thickness_distribution.csv: ``bin_lower_um``, ``bin_upper_um``,
        ``pore_volume_fraction``, ``wall_volume_fraction``.
    summary : dict, optional
        summary.json; its ``pore_thickness_d50_um`` / ``wall_thickness_d50_um`` are marked.
    """
    upper = np.asarray(table.get("bin_upper_um", []), dtype=float)
    lower = np.asarray(table.get("bin_lower_um", []), dtype=float)
    if upper.size == 0:
        return None
    summary = summary or {}
    fig = new_figure(6.4, 3.6)
    ax = fig.add_subplot()
    for phase, label in (("pore", "pores (cell size)"), ("wall", "walls")):
        frac = np.nan_to_num(np.asarray(table.get(f"{phase}_volume_fraction", []), float))
        if frac.size != upper.size or frac.sum() <= 0:
            continue
        cum = np.concatenate([[0.0], np.cumsum(frac) / frac.sum()])
        x = np.concatenate([[lower[0]], upper])
        colour = COLOURS["pore" if phase == "pore" else "solid"]
        d50 = _num(summary.get(f"{phase}_thickness_d50_um"))
        text = f"{label}, D50 {d50:.4g} µm" if math.isfinite(d50) else label
        ax.plot(x, cum, color=colour, linewidth=1.6, label=text)
        if math.isfinite(d50):
            ax.plot([d50, d50], [0, 0.5], color=colour, linewidth=0.8, linestyle=":")
    ax.axhline(0.5, color="#999999", linewidth=0.6, linestyle=":")
    ax.set_ylim(0, 1.02)
    ax.set_xlim(left=0)
    ax.set_xlabel("local thickness (µm)")
    ax.set_ylabel("cumulative volume fraction")
    ax.set_title("local thickness, cumulative by volume", fontsize=9)
    ax.legend(fontsize=8, loc="lower right")
    ax.grid(True, linewidth=0.3)
    fig.tight_layout()
    return fig


def field_slice_figure(porosity, *, spacing_um, origin_um=(0.0, 0.0, 0.0), title: str = ""):
    """The middle z slice of a coarse porosity field on a grid (y, x in µm); None if not 3-D."""
    por = np.asarray(porosity, dtype=float)
    if por.ndim != 3 or por.size == 0:
        return None
    dz, dy, dx = (float(v) for v in spacing_um)
    z0, y0, x0 = (float(v) for v in origin_um)
    k = por.shape[0] // 2
    ny, nx = por.shape[1:]
    extent = (x0 - dx / 2, x0 + (nx - 0.5) * dx, y0 + (ny - 0.5) * dy, y0 - dy / 2)
    fig = new_figure(5.4, 4.4)
    ax = fig.add_subplot()
    im = ax.imshow(np.ma.masked_invalid(por[k]), cmap="viridis", vmin=0.0, vmax=1.0,
                   extent=extent, interpolation="nearest")
    fig.colorbar(im, ax=ax, label="porosity")
    ax.set_xlabel("x (µm)")
    ax.set_ylabel("y (µm)")
    ax.set_title(f"{title}\nmiddle slice z = {z0 + k * dz:.5g} µm (blank: too little piece "
                 "in the kernel)", fontsize=8)
    fig.tight_layout()
    return fig
