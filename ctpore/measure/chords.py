"""Chord-length distributions of pores and walls along the three grid axes."""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..spacing import as_spacing_um
from .porosity import _checked_phases

__all__ = ["chord_lengths", "chord_summary", "chord_histogram"]

EXTERIOR, PORE, SOLID = 0, 1, 2
_SEPARATOR = 3  # marks the ends of grid lines in the flattened run-length scan
PHASES = {"pore": PORE, "solid": SOLID}
AXES = ("z", "y", "x")
_BLOCK_VOXELS = 1 << 24  # grid lines are scanned in blocks of about this many voxels


def chord_lengths(phases, *, spacing_um) -> dict[str, dict[str, np.ndarray]]:
    """Chord lengths in µm of pores and solid along the z, y and x grid lines.

    A chord is a run of voxels of one phase bounded at both ends by the other phase, on a
    grid line inside the envelope. Runs that end at the exterior or at the image border are
    left out: they are cut, and their true length is unknown. Along axis ``a`` a run of n voxels
    is n·spacing[a] µm long (the voxel centres it covers times the step).

    Leaving out cut runs biases the distribution towards short chords when chords are not
    much shorter than the piece (long chords are more often cut); :func:`chord_summary`
    reports a mean corrected for this (Miles–Lantuéjoul weighting). Chords shorter than one
    voxel are missed and the neighbouring runs of the other phase merge, which lengthens the
    mean by about one voxel over twice the mean chord (for exponential chords).

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.

    Returns
    -------
    dict
        ``{"pore": {"z": ..., "y": ..., "x": ...}, "solid": {...}}``: float64 arrays of chord
        lengths in µm, in scan order.

    Raises
    ------
    InputError
        If ``spacing_um`` is invalid.
    ValueError
        If ``phases`` is not a 3-D label array with values in {0, 1, 2}.

    References
    ----------
    J. Serra (1982), Image Analysis and Mathematical Morphology, Academic Press (chord-length
    distributions, linear erosion). S. Torquato (2002), Random Heterogeneous Materials,
    Springer, ch. 2 (lineal-path and chord-length functions), doi:10.1007/978-1-4757-6355-3.

    Examples
    --------
    >>> import numpy as np
    >>> line = np.array([2, 1, 1, 1, 2, 2, 1, 2], dtype=np.uint8).reshape(1, 1, -1)
    >>> c = chord_lengths(line, spacing_um=(1, 1, 5))
    >>> c["pore"]["x"].tolist(), c["solid"]["x"].tolist()
    ([15.0, 5.0], [10.0])
    """
    spacing = as_spacing_um(spacing_um)
    phases = _checked_phases(phases)
    out = {name: {} for name in PHASES}
    for axis, ax_name in enumerate(AXES):
        runs = _axis_runs(phases, axis)
        for name, code in PHASES.items():
            length, _ = runs[code]
            out[name][ax_name] = length * spacing[axis]
    return out


def chord_summary(phases, *, spacing_um) -> dict:
    """Count, mean and median chord length per phase and axis, and over all three axes.

    The plain mean is the mean of the complete chords (see :func:`chord_lengths`). The
    corrected mean weights each chord of n voxels found on a line segment of W envelope voxels
    by 1/(W − n − 1), the inverse of the number of places where it could lie wholly inside the
    segment with a bounding voxel at each end: the Miles–Lantuéjoul correction for sampling in
    a bounded window. For a stationary structure it removes the bias against long chords;
    chords longer than the segment cannot be seen at all. In a piece, whose skin is not a
    random window edge, it is an approximation.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.

    Returns
    -------
    dict
        For ``p`` in pore, solid and ``a`` in z, y, x: ``{p}_chord_{a}_count``,
        ``{p}_chord_{a}_mean_um``, ``{p}_chord_{a}_median_um``,
        ``{p}_chord_{a}_mean_corrected_um``; and the same over all axes without the axis
        letter (``pore_chord_mean_um``, ...). Means and medians are NaN where no chord exists.

    Raises
    ------
    InputError
        If ``spacing_um`` is invalid.
    ValueError
        If ``phases`` is not a 3-D label array with values in {0, 1, 2}.

    References
    ----------
    R. E. Miles (1978), The sampling, by quadrats, of planar aggregates, J. Microsc.
    113:257–267, doi:10.1111/j.1365-2818.1978.tb00105.x. C. Lantuéjoul (1980), On the
    estimation of mean values in individual analysis of particles, Microsc. Acta 5:266–273.
    J. Serra (1982), Image Analysis and Mathematical Morphology, Academic Press.
    """
    spacing = as_spacing_um(spacing_um)
    phases = _checked_phases(phases)
    out: dict = {}
    pooled = {code: ([], []) for code in PHASES.values()}
    for axis, ax_name in enumerate(AXES):
        runs = _axis_runs(phases, axis)
        for name, code in PHASES.items():
            n_vox, window = runs[code]
            length = n_vox * spacing[axis]
            weight = 1.0 / (window - n_vox - 1)
            out.update(_stats(f"{name}_chord_{ax_name}", length, weight))
            pooled[code][0].append(length)
            pooled[code][1].append(weight)
    for name, code in PHASES.items():
        out.update(_stats(f"{name}_chord", np.concatenate(pooled[code][0]),
                          np.concatenate(pooled[code][1])))
    return out


def chord_histogram(chords, *, spacing_um, bin_width_um=None) -> dict[str, np.ndarray]:
    """Histogram of chord lengths per phase and axis on common bins, as columns for a CSV.

    Bin k (k = 1, 2, ...) is centred on k·w and holds lengths in [(k − ½)·w, (k + ½)·w); the
    first bin reaches down to 0. The default width w is the largest voxel size, so a chord of
    n voxels along the coarsest axis falls in bin n.

    Parameters
    ----------
    chords : dict
        The output of :func:`chord_lengths`.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm, as given to :func:`chord_lengths`.
    bin_width_um : float, optional
        Bin width in µm; default the largest voxel size.

    Returns
    -------
    dict of ndarray
        ``chord_length_um`` (bin centres), ``bin_start_um``, ``bin_end_um`` and
        ``{phase}_{axis}_count`` for pore/solid and z/y/x (int64), all of one length.

    Raises
    ------
    InputError
        If ``bin_width_um`` is not a positive number, ``spacing_um`` is invalid, or ``chords``
        is not the output of :func:`chord_lengths`.
    """
    spacing = as_spacing_um(spacing_um)
    try:
        arrays = {(p, a): np.asarray(chords[p][a], dtype=float) for p in PHASES for a in AXES}
    except (KeyError, TypeError, IndexError):
        raise InputError("chords must be the dict returned by chord_lengths",
                         "pass chord_lengths(phases, spacing_um=...)") from None
    longest = max((float(v.max()) for v in arrays.values() if v.size), default=0.0)
    if bin_width_um is None:
        width = max(spacing)
    else:
        try:
            width = float(bin_width_um)
        except (TypeError, ValueError):
            width = float("nan")
        if not np.isfinite(width) or width <= 0:
            raise InputError(f"bin_width_um must be a positive number of µm; got {bin_width_um!r}",
                             "give the bin width in µm, e.g. the voxel size")
    n_bins = max(1, int(np.floor(longest / width + 0.5)))
    centres = width * np.arange(1, n_bins + 1)
    edges = np.concatenate([[0.0], width * (np.arange(1, n_bins + 1) + 0.5)])
    out = {"chord_length_um": centres, "bin_start_um": edges[:-1], "bin_end_um": edges[1:]}
    for (p, a), v in arrays.items():
        out[f"{p}_{a}_count"] = np.histogram(v, bins=edges)[0].astype(np.int64)
    return out


def _stats(prefix: str, length: np.ndarray, weight: np.ndarray) -> dict:
    if length.size == 0:
        nan = float("nan")
        return {f"{prefix}_count": 0, f"{prefix}_mean_um": nan, f"{prefix}_median_um": nan,
                f"{prefix}_mean_corrected_um": nan}
    return {
        f"{prefix}_count": int(length.size),
        f"{prefix}_mean_um": float(length.mean()),
        f"{prefix}_median_um": float(np.median(length)),
        f"{prefix}_mean_corrected_um": float(np.sum(weight * length) / np.sum(weight)),
    }


def _axis_runs(phases: np.ndarray, axis: int) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Complete chords along ``axis``: per phase code, run lengths and their window lengths.

    Both are in voxels (float64). The window of a chord is the run of envelope voxels (pore or
    solid) on its grid line that contains it.
    """
    lines = np.moveaxis(phases, axis, -1)
    n = lines.shape[-1]
    lines = lines.reshape(-1, n)
    rows_per_block = max(1, _BLOCK_VOXELS // (n + 1))
    found = {code: ([], []) for code in PHASES.values()}
    for r0 in range(0, lines.shape[0], rows_per_block):
        block = lines[r0:r0 + rows_per_block]
        for code, (length, window) in _block_runs(block).items():
            found[code][0].append(length)
            found[code][1].append(window)
    return {code: (np.concatenate(ls), np.concatenate(ws)) for code, (ls, ws) in found.items()}


def _block_runs(block: np.ndarray) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Run-length scan of grid lines (rows of ``block``) laid end to end with separators."""
    m, n = block.shape
    flat = np.full(m * (n + 1) + 1, _SEPARATOR, dtype=np.uint8)
    flat[1:].reshape(m, n + 1)[:, :n] = block
    starts = np.concatenate([[0], np.flatnonzero(flat[1:] != flat[:-1]) + 1])
    lengths = np.diff(np.append(starts, flat.size)).astype(np.float64)
    values = flat[starts]
    # Envelope segments: maximal stretches of pore/solid runs between exterior or separators.
    breaker = (values == EXTERIOR) | (values == _SEPARATOR)
    segment = np.cumsum(breaker)
    window = np.bincount(segment, weights=np.where(breaker, 0.0, lengths))[segment]
    out = {}
    mid, before, after = values[1:-1], values[:-2], values[2:]
    for code, other in ((PORE, SOLID), (SOLID, PORE)):
        keep = np.flatnonzero((mid == code) & (before == other) & (after == other)) + 1
        out[code] = (lengths[keep], window[keep])
    return out
