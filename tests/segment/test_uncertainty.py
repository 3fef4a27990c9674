"""Tests for ctpore.segment.uncertainty: the segmentation-uncertainty ensemble.

Each phantom carries its voxel truth (the solid indicator before blur and noise); the ensemble's
porosity range must contain the true gas porosity 1 - solid/envelope. Grey values mix linearly
(blur of the indicator, then noise), the model under which the mean-grey porosity is exact.
"""

import math

import edt
import numpy as np
import pytest
from scipy import ndimage as ndi

import ctpore
from ctpore.segment.pipeline import segment
from ctpore.segment.threshold import ThresholdChoice
from ctpore.segment.uncertainty import (
    _volume_preserving_values, segmentation_uncertainty, threshold_span)

from ring_cylinder import ringed_cylinder  # tests/segment helper, shared with test_rings

GAS, SOLID = 0.2, 0.8
SPACING = 10.0
# A range wider than 0.1 in porosity tells a user little: common practice, no source.
MAX_WIDTH = 0.1


def _recipe(radius_um=60.0, **corrections):
    return (ctpore.Recipe().replace("structure", enabled=False)
            .replace("profiles", enabled=False).replace("envelope", radius_um=radius_um)
            .replace("corrections", **corrections))


def _walls(seed, *, n, step, skin, margin=6, noise=0.06):
    """Box piece: a solid skin and a grid of planar walls alternating 1 and 2 voxels thick,
    Gaussian blur SD 1 voxel, noise SD ``noise`` on a contrast of 0.6."""
    rng = np.random.default_rng(seed)
    solid = np.zeros((n,) * 3, bool)
    env = np.zeros_like(solid)
    env[margin:n - margin, margin:n - margin, margin:n - margin] = True
    solid[env] = True
    a, b = margin + skin, n - margin - skin
    solid[a:b, a:b, a:b] = False
    for axis, offset in enumerate((6, 4, 5)):
        for k, pos in enumerate(range(a + offset % step, b - 3, step)):
            sl = [slice(a, b)] * 3
            sl[axis] = slice(pos, pos + 1 + k % 2)
            solid[tuple(sl)] = True
    grey = GAS + (SOLID - GAS) * ndi.gaussian_filter(solid.astype(np.float64), 1.0)
    return solid, env, grey + rng.normal(0.0, noise, grey.shape)


def _small_pores(seed=5):
    """Ellipsoidal piece (semi-axes 17, 15, 14 voxels) with 25 spherical pores of radius
    sqrt(7) voxels, blur SD 0.8 voxel, noise SD 800 on a contrast of 20000, uint16."""
    rng = np.random.default_rng(seed)
    n = 40
    z, y, x = np.mgrid[:n, :n, :n] - n / 2 + 0.5
    body = (z / 17) ** 2 + (y / 15) ** 2 + (x / 14) ** 2 <= 1
    pores = np.zeros_like(body)
    for c in rng.uniform(-8, 8, size=(25, 3)) * (1, 0.8, 0.8):
        pores |= (z - c[0]) ** 2 + (y - c[1]) ** 2 + (x - c[2]) ** 2 <= 7
    g = ndi.gaussian_filter(np.where(body & ~pores, 26000.0, 6000.0), 0.8)
    g = np.clip(g + rng.normal(0, 800, g.shape), 0, 65535).astype(np.uint16)
    return body & ~pores, body, g


def _cupped_ball(seed=0, n=80, radius=34.0, cup=0.15, skin=3.0):
    """Ball of radius 34 voxels with a 3-voxel skin and overlapping spherical pores (radius
    3.5) inside; blur SD 1, noise SD 0.06 on a contrast of 0.6; the solid's contrast scaled by
    1 - 0.15 (1 - r^2) at normalised radius r (15 % radial cupping, Brooks & Di Chiro 1976,
    Phys. Med. Biol. 21:390 describe the effect)."""
    rng = np.random.default_rng(seed)
    c = (n - 1) / 2
    z, y, x = np.mgrid[:n, :n, :n]
    r = np.sqrt((z - c) ** 2 + (y - c) ** 2 + (x - c) ** 2) / radius
    env = r <= 1
    mark = np.zeros(env.shape, bool)
    idx = np.clip(np.rint(rng.uniform(c - radius, c + radius, (900, 3))).astype(int), 0, n - 1)
    mark[tuple(idx.T)] = True
    solid = env & ~((edt.edt(~mark) <= 3.5) & (r * radius <= radius - skin))
    blurred = ndi.gaussian_filter(solid.astype(np.float64), 1.0)
    grey = GAS + (SOLID - GAS) * blurred * (1 - cup * np.clip(1 - r ** 2, 0, 1))
    return solid, env, grey + rng.normal(0, 0.06, blurred.shape)


def _ringed_cylinder(seed=4):
    """The ringed cylinder of ring_cylinder.py: (solid, envelope, ringed grey)."""
    solid, env, _, ringed = ringed_cylinder(seed)
    return solid, env, ringed


def _sharp_foam(seed=3, n=40, ss=4, pore_r=3.5, n_pores=40, margin=5, skin=3):
    """No blur, no noise: each voxel's grey is GAS + (SOLID - GAS) * its solid volume fraction,
    sampled at ss**3 points per voxel (ideal detector, exact partial volume). Overlapping
    spherical pores inside a box with a solid skin. Returns (solid fraction, envelope, grey)."""
    rng = np.random.default_rng(seed)
    fine = (np.arange(n * ss) + 0.5) / ss - 0.5  # sample positions in voxel units
    gas = np.zeros((n * ss,) * 3, bool)
    for p in rng.uniform(margin + skin + pore_r, n - margin - skin - pore_r - 1, (n_pores, 3)):
        box = tuple(slice(int(math.floor(q - pore_r)) * ss, (int(math.ceil(q + pore_r)) + 1) * ss)
                    for q in p)
        z, y, x = np.meshgrid(*(fine[b] for b in box), indexing="ij", sparse=True)
        gas[box] |= (z - p[0]) ** 2 + (y - p[1]) ** 2 + (x - p[2]) ** 2 <= pore_r ** 2
    frac = 1.0 - gas.reshape(n, ss, n, ss, n, ss).mean(axis=(1, 3, 5))
    env = np.zeros((n,) * 3, bool)
    env[margin:n - margin, margin:n - margin, margin:n - margin] = True
    frac[~env] = 0.0
    return frac, env, GAS + (SOLID - GAS) * frac


def _run(grey, recipe, **kw):
    seg = segment(grey, spacing_um=SPACING, recipe=recipe)
    return seg, segmentation_uncertainty(seg, spacing_um=SPACING, recipe=recipe, **kw)


def _truth(solid, env):
    return 1.0 - float(np.count_nonzero(solid & env)) / float(np.count_nonzero(env))


PHANTOMS = {
    # 1- and 2-voxel walls, cells of about 9 voxels and of about 4.5 voxels
    "walls_step11": (lambda: _walls(7, n=72, step=11, skin=6), {}),
    "walls_step6": (lambda: _walls(7, n=60, step=6, skin=5), {}),
    # the case the former ±5 % band missed (range 0.081-0.102 for truth 0.106)
    "small_pores": (_small_pores, {"radius_um": 40.0}),
    # cupping left uncorrected: the ensemble must cover it
    "cupping_15pct": (_cupped_ball, {}),
    # rings reduced by the recipe's ring correction, as a ringed scan is run
    "rings": (_ringed_cylinder, {"rings": True}),
}


@pytest.mark.parametrize("name", list(PHANTOMS))
def test_porosity_range_contains_truth_and_is_not_too_wide(name):
    build, options = PHANTOMS[name]
    solid, env, grey = build()
    truth = _truth(solid, env)
    seg, u = _run(grey, _recipe(**options), wall_thickness=False)
    # The range must hold the voxel truth of the phantom (what the ensemble is for).
    assert u["porosity_gas_min"] <= truth <= u["porosity_gas_max"], (name, truth, u)
    assert u["porosity_gas_max"] - u["porosity_gas_min"] < MAX_WIDTH
    # It holds the nominal result too: the nominal threshold is a member.
    nominal = 1.0 - np.mean(seg.phases[seg.envelope] == 2)
    lo, hi = u["porosity_gas_threshold_min"], u["porosity_gas_threshold_max"]
    assert lo - 1e-12 <= nominal <= hi + 1e-12
    # Six members: three thresholds (low, nominal, high) x two ball envelopes.
    assert len(u["members"]) == 6
    assert u["thresholds"]["low"] <= seg.threshold.value <= u["thresholds"]["high"]


def test_blur_moves_the_volume_preserving_threshold_off_the_midpoint():
    # 1-voxel walls blurred with SD 1 voxel peak at 0.38 of the contrast and vanish at the
    # midpoint (Verbeek & van Vliet 1994, IEEE PAMI 16:726), while 4-voxel cells fill in: the
    # blur-invariant mean grey (linear mixing) then asks for a threshold away from the midpoint,
    # and the span opens to it. Otsu (Otsu 1979, IEEE Trans. SMC-9:62) sits elsewhere again.
    solid, env, grey = _walls(7, n=60, step=6, skin=5)
    seg, u = _run(grey, _recipe(), wall_thickness=False)
    th = u["thresholds"]
    contrast = SOLID - GAS
    assert th["midpoint"] == pytest.approx(0.5 * (GAS + SOLID), abs=0.01 * contrast)
    assert abs(th["moment_preserving"] - th["midpoint"]) > 0.02 * contrast
    # The moment-preserving threshold reproduces the mean-grey porosity inside the envelope
    # (Tsai 1985, CVGIP 29:377, first moment with fixed pure greys).
    pv = u["partial_volume_member"]["porosity_partial_volume"]
    gas = np.mean(seg.grey[seg.envelope] <= th["moment_preserving"])
    assert gas == pytest.approx(pv, abs=1e-4)
    assert u["delta_grey"] == pytest.approx(0.5 * (th["high"] - th["low"]))
    assert u["delta_fraction_of_peak_distance"] == pytest.approx(
        u["delta_grey"] / abs(seg.threshold.solid_peak - seg.threshold.gas_peak))
    assert u["partial_volume_used"] and "moment-preserving" in u["derivation"]


def test_sharp_noise_free_phantom_collapses_near_truth():
    # Ideal detector: no blur, no noise, exact partial volume of the voxels. The three
    # thresholds (Otsu, midpoint, moment-preserving) all lie within 2 % of the contrast of the
    # midpoint, and the range shrinks to the voxel truth (tolerances 0.005: common practice, no
    # source). Measured: width 0.0015; the former fixed band (±5 % of the peak distance around
    # Otsu's value) gave 0.0069 here, so this check tells the two apart.
    frac, env, grey = _sharp_foam()
    truth = 1.0 - frac[env].mean()
    _, u = _run(grey, _recipe(), wall_thickness=False)
    assert u["porosity_gas_max"] - u["porosity_gas_min"] < 0.005
    assert abs(u["porosity_gas_min"] - truth) < 0.005
    assert abs(u["porosity_gas_max"] - truth) < 0.005
    assert u["delta_fraction_of_contrast"] < 0.03


def test_two_valued_phantom_has_no_width():
    # Grey values GAS or SOLID only: every threshold between them gives the same segmentation,
    # so the range is the truth exactly.
    solid, env, _ = _walls(1, n=48, step=7, skin=4)
    grey = np.where(solid, SOLID, GAS)
    _, u = _run(grey, _recipe(), wall_thickness=False)
    truth = _truth(solid, env)
    assert u["porosity_gas_min"] == pytest.approx(truth, abs=1e-12)
    assert u["porosity_gas_max"] == pytest.approx(truth, abs=1e-12)


def test_wall_thickness_and_open_share_ranges_and_bound_labels():
    solid, env, grey = _small_pores()
    _, u = _run(grey, _recipe(radius_um=40.0), wall_thickness=True)
    for key in ("porosity_gas", "open_share", "wall_thickness_d50_um"):
        assert u[f"{key}_min"] <= u[f"{key}_max"]
        values = [m[key] for m in u["members"]]
        if key != "porosity_gas":
            assert u[f"{key}_min"] == min(values) and u[f"{key}_max"] == max(values)
        assert isinstance(u[f"{key}_min_from"], str) and isinstance(u[f"{key}_max_from"], str)
    # Wall-thickness D50 is in µm: the ellipsoid's solid is a few voxels thick between pores.
    assert SPACING <= u["wall_thickness_d50_um_min"] <= 20 * SPACING
    pv = u["partial_volume_member"]
    assert pv["porosity_gas_low"] < pv["porosity_partial_volume"] < pv["porosity_gas_high"]
    assert u["porosity_gas_min"] <= pv["porosity_gas_low"]
    assert u["porosity_gas_max"] >= pv["porosity_gas_high"]
    labels = {u["porosity_gas_min_from"], u["porosity_gas_max_from"]}
    assert labels <= {_member_label(m) for m in u["members"]} | {
        "partial_volume - k·u", "partial_volume + k·u"}


def _member_label(m):
    return (f"threshold {m['threshold_role']} ({m['threshold_value']:.6g}), "
            f"envelope {m['envelope_method']}")


def test_dark_solid_gives_the_same_range():
    solid, env, grey = _walls(3, n=48, step=7, skin=4)
    _, bright = _run(grey, _recipe(), wall_thickness=False)
    dark_recipe = _recipe().replace("threshold", solid_is_bright=False)
    _, dark = _run(1.0 - grey, dark_recipe, wall_thickness=False)
    # Histogram bins of the negated values differ slightly (Otsu's value moves by < 1 bin):
    # agreement to 2e-3, not to rounding.
    assert dark["porosity_gas_min"] == pytest.approx(bright["porosity_gas_min"], abs=2e-3)
    assert dark["porosity_gas_max"] == pytest.approx(bright["porosity_gas_max"], abs=2e-3)
    assert dark["thresholds"]["midpoint"] == pytest.approx(
        1.0 - bright["thresholds"]["midpoint"], abs=1e-3)


@pytest.mark.parametrize("bright", [True, False])
def test_volume_preserving_values_split_exactly(bright):
    # Reference: direct counting with numpy. The gas side is <= t (bright solid) or >= t.
    rng = np.random.default_rng(0)
    v = rng.normal(size=1001)
    for phi in (0.0, 0.1234, 0.5, 0.9, 1.0):
        (t,) = _volume_preserving_values(v.copy(), [phi], bright)
        gas = np.mean(v <= t) if bright else np.mean(v >= t)
        assert gas == pytest.approx(round(phi * v.size) / v.size, abs=1e-12)


def test_untrusted_pure_greys_fall_back_to_the_sensitivity_band():
    choice = ThresholdChoice(method="otsu", value=0.5, gas_peak=0.2, solid_peak=0.7, delta=0.025)
    pv = {"porosity_partial_volume": 0.4, "porosity_partial_volume_uncertainty": 0.01,
          "gas_grey": 0.2, "solid_grey": 0.7, "gas_grey_source": "deep_voxels",
          "solid_grey_source": "histogram_peak", "gas_voxels_used": 5000,
          "solid_voxels_used": 0}
    grey = np.linspace(0, 1, 1000).reshape(10, 10, 10)
    span = threshold_span(grey, np.ones(grey.shape, bool), choice, partial_volume=pv)
    assert not span["partial_volume_used"] and "histogram_peak" in span["partial_volume_reason"]
    assert span["thresholds"]["low"] == pytest.approx(0.475)
    assert span["thresholds"]["high"] == pytest.approx(0.525)
    assert span["delta_fraction_of_peak_distance"] == pytest.approx(0.05)
    pv.update(solid_grey_source="deep_voxels", solid_voxels_used=40)
    span = threshold_span(grey, np.ones(grey.shape, bool), choice, partial_volume=pv)
    assert not span["partial_volume_used"] and "40 deep solid" in span["partial_volume_reason"]


def test_analyze_reports_the_range_and_it_holds_the_truth():
    # The full path: analyze passes its partial-volume estimate to the ensemble, and
    # summary["uncertainty"] holds the truth on the small-pore piece.
    solid, env, grey = _small_pores()
    s = ctpore.analyze(grey, spacing_um=SPACING,
                       recipe=_recipe(radius_um=40.0, uncertainty=True)).summary
    u = s["uncertainty"]
    assert u["porosity_gas_min"] <= _truth(solid, env) <= u["porosity_gas_max"]
    assert u["porosity_gas_min"] <= s["porosity_gas"] <= u["porosity_gas_max"]
    assert {"delta_grey", "delta_fraction_of_peak_distance", "derivation",
            "partial_volume_member", "open_share_min", "open_share_max"} <= set(u)
    assert ctpore.analysis.segmentation_uncertainty is segmentation_uncertainty
