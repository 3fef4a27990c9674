"""Beam-hardening cupping: the solid's grey value against depth below the piece's surface.

Polychromatic X-rays harden through the sample, so the reconstructed attenuation of the same
material drops toward the centre of a piece ("cupping", Brooks & Di Chiro 1976 [1]_). A global
threshold then loses more solid in the core than at the skin and fakes a skin-to-core porosity
gradient. Here the trend of the solid's median grey value with depth from the envelope surface
is measured and divided out.
"""

from __future__ import annotations

import edt
import numpy as np

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["cupping_profile", "correct_cupping"]

_MIN_COUNT = 20  # depth bins with fewer solid voxels are not used (common practice, no source)


def cupping_profile(grey, solid, envelope, *, spacing_um, bin_um) -> dict:
    """Median grey value of the solid against depth from the envelope surface.

    Depth is the exact anisotropic Euclidean distance of each envelope voxel to the nearest
    voxel outside the envelope (``edt``, Felzenszwalb & Huttenlocher 2012,
    :doi:`10.4086/toc.2012.v008a019`), binned in ``[k bin_um, (k+1) bin_um)``.

    Parameters
    ----------
    grey : (nz, ny, nx) array_like
    solid, envelope : (nz, ny, nx) array_like of bool
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) in µm.
    bin_um : float
        Width of the depth bins in µm.

    Returns
    -------
    dict
        ``depth_um`` (bin centres), ``solid_grey_median``, ``solid_voxels`` (1-D arrays, one
        entry per bin; median NaN where the bin has no solid voxel) and ``bin_um``.
    """
    grey, solid, env, spacing = _inputs(grey, solid, envelope, spacing_um)
    bin_um = float(bin_um)
    if not bin_um > 0:
        raise InputError(f"bin_um must be positive; got {bin_um}", "use e.g. 2 voxel sizes")
    depth = _depth(env, spacing)
    sel = solid & env
    d = depth[sel]
    g = grey[sel].astype(np.float64)
    nbins = int(np.ceil(depth.max() / bin_um)) + 1 if depth.size else 1
    idx = np.minimum((d / bin_um).astype(np.int64), nbins - 1)
    order = np.argsort(idx, kind="stable")
    idx, g = idx[order], g[order]
    counts = np.bincount(idx, minlength=nbins)
    med = np.full(nbins, np.nan)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    for k in np.flatnonzero(counts):
        med[k] = np.median(g[starts[k]:starts[k] + counts[k]])
    last = int(np.flatnonzero(counts).max()) + 1 if counts.any() else 0
    centres = (np.arange(last) + 0.5) * bin_um
    return {"depth_um": centres, "solid_grey_median": med[:last],
            "solid_voxels": counts[:last].astype(np.int64), "bin_um": bin_um}


def correct_cupping(grey, envelope, solid, *, spacing_um, degree: int = 2, bin_um=None,
                    gas_grey=None, min_depth_um=None, core_depth_um=None) -> dict:
    """Remove the trend of the solid's grey value with depth so that it is flat.

    The profile of :func:`cupping_profile` is fitted by a polynomial of ``degree`` in depth,
    by weighted least squares on the bin medians (medians make the fit robust to walls'
    partial volume and outliers; weights ``sqrt(voxels)``). Only "deep" solid voxels enter
    the profile, those at least ``core_depth_um`` (default 3 voxels of the largest spacing)
    from the gas: solid voxels near the threshold are a truncated sample (the dimmed core ones
    were lost to gas, so the survivors are purer), which would hide part of the cup. When
    fewer than ``20 (degree + 1)`` deep voxels exist, all solid voxels are used. Bins
    shallower than ``min_depth_um`` (default 2 voxels of the largest spacing), where the solid mixes with the
    exterior air, and bins with fewer than 20 solid voxels are left out; outside the fitted
    depth range the trend is held at its end values (no extrapolation).

    The correction is multiplicative on the contrast over gas:
    ``g' = g_gas + (g - g_gas) * (T(d_ref) - g_gas) / (T(d) - g_gas)``, with ``T`` the trend
    and ``d_ref`` the shallowest fitted depth. Cupping scales the attenuation of matter (the
    reconstructed attenuation coefficient is lowered by a depth-dependent factor, Brooks & Di
    Chiro 1976 [1]_) while air stays air, so scaling the contrast keeps the gas grey value
    and every partial-volume mixture's fraction; an additive correction would lift the gas of
    core pores too. The gas grey is the median outside the envelope unless given.
    Voxels outside the envelope are unchanged.

    Parameters
    ----------
    grey : (nz, ny, nx) array_like
    envelope, solid : (nz, ny, nx) array_like of bool
        The piece and a first solid segmentation (e.g. the global threshold).
    spacing_um : float or 3 floats
    degree : int
        Polynomial degree (0 to 4); 2 fits the parabolic cup of a roughly round piece.
    bin_um : float, optional
        Depth bin width; default 1 voxel of the largest spacing.
    gas_grey : float, optional
    min_depth_um : float, optional
    core_depth_um : float, optional

    Returns
    -------
    dict
        ``grey`` (float32, corrected), ``trend_coefficients`` (highest power first, depth in
        µm), ``reference_grey`` ``T(d_ref)``, ``gas_grey``, ``profile_before`` and
        ``profile_after`` (:func:`cupping_profile` of the input and corrected grey, over the
        same deep solid voxels)
        and ``trend`` (the fitted trend at ``profile_before["depth_um"]``).

    References
    ----------
    .. [1] Brooks, R. A. & Di Chiro, G. (1976). Beam hardening in X-ray reconstructive
       tomography. Phys. Med. Biol. 21(3):390-398. :doi:`10.1088/0031-9155/21/3/004`
    """
    grey, solid, env, spacing = _inputs(grey, solid, envelope, spacing_um)
    if int(degree) != degree or not 0 <= degree <= 4:
        raise InputError(f"degree must be an integer from 0 to 4; got {degree}", "use 2")
    h = max(spacing)
    bin_um = h if bin_um is None else float(bin_um)
    min_depth = 2.0 * h if min_depth_um is None else float(min_depth_um)
    core_um = 3.0 * h if core_depth_um is None else float(core_depth_um)
    # Deep solid only: voxels near the threshold are a truncated sample (the dimmed ones are
    # lost), which would hide part of the cup; deep ones lie far above the threshold.
    solid_in = solid & env
    core = _depth(solid_in, spacing) >= core_um
    if np.count_nonzero(core) < _MIN_COUNT * (degree + 1):
        core = solid_in
    before = cupping_profile(grey, core, env, spacing_um=spacing, bin_um=bin_um)
    d, m, n = before["depth_um"], before["solid_grey_median"], before["solid_voxels"]
    use = (n >= _MIN_COUNT) & np.isfinite(m) & (d >= min_depth)
    if np.count_nonzero(use) < degree + 1:
        raise InputError(f"only {int(np.count_nonzero(use))} depth bins hold enough solid to "
                         f"fit a degree-{degree} cupping trend",
                         "lower the degree or bin_um, or skip the cupping correction")
    coef = np.polyfit(d[use], m[use], int(degree), w=np.sqrt(n[use]))
    lo, hi = float(d[use].min()), float(d[use].max())
    if gas_grey is None:
        if env.all():
            raise InputError("the envelope fills the stack, so there is no exterior gas",
                             "give gas_grey")
        gas_grey = float(np.median(grey[~env]))
    gas_grey = float(gas_grey)
    ref = float(np.polyval(coef, lo))
    depth = _depth(env, spacing)
    trend = np.polyval(coef, np.clip(depth[env], lo, hi))
    denom = trend - gas_grey
    if np.any(denom * (ref - gas_grey) <= 0):
        raise InputError("the fitted cupping trend crosses the gas grey value",
                         "check the solid mask and gas_grey, or lower the degree")
    out = grey.astype(np.float32, copy=True)
    out[env] = gas_grey + (grey[env] - gas_grey) * ((ref - gas_grey) / denom)
    after = cupping_profile(out, core, env, spacing_um=spacing, bin_um=bin_um)
    return {"grey": out, "trend_coefficients": [float(c) for c in coef],
            "reference_grey": ref, "gas_grey": gas_grey, "profile_before": before,
            "profile_after": after, "trend": np.polyval(coef, np.clip(d, lo, hi))}


def _depth(env, spacing):
    return edt.edt(np.ascontiguousarray(env), anisotropy=spacing, black_border=False,
                   parallel=1)


def _inputs(grey, solid, envelope, spacing_um):
    spacing = as_spacing_um(spacing_um)
    grey = np.asarray(grey)
    solid = np.asarray(solid, dtype=bool)
    env = np.asarray(envelope, dtype=bool)
    if grey.ndim != 3 or solid.shape != grey.shape or env.shape != grey.shape:
        raise InputError(f"grey {grey.shape}, solid {solid.shape} and envelope {env.shape} "
                         "must be 3-D arrays of one shape", "pass masks of the same stack")
    if not env.any():
        raise InputError("the envelope is empty", "segment the piece first")
    return grey, solid, env, spacing
