"""Individual cells of a piece: the pore phase split by a marker-based watershed (SNOW)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import edt
import numpy as np
from scipy import ndimage, spatial
from skimage.morphology import local_maxima
from skimage.segmentation import watershed

from ..errors import InputError
from ..segment.clean import label_sizes
from ..spacing import as_spacing_um
from .porosity import open_pore_mask

__all__ = ["CellTable", "cells", "cell_table_rows", "CELL_COLUMNS"]

EXTERIOR, PORE, SOLID = 0, 1, 2
_UM3_PER_MM3 = 1e9
# Face (6-) connectivity for the pore phase, as in ctpore.measure.porosity: cells never join
# across an edge or a corner, and the solid keeps the complementary 26-adjacency.
_FACES = ndimage.generate_binary_structure(3, 1)
_FULL = ndimage.generate_binary_structure(3, 3)

CELL_COLUMNS = ("label", "volume_um3", "diameter_um", "centroid_z_um", "centroid_y_um",
                "centroid_x_um", "open", "touches_border")


@dataclass(frozen=True, eq=False)
class CellTable:
    """Cells of a piece: a label volume, one entry per cell in each array, and a summary.

    Attributes
    ----------
    labels : ndarray of int32, shape (nz, ny, nx)
        Cell label of every pore voxel; 0 on solid, exterior and dropped small cells.
    label : ndarray of int32, shape (n,)
        Cell labels, 1..n in order.
    volume_um3 : ndarray of float, shape (n,)
        Cell volume (voxel count times voxel volume).
    diameter_um : ndarray of float, shape (n,)
        Equivalent-sphere diameter (6V/π)^(1/3).
    centroid_um : ndarray of float, shape (n, 3)
        Centroid (z, y, x) in µm, measured from the centre of voxel (0, 0, 0).
    open : ndarray of bool, shape (n,)
        True when the cell's pore space connects to the exterior (see
        :func:`ctpore.measure.porosity.open_pore_mask`).
    touches_border : ndarray of bool, shape (n,)
        True when the cell reaches a face of the image (the field of view cut it).
    summary : dict
        Statistics over the cells; see :func:`cells`.
    spacing_um : tuple of 3 floats
        Voxel size (dz, dy, dx) in µm.
    """

    labels: np.ndarray
    label: np.ndarray
    volume_um3: np.ndarray
    diameter_um: np.ndarray
    centroid_um: np.ndarray
    open: np.ndarray
    touches_border: np.ndarray
    summary: dict = field(default_factory=dict)
    spacing_um: tuple = (1.0, 1.0, 1.0)


def cells(phases, *, spacing_um, min_cell_volume_um3=0.0, sigma_vox=0.4,
          r_max_vox=4) -> CellTable:
    """Split the pore phase into cells and measure each one.

    The pore phase (label 1) is partitioned as in the SNOW algorithm (Gostick 2017):

    1. exact Euclidean distance map of the pore phase in µm, honouring anisotropic voxels;
       exterior and solid both count as "not pore", so distances run to the nearest wall or to
       the piece's outer surface (the image border does not count as a wall);
    2. light Gaussian smoothing of the map (standard deviation ``sigma_vox``);
    3. markers at the local maxima of the smoothed map within a ball of radius ``r_max_vox``;
       pore voxels whose ball reaches a non-pore voxel must beat it by two voxels, so no marker
       sits against a wall;
    4. markers that are not on a regional maximum of the unsmoothed map (they lie on a saddle or
       a ridge) are dropped;
    5. when a marker's nearest other marker lies within its distance-map value, the one of the
       pair nearer a wall (smaller value) is dropped; one pass;
    6. watershed of the negated distance map from the markers, within the pore phase and with
       face connectivity. A connected pore region left without a marker (a pore too small for
       one) becomes a cell of its own.

    ``sigma_vox`` and ``r_max_vox`` are in units of the finest voxel edge; with anisotropic
    voxels the smoothing kernel and the ball are round in physical space.

    Cells smaller than ``min_cell_volume_um3`` are **merged** into the neighbouring cell, among
    those of at least ``min_cell_volume_um3``, with which they share the most voxel faces;
    otherwise (an isolated small pore, or one touching only other small cells) they are
    **dropped**: set to 0 in ``labels`` and left out of the table and the statistics. This is
    done once, after the watershed.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    min_cell_volume_um3 : float
        Smallest cell kept, in µm³ (0 keeps every cell).
    sigma_vox : float
        Standard deviation of the Gaussian smoothing of the distance map, in finest-voxel units;
        0 skips the smoothing.
    r_max_vox : float
        Radius of the ball in which a marker must be the maximum, in finest-voxel units (>= 2).

    Returns
    -------
    CellTable
        ``summary`` holds ``cell_count``, ``cell_density_per_mm3`` (cells per mm³ of envelope,
        pore + solid voxels), ``cell_diameter_mean_um``, ``cell_diameter_sd_um`` (sample
        standard deviation, ddof = 1), ``cell_diameter_d10_um``, ``cell_diameter_d50_um``,
        ``cell_diameter_d90_um`` (number-weighted percentiles, linear interpolation),
        ``open_cell_count``, ``closed_cell_count``, ``border_cell_count`` and
        ``dropped_cell_count``. Statistics with no cell (or one cell for the standard deviation)
        are NaN. Cells cut by the image border count; filter on ``touches_border`` if needed.

    Raises
    ------
    ValueError
        If ``phases`` is not a 3-D integer array with values in {0, 1, 2}.
    InputError
        If ``spacing_um``, ``min_cell_volume_um3``, ``sigma_vox`` or ``r_max_vox`` is invalid.

    References
    ----------
    J. T. Gostick (2017), Versatile and efficient pore network extraction method using
    marker-based watershed segmentation, Phys. Rev. E 96:023307,
    doi:10.1103/PhysRevE.96.023307. S. Beucher & F. Meyer (1993), The morphological approach to
    segmentation: the watershed transformation, in Mathematical Morphology in Image Processing,
    Marcel Dekker, 433–481. ISO 4590 (open and closed cells).

    Examples
    --------
    >>> import numpy as np
    >>> phases = np.full((20, 20, 40), 2, dtype=np.uint8)
    >>> z, y, x = np.ogrid[:20, :20, :40]
    >>> phases[(z - 10) ** 2 + (y - 10) ** 2 + (x - 10) ** 2 < 36] = 1
    >>> phases[(z - 10) ** 2 + (y - 10) ** 2 + (x - 29) ** 2 < 36] = 1
    >>> table = cells(phases, spacing_um=10)
    >>> table.summary["cell_count"], table.summary["closed_cell_count"]
    (2, 2)
    """
    spacing = as_spacing_um(spacing_um)
    min_volume = _checked_number("min_cell_volume_um3", min_cell_volume_um3, minimum=0.0,
                                 fix="give a volume in µm³, 0 to keep every cell")
    sigma = _checked_number("sigma_vox", sigma_vox, minimum=0.0,
                            fix="use 0.4 (the SNOW default) or 0 for no smoothing")
    r_max = _checked_number("r_max_vox", r_max_vox, minimum=2.0,
                            fix="use 4 (the SNOW default); larger values give fewer cells")
    open_mask = open_pore_mask(phases)  # also checks phases
    phases = np.asarray(phases)
    pore = phases == PORE

    labels = _partition(pore, spacing, sigma, r_max)
    voxel_um3 = spacing[0] * spacing[1] * spacing[2]
    labels, dropped = _apply_min_volume(labels, min_volume / voxel_um3)
    n_envelope = int(np.count_nonzero(phases != EXTERIOR))
    return _table(labels, open_mask, spacing, n_envelope, dropped)


def cell_table_rows(table: CellTable) -> list[dict]:
    """One dict per cell with the columns of :data:`CELL_COLUMNS`, for a CSV file.

    Parameters
    ----------
    table : CellTable
        Result of :func:`cells`.

    Returns
    -------
    list of dict
        Keys ``label``, ``volume_um3``, ``diameter_um``, ``centroid_z_um``, ``centroid_y_um``,
        ``centroid_x_um``, ``open``, ``touches_border`` with plain Python values.
    """
    rows = []
    for i in range(table.label.size):
        cz, cy, cx = (float(v) for v in table.centroid_um[i])
        rows.append({
            "label": int(table.label[i]),
            "volume_um3": float(table.volume_um3[i]),
            "diameter_um": float(table.diameter_um[i]),
            "centroid_z_um": cz,
            "centroid_y_um": cy,
            "centroid_x_um": cx,
            "open": bool(table.open[i]),
            "touches_border": bool(table.touches_border[i]),
        })
    return rows


# --------------------------------------------------------------------------------------------
# Partition


def _partition(pore: np.ndarray, spacing, sigma: float, r_max: float) -> np.ndarray:
    """SNOW-style watershed labels (int32) of the pore voxels; 0 elsewhere."""
    labels = np.zeros(pore.shape, dtype=np.int32)
    if not pore.any():
        return labels
    if pore.all():  # no wall anywhere: the distance map is undefined, one cell
        labels[...] = 1
        return labels
    h_min = min(spacing)
    dist = edt.edt(pore, anisotropy=spacing, black_border=False, parallel=1)
    dist = dist.astype(np.float32, copy=False)
    if sigma > 0:
        smooth = ndimage.gaussian_filter(dist, sigma=[sigma * h_min / h for h in spacing])
        smooth *= pore
    else:
        smooth = dist
    peaks = _ball_maxima(smooth, pore, spacing, r_max, bump=2.0 * h_min)
    # Saddle/ridge trimming: keep peak voxels on a regional maximum (plateau with no higher
    # 26-neighbour) of the unsmoothed distance map.
    peaks &= local_maxima(dist, connectivity=3, allow_borders=True)
    markers, n = ndimage.label(peaks, structure=_FULL)
    if n > 1:
        markers = _trim_nearby(markers, n, dist, spacing)
    labels = watershed(-dist, markers, mask=pore, connectivity=1).astype(np.int32, copy=False)
    unmarked = pore & (labels == 0)
    if unmarked.any():
        extra, _ = ndimage.label(unmarked, structure=_FACES)
        start = int(labels.max())
        labels[unmarked] = extra[unmarked] + start
    return labels


def _ball_offsets(spacing, r_max: float) -> np.ndarray:
    """Voxel offsets (k, 3) inside the physical ball of radius ``r_max`` finest-voxel edges."""
    h_min = min(spacing)
    scale = [h / h_min for h in spacing]
    reach = [int(math.ceil(r_max / s)) for s in scale]
    grids = np.meshgrid(*[np.arange(-r, r + 1) for r in reach], indexing="ij")
    offsets = np.stack([g.ravel() for g in grids], axis=1)
    d2 = sum((offsets[:, a] * scale[a]) ** 2 for a in range(3))
    return offsets[d2 < r_max**2]


def _ball_maxima(smooth, pore, spacing, r_max, *, bump) -> np.ndarray:
    """Pore voxels where ``smooth`` is the maximum of ``smooth + bump·(not pore)`` in the ball.

    Equal to ``smooth == maximum_filter(smooth + bump*~pore, footprint=ball)`` on pore voxels
    (the image border ignored, as with scipy's mirror modes), computed in two stages: a
    separable maximum over the largest box of side 3 inside the ball, on the whole volume,
    then the remaining ball offsets on the few candidates that survive.
    """
    value = smooth + np.float32(bump) * ~pore
    offsets = _ball_offsets(spacing, r_max)
    box = _inner_box(offsets, spacing)
    top = value
    for axis in np.flatnonzero(box):
        top = _max3(top, axis)
    cand = pore & (smooth >= top)
    del top
    rest = offsets[(np.abs(offsets) > box).any(axis=1)]
    idx = np.flatnonzero(cand)
    if rest.size and idx.size:
        reach = np.abs(rest).max(axis=0)
        padded = np.pad(value, [(r, r) for r in reach], mode="constant",
                        constant_values=-np.inf)
        strides = np.array([padded.shape[1] * padded.shape[2], padded.shape[2], 1])
        pidx = (np.stack(np.unravel_index(idx, smooth.shape), axis=1) + reach) @ strides
        centre = smooth.ravel()[idx]
        flat = padded.ravel()
        for delta in rest @ strides:
            keep = flat[pidx + delta] <= centre
            if not keep.all():
                idx, pidx, centre = idx[keep], pidx[keep], centre[keep]
                if idx.size == 0:
                    break
    peaks = np.zeros(pore.shape, dtype=bool)
    peaks.ravel()[idx] = True
    return peaks


def _inner_box(offsets, spacing) -> np.ndarray:
    """Half-widths (0 or 1 per axis) of the largest box of side <= 3 inside the ball offsets.

    The ball is symmetric and shrinks with each |coordinate|, so a box lies inside it when its
    corner does; axes are dropped, coarsest voxel edge first, until the corner fits.
    """
    members = {tuple(o) for o in offsets.tolist()}
    box = np.array([int((1 if a == 0 else 0, 1 if a == 1 else 0, 1 if a == 2 else 0) in members)
                    for a in range(3)])
    for axis in np.argsort(spacing, kind="stable")[::-1]:
        if tuple(box.tolist()) in members:
            break
        box[axis] = 0
    return box


def _max3(a: np.ndarray, axis: int) -> np.ndarray:
    """Maximum over each voxel and its two neighbours along ``axis`` (border: inside only)."""
    out = a.copy()
    lo = [slice(None)] * a.ndim
    hi = [slice(None)] * a.ndim
    lo[axis], hi[axis] = slice(None, -1), slice(1, None)
    lo, hi = tuple(lo), tuple(hi)
    np.maximum(out[hi], a[lo], out=out[hi])
    np.maximum(out[lo], a[hi], out=out[lo])
    return out


def _trim_nearby(markers, n, dist, spacing) -> np.ndarray:
    """Drop the marker nearer a wall of each pair closer than their distance value (SNOW).

    Each marker's position is its centre of mass (in µm) and its distance value the largest
    distance-map value on it; a marker whose nearest other marker lies within its distance
    value loses to that neighbour if its own value is smaller (ties: the higher label loses).
    One pass, as in Gostick (2017).
    """
    flat = np.flatnonzero(markers)
    lab = markers.ravel()[flat]
    counts = np.bincount(lab, minlength=n + 1)[1:]
    centres = np.empty((n, 3))
    for axis, position in enumerate(np.unravel_index(flat, markers.shape)):
        total = np.bincount(lab, weights=position, minlength=n + 1)[1:]
        centres[:, axis] = total / counts * spacing[axis]
    value = np.zeros(n + 1)
    np.maximum.at(value, lab, dist.ravel()[flat])
    value = value[1:]
    gap, nearest = spatial.cKDTree(centres).query(centres, k=2)
    gap, nearest = gap[:, 1], nearest[:, 1]
    hit = np.flatnonzero(gap <= value)
    other = nearest[hit]
    self_loses = (value[hit] < value[other]) | ((value[hit] == value[other]) & (hit > other))
    drop = np.unique(np.where(self_loses, hit, other))
    keep = np.ones(n + 1, dtype=bool)
    keep[drop + 1] = False
    lut = np.where(keep, np.cumsum(keep) - 1, 0).astype(np.int32)
    return lut[markers]


# --------------------------------------------------------------------------------------------
# Small cells


def _apply_min_volume(labels: np.ndarray, min_voxels: float) -> tuple[np.ndarray, int]:
    """Merge or drop cells under ``min_voxels`` voxels; returns new labels 1..n and the drops."""
    counts = label_sizes(labels)
    if min_voxels <= 0 or counts.size <= 1:
        return labels, 0
    small = counts < min_voxels
    small[0] = False
    if not small.any():
        return labels, 0
    # Face contacts between a small cell and a large one, counted in both directions.
    pairs = []
    for axis in range(3):
        a = np.take(labels, np.arange(labels.shape[axis] - 1), axis=axis).ravel()
        b = np.take(labels, np.arange(1, labels.shape[axis]), axis=axis).ravel()
        m = (a != b) & (a > 0) & (b > 0) & (small[a] != small[b])
        a, b = a[m], b[m]
        s_first = small[a]
        pairs.append(np.stack([np.where(s_first, a, b), np.where(s_first, b, a)], axis=1))
    pairs = np.concatenate(pairs)
    lut = np.arange(counts.size, dtype=np.int64)
    lut[small] = 0
    if pairs.size:
        uniq, contact = np.unique(pairs, axis=0, return_counts=True)
        order = np.lexsort((uniq[:, 1], -contact, uniq[:, 0]))
        uniq = uniq[order]
        first = np.ones(len(uniq), dtype=bool)
        first[1:] = uniq[1:, 0] != uniq[:-1, 0]
        lut[uniq[first, 0]] = uniq[first, 1]
    dropped = int(np.count_nonzero(small & (lut == 0)))
    present = np.zeros(counts.size, dtype=bool)
    present[lut[lut > 0]] = True
    new = np.cumsum(present).astype(np.int32)
    new[0] = 0
    return new[lut][labels].astype(np.int32, copy=False), dropped


# --------------------------------------------------------------------------------------------
# Table


def _table(labels, open_mask, spacing, n_envelope: int, dropped: int) -> CellTable:
    """Per-cell measures and the summary from the final labels."""
    n = int(labels.max()) if labels.size else 0
    flat = np.flatnonzero(labels)
    lab = labels.ravel()[flat]
    counts = np.bincount(lab, minlength=n + 1)[1:]
    voxel_um3 = spacing[0] * spacing[1] * spacing[2]
    volume = counts * voxel_um3
    diameter = np.cbrt(6.0 * volume / math.pi)
    centroid = np.zeros((n, 3))
    strides = (labels.shape[1] * labels.shape[2], labels.shape[2], 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        for axis in range(3):
            coord = (flat // strides[axis]) % labels.shape[axis]
            total = np.bincount(lab, weights=coord, minlength=n + 1)[1:]
            centroid[:, axis] = total / counts * spacing[axis]
    is_open = np.bincount(lab, weights=open_mask.ravel()[flat], minlength=n + 1)[1:] > 0
    border = np.zeros(n + 1, dtype=bool)
    for axis in range(3):
        for index in (0, -1):
            border[np.take(labels, index, axis=axis)] = True
    border = border[1:]
    envelope_mm3 = n_envelope * voxel_um3 / _UM3_PER_MM3
    nan = math.nan
    summary = {
        "cell_count": n,
        "cell_density_per_mm3": n / envelope_mm3 if envelope_mm3 > 0 else nan,
        "cell_diameter_mean_um": float(diameter.mean()) if n else nan,
        "cell_diameter_sd_um": float(diameter.std(ddof=1)) if n > 1 else nan,
        "cell_diameter_d10_um": float(np.percentile(diameter, 10)) if n else nan,
        "cell_diameter_d50_um": float(np.percentile(diameter, 50)) if n else nan,
        "cell_diameter_d90_um": float(np.percentile(diameter, 90)) if n else nan,
        "open_cell_count": int(np.count_nonzero(is_open)),
        "closed_cell_count": int(n - np.count_nonzero(is_open)),
        "border_cell_count": int(np.count_nonzero(border)),
        "dropped_cell_count": dropped,
    }
    return CellTable(labels=labels, label=np.arange(1, n + 1, dtype=np.int32), volume_um3=volume,
                     diameter_um=diameter, centroid_um=centroid, open=is_open,
                     touches_border=border, summary=summary, spacing_um=tuple(spacing))


def _checked_number(name, value, *, minimum, fix) -> float:
    """``value`` as a finite float >= ``minimum``, or an InputError naming ``name``."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} {value!r} is not a number", fix) from None
    if not (math.isfinite(number) and number >= minimum):
        raise InputError(f"{name} must be finite and >= {minimum:g}; got {value!r}", fix)
    return number
