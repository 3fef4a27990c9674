"""Segmentation uncertainty: porosity, open share and wall-thickness D50 over a small ensemble.

The threshold and the envelope are the two choices that move a porosity most between
laboratories. The ensemble re-segments a piece at the ends of a grey-value span measured on the
scan itself (below) and with the two ball envelopes, and reports the range of each quantity with
the member that sets each bound. The mean-grey (partial-volume) porosity, which no threshold
touches, joins the porosity range as a second, independent estimator.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

__all__ = ["segmentation_uncertainty", "threshold_span", "COVERAGE_FACTOR"]

COVERAGE_FACTOR = 2.0
"""Coverage factor k on the partial-volume porosity's standard uncertainty: k = 2 gives an
interval of about 95 % for a normal distribution (JCGM 100:2008, GUM, section 6.3)."""

_MIN_DEEP_VOXELS = 100  # fewer deep pure-phase voxels: the pure greys are not trusted
_ENVELOPES = ("closing", "rolling_sphere")


def threshold_span(grey, envelope, choice, *, partial_volume: dict,
                   solid_is_bright: bool = True) -> dict:
    """The grey-value span of the ensemble's thresholds, measured on the scan, and its origin.

    Three thresholds each have a claim to be right, and the span is the smallest interval that
    holds all of them:

    ``nominal``
        The recipe's threshold (e.g. Otsu [1]_). Automatic methods give different values on
        the same histogram [2]_; the nominal one is one of them.
    ``midpoint``
        Halfway between the pure-gas and pure-solid grey values measured on deep voxels
        (:func:`ctpore.segment.partial_volume.partial_volume_porosity`): the "50 % rule"
        (common practice, no single source). It puts a blurred *flat, thick* edge exactly in
        place for any symmetric point-spread function.
    ``moment_preserving``
        The threshold whose segmented gas fraction inside the envelope equals the mean-grey
        porosity ``phi_pv``: a binary image with the pure greys that keeps the first grey-value
        moment of the piece, in the sense of Tsai's moment-preserving thresholding [3]_ with
        the two grey levels fixed at the measured pure greys. Its neighbours
        ``moment_preserving_low``/``_high`` do the same at ``phi_pv -/+ k u(phi_pv)`` (k = 2,
        [5]_), so the noise of the pure greys and of the mean grey (the propagated uncertainty
        of ``phi_pv``) widens the span.

    Why blur and noise set the span. Blur shifts thresholded edges off their true place by an
    amount that depends on the structure: a curved edge moves by about ``sigma**2 / R`` [4]_,
    so pores of a few voxels shrink, and walls thinner than about ``3 sigma`` read thin and
    vanish below about ``1.35 sigma`` (derived); in grey terms, the level at which a wall of thickness ``w`` keeps its true
    width is ``C (1 - Phi(w / sigma))`` below the midpoint (``C`` the contrast; derived),
    0.16 C for a one-voxel wall at ``sigma`` = 1 voxel. These shifts have both signs and partly
    cancel in a real foam, so a band from their individual worst cases is far wider than the
    error it should cover (the band midpoint +/- 0.16 C gave porosity ranges 0.12-0.28 wide on
    the test phantoms of tests/segment/test_uncertainty.py, where the nominal Otsu porosity is
    off by at most 0.08). The
    mean grey is blur-invariant, so the distance between ``midpoint`` and
    ``moment_preserving`` *measures* the net blur effect on this very piece, and the
    uncertainty of ``phi_pv`` carries the noise. On a sharp noise-free scan all three lie in the
    gap between the two grey values and the range has no width; on a blurred one it opens as
    far as blur has moved the porosity.

    When the pure greys are not trustworthy (fewer than 100 deep voxels of a phase, or a
    histogram-peak fallback: walls too thin to show pure solid) the moment-preserving and
    midpoint thresholds are skipped and the span falls back to the recipe's sensitivity band
    ``nominal +/- choice.delta``; ``partial_volume_used`` is then False with the reason.

    Parameters
    ----------
    grey : (nz, ny, nx) array_like
        The grey values the threshold was applied to (denoised / corrected).
    envelope : (nz, ny, nx) array_like of bool
        The nominal envelope.
    choice : ctpore.segment.threshold.ThresholdChoice
        The nominal threshold with its histogram peaks and sensitivity step.
    partial_volume : dict
        Output of :func:`ctpore.segment.partial_volume.partial_volume_porosity` on the same
        grey and envelope (``porosity_partial_volume``, its ``_uncertainty``, ``gas_grey``,
        ``solid_grey``, the ``*_grey_source`` and ``*_voxels_used`` entries).
    solid_is_bright : bool
        True when solid voxels lie above the threshold.

    Returns
    -------
    dict
        ``thresholds`` (dict of the named grey values above, plus ``low`` and ``high``, the
        span's ends), ``delta_low_grey`` and ``delta_high_grey`` (nominal minus low, high minus
        nominal, >= 0), ``delta_grey`` (half the span), ``delta_fraction_of_peak_distance``
        (``delta_grey`` over the distance between the histogram's gas and solid peaks, the unit
        of the recipe's ``sensitivity_fraction``), ``delta_fraction_of_contrast`` (over the
        pure-grey contrast), ``derivation`` (text), ``partial_volume_used`` (bool) and
        ``partial_volume_reason``.

    References
    ----------
    .. [1] Otsu, N. (1979). A threshold selection method from gray-level histograms. IEEE Trans.
       Syst. Man Cybern. SMC-9(1):62-66. :doi:`10.1109/TSMC.1979.4310076`
    .. [2] Sezgin, M. & Sankur, B. (2004). Survey over image thresholding techniques and
       quantitative performance evaluation. J. Electron. Imaging 13(1):146-165.
       :doi:`10.1117/1.1631315`
    .. [3] Tsai, W.-H. (1985). Moment-preserving thresholding: a new approach. Comput. Vis.
       Graph. Image Process. 29(3):377-393. :doi:`10.1016/0734-189X(85)90133-1`
    .. [4] Verbeek, P. W. & van Vliet, L. J. (1994). On the location error of curved edges in
       low-pass filtered 2-D and 3-D images. IEEE Trans. PAMI 16(7):726-733.
       :doi:`10.1109/34.297954`
    .. [5] JCGM 100:2008. Evaluation of measurement data -- Guide to the expression of
       uncertainty in measurement (GUM), section 6.3 (coverage factor).
    """
    nominal = float(choice.value)
    peak_distance = abs(float(choice.solid_peak) - float(choice.gas_peak))
    pv = partial_volume
    reason = _unreliable(pv)
    thresholds = {"nominal": nominal}
    contrast = abs(float(pv.get("solid_grey", math.nan)) - float(pv.get("gas_grey", math.nan)))
    if reason is None:
        values = np.asarray(grey)[np.asarray(envelope, dtype=bool)]
        phi = float(pv["porosity_partial_volume"])
        u = COVERAGE_FACTOR * float(pv.get("porosity_partial_volume_uncertainty", 0.0) or 0.0)
        low_phi, high_phi = phi - u, phi + u
        mp_mid, mp_a, mp_b = _volume_preserving_values(
            values, (phi, low_phi, high_phi), solid_is_bright)
        thresholds.update({
            "midpoint": 0.5 * (float(pv["gas_grey"]) + float(pv["solid_grey"])),
            "moment_preserving": mp_mid,
            "moment_preserving_low": min(mp_a, mp_b),
            "moment_preserving_high": max(mp_a, mp_b),
        })
        derivation = ("span of the nominal threshold, the midpoint of the deep-voxel pure greys "
                      "(50 % rule) and the moment-preserving thresholds at porosity_partial_"
                      f"volume ± {COVERAGE_FACTOR:g} × its uncertainty (mean grey kept)")
    else:
        delta = float(choice.delta)
        thresholds.update({"sensitivity_low": nominal - delta, "sensitivity_high": nominal + delta})
        derivation = (f"recipe sensitivity band nominal ± {delta:.6g} (partial-volume estimates "
                      f"not used: {reason})")
    low = min(thresholds.values())
    high = max(thresholds.values())
    thresholds.update({"low": low, "high": high})
    half = 0.5 * (high - low)
    return {
        "thresholds": {k: float(v) for k, v in thresholds.items()},
        "delta_low_grey": float(nominal - low),
        "delta_high_grey": float(high - nominal),
        "delta_grey": float(half),
        "delta_fraction_of_peak_distance": float(half / peak_distance)
        if peak_distance > 0 else math.nan,
        "delta_fraction_of_contrast": float(half / contrast)
        if math.isfinite(contrast) and contrast > 0 else math.nan,
        "derivation": derivation,
        "partial_volume_used": reason is None,
        "partial_volume_reason": reason or "",
    }


def segmentation_uncertainty(seg, *, spacing_um, recipe, wall_thickness: bool = True,
                             partial_volume: dict | None = None) -> dict:
    """Ranges of porosity, open share and wall-thickness D50 over a small ensemble.

    Members: the thresholds ``low``, ``nominal`` and ``high`` of :func:`threshold_span` (each
    through the recipe's thin-wall method and cleaning, as the nominal run), each with the
    ``"closing"`` and the ``"rolling_sphere"`` envelope of the recipe's radius, the two ball
    envelopes labs choose between: six segmentations. The porosity range also holds the
    partial-volume interval ``phi_pv +/- 2 u(phi_pv)`` (when its pure greys are trusted), an
    estimator with no threshold and no envelope choice beyond the nominal one: where blur makes
    every threshold wrong in the same direction, it still brackets the truth from the other side.
    The keys ``*_from`` name the member that sets each bound.

    Open share is open over gas porosity (ISO 4590 sense, see
    :func:`ctpore.measure.porosity.porosity`); wall-thickness D50 is the volume-weighted median
    local thickness of the solid (Hildebrand & Rüegsegger 1997, J. Microsc. 185:67).

    Parameters
    ----------
    seg : ctpore.segment.pipeline.Segmentation
        The nominal segmentation (its ``grey``, ``envelope`` and ``threshold`` are used).
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) in µm.
    recipe : ctpore.recipe.Recipe
        The run's parameters (threshold side, thin-wall method, cleaning, envelope radius).
    wall_thickness : bool
        Also compute wall-thickness D50 for each member (a local thickness per member).
    partial_volume : dict, optional
        :func:`ctpore.segment.partial_volume.partial_volume_porosity` output for ``seg``;
        computed when omitted.

    Returns
    -------
    dict
        ``members`` (six dicts: ``threshold_role``, ``threshold_value``, ``envelope_method``,
        ``porosity_gas``, ``open_share`` and, with ``wall_thickness``, ``wall_thickness_d50_um``),
        ``partial_volume_member`` (``porosity_gas_low``/``_high``, ``coverage_factor``, ``used``,
        ``reason``), ``porosity_gas_min``/``_max`` (members and the partial-volume interval) with
        ``porosity_gas_min_from``/``_max_from``, ``porosity_gas_threshold_min``/``_max``
        (members only), ``open_share_min``/``_max``, ``wall_thickness_d50_um_min``/``_max``
        (each with ``_from``), and the span of :func:`threshold_span` (``thresholds``,
        ``delta_grey``, ``delta_low_grey``, ``delta_high_grey``,
        ``delta_fraction_of_peak_distance``, ``delta_fraction_of_contrast``, ``derivation``).
    """
    from ..measure.porosity import porosity as measure_porosity
    from ..spacing import as_spacing_um
    from .envelope import envelope as make_envelope
    from .phases import make_phases
    from .pipeline import solid_at

    spacing = as_spacing_um(spacing_um)
    bright = recipe.threshold.solid_is_bright
    choice = seg.threshold
    if partial_volume is None:
        from .partial_volume import partial_volume_porosity

        partial_volume = partial_volume_porosity(seg.grey, seg.envelope, choice=choice,
                                                 spacing_um=spacing, solid_is_bright=bright)
    span = threshold_span(seg.grey, seg.envelope, choice, partial_volume=partial_volume,
                          solid_is_bright=bright)
    th = span["thresholds"]
    members = []
    for role in ("low", "nominal", "high"):
        value = th[role]
        solid = solid_at(seg.grey, value, spacing, recipe, choice)
        for method in _ENVELOPES:
            section = dataclasses.replace(recipe.envelope, method=method)
            env = make_envelope(solid, spacing_um=spacing, section=section)
            phases = make_phases(solid & env, env)
            p = measure_porosity(phases, spacing_um=spacing)
            gas = p["porosity_gas"]
            member = {"threshold_role": role, "threshold_value": float(value),
                      "envelope_method": method, "porosity_gas": float(gas),
                      "open_share": float(p["porosity_open"] / gas) if gas > 0 else math.nan}
            if wall_thickness:
                from ..measure.local_thickness import local_thickness, thickness_statistics

                wall = phases == 2
                member["wall_thickness_d50_um"] = float(thickness_statistics(
                    local_thickness(wall, spacing), wall)["d50_um"])
            members.append(member)

    out = {"members": members}
    out.update(span)
    candidates = {"porosity_gas": [(m["porosity_gas"], _label(m)) for m in members]}
    pv_member = {"coverage_factor": COVERAGE_FACTOR, "used": span["partial_volume_used"],
                 "reason": span["partial_volume_reason"]}
    if span["partial_volume_used"]:
        phi = float(partial_volume["porosity_partial_volume"])
        u = COVERAGE_FACTOR * float(partial_volume.get("porosity_partial_volume_uncertainty",
                                                        0.0) or 0.0)
        pv_member.update({"porosity_partial_volume": phi, "porosity_gas_low": phi - u,
                          "porosity_gas_high": phi + u})
    out["partial_volume_member"] = pv_member
    thr = [v for v, _ in candidates["porosity_gas"] if math.isfinite(v)]
    if thr:
        out["porosity_gas_threshold_min"] = float(min(thr))
        out["porosity_gas_threshold_max"] = float(max(thr))
    if span["partial_volume_used"]:
        candidates["porosity_gas"] += [
            (pv_member["porosity_gas_low"], "partial_volume - k·u"),
            (pv_member["porosity_gas_high"], "partial_volume + k·u")]
    for key in ("open_share", "wall_thickness_d50_um"):
        candidates[key] = [(m[key], _label(m)) for m in members if key in m]
    for key, pairs in candidates.items():
        pairs = [(v, who) for v, who in pairs if math.isfinite(v)]
        if not pairs:
            continue
        lo = min(pairs, key=lambda p: p[0])
        hi = max(pairs, key=lambda p: p[0])
        out[f"{key}_min"], out[f"{key}_min_from"] = float(lo[0]), lo[1]
        out[f"{key}_max"], out[f"{key}_max_from"] = float(hi[0]), hi[1]
    return out


def _label(member: dict) -> str:
    return (f"threshold {member['threshold_role']} ({member['threshold_value']:.6g}), "
            f"envelope {member['envelope_method']}")


def _unreliable(pv: dict) -> str | None:
    """Why the partial-volume estimates cannot set the span, or None when they can."""
    for phase in ("gas", "solid"):
        source = pv.get(f"{phase}_grey_source")
        if source not in ("deep_voxels", "given"):
            return f"the pure {phase} grey comes from {source or 'nowhere'}, not deep voxels"
        if source == "deep_voxels" and pv.get(f"{phase}_voxels_used", 0) < _MIN_DEEP_VOXELS:
            return (f"only {pv.get(f'{phase}_voxels_used', 0)} deep {phase} voxels (fewer than "
                    f"{_MIN_DEEP_VOXELS})")
    for key in ("porosity_partial_volume", "gas_grey", "solid_grey"):
        if not math.isfinite(float(pv.get(key, math.nan))):
            return f"{key} is not finite"
    return None


def _volume_preserving_values(values, porosities, solid_is_bright) -> list[float]:
    """Thresholds whose gas fraction among ``values`` equals each porosity.

    With k = round(porosity * n) gas voxels wanted, the threshold lies halfway between the
    k-th and (k+1)-th value counted from the gas side, so under the strict rule of
    :func:`ctpore.segment.threshold.solid_mask` (solid strictly beyond the threshold) exactly
    k voxels are gas, ties aside. ``values`` is partitioned in place (pass a copy).
    """
    v = np.asarray(values).ravel()
    n = v.size
    # Number of voxels on the low-grey side of each threshold: gas when the solid is bright.
    lows = []
    for p in porosities:
        k = int(round(min(max(float(p), 0.0), 1.0) * n))
        lows.append(k if solid_is_bright else n - k)
    kth = sorted({i for m in lows for i in (m - 1, m) if 0 <= i < n})
    if kth:
        v.partition(kth)
    out = []
    for m in lows:
        if m == 0:  # nothing below: a threshold under the smallest value
            t = float(np.nextafter(float(v.min()), -np.inf)) if solid_is_bright \
                else float(v.min())
        elif m == n:  # everything below
            t = float(v.max()) if solid_is_bright else float(np.nextafter(float(v.max()),
                                                                          np.inf))
        else:
            t = 0.5 * (float(v[m - 1]) + float(v[m]))
        out.append(t)
    return out
