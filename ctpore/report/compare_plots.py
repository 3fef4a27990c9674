"""Figures of a scan-against-simulation comparison: maps, parity, difference, profiles.

* **maps** — the scan's kernel-averaged porosity, the model's porosity and their difference
  (model − scan) side by side on the same coordinates. For (r, z) models the r–z plane (z from
  the first tip along the scan's long axis, r from it), model values and the scan's ring
  averages at the model's points interpolated linearly over a Delaunay triangulation of the
  points (scipy's LinearNDInterpolator; blank outside their convex hull); for 3-D models the
  section through the scan's centroid spanned by its long and middle axes, the scan averaged
  with the kernel at every pixel and the model taken from its nearest point within half a
  cell diagonal.
* **parity** — model against scan at every compared point, with the line model = scan.
* **difference** — model − scan along the long axis, with the ±2σ band of the scan's sampling
  uncertainty.
* **profiles** — depth below the scan's envelope, distance from its long axis and position
  along it from the first tip: the scan's voxel profiles (:mod:`ctpore.profiles`, Delesse
  point counts), the kernel-averaged scan at the model's points and the model, in the same
  bins. Model points are weighted by the volume they stand for
  (:func:`ctpore.compare.timeseries.point_weights`); an (r, z) model is spread over its rings.

matplotlib is used through its object API (Agg canvas, no pyplot state); PNG files carry no
software or date metadata, so the same comparison gives the same bytes.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

__all__ = ["section_maps", "maps_figure", "parity_figure", "difference_figure",
           "profile_overlays", "profiles_figure", "save_png", "save_comparison_figures"]

_SCAN = "#0072B2"
_MODEL = "#D55E00"
_MAX_PIXELS = 160


def _figure(width_in, height_in):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100)


def save_png(fig, path) -> Path:
    """Save a figure as PNG without software or date metadata (same figure, same bytes)."""
    path = Path(path)
    fig.savefig(path, format="png", metadata={"Software": None})
    return path


def _median_step(points) -> float:
    from scipy.spatial import cKDTree

    p = np.asarray(points, float)
    if len(p) < 2:
        return 1.0
    nn = cKDTree(p).query(p[:: max(1, len(p) // 5000)], k=2)[0][:, 1]
    return float(np.median(nn[nn > 0])) if (nn > 0).any() else 1.0


def _axis(lo, hi, step):
    n = int(math.floor((hi - lo) / step + 1e-9)) + 1
    return lo + np.arange(n) * step


# --- maps -------------------------------------------------------------------------------------

def section_maps(out: dict, model, phases, *, spacing_um, kernel, min_coverage: float = 0.5,
                 max_pixels: int = _MAX_PIXELS) -> dict:
    """Scan and model porosity on one 2-D grid of the scan's frame (see module notes).

    Parameters
    ----------
    out : dict
        The result of :func:`ctpore.compare.command.compare_field`.
    model : ModelField
        The model that was compared.
    phases : ndarray (nz, ny, nx)
        The scan's labels.
    spacing_um : float or sequence of 3 floats
        The scan's voxel size.
    kernel : Kernel
        The kernel the scan was averaged with.
    min_coverage : float
        As in the comparison.
    max_pixels : int
        Largest number of pixels along either axis.

    Returns
    -------
    dict
        ``x_um`` (nx,), ``y_um`` (ny,) pixel centres; ``scan``, ``model``, ``difference``
        (ny, nx) with NaN where there is no value; ``xlabel``, ``ylabel``, ``kind``
        ("r-z plane" or "mid-plane section").
    """
    from scipy.spatial import cKDTree

    frame = out["frame"]
    a0 = float(frame.extents_um[0, 0])
    if model.axisymmetric:
        from scipy.interpolate import LinearNDInterpolator

        pts = np.column_stack([model.points_um[:, 0], out["axial_um"]])  # (r, axial)
        h = _median_step(pts)
        step = max(0.5 * h, float(np.ptp(pts, axis=0).max()) / (max_pixels - 1))
        xs = _axis(max(0.0, pts[:, 0].min()), pts[:, 0].max(), step)
        ys = _axis(pts[:, 1].min(), pts[:, 1].max(), step)
        gx, gy = np.meshgrid(xs, ys)
        values = np.column_stack([out["model"], out["scan"]])
        both = LinearNDInterpolator(pts, values)(gx, gy)  # NaN outside the points' hull
        m, s = both[..., 0], both[..., 1]
        labels = ("r, from the long axis (µm)", "z, from the first tip (µm)")
        kind = "r-z plane"
    else:
        from ..continuum.coarse import coarsen
        from ..spacing import as_spacing_um

        spacing = as_spacing_um(spacing_um)
        pts = np.asarray(out["points_scan_um"], float)
        h = _median_step(pts)
        ext = np.asarray(frame.extents_um)
        span = max(ext[0, 1] - ext[0, 0], ext[1, 1] - ext[1, 0])
        step = max(0.5 * h, min(spacing), span / (max_pixels - 1))
        xs = _axis(ext[0, 0] - h, ext[0, 1] + h, step)   # along the long axis
        ys = _axis(ext[1, 0] - h, ext[1, 1] + h, step)   # along the middle axis
        gx, gy = np.meshgrid(xs, ys)
        axes = np.asarray(frame.axes)
        plane = (np.asarray(frame.centroid_um)[None] + gx.reshape(-1, 1) * axes[0]
                 + gy.reshape(-1, 1) * axes[1])
        s = coarsen(phases, spacing_um=spacing, kernel=kernel, min_coverage=min_coverage,
                    grid=plane).porosity.astype(np.float64).reshape(gx.shape)
        d, idx = cKDTree(pts).query(plane, k=1,
                                    distance_upper_bound=0.5 * math.sqrt(3) * h * (1 + 1e-9))
        ok = np.isfinite(d)
        m = np.where(ok, out["model"][np.where(ok, idx, 0)], np.nan).reshape(gx.shape)
        xs = xs - a0
        labels = ("along the long axis, from the first tip (µm)",
                  "along the middle axis (µm)")
        kind = "mid-plane section"
    return {"x_um": xs, "y_um": ys, "scan": s, "model": m, "difference": m - s,
            "xlabel": labels[0], "ylabel": labels[1], "kind": kind}


def maps_figure(maps: dict, *, kernel_name: str = "", title: str = ""):
    """Scan | model | model − scan as three images on the same coordinates.

    The panels are laid out by hand (fixed margins in inches), which draws the figure once.
    """
    xs, ys = maps["x_um"], maps["y_um"]
    dx = xs[1] - xs[0] if len(xs) > 1 else 1.0
    dy = ys[1] - ys[0] if len(ys) > 1 else 1.0
    extent = (xs[0] - dx / 2, xs[-1] + dx / 2, ys[0] - dy / 2, ys[-1] + dy / 2)
    aspect_wh = (extent[1] - extent[0]) / max(extent[3] - extent[2], 1e-12)
    panel_h = 3.4
    panel_w = min(4.2, max(1.3, panel_h * aspect_wh))
    panel_h = min(panel_h, panel_w / aspect_wh) if aspect_wh > 0 else panel_h
    left, gap, bar, bar_gap, right, bottom, top = 0.8, 0.35, 0.15, 0.9, 0.75, 0.6, 0.6
    width = left + 3 * panel_w + 2 * gap + bar_gap + bar + right
    height = bottom + panel_h + top
    fig = _figure(width, height)

    def box(x0, w):
        return [x0 / width, bottom / height, w / width, panel_h / height]

    x = [left, left + panel_w + gap, left + 2 * panel_w + gap + bar_gap + gap]
    axs = [fig.add_axes(box(x[0], panel_w))]
    axs += [fig.add_axes(box(xx, panel_w), sharex=axs[0], sharey=axs[0]) for xx in x[1:]]
    diff = maps["difference"]
    lim = float(np.nanmax(np.abs(diff))) if np.isfinite(diff).any() else 0.1
    lim = max(lim, 0.01)
    images = []
    for ax, img, name, cmap, lo, hi in (
            (axs[0], maps["scan"], "scan", "viridis", 0.0, 1.0),
            (axs[1], maps["model"], "model", "viridis", 0.0, 1.0),
            (axs[2], diff, "model − scan", "RdBu_r", -lim, lim)):
        images.append(ax.imshow(np.ma.masked_invalid(img), origin="lower", extent=extent,
                                cmap=cmap, vmin=lo, vmax=hi, interpolation="nearest",
                                aspect="auto"))
        ax.set_title(name, fontsize=9)
        ax.set_xlabel(maps["xlabel"], fontsize=7)
        ax.tick_params(labelsize=7)
    for ax in axs[1:]:
        ax.tick_params(labelleft=False)
    axs[0].set_ylabel(maps["ylabel"], fontsize=7)
    cb1 = fig.add_axes(box(x[1] + panel_w + 0.12, bar))
    cb2 = fig.add_axes(box(x[2] + panel_w + 0.12, bar))
    fig.colorbar(images[0], cax=cb1).set_label("gas porosity", fontsize=7)
    fig.colorbar(images[2], cax=cb2).set_label("model − scan", fontsize=7)
    for cb in (cb1, cb2):
        cb.tick_params(labelsize=7)
    head = title or f"porosity, {maps['kind']}"
    fig.suptitle(f"{head}; scan kernel: {kernel_name}" if kernel_name else head, fontsize=9)
    return fig


# --- parity and difference --------------------------------------------------------------------

def parity_figure(model, scan, *, kernel_name: str = ""):
    """Model porosity against the scan's at every compared point (NaN scan values left out)."""
    m = np.asarray(model, float)
    s = np.asarray(scan, float)
    ok = np.isfinite(s) & np.isfinite(m)
    m, s = m[ok], s[ok]
    fig = _figure(4.5, 4.5)
    ax = fig.add_subplot()
    ax.scatter(s, m, s=3, alpha=0.5, linewidths=0, color=_MODEL)
    lo = float(min(m.min(), s.min())) if m.size else 0.0
    hi = float(max(m.max(), s.max())) if m.size else 1.0
    ax.plot([lo, hi], [lo, hi], "k-", lw=1, label="model = scan")
    ax.set_xlabel(f"scan porosity ({kernel_name})" if kernel_name else "scan porosity")
    ax.set_ylabel("model porosity")
    ax.legend(loc="upper left", fontsize=8)
    fig.tight_layout()
    return fig


def difference_figure(axial_um, difference, sigma=None):
    """Model − scan against the position along the long axis, with the ±2σ band."""
    d = np.asarray(difference, float)
    a = np.asarray(axial_um, float) / 1000.0
    ok = np.isfinite(d)
    fig = _figure(6, 3.5)
    ax = fig.add_subplot()
    ax.scatter(a[ok], d[ok], s=3, alpha=0.5, linewidths=0, color=_MODEL, label="model − scan")
    if sigma is not None:
        sg = np.asarray(sigma, float)[ok]
        order = np.argsort(a[ok], kind="stable")
        ax.fill_between(a[ok][order], -2 * sg[order], 2 * sg[order], color="0.8", alpha=0.5,
                        label="±2σ (scan sampling)")
    ax.axhline(0, color="k", lw=1)
    ax.set_xlabel("position along the long axis from the first tip (mm)")
    ax.set_ylabel("porosity difference")
    ax.legend(loc="upper right", fontsize=8)
    fig.tight_layout()
    return fig


# --- profiles ---------------------------------------------------------------------------------

def _samples(out, model):
    """3-D sample points in the scan frame, their weights, model and scan values."""
    from ..compare.align import ring_points
    from ..compare.timeseries import point_weights

    w = point_weights(model)
    if not model.axisymmetric:
        return (np.asarray(out["points_scan_um"], float), w, np.asarray(out["model"], float),
                np.asarray(out["scan"], float))
    note = out.get("alignment") or {}
    n_az = int(note.get("n_azimuths", 16))
    rings = ring_points(model.points_um, out["frame"], n_azimuths=n_az,
                        z_origin=note.get("z_origin", "first_tip"))
    rep = lambda v: np.repeat(np.asarray(v, float), n_az)  # noqa: E731
    return rings.reshape(-1, 3), rep(w) / n_az, rep(out["model"]), rep(out["scan"])


def _binned(coord, values, weights, bin_um, n_bins):
    ok = np.isfinite(values) & np.isfinite(coord)
    idx = np.full(coord.shape, -1, dtype=np.intp)
    idx[ok] = np.floor(coord[ok] / bin_um).astype(np.intp)
    ok &= (idx >= 0) & (idx < n_bins)
    num = np.bincount(idx[ok], weights=weights[ok] * values[ok], minlength=n_bins)
    den = np.bincount(idx[ok], weights=weights[ok], minlength=n_bins)
    return np.divide(num, den, out=np.full(n_bins, np.nan), where=den > 0)


def profile_overlays(out: dict, model, phases, *, spacing_um, bin_um: float | None = None
                     ) -> dict:
    """Depth, radial and axial profiles of the scan and of the model in the same bins.

    Parameters
    ----------
    out : dict
        The result of :func:`ctpore.compare.command.compare_field`.
    model : ModelField
    phases : ndarray (nz, ny, nx)
    spacing_um : float or sequence of 3 floats
    bin_um : float, optional
        Bin width; default the larger of the model's median point spacing and two voxels of
        the scan's coarsest axis.

    Returns
    -------
    dict
        ``"depth"``, ``"radial"``, ``"axial"``: each ``centre_um``, ``scan`` (voxel profile),
        ``scan_at_model`` (the kernel-averaged scan at the model's points), ``model``,
        ``xlabel``; and ``bin_um``. Model points outside the scan's envelope are left out of
        the depth profile.
    """
    import edt
    from scipy import ndimage

    from ..piece_frame import to_frame
    from ..profiles import profiles_for_result
    from ..recipe import ProfilesSection
    from ..spacing import as_spacing_um

    spacing = as_spacing_um(spacing_um)
    frame = out["frame"]
    pts, w, m, s = _samples(out, model)
    if bin_um is None:
        h = _median_step(model.points_um)
        bin_um = max(h, 2.0 * max(spacing))
    bin_um = float(bin_um)
    prof = profiles_for_result(phases, spacing_um=spacing, section=ProfilesSection(
        depth_bin_um=bin_um, radial_bin_um=bin_um, axial_bin_um=bin_um))
    a, r, _ = to_frame(frame, pts)
    axial = a - float(frame.extents_um[0, 0])
    env = np.pad(np.asarray(phases) != 0, 1, mode="constant", constant_values=False)
    dist = edt.edt(env, anisotropy=spacing, black_border=False, parallel=1)
    idx = (pts / np.asarray(spacing)).T + 1.0  # +1: the padding
    depth = ndimage.map_coordinates(dist, idx, order=1, mode="constant", cval=0.0) \
        - 0.5 * min(spacing)
    inside = ndimage.map_coordinates(env.astype(np.uint8), idx, order=0, mode="constant",
                                     cval=0) > 0
    depth = np.where(inside, np.maximum(depth, 0.0), np.nan)
    labels = {"depth": "depth below the scan's envelope surface (µm)",
              "radial": "distance from the long axis (µm)",
              "axial": "position along the long axis from the first tip (µm)"}
    result = {"bin_um": bin_um}
    for name, coord in (("depth", depth), ("radial", r), ("axial", axial)):
        table = prof[name]
        n = len(table["bin_centre_um"])
        result[name] = {"centre_um": np.asarray(table["bin_centre_um"], float),
                        "scan": np.asarray(table["porosity_gas"], float),
                        "scan_at_model": _binned(coord, s, w, bin_um, n),
                        "model": _binned(coord, m, w, bin_um, n), "xlabel": labels[name]}
    return result


def profiles_figure(overlays: dict, *, kernel_name: str = ""):
    """Three panels: depth, radial and axial profiles of scan and model."""
    fig = _figure(12, 3.8)
    axs = fig.subplots(1, 3, sharey=True)
    for ax, name in zip(axs, ("depth", "radial", "axial")):
        p = overlays[name]
        x = p["centre_um"]
        ax.plot(x, p["scan"], "-", color=_SCAN, lw=1.5, label="scan (voxels)")
        ax.plot(x, p["scan_at_model"], "--", color=_SCAN, lw=1.2,
                label=f"scan at model points ({kernel_name})" if kernel_name
                else "scan at model points")
        ax.plot(x, p["model"], "o-", color=_MODEL, ms=3, lw=1.2, label="model")
        ax.set_xlabel(p["xlabel"], fontsize=8)
        ax.set_ylim(0, 1)
        ax.grid(True, linewidth=0.3)
        ax.tick_params(labelsize=7)
    axs[0].set_ylabel("gas porosity")
    axs[0].legend(fontsize=7, loc="lower right")
    fig.suptitle(f"porosity profiles, bins of {overlays['bin_um']:.4g} µm", fontsize=10)
    fig.subplots_adjust(left=0.06, right=0.99, bottom=0.15, top=0.88, wspace=0.06)
    return fig


def save_comparison_figures(folder, out: dict, model, phases, *, spacing_um, kernel,
                            min_coverage: float = 0.5) -> list[Path]:
    """Write maps.png, parity.png, difference.png and profiles.png into ``folder``.

    Returns
    -------
    list of Path
        The files written.
    """
    folder = Path(folder)
    name = kernel.name
    maps = section_maps(out, model, phases, spacing_um=spacing_um, kernel=kernel,
                        min_coverage=min_coverage)
    overlays = profile_overlays(out, model, phases, spacing_um=spacing_um)
    return [
        save_png(maps_figure(maps, kernel_name=name), folder / "maps.png"),
        save_png(parity_figure(out["model"], out["scan"], kernel_name=name),
                 folder / "parity.png"),
        save_png(difference_figure(out["axial_um"], out["model"] - out["scan"], out["sigma"]),
                 folder / "difference.png"),
        save_png(profiles_figure(overlays, kernel_name=name), folder / "profiles.png"),
    ]
