"""Segmentations that keep thin walls a global threshold loses, and a score for them.

A wall thinner than about 3 blur SDs never reaches the solid grey value after blur: a 1-voxel
wall under a Gaussian blur of SD 1 voxel peaks at only ~38 % of the gas-to-solid contrast, so a
midpoint threshold drops it (Verbeek & van Vliet 1994, IEEE PAMI 16:726 describe the blur's
shift of thresholded edges). Two remedies here:

* hysteresis: a low threshold keeps dim voxels connected to clearly solid ones. It helps when
  thin walls join thicker walls, junctions or the skin (the usual foam), and fails for isolated
  thin fragments.
* a local threshold that drops toward the gas level where a voxel's neighbourhood is mostly
  gas (thin walls in large cells), clipped between a floor (above the gas noise) and a ceiling
  (normally the global threshold, so it never removes solid the global threshold kept).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage as ndi

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["hysteresis_solid", "local_threshold_solid", "wall_recovery"]


def hysteresis_solid(grey, *, low, high, solid_is_bright: bool = True) -> np.ndarray:
    """Solid by hysteresis thresholding: voxels beyond ``low`` connected to voxels beyond ``high``.

    Uses ``skimage.filters.apply_hysteresis_threshold`` [1]_ (face connectivity: 6 in 3-D, as
    ``scipy.ndimage.label`` defaults). For dark solid the grey values are negated.
    Choose ``high`` = the global threshold and ``low`` between the gas peak and the expected
    peak of the thinnest wall (e.g. gas + 0.3 × contrast for 1-voxel walls at blur SD 1 voxel).

    Parameters
    ----------
    grey : array_like
        Grey values.
    low, high : float
        Thresholds; on the solid side of ``low`` and connected to a voxel on the solid side of
        ``high`` is solid. For dark solid ``low`` is the larger grey value.
    solid_is_bright : bool

    Returns
    -------
    ndarray of bool

    References
    ----------
    .. [1] Canny, J. (1986). A computational approach to edge detection. IEEE Trans. PAMI
       8(6):679-698. :doi:`10.1109/TPAMI.1986.4767851`
    """
    from skimage.filters import apply_hysteresis_threshold

    low, high = float(low), float(high)
    g = np.asarray(grey, dtype=np.float64)
    if not solid_is_bright:
        g, low, high = -g, -low, -high
    if not low <= high:
        raise InputError(f"hysteresis needs low on the gas side of high; got low={low:g}, "
                         f"high={high:g} (solid_is_bright={solid_is_bright})",
                         "swap low and high")
    return apply_hysteresis_threshold(g, low, high)


def local_threshold_solid(grey, *, window_um, spacing_um, offset: float = 0.0, floor=None,
                          ceiling=None, solid_is_bright: bool = True) -> np.ndarray:
    """Solid by a local-mean threshold over a box window given in µm, clipped to a band.

    ``t(x) = clip(mean_W(x) + offset, floor, ceiling)``; a voxel is solid when its grey value
    is beyond ``t(x)``. The local mean over the window W is the simplest local threshold (a box
    version of Niblack's local mean, with his ``k`` = 0 [1]_; ``offset`` plays Sauvola's role of
    a bias [2]_). The window is ``window_um`` along each axis, converted per axis to an odd
    number of voxels ``2 floor(w / 2s) + 1``, so anisotropic voxels get the same physical window
    (``scipy.ndimage.uniform_filter``, mode "reflect").

    Near a thin wall inside large cells the local mean is close to the gas grey, so the wall's
    dim voxels exceed it; inside a uniform region the local mean equals the region's grey and
    noise would split it at random, hence the clip: ``floor`` (default: none) should sit a few
    noise SDs above the gas grey, ``ceiling`` (default: none) at the global threshold so that
    every voxel the global threshold calls solid stays solid. Helps for walls thinner than the
    window in cells wider than it; the window should be narrower than a typical cell and a
    few times wider than the blur (common practice, no source).

    Parameters
    ----------
    grey : (nz, ny, nx) array_like
    window_um : float or 3 floats
        Window edge in µm (per axis).
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) in µm.
    offset : float
        Added to the local mean (grey values; towards solid when positive and solid bright).
    floor, ceiling : float, optional
        Clip of the local threshold, in grey values (for dark solid, floor is the larger).
    solid_is_bright : bool

    Returns
    -------
    ndarray of bool

    References
    ----------
    .. [1] Niblack, W. (1986). An Introduction to Digital Image Processing. Prentice Hall.
    .. [2] Sauvola, J. & Pietikäinen, M. (2000). Adaptive document image binarization. Pattern
       Recognit. 33(2):225-236. :doi:`10.1016/S0031-3203(99)00055-2`
    """
    spacing = as_spacing_um(spacing_um)
    window = as_spacing_um(window_um, name="window_um")
    g = np.asarray(grey, dtype=np.float64)
    if g.ndim != 3:
        raise InputError(f"grey must be 3-D (z, y, x); got shape {g.shape}", "pass a stack")
    sign = 1.0 if solid_is_bright else -1.0
    g = sign * g
    size = tuple(2 * int(math.floor(w / s / 2)) + 1 for w, s in zip(window, spacing))
    t = ndi.uniform_filter(g, size=size, mode="reflect") + sign * float(offset)
    lo = None if floor is None else sign * float(floor)
    hi = None if ceiling is None else sign * float(ceiling)
    if lo is not None and hi is not None and lo > hi:
        raise InputError(f"local threshold floor {floor:g} lies beyond ceiling {ceiling:g}",
                         "put floor on the gas side of ceiling")
    if lo is not None or hi is not None:
        t = np.clip(t, lo, hi)
    return g > t


def wall_recovery(truth_solid, segmented_solid, *, within=None) -> float:
    """Fraction of the true solid (wall) voxels that the segmentation calls solid (recall).

    Parameters
    ----------
    truth_solid, segmented_solid : array_like of bool, same shape
    within : array_like of bool, optional
        Count only true solid voxels here (e.g. the thin walls only).

    Returns
    -------
    float
        ``|truth ∩ segmented| / |truth|``; it does not penalise false solid (check that with
        the porosity or with ``wall_recovery(segmented, truth)``, the precision).
    """
    truth = np.asarray(truth_solid, dtype=bool)
    seg = np.asarray(segmented_solid, dtype=bool)
    if truth.shape != seg.shape:
        raise InputError(f"truth {truth.shape} and segmentation {seg.shape} shapes differ",
                         "compare masks of one stack")
    if within is not None:
        truth = truth & np.asarray(within, dtype=bool)
    n = int(np.count_nonzero(truth))
    if n == 0:
        raise InputError("there is no true wall voxel to recover", "check the truth mask")
    return float(np.count_nonzero(truth & seg) / n)
