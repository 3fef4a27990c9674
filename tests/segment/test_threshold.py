"""Tests for ctpore.segment.threshold against published properties and scikit-image."""

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from skimage import exposure, filters

import ctpore.segment.threshold as threshold_module
from ctpore.errors import InputError
from ctpore.recipe import ThresholdSection
from ctpore.segment.threshold import (FLOAT_BINS, grey_histogram, solid_mask,
                                      threshold_value)

SKIMAGE = {
    "otsu": filters.threshold_otsu,
    "isodata": filters.threshold_isodata,
    "li": filters.threshold_li,
    "triangle": filters.threshold_triangle,
}


def _mixture(rng, n, means, sds, weights, dtype, lo=None, hi=None):
    """Gaussian mixture grey values and their true class labels, shuffled together."""
    counts = rng.multinomial(n, weights)
    values = np.concatenate([rng.normal(m, s, c) for m, s, c in zip(means, sds, counts)])
    labels = np.repeat(np.arange(len(means)), counts)
    order = rng.permutation(n)
    values, labels = values[order], labels[order]
    if lo is not None:
        values = np.clip(np.rint(values), lo, hi)
    return values.astype(dtype), labels


@pytest.fixture(scope="module")
def two_gaussians():
    """Equal weights, equal sigma: gas N(0.4, 0.05), solid N(0.6, 0.05), float32, 48**3.

    Four sigma apart the classes still overlap, so the criteria have a well-defined optimum
    (with the classes far apart Otsu's criterion is flat across the empty valley)."""
    rng = np.random.default_rng(11)
    values, _ = _mixture(rng, 48**3, (0.4, 0.6), (0.05, 0.05), (0.5, 0.5), np.float32)
    return values.reshape(48, 48, 48)


@pytest.fixture(scope="module")
def int16_stack():
    """Unequal classes on 16-bit integers spanning about 3500 grey values, 32**3."""
    rng = np.random.default_rng(5)
    values, labels = _mixture(rng, 32**3, (1000, 2500), (150, 250), (0.6, 0.4), np.uint16,
                              0, 65535)
    return values.reshape(32, 32, 32), labels.reshape(32, 32, 32)


@pytest.mark.parametrize("method", ["otsu", "isodata", "multiotsu", "peak_midpoint"])
def test_equal_gaussians_give_the_midpoint(two_gaussians, method):
    # Two equal Gaussians of equal sigma: Otsu (Otsu 1979, IEEE Trans. SMC-9:62-66) and
    # isodata (Ridler & Calvard 1978, IEEE Trans. SMC-8:630) give the midpoint; multi-level
    # Otsu with 2 classes is Otsu; the midpoint of the two peaks is the midpoint by symmetry
    # [derived]. Sampling noise of 110 592 values: class means move by ~0.0002, well under
    # 0.002; histogram modes (peak_midpoint) by up to ~0.2 sigma = 0.01, as the top of a
    # Gaussian is flat.
    section = ThresholdSection(method=method, classes=2, boundary=1)
    choice = threshold_value(two_gaussians, section=section)
    assert choice.method == method
    assert choice.value == pytest.approx(0.5, abs=0.01 if method == "peak_midpoint" else 0.002)
    # The histogram modes on either side are the class means (within the sampling noise).
    assert choice.gas_peak == pytest.approx(0.4, abs=0.015)
    assert choice.solid_peak == pytest.approx(0.6, abs=0.015)
    # delta = sensitivity_fraction * (solid_peak - gas_peak) = 0.05 * 0.2
    assert choice.delta == pytest.approx(0.05 * (choice.solid_peak - choice.gas_peak))
    assert choice.delta == pytest.approx(0.01, abs=0.0015)


def test_sensitivity_delta_overrides_fraction(two_gaussians):
    choice = threshold_value(two_gaussians,
                             section=ThresholdSection(sensitivity_delta=0.03))
    assert choice.delta == 0.03


@pytest.mark.parametrize("method", ["otsu", "isodata", "li", "triangle"])
def test_integer_data_agrees_exactly_with_skimage(int16_stack, method):
    # Reference library: scikit-image's threshold functions called directly on the raw values.
    vol, _ = int16_stack
    ours = threshold_value(vol, section=ThresholdSection(method=method)).value
    assert ours == float(SKIMAGE[method](vol))
    # The same inside a mask equals scikit-image on the masked values.
    mask = np.zeros(vol.shape, dtype=bool)
    mask[4:28, 2:30, 6:26] = True
    ours = threshold_value(vol, section=ThresholdSection(method=method), mask=mask).value
    assert ours == float(SKIMAGE[method](vol[mask]))


@pytest.mark.parametrize("method", ["otsu", "isodata", "li", "triangle"])
def test_float_data_agrees_with_skimage_within_one_bin(two_gaussians, method):
    # Reference library: scikit-image on the same float data with the same 4096 bins.
    kwargs = {} if method == "li" else {"nbins": FLOAT_BINS}
    ref = float(SKIMAGE[method](two_gaussians, **kwargs))
    choice = threshold_value(two_gaussians, section=ThresholdSection(method=method))
    bin_width = (choice.details["grey_max"] - choice.details["grey_min"]) / FLOAT_BINS
    assert abs(choice.value - ref) <= bin_width


@pytest.fixture(scope="module")
def three_classes():
    """Gas, wall and dense inclusions on 8-bit values: N(50, 10), N(130, 12), N(215, 8)."""
    rng = np.random.default_rng(2)
    values, labels = _mixture(rng, 32**3, (50, 130, 215), (10, 12, 8), (0.5, 0.4, 0.1),
                              np.uint8, 0, 255)
    return values.reshape(32, 32, 32), labels.reshape(32, 32, 32)


@pytest.mark.parametrize("boundary", [1, 2])
def test_multiotsu_boundary_selection(three_classes, boundary):
    # Reference library: skimage.filters.threshold_multiotsu (Liao, Chen & Chung 2001,
    # J. Inf. Sci. Eng. 17:713); exact on 8-bit data (one bin per grey value).
    vol, _ = three_classes
    ref = filters.threshold_multiotsu(vol, classes=3)
    choice = threshold_value(vol, section=ThresholdSection(method="multiotsu", classes=3,
                                                           boundary=boundary))
    assert choice.value == float(ref[boundary - 1])
    assert choice.details["thresholds"] == [float(t) for t in ref]
    # boundary 1 separates gas from wall, boundary 2 wall from inclusions.
    lo, hi = (50, 130) if boundary == 1 else (130, 215)
    assert lo < choice.value < hi


def test_multiotsu_on_a_wide_histogram_within_one_merged_bin(int16_stack):
    # 16-bit data spanning ~3500 grey values is merged to at most 1024 bins for 3 classes;
    # scikit-image with nbins=1024 on the raw values must agree within one merged bin.
    vol, _ = int16_stack
    choice = threshold_value(vol.astype(np.float32),
                             section=ThresholdSection(method="multiotsu", classes=3))
    ref = filters.threshold_multiotsu(vol.astype(np.float32), classes=3, nbins=1024)
    width = (choice.details["grey_max"] - choice.details["grey_min"]) / 1024
    assert choice.details["multiotsu_bins"] == 1024
    assert abs(choice.value - float(ref[0])) <= width


def test_peak_midpoint_on_a_bimodal_16_bit_histogram():
    # Midpoint between the air and material peaks ("50 % rule"): common practice in CT
    # dimensional metrology, no single source. Peaks at 8000 and 30000: midpoint 19000.
    rng = np.random.default_rng(9)
    values, _ = _mixture(rng, 48**3, (8000, 30000), (600, 1500), (0.6, 0.4), np.uint16,
                         0, 65535)
    vol = values.reshape(48, 48, 48)
    choice = threshold_value(vol, section=ThresholdSection(method="peak_midpoint"))
    assert choice.details["exact_integer_bins"]
    assert 8000 < choice.value < 30000
    assert choice.gas_peak == pytest.approx(8000, abs=150)
    assert choice.solid_peak == pytest.approx(30000, abs=300)
    assert choice.value == pytest.approx(19000, abs=200)
    assert choice.value == pytest.approx(0.5 * (choice.gas_peak + choice.solid_peak))


def test_peak_midpoint_finds_a_clipped_air_peak_at_the_range_end():
    # Air clipped at grey value 0 puts the gas peak on the first bin of the histogram.
    rng = np.random.default_rng(4)
    values, _ = _mixture(rng, 32**3, (0, 20000), (300, 1000), (0.5, 0.5), np.uint16, 0, 65535)
    choice = threshold_value(values.reshape(32, 32, 32),
                             section=ThresholdSection(method="peak_midpoint"))
    assert choice.gas_peak == 0.0
    assert choice.solid_peak == pytest.approx(20000, abs=300)
    assert choice.value == pytest.approx(10000, abs=150)


def test_inverted_contrast(three_classes):
    # Same scene with dark solid: the threshold mirrors, the peaks swap sides, and the solid
    # mask (strictly below the threshold) matches the truth as well as in normal contrast.
    # Classes N(80, 12) and N(150, 15): about 0.5 % overlap error at the Otsu threshold.
    rng = np.random.default_rng(8)
    values, labels = _mixture(rng, 32**3, (80, 150), (12, 15), (0.55, 0.45), np.uint8, 0, 255)
    bright = values.reshape(32, 32, 32)
    truth = labels.reshape(32, 32, 32) == 1
    dark = (255 - bright).astype(np.uint8)
    normal = threshold_value(bright, section=ThresholdSection())
    inverted = threshold_value(dark, section=ThresholdSection(solid_is_bright=False))
    assert inverted.value == float(filters.threshold_otsu(dark))
    assert abs(inverted.value - (255 - normal.value)) <= 1
    assert inverted.gas_peak > inverted.solid_peak
    assert inverted.gas_peak == pytest.approx(255 - 80, abs=3)
    assert inverted.solid_peak == pytest.approx(255 - 150, abs=3)
    assert inverted.delta == pytest.approx(0.05 * 70, abs=0.3)
    seg_bright = solid_mask(bright, normal.value)
    seg_dark = solid_mask(dark, inverted.value, solid_is_bright=False)
    assert np.mean(seg_bright == truth) > 0.99
    assert np.mean(seg_dark == truth) > 0.99


def test_solid_mask_is_strict():
    vol = np.array([[[1, 2, 3, 4]]], dtype=np.uint8)
    assert_array_equal(solid_mask(vol, 2), [[[False, False, True, True]]])
    assert_array_equal(solid_mask(vol, 3, solid_is_bright=False), [[[True, True, False, False]]])
    with pytest.raises(InputError, match="NaN"):
        solid_mask(vol, float("nan"))


def test_histogram_matches_skimage(int16_stack, two_gaussians):
    # Reference library: skimage.exposure.histogram (bincount for integers, np.histogram on
    # [min, max] for floats).
    vol, _ = int16_stack
    counts, centres = grey_histogram(vol)
    ref_counts, ref_centres = exposure.histogram(vol)
    assert_array_equal(counts, ref_counts)
    assert_array_equal(centres, ref_centres)
    assert counts.sum() == vol.size
    counts, centres = grey_histogram(two_gaussians)
    ref_counts, ref_centres = exposure.histogram(two_gaussians, nbins=FLOAT_BINS)
    assert counts.size == FLOAT_BINS
    assert_array_equal(counts, ref_counts)
    assert_array_equal(centres, ref_centres)
    counts, _ = grey_histogram(two_gaussians, bins=64)
    assert_array_equal(counts, np.histogram(two_gaussians, bins=64)[0])


def test_histogram_by_slabs_equals_whole(int16_stack, two_gaussians, monkeypatch):
    vol, _ = int16_stack
    mask = vol > 900
    whole = [grey_histogram(v, mask=m) for v, m in ((vol, mask), (two_gaussians, None))]
    monkeypatch.setattr(threshold_module, "_SLAB_VOXELS", 1000)
    slabs = [grey_histogram(v, mask=m) for v, m in ((vol, mask), (two_gaussians, None))]
    for (c1, m1), (c2, m2) in zip(whole, slabs):
        assert_array_equal(c1, c2)
        assert_array_equal(m1, m2)
    assert whole[0][0].sum() == mask.sum()


def test_manual_value():
    vol = np.arange(64, dtype=np.uint16).reshape(4, 4, 4)
    choice = threshold_value(vol, section=ThresholdSection(method="manual", value=20.5))
    assert choice.value == 20.5
    assert choice.gas_peak <= 20.5 < choice.solid_peak
    assert threshold_value(vol, section=ThresholdSection(method="manual", value=63)).value == 63
    with pytest.raises(InputError, match=r"outside the stack's grey range"):
        threshold_value(vol, section=ThresholdSection(method="manual", value=64))
    with pytest.raises(InputError, match="threshold.value"):
        threshold_value(vol, section=ThresholdSection(method="manual"))


def test_error_cases():
    with pytest.raises(InputError, match="empty"):
        threshold_value(np.zeros((0, 5, 5), dtype=np.uint8), section=ThresholdSection())
    vol = np.arange(125, dtype=np.float32).reshape(5, 5, 5)
    with pytest.raises(InputError, match="mask selects no voxel"):
        threshold_value(vol, section=ThresholdSection(), mask=np.zeros(vol.shape, bool))
    with pytest.raises(InputError, match="shape"):
        threshold_value(vol, section=ThresholdSection(), mask=np.ones((5, 5), bool))
    with pytest.raises(InputError, match="one grey value") as err:
        threshold_value(np.full((4, 4, 4), 7, dtype=np.uint16), section=ThresholdSection())
    assert "contrast" in err.value.fix and "file" in err.value.fix
    bad = vol.copy()
    bad[0, 0, 0] = np.nan
    with pytest.raises(InputError, match="NaN"):
        threshold_value(bad, section=ThresholdSection())
    mask = np.ones(vol.shape, bool)
    mask[0, 0, 0] = False  # NaN outside the mask is ignored
    assert np.isfinite(threshold_value(bad, section=ThresholdSection(), mask=mask).value)
    with pytest.raises(InputError, match="two peaks"):
        rng = np.random.default_rng(1)
        one = rng.normal(100, 10, (32, 32, 32)).astype(np.float32)
        threshold_value(one, section=ThresholdSection(method="peak_midpoint"))
    with pytest.raises(InputError, match="too few distinct grey values"):
        two = np.zeros((4, 4, 4), np.uint8)
        two[2:] = 9
        threshold_value(two, section=ThresholdSection(method="multiotsu", classes=3))
