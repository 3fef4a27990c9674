"""Averaging kernels against scipy's filters and against their physical definitions.

Each check names its source beside it.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage, special

from ctpore.continuum.kernels import Kernel, apply_kernel, apply_squared_kernel, kernel_weights
from ctpore.errors import InputError


@pytest.fixture(scope="module")
def noise():
    return np.random.default_rng(0).random((40, 44, 48)).astype(np.float32)


@pytest.mark.parametrize("width_vox", [3, 4, 5, 8, 9])
def test_box_equals_scipy_uniform_filter(noise, width_vox):
    # Reference library: scipy.ndimage.uniform_filter, mode "constant". The box holds the voxel
    # centres within ±width/2, so its size is 2·floor(width/2) + 1 voxels (odd, centred).
    size = 2 * (width_vox // 2) + 1
    ref = ndimage.uniform_filter(noise, size=size, mode="constant", cval=0.0)
    out = apply_kernel(noise, kernel=Kernel("box", 10.0 * width_vox), spacing_um=10.0)
    assert out.dtype == np.float32
    np.testing.assert_array_equal(out, ref)


@pytest.mark.parametrize("sigma_vox,truncate", [(1.0, 4.0), (2.5, 3.0), (4.0, 2.0)])
def test_gaussian_equals_scipy_gaussian_filter(noise, sigma_vox, truncate):
    # Reference library: scipy.ndimage.gaussian_filter (same truncation rule, float32 passes).
    ref = ndimage.gaussian_filter(noise, sigma_vox, mode="constant", cval=0.0, truncate=truncate)
    out = apply_kernel(noise, kernel=Kernel("gaussian", 8.0 * sigma_vox, truncate),
                       spacing_um=8.0)
    np.testing.assert_array_equal(out, ref)


@pytest.mark.parametrize("spacing", [(10.0, 10.0, 10.0), (20.0, 10.0, 10.0)])
def test_ball_fft_equals_direct_correlation(noise, spacing):
    # Reference library: scipy.ndimage.correlate with the explicit 3-D weights (direct sums);
    # the FFT differs only by float32 rounding.
    kernel = Kernel("ball", 90.0)
    weights = kernel_weights(kernel, spacing_um=spacing)
    ref = ndimage.correlate(noise.astype(np.float64), weights, mode="constant", cval=0.0)
    out = apply_kernel(noise, kernel=kernel, spacing_um=spacing)
    np.testing.assert_allclose(out, ref, atol=2e-6)


def test_explicit_weights_reproduce_separable_filters(noise):
    # The 3-D weights of a separable kernel are the outer product used by the 1-D passes:
    # correlating with them (scipy.ndimage.correlate) gives the same result.
    for kernel, spacing in ((Kernel("gaussian", 15.0), (10.0, 5.0, 5.0)),
                            (Kernel("box", 30.0), (10.0, 5.0, 7.0))):
        w = kernel_weights(kernel, spacing_um=spacing)
        ref = ndimage.correlate(noise.astype(np.float64), w, mode="constant", cval=0.0)
        out = apply_kernel(noise, kernel=kernel, spacing_um=spacing)
        np.testing.assert_allclose(out, ref, atol=1e-6)
        assert math.isclose(float(w.sum()), 1.0, rel_tol=1e-12)
        np.testing.assert_allclose(w, w[::-1, ::-1, ::-1])  # centred and symmetric


def _second_moments_um2(kernel, spacing):
    w = kernel_weights(kernel, spacing_um=spacing)
    out = []
    for axis, s in enumerate(spacing):
        n = w.shape[axis]
        offsets = (np.arange(n) - n // 2) * s
        shape = [1, 1, 1]
        shape[axis] = n
        out.append(float(np.sum(w * offsets.reshape(shape) ** 2)))
    return np.array(out)


SPACINGS = [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0), (0.5, 1.0, 1.5)]


def test_gaussian_is_the_same_physical_kernel_at_any_spacing():
    # A Gaussian of σ truncated at t·σ has per-axis variance σ²(1 − 2tφ(t)/(2Φ(t) − 1))
    # (variance of a truncated normal; e.g. Johnson, Kotz & Balakrishnan 1994, Continuous
    # Univariate Distributions, ch. 13, from memory); every spacing must give it in µm².
    sigma, t = 6.0, 3.0
    phi = math.exp(-t * t / 2) / math.sqrt(2 * math.pi)
    expected = sigma**2 * (1 - 2 * t * phi / special.erf(t / math.sqrt(2)))
    for spacing in SPACINGS:
        m = _second_moments_um2(Kernel("gaussian", sigma, t), spacing)
        np.testing.assert_allclose(m, expected, rtol=0.012)  # sampling at 1.5 µm: derived ~1 %


def test_ball_is_the_same_physical_kernel_at_any_spacing():
    # A uniform ball of radius R has per-axis second moment R²/5 (elementary integral).
    radius = 12.0
    for spacing in SPACINGS:
        m = _second_moments_um2(Kernel("ball", 2 * radius), spacing)
        np.testing.assert_allclose(m, radius**2 / 5, rtol=0.03)  # voxelisation of the sphere
        count = np.count_nonzero(kernel_weights(Kernel("ball", 2 * radius), spacing_um=spacing))
        voxel = math.prod(spacing)
        assert count * voxel == pytest.approx(4 / 3 * math.pi * radius**3, rel=0.03)


def test_box_voxel_set_follows_its_definition():
    # Box of side W: the voxel centres k·s with |k·s| ≤ W/2, i.e. 2·floor(W/2/s) + 1 voxels; a
    # discrete uniform distribution on h·s..h·s has second moment s²·h(h + 1)/3 (elementary).
    width = 20.0
    for spacing in SPACINGS:
        h = [math.floor(width / 2 / s) for s in spacing]
        w = kernel_weights(Kernel("box", width), spacing_um=spacing)
        assert w.shape == tuple(2 * k + 1 for k in h)
        expected = [s * s * k * (k + 1) / 3 for s, k in zip(spacing, h)]
        np.testing.assert_allclose(_second_moments_um2(Kernel("box", width), spacing), expected)
        # Within one voxel of the physical cube W²/12 (uniform distribution on [−W/2, W/2]).
        for s, k in zip(spacing, h):
            assert abs((2 * k + 1) * s - width) <= s


def _porous_body(spacing, shape):
    """A smooth periodic porous structure defined in µm, sampled at voxel i = i·spacing."""
    z, y, x = (np.arange(n) * s for n, s in zip(shape, spacing))
    f = (np.sin(2 * np.pi * z[:, None, None] / 32 + 0.3) * np.sin(2 * np.pi * y[None, :, None] / 40)
         + 0.5 * np.cos(2 * np.pi * x[None, None, :] / 28))
    return f > 0.1


@pytest.mark.parametrize("kernel", [Kernel("gaussian", 4.0), Kernel("box", 21.0),
                                    Kernel("ball", 24.0)], ids=lambda k: k.shape)
def test_same_body_at_anisotropic_spacing_gives_the_same_field(kernel):
    # The same physical body sampled at (1, 1, 1) and (2, 1, 1) µm and smoothed with the same
    # physical kernel agrees on the common points (z even); the differences are the coarser
    # sampling along z (tolerance: common practice, no source). A kernel taken in voxels instead
    # of µm (σ_z twice as wide on the coarse grid) must fail the same check.
    fine = _porous_body((1.0, 1.0, 1.0), (64, 64, 64))
    coarse = _porous_body((2.0, 1.0, 1.0), (32, 64, 64))
    assert np.array_equal(fine[::2], coarse)
    a = apply_kernel(fine, kernel=kernel, spacing_um=(1, 1, 1))[::2]
    b = apply_kernel(coarse, kernel=kernel, spacing_um=(2, 1, 1))
    inner = (slice(7, -7), slice(14, -14), slice(14, -14))
    diff = np.abs(a - b)[inner]
    assert diff.mean() < 0.008 and diff.max() < 0.04
    wrong = apply_kernel(coarse, kernel=kernel, spacing_um=(1, 1, 1))  # voxel units
    assert np.abs(a - wrong)[inner].mean() > 3 * diff.mean()


def test_effective_volume():
    # V_eff = v / Σw² (derived in Kernel.effective_volume_um3): the box's own volume for equal
    # weights; (2√π σ)³ for a Gaussian (1/∫g², continuous normal density), up to truncation.
    spacing = (2.0, 1.0, 1.0)
    box = Kernel("box", 21.0)
    n = np.count_nonzero(kernel_weights(box, spacing_um=spacing))
    assert box.effective_volume_um3(spacing) == pytest.approx(n * 2.0)
    gauss = Kernel("gaussian", 5.0, 4.0)
    assert gauss.effective_volume_um3(spacing) == pytest.approx(
        (2 * math.sqrt(math.pi) * 5.0) ** 3, rel=0.01)


def test_squared_kernel_matches_explicit_squared_weights(noise):
    # Σ w_k² v[i + k] with the explicit squared weights (scipy.ndimage.correlate).
    for kernel, spacing in ((Kernel("gaussian", 12.0), (10.0, 5.0, 5.0)),
                            (Kernel("ball", 50.0), (10.0, 10.0, 5.0))):
        w = kernel_weights(kernel, spacing_um=spacing)
        ref = ndimage.correlate(noise.astype(np.float64), w * w, mode="constant", cval=0.0)
        out = apply_squared_kernel(noise, kernel=kernel, spacing_um=spacing)
        np.testing.assert_allclose(out, ref, atol=1e-8, rtol=1e-4)


def test_names_and_bad_input():
    assert Kernel("gaussian", 400).name == "gaussian σ=400 µm, truncated at 3σ"
    assert Kernel("box", 400).name == "box 400 µm cube"
    assert Kernel("ball", 400).name == "ball 400 µm diameter"
    with pytest.raises(InputError, match="shape"):
        Kernel("cone", 10)
    with pytest.raises(InputError, match="width_um"):
        Kernel("box", 0)
    with pytest.raises(InputError, match="truncate_sigma"):
        Kernel("gaussian", 10, 0)
    with pytest.raises(InputError, match="3-D"):
        apply_kernel(np.zeros((4, 4)), kernel=Kernel("box", 1), spacing_um=1)
    with pytest.raises(InputError, match="spacing"):
        apply_kernel(np.zeros((4, 4, 4)), kernel=Kernel("box", 1), spacing_um=(1, 0, 1))
