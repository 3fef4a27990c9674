"""Agreement between a model and a scan: point metrics on porosity, shape metrics on masks.

Point metrics (on the model's points, the scan's kernel-averaged porosity there): root mean
square error, mean absolute error, bias (model − scan), Pearson's r, coverage (the share of
model points with a valid scan value) and the share of points whose difference lies within
``band_sigmas`` (default 2) standard deviations of the scan's sampling uncertainty.

Shape metrics (two boolean masks on one grid with voxel size ``spacing_um``): the Sørensen–Dice
overlap ``2|A∩B| / (|A| + |B|)`` (Dice 1945), the volume ratio |A|/|B|, and the Hausdorff and
mean surface distances between the masks' surfaces. A mask's surface is its voxels with a face
neighbour outside the mask (or on the image border); the distance of each surface voxel centre
of one mask to the nearest surface voxel centre of the other comes from an exact Euclidean
distance transform with the voxel size (Felzenszwalb & Huttenlocher 2012). The Hausdorff
distance is the larger of the two directed maxima (Huttenlocher et al. 1993); the mean surface
distance is the mean over the surface voxels of both masks (the symmetric average).

References
----------
Dice L. R. (1945). Measures of the amount of ecologic association between species. Ecology
26:297–302. https://doi.org/10.2307/1932409
Huttenlocher D. P., Klanderman G. A. & Rucklidge W. J. (1993). Comparing images using the
Hausdorff distance. IEEE TPAMI 15:850–863. https://doi.org/10.1109/34.232073
Felzenszwalb P. F. & Huttenlocher D. P. (2012). Distance transforms of sampled functions.
Theory Comput. 8:415–428. https://doi.org/10.4086/toc.2012.v008a019
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..spacing import as_spacing_um, voxel_volume_um3

__all__ = ["point_metrics", "dice", "volume_ratio", "surface_mask", "surface_distances",
           "shape_metrics"]


def point_metrics(model, scan, *, sigma=None, band_sigmas: float = 2.0) -> dict:
    """RMSE, MAE, bias, Pearson r, coverage and share within the uncertainty band.

    Parameters
    ----------
    model, scan : array-like (n,)
        Model porosity and scan porosity at the same points (scan NaN where not valid).
    sigma : array-like (n,), optional
        Standard deviation of the scan value (sampling uncertainty); NaN where unknown.
    band_sigmas : float
        Half-width of the band in units of ``sigma``.

    Returns
    -------
    dict
        ``rmse``, ``mae``, ``bias`` (mean of model − scan), ``pearson_r`` (NaN when either side
        is constant), ``coverage``, ``share_within_band`` (NaN without sigma), ``n_points``,
        ``n_valid``.

    Raises
    ------
    InputError
        If the arrays differ in length or no point has a valid scan value.
    """
    m = np.asarray(model, dtype=np.float64).reshape(-1)
    s = np.asarray(scan, dtype=np.float64).reshape(-1)
    if m.shape != s.shape:
        raise InputError(f"model ({m.size}) and scan ({s.size}) values differ in number",
                         "sample the scan at the model's points")
    ok = np.isfinite(s) & np.isfinite(m)
    n_valid = int(ok.sum())
    if n_valid == 0:
        raise InputError("no model point has a valid scan value: the model does not overlap "
                         "the piece", "check the length unit and the alignment")
    d = m[ok] - s[ok]
    if n_valid > 1 and np.ptp(m[ok]) > 0 and np.ptp(s[ok]) > 0:
        r = float(np.corrcoef(m[ok], s[ok])[0, 1])
    else:
        r = float("nan")
    share = float("nan")
    if sigma is not None:
        sg = np.asarray(sigma, dtype=np.float64).reshape(-1)[ok]
        known = np.isfinite(sg)
        if known.any():
            share = float(np.mean(np.abs(d[known]) <= band_sigmas * sg[known]))
    return {"rmse": float(np.sqrt(np.mean(d * d))), "mae": float(np.mean(np.abs(d))),
            "bias": float(np.mean(d)), "pearson_r": r, "coverage": n_valid / m.size,
            "share_within_band": share, "n_points": int(m.size), "n_valid": n_valid}


def _masks(a, b):
    a = np.asarray(a, dtype=bool)
    b = np.asarray(b, dtype=bool)
    if a.shape != b.shape:
        raise InputError(f"masks differ in shape: {a.shape} and {b.shape}",
                         "put both masks on the same grid")
    return a, b


def dice(a, b) -> float:
    """Sørensen–Dice overlap ``2|A∩B| / (|A| + |B|)`` of two boolean masks (NaN if both empty)."""
    a, b = _masks(a, b)
    total = int(a.sum()) + int(b.sum())
    return float("nan") if total == 0 else 2.0 * int(np.count_nonzero(a & b)) / total


def volume_ratio(a, b) -> float:
    """|A| / |B| (NaN if B is empty)."""
    a, b = _masks(a, b)
    nb = int(b.sum())
    return float("nan") if nb == 0 else int(a.sum()) / nb


def surface_mask(mask) -> np.ndarray:
    """Voxels of ``mask`` with a face neighbour outside it (the image border counts as outside)."""
    m = np.asarray(mask, dtype=bool)
    inner = ndimage.binary_erosion(m, structure=ndimage.generate_binary_structure(m.ndim, 1),
                                   border_value=0)
    return m & ~inner


def _distance_to(surface, spacing):
    import edt

    if not surface.any():
        return None
    return edt.edt(~surface, anisotropy=spacing, black_border=False, parallel=1)


def surface_distances(a, b, *, spacing_um) -> dict:
    """Hausdorff and mean surface distance (µm) between the surfaces of two masks.

    Parameters
    ----------
    a, b : ndarray of bool, shape (nz, ny, nx)
        Masks on the same grid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.

    Returns
    -------
    dict
        ``hausdorff_um``, ``hausdorff_a_to_b_um``, ``hausdorff_b_to_a_um``,
        ``mean_surface_distance_um`` (NaN when a mask is empty).
    """
    a, b = _masks(a, b)
    if a.ndim != 3:
        raise InputError(f"masks must be 3-D (z, y, x); got {a.ndim}-D", "pass 3-D masks")
    spacing = as_spacing_um(spacing_um)
    sa, sb = surface_mask(a), surface_mask(b)
    da, db = _distance_to(sa, spacing), _distance_to(sb, spacing)
    if da is None or db is None:
        nan = float("nan")
        return {"hausdorff_um": nan, "hausdorff_a_to_b_um": nan, "hausdorff_b_to_a_um": nan,
                "mean_surface_distance_um": nan}
    a_to_b = db[sa].astype(np.float64)
    b_to_a = da[sb].astype(np.float64)
    return {"hausdorff_um": float(max(a_to_b.max(), b_to_a.max())),
            "hausdorff_a_to_b_um": float(a_to_b.max()),
            "hausdorff_b_to_a_um": float(b_to_a.max()),
            "mean_surface_distance_um": float((a_to_b.sum() + b_to_a.sum())
                                              / (a_to_b.size + b_to_a.size))}


def shape_metrics(model_mask, scan_mask, *, spacing_um) -> dict:
    """Dice, volume ratio (model / scan), volumes and surface distances of two masks."""
    spacing = as_spacing_um(spacing_um)
    v = voxel_volume_um3(spacing) / 1e9
    out = {"dice": dice(model_mask, scan_mask),
           "volume_ratio": volume_ratio(model_mask, scan_mask),
           "model_volume_mm3": float(np.count_nonzero(model_mask)) * v,
           "scan_volume_mm3": float(np.count_nonzero(scan_mask)) * v}
    out.update(surface_distances(model_mask, scan_mask, spacing_um=spacing))
    return out
