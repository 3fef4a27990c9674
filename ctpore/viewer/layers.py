"""The layers of a result folder as napari layer-data tuples (pure: no napari, no Qt).

A layer-data tuple is ``(data, kwargs, layer_type)``: napari's readers return lists of them and
``viewer.add_<layer_type>(data, **kwargs)`` adds one. This module builds them from a folder
written by ``ctpore analyze`` (and the ``coarsen`` and ``compare`` commands):

grey stack
    The scanned stack (path from ``provenance.json``'s ``input`` or given), grey colour map.
phases
    Labels 0 exterior (transparent), 1 pore, 2 solid, colours from :mod:`.palette`.
envelope outline
    The piece's envelope, drawn as a contour.
pore and wall thickness
    ``pore_thickness.ome.tif`` and ``wall_thickness.ome.tif`` (µm), 0 outside the phase shown
    transparent, with colour bars.
coarse porosity
    Every ``coarse_*`` folder holding ``coarse_field.npz`` (from ``ctpore coarsen``), on its own
    grid.
scan − model
    Every ``compare_*/difference.csv`` (from ``ctpore compare``): scan porosity minus model
    porosity, on the model's grid when its points form one, else drawn on a grid from the
    scattered points.

Coordinates: voxel ``(i, j, k)`` has its centre at ``(i·dz, j·dy, k·dx)`` µm, the origin at the
centre of voxel (0, 0, 0), so every layer gets ``scale`` = its grid step and ``translate`` = the
position of its first point in µm; fields on other grids then overlay the scan exactly. Every
layer has the same units (µm) and axis labels (z, y, x), which napari needs to use them.

Display settings that napari cannot take as constructor arguments (colour bars, contour
thickness) travel in ``kwargs["metadata"]["ctpore"]``; :func:`ctpore.viewer.reader.apply_display`
applies them once a layer is in a viewer.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from . import palette

__all__ = [
    "UNITS", "AXIS_LABELS", "result_layers", "find_grey_stack", "grey_layer", "phase_layer",
    "envelope_layer", "thickness_layer", "coarse_field_layer", "difference_layer",
    "is_result_folder", "rasterise_points",
]

#: Unit of every layer (napari ignores units unless all layers share them).
UNITS = ("µm", "µm", "µm")
AXIS_LABELS = ("z", "y", "x")

_RESULT_FILES = ("summary.json", "phases.ome.tif", "recipe.toml")


def is_result_folder(path) -> bool:
    """True when ``path`` is a folder holding the files ``ctpore analyze`` always writes."""
    path = Path(path)
    return path.is_dir() and all((path / n).is_file() for n in _RESULT_FILES)


def _placement(spacing_um, origin_um=(0.0, 0.0, 0.0)) -> dict:
    return {"scale": tuple(float(s) for s in spacing_um),
            "translate": tuple(float(o) for o in origin_um),
            "units": UNITS, "axis_labels": AXIS_LABELS}


def _meta(kind: str, **extra) -> dict:
    return {"ctpore": {"kind": kind, **extra}}


def find_grey_stack(result_path, *, stack=None) -> tuple[Path | None, str | None]:
    """Where the grey stack of a result is, or why it was not found.

    Parameters
    ----------
    result_path : str or Path
        The result folder.
    stack : str or Path, optional
        A path given by the user; it wins over the recorded one.

    Returns
    -------
    path : Path or None
        The stack file or slice folder, when it exists.
    note : str or None
        Why no stack was found (None when one was).

    Notes
    -----
    The recorded path is ``provenance.json``'s ``input`` (``summary.json``'s when provenance is
    missing). A relative path is tried from the current folder, then from the result folder's
    parent and the result folder itself.
    """
    result_path = Path(result_path)
    if stack is not None:
        stack = Path(stack)
        if stack.exists():
            return stack, None
        return None, (f"grey stack {stack} (from --stack) does not exist; opening the result "
                      "without it")
    recorded = None
    for name in ("provenance.json", "summary.json"):
        f = result_path / name
        if f.is_file():
            try:
                recorded = json.loads(f.read_text(encoding="utf-8")).get("input")
            except (json.JSONDecodeError, UnicodeDecodeError):
                recorded = None
            if recorded:
                break
    if not recorded or str(recorded).startswith("<"):
        return None, (f"{result_path} records no grey stack file (the analysis ran on an "
                      "in-memory array); opening the result without it. Fix: give --stack PATH")
    recorded = Path(recorded)
    tries = [recorded] if recorded.is_absolute() else [
        Path.cwd() / recorded, result_path.parent / recorded, result_path / recorded]
    for p in tries:
        if p.exists():
            return p, None
    return None, (f"grey stack {recorded} recorded in {result_path / 'provenance.json'} was not "
                  "found; opening the result without it. Fix: give --stack PATH")


def _grey_limits(data, summary: dict | None) -> tuple[float, float]:
    """Display range: the gas and solid grey peaks of the analysis, widened by half the
    contrast; else the 0.5 and 99.5 percentiles of a strided sample."""
    t = (summary or {}).get("threshold") or {}
    gas, solid = t.get("gas_peak"), t.get("solid_peak")
    if gas is not None and solid is not None and math.isfinite(gas) and math.isfinite(solid) \
            and gas != solid:
        lo, hi = sorted((float(gas), float(solid)))
        pad = 0.5 * (hi - lo)
        return lo - pad, hi + pad
    nz = int(data.shape[0])
    step = max(1, nz // 16)
    sample = np.asarray(data[::step], dtype=np.float64)
    lo, hi = np.percentile(sample, [0.5, 99.5])
    if hi <= lo:
        hi = lo + 1.0
    return float(lo), float(hi)


def grey_layer(data, *, spacing_um, name="grey", summary=None, source=None,
               result=None) -> tuple:
    """Layer tuple of the grey stack (may be lazy: memmap or ctpore's LazyStack)."""
    kwargs = _placement(spacing_um)
    kwargs.update(name=name, colormap="gray", blending="translucent",
                  contrast_limits=_grey_limits(data, summary),
                  metadata=_meta("grey", source=None if source is None else str(source),
                                 result=None if result is None else str(result),
                                 spacing_um=[float(s) for s in spacing_um]))
    return (data, kwargs, "image")


def phase_layer(phases, *, spacing_um, result=None) -> tuple:
    """Layer tuple of the phase labels (0 exterior transparent, 1 pore, 2 solid)."""
    kwargs = _placement(spacing_um)
    kwargs.update(
        name="phases (exterior / pore / solid)", colormap=palette.phase_colormap(),
        opacity=0.5, blending="translucent",
        features={"index": [0, 1, 2], "phase": [palette.PHASE_NAMES[i] for i in (0, 1, 2)]},
        metadata=_meta("phases", result=None if result is None else str(result),
                       names=palette.PHASE_NAMES))
    return (np.asarray(phases), kwargs, "labels")


def envelope_layer(phases, *, spacing_um, contour_voxels: int = 2) -> tuple:
    """Layer tuple of the envelope (pore ∪ solid), shown as its outline, ``contour_voxels``
    wide in the displayed slice."""
    kwargs = _placement(spacing_um)
    kwargs.update(name="envelope outline", colormap=palette.outline_colormap(), opacity=1.0,
                  blending="translucent", metadata=_meta("envelope", contour=int(contour_voxels)))
    return ((np.asarray(phases) != 0).astype(np.uint8), kwargs, "labels")


def thickness_layer(thickness, *, spacing_um, phase: str, visible: bool = False) -> tuple:
    """Layer tuple of a local-thickness map in µm (0 outside the phase: transparent).

    ``phase`` is ``"pore"`` (cividis) or ``"wall"`` (Tol's YlOrBr).
    """
    if phase not in ("pore", "wall"):
        raise ValueError(f"phase must be 'pore' or 'wall'; got {phase!r}")
    top = float(np.nanmax(thickness)) if np.size(thickness) else 0.0
    if not (math.isfinite(top) and top > 0):
        top = 1.0
    kwargs = _placement(spacing_um)
    kwargs.update(
        name=f"{phase} thickness (µm)",
        colormap=palette.sequential_colormap("cividis" if phase == "pore" else "YlOrBr",
                                             transparent_zero=True),
        contrast_limits=(0.0, top), blending="translucent", visible=visible,
        metadata=_meta(f"{phase}_thickness", colorbar=True, unit="µm"))
    return (thickness, kwargs, "image")


def coarse_field_layer(folder) -> tuple | None:
    """Layer tuple of a coarse porosity field folder (``coarse_field.npz``), or None.

    A grid field becomes an image with the field's step as scale and its origin as translate;
    a field at scattered points is drawn on a grid first (:func:`rasterise_points`).
    """
    folder = Path(folder)
    f = folder / "coarse_field.npz"
    if not f.is_file():
        return None
    with np.load(f) as npz:
        porosity = np.asarray(npz["porosity"], dtype=np.float32)
        kernel = str(npz["kernel_name"]) if "kernel_name" in npz.files else ""
        grid = None if "points_um" in npz.files else (
            tuple(float(v) for v in npz["spacing_um"]), tuple(float(v) for v in npz["origin_um"]))
        points = np.asarray(npz["points_um"], float) if "points_um" in npz.files else None
    name = f"coarse porosity: {folder.name}"
    meta = _meta("coarse_porosity", colorbar=True, kernel=kernel, folder=str(folder))
    if grid is not None:
        kwargs = _placement(grid[0], grid[1])
        kwargs.update(name=name, colormap=palette.sequential_colormap("cividis"),
                      contrast_limits=(0.0, 1.0), blending="translucent", visible=False,
                      metadata=meta)
        return (porosity, kwargs, "image")
    ok = np.isfinite(porosity)
    if not ok.any():
        return None
    image, origin, step = rasterise_points(points[ok], porosity[ok])
    meta["ctpore"]["rasterised"] = True
    kwargs = _placement(step, origin)
    kwargs.update(name=name, colormap=palette.sequential_colormap("cividis"),
                  contrast_limits=(0.0, 1.0), blending="translucent", visible=False,
                  metadata=meta)
    return (image, kwargs, "image")


#: Largest grid a scattered field is drawn on (about 128³ points).
_MAX_RASTER_POINTS = 2_000_000


def rasterise_points(points, values, *, max_points: int = _MAX_RASTER_POINTS):
    """Draw values known at scattered points on a regular grid, for slicing in a viewer.

    The grid step is half the median nearest-neighbour distance ``h`` of the points (coarser if
    the grid would exceed ``max_points``); each grid point takes the value of its nearest
    point when that lies within ``0.5·√3·h`` (the reach ``ctpore compare`` gives a model point),
    else NaN (drawn transparent).

    Parameters
    ----------
    points : ndarray (n, 3)
        (z, y, x) positions in µm.
    values : ndarray (n,)
        Values at the points.

    Returns
    -------
    image : ndarray of float32
    origin_um : tuple of 3 floats
        Position of grid point (0, 0, 0) (the smallest z, y, x of the points).
    step_um : tuple of 3 floats
        Grid step (the same along every axis).
    """
    from scipy.spatial import cKDTree

    points = np.asarray(points, float).reshape(-1, 3)
    values = np.asarray(values, float).ravel()
    if len(points) == 0:
        raise ValueError("no points to draw")
    tree = cKDTree(points)
    if len(points) > 1:
        sample = points[:: max(1, len(points) // 5000)]
        d = tree.query(sample, k=2)[0][:, 1]
        d = d[d > 0]
        h = float(np.median(d)) if d.size else 1.0
    else:
        h = 1.0
    lo, hi = points.min(axis=0), points.max(axis=0)
    step = h / 2.0
    shape = np.floor((hi - lo) / step).astype(int) + 1
    if math.prod(int(n) for n in shape) > max_points:
        step *= (math.prod(int(n) for n in shape) / max_points) ** (1.0 / 3.0)
        shape = np.floor((hi - lo) / step).astype(int) + 1
    reach = 0.5 * math.sqrt(3.0) * h
    image = np.full(tuple(int(n) for n in shape), np.nan, np.float32)
    ys, xs = (lo[k] + np.arange(shape[k]) * step for k in (1, 2))
    yy, xx = np.meshgrid(ys, xs, indexing="ij")
    for i in range(int(shape[0])):  # one z slab at a time keeps the query's memory small
        q = np.column_stack([np.full(yy.size, lo[0] + i * step), yy.ravel(), xx.ravel()])
        dist, idx = tree.query(q, k=1, distance_upper_bound=reach)
        hit = np.isfinite(dist)
        plane = np.full(yy.size, np.nan, np.float32)
        plane[hit] = values[idx[hit]]
        image[i] = plane.reshape(yy.shape)
    return image, tuple(float(v) for v in lo), (float(step),) * 3


def _read_difference(path: Path) -> tuple[np.ndarray, np.ndarray]:
    """Points (n, 3) in µm and scan − model porosity from a compare difference.csv."""
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    if not rows:
        return np.zeros((0, 3)), np.zeros(0)
    cols = ("z_um", "y_um", "x_um") if "z_um" in rows[0] else (
        "axis_z_um", "axis_y_um", "axis_x_um")

    def num(text):
        return float(text) if text not in ("", None) else math.nan

    points = np.array([[num(r[c]) for c in cols] for r in rows], float)
    model = np.array([num(r["model_porosity"]) for r in rows], float)
    scan = np.array([num(r["scan_porosity"]) for r in rows], float)
    return points, scan - model


def _regular_grid(points: np.ndarray):
    """(origin, step, index array) when the points fill a regular axis-aligned grid once each,
    else None."""
    if len(points) < 8 or not np.isfinite(points).all():
        return None
    axes, steps = [], []
    for k in range(3):
        u = np.unique(np.round(points[:, k], 6))
        axes.append(u)
        if len(u) > 1:
            d = np.diff(u)
            if not np.allclose(d, d[0], rtol=1e-6, atol=1e-6):
                return None
            steps.append(float(d[0]))
        else:
            steps.append(None)
    if math.prod(len(a) for a in axes) != len(points):
        return None
    known = [s for s in steps if s is not None]
    if not known:
        return None
    steps = [s if s is not None else min(known) for s in steps]
    origin = [float(a[0]) for a in axes]
    index = np.rint((points - np.asarray(origin)) / np.asarray(steps)).astype(int)
    if len(np.unique(index, axis=0)) != len(points):
        return None
    return origin, steps, index, tuple(len(a) for a in axes)


def difference_layer(csv_path) -> tuple | None:
    """Layer tuple of ``scan − model`` porosity from a ``compare_*/difference.csv``, or None.

    ``ctpore compare`` writes ``difference = model − scan``; this layer shows the opposite sign,
    scan minus model, in Paul Tol's diverging BuRd with symmetric limits (red: the scan is more
    porous than the model). Points on a regular axis-aligned grid (a model on a grid compared
    without rotation) are shown on that grid; scattered points are drawn on a grid by
    :func:`rasterise_points`. Points where the scan has no valid value are transparent.
    """
    csv_path = Path(csv_path)
    if not csv_path.is_file():
        return None
    points, diff = _read_difference(csv_path)
    folder = csv_path.parent.name
    name = f"scan − model porosity: {folder}"
    ok = np.isfinite(diff) & np.isfinite(points).all(axis=1)
    m = float(np.nanmax(np.abs(diff[ok]))) if ok.any() else 0.0
    limits = (-m, m) if m > 0 else (-0.1, 0.1)
    meta = _meta("difference", colorbar=True, sign="scan - model", folder=str(csv_path.parent),
                 left_out=int(np.count_nonzero(~ok)))
    grid = _regular_grid(points)
    if grid is not None:
        origin, steps, index, shape = grid
        image = np.full(shape, np.nan, np.float32)
        image[tuple(index.T)] = diff
    elif ok.any():
        image, origin, steps = rasterise_points(points[ok], diff[ok])
        meta["ctpore"]["rasterised"] = True
    else:
        return None
    kwargs = _placement(steps, origin)
    kwargs.update(name=name, colormap=palette.diverging_colormap(), contrast_limits=limits,
                  blending="translucent", visible=False, metadata=meta)
    return (image, kwargs, "image")


def result_layers(result, *, stack=None) -> tuple[list[tuple], list[str]]:
    """All layers of a result folder, in drawing order (bottom first), and notes for the user.

    Parameters
    ----------
    result : str or Path
        A folder written by ``ctpore analyze``.
    stack : str or Path, optional
        The grey stack, when it is not where ``provenance.json`` says.

    Returns
    -------
    layers : list of (data, kwargs, layer_type)
        napari layer-data tuples: grey stack (when found), pore and wall thickness (when the
        structure measures ran), coarse porosity fields, scan − model differences, phases and
        envelope outline.
    notes : list of str
        What was left out and why (e.g. the grey stack was not found).

    Raises
    ------
    InputError
        If ``result`` is not a complete result folder.
    """
    from ..io.result_reader import open_result
    from ..io.stack_readers import read_stack

    res = open_result(result)
    path, spacing = res.path, res.spacing_um
    layers, notes = [], []
    grey_path, note = find_grey_stack(path, stack=stack)
    if note:
        notes.append(note)
    if grey_path is not None:
        scan = read_stack(grey_path, spacing_um=spacing)
        if tuple(scan.shape) != tuple(res.phases.shape):
            notes.append(f"grey stack {grey_path} has shape {tuple(scan.shape)}, the result "
                         f"{tuple(res.phases.shape)}; opening the result without it. Fix: give "
                         "the stack that was analysed with --stack PATH")
        else:
            layers.append(grey_layer(scan.data, spacing_um=spacing, summary=res.summary,
                                     name=f"grey: {grey_path.name}", source=grey_path,
                                     result=path))
    for phase in ("pore", "wall"):
        f = path / f"{phase}_thickness.ome.tif"
        if f.is_file():
            t = read_stack(f, spacing_um=spacing)
            layers.append(thickness_layer(t.data, spacing_um=spacing, phase=phase))
        else:
            notes.append(f"{f.name} is missing (structure measures off); no {phase} thickness "
                         "layer")
    for folder in sorted(p for p in path.glob("coarse_*") if p.is_dir()):
        layer = coarse_field_layer(folder)
        if layer is not None:
            layers.append(layer)
    for folder in sorted(p for p in path.glob("compare_*") if p.is_dir()):
        layer = difference_layer(folder / "difference.csv")
        if layer is not None:
            layers.append(layer)
            left = layer[1]["metadata"]["ctpore"]["left_out"]
            if left:
                notes.append(f"{folder.name}: {left} point(s) with no valid scan value are not "
                             "shown")
    layers.append(phase_layer(res.phases, spacing_um=spacing, result=path))
    layers.append(envelope_layer(res.phases, spacing_um=spacing))
    return layers, notes
