"""Ring-artefact reduction on axial slices by filtering in polar coordinates.

A detector element that responds a little off gives, after reconstruction, a full or partial
circle about the rotation axis in every axial slice. In polar coordinates (radius, angle) about
the rotation centre such a ring is a line of constant radius, so it can be estimated as the
part of the radial high-pass signal that is the same at every angle and subtracted. This
follows the polar-coordinate approach of Sijbers & Postnov [1]_ in a simplified form (one ring
profile per slice, no homogeneity detection); a sinogram-domain alternative is Raven [2]_.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from ..errors import InputError

__all__ = ["reduce_rings"]

_TRIM = 0.1  # fraction trimmed from each end of the angular samples (common practice)


def reduce_rings(grey, *, centre=None, radial_window: int = 9, radial_step: float = 0.5,
                 significance: float = 3.0, z_window=1, min_radius=None,
                 axis: int = 0) -> np.ndarray:
    """Reduce ring artefacts in each axial slice.

    Per slice: (1) polar coordinates about ``centre``: every pixel is put in the annulus
    (radius bin of ``radial_step`` pixels) of its exact radius, so the image is a set of
    angular samples per radius without interpolation (which would smear 1-pixel rings);
    (2) at each radius take the 10 %-trimmed mean over all angles, ``m(rho)``: the sample's
    features vary with angle and average out, rings do not (a median is worse here: on a
    foam the values on a circle are bimodal and their median jumps between gas and solid);
    (3) the ring profile is the radial high-pass ``s = m - running_median(m)`` over
    ``radial_window`` pixels (a median keeps steps such as a round piece's outline, which a
    mean would turn into false rings), taken twice: the second pass replaces samples that
    stand out by more than 2 robust SDs with the first baseline, because on a sloping
    profile the rings inside the window pull the running median; only values above ``significance`` standard errors of
    ``m`` (and their neighbours) are kept, so noise and structure do not paint new rings.
    (A radial running-median high-pass taken before an angular median instead biases the ring
    toward zero: a running median returns one of its samples, so the residual has a point
    mass at 0 that pins the angular median.) (4) subtract ``s`` at each pixel's radius
    (``scipy.ndimage.map_coordinates`` of the 1-D profile, linear): only the correction is
    transformed back, the image itself is never resampled.

    Rings wider than about half of ``radial_window`` are not removed; sample structures that
    are themselves circles about the rotation centre (a concentric skin thinner than the
    window) would be taken for rings, so keep the piece off-centre or the window narrower than
    the skin is thick. Pixels are taken as square in the slice plane (reconstruction grids
    are), so no spacing is needed.

    Parameters
    ----------
    grey : (nz, ny, nx) array_like
        Grey values.
    centre : (float, float), optional
        Rotation centre (row, column) in pixels of the slice; default the slice centre
        ``((ny - 1) / 2, (nx - 1) / 2)``.
    radial_window : int
        Odd length in pixels of the radial running median (>= 3).
    radial_step : float
        Width in pixels of the annuli (radius bins) of the polar profile, in (0, 1].
    significance : float
        A radius is corrected only when its ring value exceeds this many standard errors of
        the angular median (or lies next to such a radius); 0 corrects every radius.
    z_window : int or None
        Number of neighbouring slices whose angular profiles are averaged before the
        ring is estimated (1 = each slice alone; None = the whole stack). A faulty detector
        column draws the same ring in consecutive slices, while the sample's structure
        changes, so pooling lowers the structure's noise in the estimate by about
        ``sqrt(z_window)``; use 1 when rings change from slice to slice.
    min_radius : float, optional
        Rings closer than this to the centre (pixels) are left alone: there an annulus holds
        a few pixels of one or two structures, which cannot be told from a ring. Default
        ``radial_window``.
    axis : int
        The rotation axis of the stack (slices are taken across it); default 0 (z).

    Returns
    -------
    ndarray of float32, the shape of ``grey``

    References
    ----------
    .. [1] Sijbers, J. & Postnov, A. (2004). Reduction of ring artefacts in high resolution
       micro-CT reconstructions. Phys. Med. Biol. 49(14):N247-N253.
       :doi:`10.1088/0031-9155/49/14/N06`
    .. [2] Raven, C. (1998). Numerical removal of ring artifacts in microtomography. Rev. Sci.
       Instrum. 69(8):2978-2980. :doi:`10.1063/1.1149043`
    """
    grey = np.asarray(grey)
    if grey.ndim != 3:
        raise InputError(f"grey must be 3-D; got shape {grey.shape}", "pass a stack")
    if axis not in (0, 1, 2):
        raise InputError(f"axis must be 0, 1 or 2; got {axis}", "0 for a z rotation axis")
    radial_window = int(radial_window)
    if radial_window < 3 or radial_window % 2 == 0:
        raise InputError(f"radial_window must be an odd integer >= 3; got {radial_window}",
                         "use e.g. 9")
    if not radial_step > 0 or radial_step > 1:
        raise InputError(f"radial_step must be in (0, 1] pixel; got {radial_step}", "use 0.5")
    stack = np.moveaxis(grey, axis, 0)  # a view; slices are converted one at a time
    ny, nx = stack.shape[1:]
    if centre is None:
        cy, cx = (ny - 1) / 2, (nx - 1) / 2
    else:
        try:
            cy, cx = (float(c) for c in centre)
        except (TypeError, ValueError):
            raise InputError(f"centre must be two numbers (row, column); got {centre!r}",
                             "give the rotation centre in pixels, e.g. (255.5, 255.5)") from None
    radius = np.hypot(*np.meshgrid(np.arange(ny) - cy, np.arange(nx) - cx,
                                   indexing="ij")).ravel()
    # Polar resampling by exact binning: each pixel goes to the annulus of its own radius
    # (width radial_step), so a 1-pixel ring is not smeared by interpolation.
    ring_bin = np.floor(radius / radial_step).astype(np.int64)
    counts = np.bincount(ring_bin)
    rho_bins = (np.arange(counts.size) + 0.5) * radial_step
    r_min = float(radial_window if min_radius is None else min_radius)
    window = max(3, 2 * int(round(radial_window / radial_step / 2)) + 1)
    nz = stack.shape[0]
    prof = np.zeros((nz, counts.size))
    var = np.zeros((nz, counts.size))
    for k, image in enumerate(stack):
        prof[k], se = _annulus_profile(np.asarray(image, dtype=np.float64), ring_bin, counts)
        var[k] = se ** 2
    w = nz if z_window is None else max(1, min(int(z_window), nz))
    if w > 1:  # pool the profiles of neighbouring slices
        prof = ndi.uniform_filter1d(prof, w, axis=0, mode="nearest")
        var = ndi.uniform_filter1d(var, w, axis=0, mode="nearest") / w
    out = np.empty(stack.shape, dtype=np.float32)
    for k, image in enumerate(stack):
        ring = _ring_from_profile(prof[k], np.sqrt(var[k]), window, significance)
        ring[rho_bins < r_min] = 0.0
        # Back to the slice: the ring value at each pixel's radius, linear in radius
        # (scipy.ndimage.map_coordinates on the 1-D profile).
        coord = (radius / radial_step - 0.5)[None, :]
        correction = ndi.map_coordinates(ring, coord, order=1, mode="nearest")
        out[k] = np.asarray(image, dtype=np.float64) - correction.reshape(ny, nx)
    return np.moveaxis(out, 0, axis)


def _annulus_profile(image, ring_bin, counts):
    """Trimmed mean of each annulus and its standard error (inf where < 8 pixels).

    A 10 %-per-side trimmed mean (as ``scipy.stats.trim_mean``: ``int(0.1 n)`` values cut
    from each end) rather than a median: a foam's grey values on a circle are bimodal (gas
    and solid), and the median of a bimodal sample jumps between the modes from one radius to
    the next, which the radial high-pass would take for rings. SE = SD of the kept values /
    sqrt(n) for n pixels in the annulus. Vectorised with one sort by (annulus, value) and
    cumulative sums.
    """
    values = image.ravel()
    order = np.lexsort((values, ring_bin))
    v = values[order]
    cs = np.concatenate(([0.0], np.cumsum(v)))
    cs2 = np.concatenate(([0.0], np.cumsum(v * v)))
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    cut = (_TRIM * counts).astype(np.int64)
    lo, hi = starts + cut, starts + counts - cut
    kept = np.maximum(hi - lo, 1)
    mean = (cs[hi] - cs[lo]) / kept
    var = np.maximum((cs2[hi] - cs2[lo]) / kept - mean ** 2, 0.0)
    ok = counts >= 8
    se = np.where(ok, np.sqrt(var) / np.sqrt(np.maximum(counts, 1)), np.inf)
    return np.where(ok, mean, 0.0), se


def _ring_from_profile(m, se, window, significance):
    """Radial high-pass of the angular profile, kept where significant.

    ``s = m - running_median(m, window)`` over the sampled radii (annuli with too few pixels
    are skipped and get 0); values below ``significance`` standard errors, and not next to a
    radius above it (ring flanks), are set to 0, so a ring-free slice is left almost
    untouched.
    """
    valid = np.flatnonzero(np.isfinite(se))
    ring = np.zeros(m.size)
    n = valid.size
    if n < 3:
        return ring
    size = min(window, n if n % 2 else n - 1)
    mv = m[valid]
    base = ndi.median_filter(mv, size=size, mode="nearest")
    # Second pass: on a sloping profile a running median is pulled by the rings in its
    # window, so samples that stand out (beyond 2 robust SDs of the residual) are replaced by
    # the first baseline and the running median is taken again.
    resid = mv - base
    scale = 1.4826 * np.median(np.abs(resid - np.median(resid)))
    if scale > 0:
        filled = np.where(np.abs(resid) > 2.0 * scale, base, mv)
        base = ndi.median_filter(filled, size=size, mode="nearest")
    ring[valid] = mv - base
    if significance <= 0:
        return ring
    strong = np.abs(ring) > significance * se
    keep = ndi.binary_dilation(strong, iterations=1)
    return np.where(keep, ring, 0.0)
