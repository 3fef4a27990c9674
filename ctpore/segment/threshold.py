"""Grey-value histogram and the global threshold between gas (pores, air) and solid.

Convention: a voxel is solid when its grey value lies strictly on the solid side of the
threshold (``> value`` for the usual attenuation contrast, ``< value`` when the solid is dark);
a voxel exactly at the threshold counts as gas.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.ndimage import gaussian_filter1d
from scipy.signal import find_peaks

from ..errors import InputError
from ..recipe import ThresholdSection

__all__ = ["ThresholdChoice", "grey_histogram", "threshold_value", "solid_mask", "FLOAT_BINS"]

FLOAT_BINS = 4096
"""Number of equal-width bins between the smallest and largest grey value for float data (and
for integer data spanning more than 65536 grey values)."""

_EXACT_SPAN = 1 << 16  # integer data with at most this many grey values gets one bin per value
_SLAB_VOXELS = 1 << 22  # the histogram is accumulated slab by slab to bound memory
# Multi-level Otsu searches every combination of classes-1 bins (cost ~ bins**(classes-1)):
# the histogram is merged down to these sizes to keep the search under about a second.
_MULTIOTSU_MAX_BINS = {2: 1024, 3: 1024, 4: 256, 5: 128}
_SMOOTH_FRACTION = 1 / 256  # Gaussian smoothing of the histogram: sigma = bins / 256 (>= 1 bin)
_PEAK_PROMINENCE = 0.05  # a histogram peak must rise 5 % of the highest peak above its dips
_PEAK_SEPARATION = 0.05  # and lie at least 5 % of the grey range from a higher peak


@dataclass(frozen=True)
class ThresholdChoice:
    """The threshold picked for a stack, with the histogram facts used later.

    Attributes
    ----------
    method : str
        The method that gave the value (a ``ThresholdSection.method``).
    value : float
        Grey-value threshold; solid is strictly on the solid side (see :func:`solid_mask`).
    gas_peak, solid_peak : float
        Modes of the smoothed grey-value histogram on the gas and on the solid side of the
        threshold (NaN when a side holds no voxel). For ``peak_midpoint`` the two peaks found.
    delta : float
        Grey-value step for the porosity sensitivity band ``value ± delta``.
    details : dict
        JSON-friendly facts: grey range, voxel count, bin count, method-specific values.
    """

    method: str
    value: float
    gas_peak: float
    solid_peak: float
    delta: float
    details: dict = field(default_factory=dict)


def grey_histogram(volume, *, mask=None, bins: int | None = None):
    """Grey-value histogram of a stack, optionally inside a mask.

    With ``bins=None``: integer data spanning at most 65536 grey values (all 8- and 16-bit
    stacks) gets one bin per integer value from the smallest to the largest value present, as
    ``np.bincount`` of the values offset by the minimum, so that thresholds computed on it equal
    scikit-image's on the raw values. Other data (float, wide integers) gets ``FLOAT_BINS`` =
    4096 equal-width bins over ``[min, max]`` computed like ``np.histogram`` (and like
    ``skimage.exposure.histogram``). An integer ``bins`` forces that many equal-width bins.

    The histogram is accumulated slab by slab along the first axis, so memory maps and other
    lazily read arrays are never loaded whole.

    Parameters
    ----------
    volume : array_like
        Grey values (any number of dimensions >= 1).
    mask : array_like of bool, optional
        Same shape as ``volume``; only voxels where it is True are counted.
    bins : int, optional
        Number of equal-width bins, overriding the default rule.

    Returns
    -------
    counts : 1-D ndarray of int64
    bin_centres : 1-D ndarray
        The grey value of each bin: int64 for one bin per integer value, otherwise in the
        float dtype the values are binned in (float32 for float32 and <=16-bit data, else
        float64), exactly as ``skimage.exposure.histogram`` gives them.

    Raises
    ------
    InputError
        If the stack or mask is empty, the mask's shape differs, or values are NaN/infinite.
    """
    volume, mask = _as_inputs(volume, mask)
    counts, centres, _ = _histogram(volume, mask, bins)
    return counts, centres


def threshold_value(volume, *, section: ThresholdSection, mask=None,
                    values_in_memory: bool = True) -> ThresholdChoice:
    """Choose the grey-value threshold between gas and solid.

    Methods (``section.method``); the scikit-image implementations are used throughout:

    ``"otsu"``
        Maximum between-class variance [1]_ (``skimage.filters.threshold_otsu`` on the
        histogram of :func:`grey_histogram`).
    ``"isodata"``
        Iterative intermeans [2]_ (``threshold_isodata`` on the histogram).
    ``"li"``
        Minimum cross-entropy [3]_. On integer stacks (one bin per grey value) from the
        histogram, with the operations of ``threshold_li``'s integer branch, so the value is
        scikit-image's to the last bit (tested); on float stacks ``threshold_li`` on the grey
        values themselves (it takes no float histogram).
    ``"triangle"``
        Triangle method [4]_, from the histogram of :func:`grey_histogram` with the operations
        of ``threshold_triangle`` (which bins the values the same way), equal to it (tested).
    ``"multiotsu"``
        Multi-level Otsu [5]_ with ``section.classes`` classes (``threshold_multiotsu`` on the
        histogram, merged to at most 1024 bins for 2-3 classes, 256 for 4 and 128 for 5 to bound
        the exhaustive search); the value is ``thresholds[section.boundary - 1]``.
    ``"peak_midpoint"``
        Midpoint between the two main histogram peaks (gas and solid), the "50 % rule" of CT
        dimensional metrology (common practice, no single source). The histogram is smoothed
        with a Gaussian of ``bins/256`` bins (at least one); peaks must have a prominence of 5 %
        of the highest and lie 5 % of the grey range apart (``scipy.signal.find_peaks``); the
        two highest are used. Peaks at the ends of the grey range (clipped air) count.
    ``"manual"``
        ``section.value``, which must lie within the stack's grey range.

    ``gas_peak`` and ``solid_peak`` are the modes of the same smoothed histogram on either side
    of the threshold; ``delta`` is ``section.sensitivity_delta`` when > 0, otherwise
    ``section.sensitivity_fraction * |solid_peak - gas_peak|``. The survey by Sezgin & Sankur
    [6]_ compares these methods.

    Parameters
    ----------
    volume : array_like
        Grey values.
    section : ThresholdSection
        The recipe's ``[threshold]`` section.
    mask : array_like of bool, optional
        Only voxels where it is True enter the histogram (e.g. the inside of the sample holder).
    values_in_memory : bool
        False when ``volume`` must only be streamed (the chunked path): the one method that
        needs every grey value at once (``li`` on float stacks) then raises InputError.

    Returns
    -------
    ThresholdChoice

    Raises
    ------
    InputError
        Empty stack or mask, NaN or infinite values, a stack with a single grey value, a
        histogram with fewer than two peaks (``peak_midpoint``), too few grey values for the
        classes (``multiotsu``), or a manual value outside the grey range.

    References
    ----------
    .. [1] Otsu, N. (1979). A threshold selection method from gray-level histograms. IEEE Trans.
       Syst. Man Cybern. SMC-9(1):62-66. :doi:`10.1109/TSMC.1979.4310076`
    .. [2] Ridler, T. W. & Calvard, S. (1978). Picture thresholding using an iterative selection
       method. IEEE Trans. Syst. Man Cybern. SMC-8(8):630-632. :doi:`10.1109/TSMC.1978.4310039`
    .. [3] Li, C. H. & Tam, P. K. S. (1998). An iterative algorithm for minimum cross entropy
       thresholding. Pattern Recognit. Lett. 19(8):771-776.
       :doi:`10.1016/S0167-8655(98)00057-9`
    .. [4] Zack, G. W., Rogers, W. E. & Latt, S. A. (1977). Automatic measurement of sister
       chromatid exchange frequency. J. Histochem. Cytochem. 25(7):741-753.
       :doi:`10.1177/25.7.70454`
    .. [5] Liao, P.-S., Chen, T.-S. & Chung, P.-C. (2001). A fast algorithm for multilevel
       thresholding. J. Inf. Sci. Eng. 17(5):713-727.
    .. [6] Sezgin, M. & Sankur, B. (2004). Survey over image thresholding techniques and
       quantitative performance evaluation. J. Electron. Imaging 13(1):146-165.
       :doi:`10.1117/1.1631315`
    """
    from skimage import filters

    section.check()
    volume, mask = _as_inputs(volume, mask)
    counts, centres, info = _histogram(volume, mask, None)
    vmin, vmax = info["grey_min"], info["grey_max"]
    where = " inside the mask" if mask is not None else ""
    if vmin == vmax:
        raise InputError(
            f"the grey-value stack{where} has one grey value only ({vmin:g}), so no threshold "
            "between gas and solid is defined",
            "check that the right file was read and that the scan shows contrast between "
            "solid and air")
    smooth, sigma_bins = _smoothed(counts)
    details = dict(info, histogram_bins=int(counts.size), smoothing_sigma_bins=float(sigma_bins),
                   solid_is_bright=bool(section.solid_is_bright))
    method = section.method
    peaks = None
    if method == "otsu":
        value = filters.threshold_otsu(hist=(counts, centres))
    elif method == "isodata":
        value = filters.threshold_isodata(hist=(counts, centres))
    elif method == "li" and info["exact_integer_bins"]:
        value = _li_integer_histogram(counts, centres)
    elif method == "li":
        if not values_in_memory:
            raise InputError(
                "threshold.method = 'li' on a float stack (or one with more than 65536 integer "
                "grey values) needs every grey value in memory at once, which the chunked "
                "(--memory) path does not do",
                "use another [threshold] method, or run in memory (without --memory)")
        value = filters.threshold_li(_values(volume, mask, False))
    elif method == "triangle":
        value = _triangle_histogram(counts, centres)
    elif method == "multiotsu":
        value = _multiotsu(counts, centres, section, details)
    elif method == "peak_midpoint":
        peaks = _two_peaks(smooth, centres, where)
        value = 0.5 * (peaks[0] + peaks[1])
        details["peaks"] = [float(p) for p in peaks]
    else:  # manual
        value = float(section.value)
        if not vmin <= value <= vmax:
            raise InputError(
                f"threshold.value = {value:g} lies outside the stack's grey range{where} "
                f"[{vmin:g}, {vmax:g}]",
                "choose a grey value between the gas and solid peaks")
    value = float(value)
    if peaks is not None:
        dark, bright = peaks
    else:
        dark, bright = _side_modes(smooth, centres, value, section.solid_is_bright)
    gas_peak, solid_peak = (dark, bright) if section.solid_is_bright else (bright, dark)
    if section.sensitivity_delta > 0:
        delta = float(section.sensitivity_delta)
    else:
        delta = float(section.sensitivity_fraction * abs(solid_peak - gas_peak))
    return ThresholdChoice(method=method, value=value, gas_peak=float(gas_peak),
                           solid_peak=float(solid_peak), delta=delta, details=details)


def solid_mask(volume, value: float, *, solid_is_bright: bool = True) -> np.ndarray:
    """Voxels on the solid side of a grey-value threshold.

    Strict inequality: ``volume > value`` when the solid is bright, ``volume < value`` when it is
    dark; a voxel exactly at the threshold is gas in both cases (scikit-image's convention for
    bright foreground).

    Parameters
    ----------
    volume : array_like
        Grey values.
    value : float
        Threshold, e.g. ``ThresholdChoice.value``.
    solid_is_bright : bool
        True for the usual attenuation contrast.

    Returns
    -------
    solid : ndarray of bool, same shape as ``volume``
    """
    value = float(value)
    if math.isnan(value):
        raise InputError("the threshold value is NaN", "give a finite grey value")
    volume = np.asarray(volume)
    return volume > value if solid_is_bright else volume < value


# --- helpers -----------------------------------------------------------------------------------

def _as_inputs(volume, mask):
    if not (hasattr(volume, "shape") and hasattr(volume, "dtype")):
        volume = np.asarray(volume)
    if volume.dtype.kind not in "biuf":
        raise InputError(f"the grey-value stack has non-numeric dtype {volume.dtype}",
                         "read the stack as integer or floating-point grey values")
    if len(volume.shape) == 0 or math.prod(volume.shape) == 0:
        raise InputError(f"the grey-value stack is empty (shape {tuple(volume.shape)})",
                         "check the file or the crop that produced it")
    if mask is not None:
        if not (hasattr(mask, "shape") and hasattr(mask, "dtype")):
            mask = np.asarray(mask)
        if tuple(mask.shape) != tuple(volume.shape):
            raise InputError(f"the mask's shape {tuple(mask.shape)} differs from the stack's "
                             f"{tuple(volume.shape)}", "give a mask of the stack's shape")
    return volume, mask


def _slabs(volume, mask):
    """The grey values of successive slabs along the first axis (inside the mask), 1-D."""
    per_slab = max(1, math.prod(volume.shape[1:]))
    step = max(1, _SLAB_VOXELS // per_slab)
    for start in range(0, volume.shape[0], step):
        block = np.asarray(volume[start:start + step])
        if block.dtype == np.bool_:
            block = block.view(np.uint8)
        if mask is None:
            yield block.ravel()
        else:
            yield block[np.asarray(mask[start:start + step], dtype=bool)]


def _float_values(values):
    if values.dtype.kind == "f" and values.dtype.itemsize >= 4:
        return values
    return values.astype(np.float32 if values.dtype.itemsize <= 2 else np.float64)


def _histogram(volume, mask, bins):
    """Counts, bin centres and range facts; raises on empty/non-finite input."""
    vmin = vmax = None
    n = 0
    for values in _slabs(volume, mask):
        if values.size == 0:
            continue
        lo, hi = values.min(), values.max()
        vmin = lo if vmin is None else min(vmin, lo)
        vmax = hi if vmax is None else max(vmax, hi)
        n += values.size
    where = " inside the mask" if mask is not None else ""
    if n == 0:
        raise InputError("the mask selects no voxel of the stack",
                         "check the mask (it must be True inside the sample)")
    if not (np.isfinite(vmin) and np.isfinite(vmax)):
        raise InputError(f"the grey-value stack holds NaN or infinite values{where}",
                         "replace them (e.g. re-export the reconstruction) or mask them out")
    integer = volume.dtype.kind in "biu"
    exact = bins is None and integer and int(vmax) - int(vmin) < _EXACT_SPAN
    info = {"grey_min": float(vmin), "grey_max": float(vmax), "voxels": int(n),
            "exact_integer_bins": bool(exact)}
    if exact:
        lo, span = int(vmin), int(vmax) - int(vmin) + 1
        counts = np.zeros(span, dtype=np.int64)
        for values in _slabs(volume, mask):
            counts += np.bincount(values.astype(np.int64) - lo, minlength=span)
        return counts, np.arange(lo, lo + span, dtype=np.int64), info
    nbins = FLOAT_BINS if bins is None else int(bins)
    if nbins < 1:
        raise InputError(f"bins must be a positive integer; got {bins}", "use e.g. 4096")
    # Range as scalars of the working float dtype, as skimage.exposure.histogram passes it.
    work = _float_values(np.asarray([vmin, vmax], dtype=volume.dtype))
    rng = (work[0], work[1])
    counts = np.zeros(nbins, dtype=np.int64)
    edges = None
    for values in _slabs(volume, mask):
        c, edges = np.histogram(_float_values(values), bins=nbins, range=rng)
        counts += c
    centres = (edges[:-1] + edges[1:]) / 2  # in the edges' dtype, as scikit-image has them
    return counts, centres, info


def _li_integer_histogram(counts, centres) -> float:
    """``skimage.filters.threshold_li`` of integer grey values, from their exact histogram.

    The integer branch of scikit-image (0.19+) already iterates on the histogram of the values
    minus their minimum, with float32 weights and ``np.average``; this repeats those operations
    on ``grey_histogram``'s exact counts, so it needs no copy of the values. Li & Tam (1998).
    """
    lo = int(centres[0])
    bin_centers = np.asarray(centres, dtype=np.int64) - lo
    counts = np.asarray(counts, dtype=np.int64)
    hist = counts.astype(np.float32)
    tolerance = 0.5
    # np.mean of the shifted integer values: their exact sum (float64 holds it) over the count
    t_next = np.float64(int(np.dot(counts, bin_centers))) / int(counts.sum())
    t_curr = -2 * tolerance
    while abs(t_next - t_curr) > tolerance:
        t_curr = t_next
        foreground = bin_centers > t_curr
        background = ~foreground
        mean_fore = np.average(bin_centers[foreground], weights=hist[foreground])
        mean_back = np.average(bin_centers[background], weights=hist[background])
        if mean_back == 0:
            break
        t_next = (mean_back - mean_fore) / (np.log(mean_back) - np.log(mean_fore))
    return float(t_next + lo)


def _triangle_histogram(counts, centres) -> float:
    """``skimage.filters.threshold_triangle`` from a histogram (Zack et al. 1977).

    scikit-image bins the values exactly as :func:`grey_histogram` does (one bin per integer,
    or ``nbins`` equal bins over the range for floats) and then runs these steps.
    """
    hist = np.asarray(counts)
    nbins = len(hist)
    arg_peak_height = np.argmax(hist)
    peak_height = hist[arg_peak_height]
    arg_low_level, arg_high_level = np.flatnonzero(hist)[[0, -1]]
    if arg_low_level == arg_high_level:
        return float(centres[arg_low_level])
    flip = arg_peak_height - arg_low_level < arg_high_level - arg_peak_height
    if flip:
        hist = hist[::-1]
        arg_low_level = nbins - arg_high_level - 1
        arg_peak_height = nbins - arg_peak_height - 1
    width = arg_peak_height - arg_low_level
    x1 = np.arange(width)
    y1 = hist[x1 + arg_low_level]
    norm = np.sqrt(peak_height**2 + width**2)
    peak_height = peak_height / norm
    width = width / norm
    length = peak_height * x1 - width * y1
    arg_level = np.argmax(length) + arg_low_level
    if flip:
        arg_level = nbins - arg_level - 1
    return float(centres[arg_level])


def _values(volume, mask, exact):
    """All grey values (inside the mask) as one 1-D array, in the histogram's working dtype."""
    parts = [v if exact else _float_values(v) for v in _slabs(volume, mask)]
    return np.concatenate(parts)


def _smoothed(counts):
    sigma = max(1.0, counts.size * _SMOOTH_FRACTION)
    return gaussian_filter1d(counts.astype(np.float64), sigma, mode="reflect",
                             truncate=4.0), sigma


def _side_modes(smooth, centres, value, solid_is_bright):
    """Modes (dark side, bright side) of the smoothed histogram; the threshold bin is gas."""
    dark_side = centres <= value if solid_is_bright else centres < value
    modes = []
    for side in (dark_side, ~dark_side):
        if not side.any():
            modes.append(math.nan)
        else:
            idx = np.flatnonzero(side)
            modes.append(float(centres[idx[np.argmax(smooth[idx])]]))
    return modes[0], modes[1]


def _two_peaks(smooth, centres, where):
    """Grey values of the two highest well-separated peaks, ascending."""
    padded = np.concatenate(([0.0], smooth, [0.0]))  # so peaks at the range ends are found
    idx, _ = find_peaks(padded, prominence=_PEAK_PROMINENCE * smooth.max(),
                        distance=max(1, int(_PEAK_SEPARATION * smooth.size)))
    idx = idx - 1
    if idx.size < 2:
        raise InputError(
            f"threshold.method = 'peak_midpoint' needs a histogram with two peaks (gas and "
            f"solid); the histogram{where} has {idx.size}",
            "use threshold.method = 'otsu', or check the contrast of the scan")
    top = np.sort(idx[np.argsort(smooth[idx], kind="stable")[-2:]])
    return float(centres[top[0]]), float(centres[top[1]])


def _multiotsu(counts, centres, section, details):
    from skimage.filters import threshold_multiotsu

    classes = int(section.classes)
    counts, centres = _merge_bins(counts, centres, _MULTIOTSU_MAX_BINS[classes])
    try:
        thresholds = threshold_multiotsu(hist=(counts, centres), classes=classes)
    except ValueError:
        raise InputError(
            f"the stack has too few distinct grey values for threshold.classes = {classes}",
            "lower threshold.classes or use threshold.method = 'otsu'") from None
    details.update(classes=classes, boundary=int(section.boundary),
                   multiotsu_bins=int(counts.size),
                   thresholds=[float(t) for t in thresholds])
    return thresholds[section.boundary - 1]


def _merge_bins(counts, centres, max_bins):
    """Sum groups of k neighbouring bins so that at most ``max_bins`` remain."""
    k = -(-counts.size // max_bins)
    if k <= 1:
        return counts, centres
    extra = -counts.size % k
    step = centres[1] - centres[0]
    counts = np.concatenate((counts, np.zeros(extra, dtype=counts.dtype)))
    centres = np.concatenate((centres, centres[-1] + step * np.arange(1, extra + 1)))
    return counts.reshape(-1, k).sum(axis=1), centres.reshape(-1, k).mean(axis=1)
