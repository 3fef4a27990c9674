"""Porosity from the mean grey value (linear partial-volume mixing), free of any threshold.

Thin walls (1-3 voxels) are lost or fattened by a global threshold because blur spreads their
grey value over their neighbours; the mean grey value inside the piece is unchanged by blur and
gives the gas fraction directly when the grey value mixes linearly with the gas fraction.
"""

from __future__ import annotations

import math

import edt
import numpy as np

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["partial_volume_porosity", "pure_grey_estimate", "porosity_from_mixture"]

_MEDIAN_SE = math.sqrt(math.pi / 2)  # SE of a median = sqrt(pi/2) * SD / sqrt(n), normal data
_MAD_TO_SD = 1.4826  # robust SD = 1.4826 * median absolute deviation, normal data


def partial_volume_porosity(grey, envelope, *, gas_grey=None, solid_grey=None, choice=None,
                            spacing_um=(1.0, 1.0, 1.0), solid_is_bright: bool = True,
                            shell_um=None, core_depth_um=None) -> dict:
    """Gas porosity of a piece from its mean grey value, assuming linear partial-volume mixing.

    Derivation. Under linear mixing a voxel holding gas fraction ``f`` has the grey value
    ``g = f g_gas + (1 - f) g_solid`` (+ zero-mean noise), so ``f = (g_solid - g) /
    (g_solid - g_gas)``. Summing over a region R gives its gas volume (in voxels)
    ``G_R = sum_R (g_solid - g) / (g_solid - g_gas)``. A blur (point-spread function of unit
    integral) moves grey value between voxels but keeps the sum, so ``G_R`` is unchanged as long
    as the blur does not carry grey value across the border of R. Taking R = envelope E only,
    ``porosity = G_E / |E| = (g_solid - mean_E g) / (g_solid - g_gas)`` -- exact for a
    noise-free linear mixture without blur across the envelope's surface. With blur the skin
    leaks solid out through the surface (about ``sigma / sqrt(2 pi)`` voxel per unit area for a
    Gaussian PSF of SD sigma), so by default R is the envelope plus an exterior shell S of
    ``shell_um`` wider than the blur, which is pure gas in truth:
    ``porosity = (G_{E+S} - |S|) / |E|``, exact for a blurred noise-free linear mixture whose
    blur support is narrower than the shell and whose shell holds no other object.
    The mean-grey (two-phase linear) estimate of volume fractions is standard; the blur effect
    on thresholded thin structures is described by Verbeek & van Vliet [1]_.

    Pure-phase grey values, when not given, are medians of "deep" voxels, which partial volume
    does not touch: voxels on each side of the threshold whose anisotropic Euclidean distance to
    the other side is at least ``core_depth_um`` (default 3 voxels of the largest spacing: a
    voxel centre 3 voxels from the nearest other-phase voxel centre lies 2.5 voxels from the
    edge, where a Gaussian blur of SD 1 voxel mixes in < 1 % of the other phase).
    Gas comes from deep gas voxels inside the envelope and in the shell around it; solid from
    deep solid voxels inside the envelope (thick walls, skin). When a population is empty
    (e.g. all walls thinner than 4 voxels) the histogram peak of ``choice`` is used instead
    (``gas_peak``/``solid_peak``), which partial volume biases: the result says so.

    Limitation: when hardly any solid is thicker than about 5 voxels (walls and skin of 2-3
    voxels, as in many puffed pieces), few or no deep solid voxels exist and even they are
    dimmed by blur, so ``solid_grey`` comes out low and the porosity low (the histogram's
    solid peak, the fallback, is then far too low: it is the thin walls' partial-volume
    peak). Check ``solid_voxels_used``; give ``solid_grey`` from a thick reference (a
    calibration piece, the sample holder of known material, or a thick part of the same
    material scanned alike) when it is small.

    Uncertainty: the standard errors of the two medians (``sqrt(pi/2) * robust SD / sqrt(n)``,
    robust SD = 1.4826 MAD) and of the mean grey (noise SD of the gas population times
    ``sqrt(N_R)``) are propagated with the sensitivities ``d phi / d g_solid = (1 - phi) /
    Delta`` and ``d phi / d g_gas = (phi + |S|/|E|) / Delta``, ``Delta = g_solid - g_gas``,
    added in quadrature. This is the random part only; systematic errors (non-linear mixing,
    cupping, a bias of the pure-phase greys) are not in it. Voxel counts treat noise as
    independent, which smoothing makes optimistic.

    Parameters
    ----------
    grey : (nz, ny, nx) array_like
        Grey values (raw or denoised; denoising keeps the mean).
    envelope : (nz, ny, nx) array_like of bool
        The piece's volume (pores and solid).
    gas_grey, solid_grey : float, optional
        Pure-phase grey values; estimated when omitted.
    choice : ThresholdChoice, optional
        The threshold used to split gas from solid when estimating pure-phase greys and the
        histogram-peak fallback. Without it Otsu's threshold of the grey values in the envelope
        and shell is used (``skimage.filters.threshold_otsu``).
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) in µm; distances are anisotropic.
    solid_is_bright : bool
        Ignored when ``choice`` is given (its ``details["solid_is_bright"]`` is used if present).
    shell_um : float, optional
        Width of the exterior shell added to the sum; default 4 voxels of the largest spacing
        (covers a Gaussian blur of SD up to 1 voxel). 0 gives the plain envelope mean.
    core_depth_um : float, optional
        Depth for "deep" pure-phase voxels; default 3 voxels of the largest spacing.

    Returns
    -------
    dict
        ``porosity_partial_volume``, ``gas_grey``, ``solid_grey``, ``gas_grey_spread``,
        ``solid_grey_spread`` (robust SDs, NaN when given by the caller),
        ``porosity_partial_volume_uncertainty`` (1 SD), ``gas_grey_source``,
        ``solid_grey_source`` ("given", "deep_voxels" or "histogram_peak"),
        ``gas_voxels_used``, ``solid_voxels_used``, ``shell_um``, ``dporosity_dsolid_grey``,
        ``dporosity_dgas_grey``.

    Raises
    ------
    InputError
        Shapes differ, empty envelope, non-finite grey values, or gas and solid greys equal.

    References
    ----------
    .. [1] Verbeek, P. W. & van Vliet, L. J. (1994). On the location error of curved edges in
       low-pass filtered 2-D and 3-D images. IEEE Trans. PAMI 16(7):726-733.
       :doi:`10.1109/34.297954`
    """
    spacing = as_spacing_um(spacing_um)
    grey = np.asarray(grey)
    env = np.asarray(envelope)
    if grey.ndim != 3 or env.shape != grey.shape:
        raise InputError(f"grey {grey.shape} and envelope {env.shape} must be 3-D of one shape",
                         "pass the stack and the envelope computed from it")
    env = env.astype(bool, copy=False)
    n_env = int(np.count_nonzero(env))
    if n_env == 0:
        raise InputError("the envelope is empty", "segment the piece before measuring it")
    h = max(spacing)
    shell_um = 4.0 * h if shell_um is None else float(shell_um)
    core_um = 3.0 * h if core_depth_um is None else float(core_depth_um)
    if shell_um < 0 or core_um < 0:
        raise InputError("shell_um and core_depth_um must be >= 0", "use e.g. 4 and 2 voxels")

    if shell_um > 0:
        d_out = edt.edt(np.ascontiguousarray(~env), anisotropy=spacing, black_border=False,
                        parallel=1)
        region = d_out <= shell_um
        del d_out
        region |= env
    else:
        region = env
    # Only the count and the exact sum of the region's grey values enter the mixture, so no
    # float copy of the region is kept (a whole-piece float64 copy is 8 bytes per voxel).
    values = grey[region]
    n_region = int(values.size)
    if values.dtype.kind == "f" and not np.all(np.isfinite(values)):
        raise InputError("the grey values hold NaN or infinite values in the envelope",
                         "replace them or re-export the reconstruction")
    sum_grey = _exact_sum(values)

    bright = solid_is_bright
    if choice is not None:
        threshold = float(choice.value)
        bright = bool(choice.details.get("solid_is_bright", solid_is_bright))
    elif gas_grey is None or solid_grey is None:
        from skimage.filters import threshold_otsu
        threshold = float(threshold_otsu(values.astype(np.float64)))
    else:
        threshold = math.nan
    del values

    result = {}
    pops = {}
    if gas_grey is None or solid_grey is None:
        solid = (grey > threshold) if bright else (grey < threshold)
        # edt gives each True voxel its distance to the nearest False voxel; one distance map
        # at a time, each dropped once its deep voxels are taken.
        d_gas = edt.edt(np.ascontiguousarray(~solid), anisotropy=spacing, black_border=False,
                        parallel=1)
        deep = d_gas >= core_um
        del d_gas
        deep &= region
        deep &= ~solid
        pops["gas"] = grey[deep]
        del region
        d_solid = edt.edt(np.ascontiguousarray(solid), anisotropy=spacing,
                          black_border=False, parallel=1)
        np.greater_equal(d_solid, core_um, out=deep)
        del d_solid
        deep &= env
        deep &= solid
        pops["solid"] = grey[deep]
        del deep, solid
    for phase, given, peak in (("gas", gas_grey, getattr(choice, "gas_peak", math.nan)),
                               ("solid", solid_grey, getattr(choice, "solid_peak", math.nan))):
        if given is not None:
            result[phase] = (float(given), math.nan, 0.0, 0, "given")
        else:
            v = pops[phase].astype(np.float64)
            result[phase] = pure_grey_estimate(phase, v.size, lambda v=v: _median_mad(v),
                                               peak=peak, core_um=core_um)

    return porosity_from_mixture(result["gas"], result["solid"],
                                 lambda g_solid: n_region * g_solid - sum_grey,
                                 n_envelope=n_env, n_region=n_region, shell_um=shell_um)


def _exact_sum(values, block: int = 1 << 20) -> float:
    """Sum of grey values in float64 blocks (pairwise within a block), blocks added by fsum.

    Exact for integer stacks (a block's sum stays far below 2**53); never holds a float copy
    of more than one block.
    """
    return math.fsum(float(values[i:i + block].sum(dtype=np.float64))
                     for i in range(0, values.size, block))


def _median_mad(v):
    est = float(np.median(v))
    return est, np.median(np.abs(v - est))


def pure_grey_estimate(phase: str, n: int, median_mad, *, peak: float, core_um: float) -> tuple:
    """Pure-phase grey value of :func:`partial_volume_porosity` from its ``n`` deep voxels.

    ``median_mad()`` returns the median of the deep voxels' grey values and their median
    absolute deviation; it is called only when ``n >= 2``. Otherwise the histogram ``peak`` is
    used when finite, else InputError is raised.

    Returns
    -------
    tuple
        ``(estimate, robust SD, standard error, voxels used, source)``, source "deep_voxels" or
        "histogram_peak".
    """
    if n >= 2:
        est, mad = median_mad()
        spread = float(_MAD_TO_SD * mad)
        return float(est), spread, _MEDIAN_SE * spread / math.sqrt(n), int(n), "deep_voxels"
    if math.isfinite(peak):
        return float(peak), math.nan, 0.0, 0, "histogram_peak"
    raise InputError(
        f"no {phase} voxel lies {core_um:g} µm from the other phase, so the pure "
        f"{phase} grey value cannot be estimated",
        f"give {phase}_grey, or pass the threshold choice (its histogram peaks)")


def porosity_from_mixture(gas: tuple, solid: tuple, solid_excess, *, n_envelope: int,
                          n_region: int, shell_um: float) -> dict:
    """The result dict of :func:`partial_volume_porosity` from reduced inputs.

    Parameters
    ----------
    gas, solid : tuple
        ``(estimate, robust SD, standard error, voxels used, source)`` of each pure-phase grey
        value (see :func:`pure_grey_estimate`).
    solid_excess : callable
        ``solid_excess(g_solid)`` = sum over the region (envelope + shell) of
        ``g_solid - grey``.
    n_envelope, n_region : int
        Voxels in the envelope and in envelope + shell.
    shell_um : float
        Width of the exterior shell, reported as is.
    """
    g_gas, gas_spread, se_gas, n_gas, gas_source = gas
    g_solid, solid_spread, se_solid, n_solid, solid_source = solid
    delta = g_solid - g_gas
    if not math.isfinite(delta) or delta == 0:
        raise InputError(f"gas grey {g_gas:g} and solid grey {g_solid:g} must differ",
                         "check gas_grey / solid_grey or the threshold")
    n_env = n_envelope
    n_shell = n_region - n_env
    gas_volume = float(solid_excess(g_solid) / delta)
    phi = (gas_volume - n_shell) / n_env
    dphi_ds = (1.0 - phi) / delta
    dphi_dg = (phi + n_shell / n_env) / delta
    noise = gas_spread if math.isfinite(gas_spread) else solid_spread
    se_mean = (noise * math.sqrt(n_region) / (abs(delta) * n_env)
               if math.isfinite(noise) else 0.0)
    unc = math.sqrt((dphi_ds * se_solid) ** 2 + (dphi_dg * se_gas) ** 2 + se_mean ** 2)
    return {
        "porosity_partial_volume": float(phi),
        "gas_grey": g_gas,
        "solid_grey": g_solid,
        "gas_grey_spread": gas_spread,
        "solid_grey_spread": solid_spread,
        "porosity_partial_volume_uncertainty": float(unc),
        "gas_grey_source": gas_source,
        "solid_grey_source": solid_source,
        "gas_voxels_used": n_gas,
        "solid_voxels_used": n_solid,
        "shell_um": float(shell_um),
        "dporosity_dsolid_grey": float(dphi_ds),
        "dporosity_dgas_grey": float(dphi_dg),
    }
