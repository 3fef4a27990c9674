"""Tests for ctpore.segment.denoise against scipy.ndimage and scikit-image footprints."""

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import ndimage as ndi
from skimage.morphology import ball

from ctpore.errors import InputError
from ctpore.recipe import DenoiseSection
from ctpore.segment.denoise import ball_footprint, denoise


@pytest.fixture
def noisy():
    rng = np.random.default_rng(7)
    return rng.integers(0, 4000, size=(18, 22, 26)).astype(np.uint16)


def test_none_returns_float32_values(noisy):
    out = denoise(noisy, spacing_um=5, section=DenoiseSection())
    assert out.dtype == np.float32
    assert_array_equal(out, noisy.astype(np.float32))


def test_gaussian_equals_scipy_with_per_axis_sigma(noisy):
    # Reference library: scipy.ndimage.gaussian_filter, sigma in voxels = sigma_um / spacing.
    spacing = (2.0, 1.0, 0.5)
    out = denoise(noisy, spacing_um=spacing,
                  section=DenoiseSection(method="gaussian", sigma_um=1.5))
    ref = ndi.gaussian_filter(noisy.astype(np.float32), sigma=(0.75, 1.5, 3.0), truncate=4.0)
    assert out.dtype == np.float32
    assert_array_equal(out, ref)


def test_gaussian_impulse_has_physical_variance_sigma_squared_in_every_axis():
    # A Gaussian of standard deviation sigma has variance sigma**2 along every axis
    # [derived: definition of the normal distribution]; the sampled kernel truncated at 4 sigma
    # keeps it to well within 1 %.
    spacing = (2.0, 1.0, 0.5)
    sigma_um = 2.0
    vol = np.zeros((41, 41, 41), dtype=np.float32)
    vol[20, 20, 20] = 1.0
    out = denoise(vol, spacing_um=spacing, section=DenoiseSection(method="gaussian",
                                                                   sigma_um=sigma_um))
    assert out.sum() == pytest.approx(1.0, rel=1e-5)
    for axis, step in enumerate(spacing):
        others = tuple(a for a in range(3) if a != axis)
        profile = out.sum(axis=others).astype(np.float64)
        pos_um = (np.arange(41) - 20) * step
        var_um2 = np.sum(profile * pos_um**2) / profile.sum()
        assert var_um2 == pytest.approx(sigma_um**2, rel=0.01)


def test_median_isotropic_equals_scipy_with_skimage_ball(noisy):
    # Reference libraries: scipy.ndimage.median_filter with skimage.morphology.ball(2), whose
    # voxels are those at distance <= 2 from the centre (scikit-image docs).
    out = denoise(noisy, spacing_um=3.0, section=DenoiseSection(method="median", radius_um=6.0))
    ref = ndi.median_filter(noisy, footprint=ball(2).astype(bool), mode="reflect")
    assert out.dtype == np.float32
    assert_array_equal(out, ref.astype(np.float32))


def _ellipsoid_by_loops(radius_um, spacing):
    """Footprint of a physical ball on an anisotropic grid, built voxel by voxel."""
    half = [int(np.floor(radius_um / s)) for s in spacing]
    fp = np.zeros([2 * h + 1 for h in half], dtype=bool)
    for idx in itertools.product(*[range(2 * h + 1) for h in half]):
        d2 = sum(((i - h) * s) ** 2 for i, h, s in zip(idx, half, spacing))
        fp[idx] = d2 <= radius_um**2
    return fp


def test_anisotropic_footprint_shape():
    # Radius 2 µm at spacing (2, 1, 1): one voxel up and down in z (only the axis voxel, at
    # exactly 2 µm), a digital disc of radius 2 in the middle slice (13 voxels) [derived].
    fp = ball_footprint(2.0, spacing_um=(2, 1, 1))
    assert fp.shape == (3, 5, 5)
    assert fp[0].sum() == 1 and fp[0, 2, 2] and fp[2].sum() == 1
    assert fp[1].sum() == 13
    assert_array_equal(fp, _ellipsoid_by_loops(2.0, (2.0, 1.0, 1.0)))
    spacing = (3.0, 1.0, 0.7)
    assert_array_equal(ball_footprint(4.2, spacing_um=spacing),
                       _ellipsoid_by_loops(4.2, spacing))


def test_footprint_below_one_voxel_is_the_centre_only():
    fp = ball_footprint(0.4, spacing_um=(1, 1, 1))
    assert fp.shape == (1, 1, 1) and fp.all()


def test_median_anisotropic_equals_scipy_with_ellipsoid(noisy):
    # Reference library: scipy.ndimage.median_filter with an independently built footprint.
    spacing = (3.0, 1.0, 0.7)
    out = denoise(noisy, spacing_um=spacing,
                  section=DenoiseSection(method="median", radius_um=4.2))
    ref = ndi.median_filter(noisy, footprint=_ellipsoid_by_loops(4.2, spacing), mode="reflect")
    assert_array_equal(out, ref.astype(np.float32))


def test_median_removes_salt_noise():
    # A median over a neighbourhood where outliers are a small minority returns the background
    # exactly (Tukey 1977, Exploratory Data Analysis: running medians).
    rng = np.random.default_rng(3)
    vol = np.full((24, 24, 24), 100.0, dtype=np.float32)
    salt = rng.random(vol.shape) < 0.01
    vol[salt] = 1000.0
    out = denoise(vol, spacing_um=(2.0, 1.0, 1.0),
                  section=DenoiseSection(method="median", radius_um=2.0))
    assert salt.sum() > 50
    assert_array_equal(out, 100.0)
    # The Gaussian only spreads the outliers.
    blurred = denoise(vol, spacing_um=1.0, section=DenoiseSection(method="gaussian",
                                                                  sigma_um=1.0))
    assert blurred.max() > 100.5


def test_float_input_is_kept_in_float32():
    vol = np.linspace(0, 1, 8 * 9 * 10).reshape(8, 9, 10)
    out = denoise(vol, spacing_um=1.0, section=DenoiseSection(method="median", radius_um=1.0))
    ref = ndi.median_filter(vol, footprint=ball(1).astype(bool), mode="reflect")
    assert out.dtype == np.float32
    assert_allclose(out, ref.astype(np.float32), rtol=0, atol=0)


def test_bad_input():
    with pytest.raises(InputError, match="3-D"):
        denoise(np.zeros((4, 4)), spacing_um=1.0, section=DenoiseSection())
    with pytest.raises(InputError, match="spacing"):
        denoise(np.zeros((4, 4, 4)), spacing_um=(1.0, 0.0, 1.0), section=DenoiseSection())
    with pytest.raises(InputError, match="radius_um"):
        denoise(np.zeros((4, 4, 4)), spacing_um=1.0, section=DenoiseSection(method="median"))
