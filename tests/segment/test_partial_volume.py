"""Tests for ctpore.segment.partial_volume: porosity from the mean grey value."""

import math

import numpy as np
import pytest
from scipy import ndimage as ndi
from skimage.filters import threshold_otsu

from ctpore.errors import InputError
from ctpore.recipe import ThresholdSection
from ctpore.segment.partial_volume import partial_volume_porosity
from ctpore.segment.threshold import threshold_value

GAS, SOLID = 0.2, 0.8


def _wall_phantom(rng, *, n=72, margin=6, skin=6, step=11, noise=0.06, widths=(1, 2)):
    """Box piece: a thick skin and a grid of planar 1- and 2-voxel walls, blurred and noisy.

    Returns (truth solid, envelope, grey). Linear mixing by construction: the grey is
    GAS + (SOLID - GAS) * (Gaussian blur, SD 1 voxel, of the solid indicator) + noise."""
    solid = np.zeros((n,) * 3, bool)
    env = np.zeros_like(solid)
    env[margin:n - margin, margin:n - margin, margin:n - margin] = True
    solid[env] = True
    a, b = margin + skin, n - margin - skin
    solid[a:b, a:b, a:b] = False
    for axis, start in ((0, a + 6), (1, a + 4), (2, a + 5)):
        for k, pos in enumerate(range(start, b - 3, step)):
            sl = [slice(a, b)] * 3
            sl[axis] = slice(pos, pos + widths[k % len(widths)])
            solid[tuple(sl)] = True
    blurred = ndi.gaussian_filter(solid.astype(np.float64), 1.0)
    grey = GAS + (SOLID - GAS) * blurred
    if noise:
        grey = grey + rng.normal(0.0, noise, grey.shape)
    return solid, env, grey


@pytest.fixture(scope="module")
def walls():
    return _wall_phantom(np.random.default_rng(7))


def test_thin_walls_blurred_noisy_partial_volume_beats_otsu(walls):
    solid, env, grey = walls
    truth = 1.0 - solid[env].mean()
    res = partial_volume_porosity(grey, env)
    # Linear mixing makes the mean grey exact up to noise and pure-phase estimates (derived
    # in the docstring; REFERENCES.md "Thresholding and partial volume").
    assert abs(res["porosity_partial_volume"] - truth) < 0.01
    # A global Otsu threshold (Otsu 1979, IEEE Trans. SMC-9:62) drops the 1-voxel walls that
    # blur dims below the midpoint (Verbeek & van Vliet 1994, IEEE PAMI 16:726): off by more.
    otsu = 1.0 - (grey[env] > threshold_otsu(grey)).mean()
    assert abs(otsu - truth) > 0.01
    assert abs(otsu - truth) > 3 * abs(res["porosity_partial_volume"] - truth)
    # Deep-voxel medians recover the pure phases (noise SD 0.06, 1 % contrast = 0.006).
    assert res["gas_grey_source"] == res["solid_grey_source"] == "deep_voxels"
    assert abs(res["gas_grey"] - GAS) < 0.01 and abs(res["solid_grey"] - SOLID) < 0.01
    # Robust SDs estimate the added noise SD (1.4826 MAD, normal data: Hampel 1974 [memory]).
    assert res["gas_grey_spread"] == pytest.approx(0.06, rel=0.1)
    assert res["solid_grey_spread"] == pytest.approx(0.06, rel=0.1)
    assert 0 < res["porosity_partial_volume_uncertainty"] < 0.01
    # Sensitivity d phi / d g_solid = (1 - phi) / Delta (derived).
    phi = res["porosity_partial_volume"]
    assert res["dporosity_dsolid_grey"] == pytest.approx(
        (1 - phi) / (res["solid_grey"] - res["gas_grey"]), rel=1e-12)


def test_uncertainty_covers_noise_scatter():
    # The propagated SD should match the scatter over noise realisations within a factor 3
    # (it is a first-order, independent-noise estimate; common practice, no source).
    rng = np.random.default_rng(3)
    base_solid, env, _ = _wall_phantom(rng, n=40, margin=5, skin=5, step=9, noise=0)
    blurred = ndi.gaussian_filter(base_solid.astype(np.float64), 1.0)
    values, uncs = [], []
    for _ in range(6):
        grey = GAS + (SOLID - GAS) * blurred + rng.normal(0, 0.1, blurred.shape)
        r = partial_volume_porosity(grey, env)
        values.append(r["porosity_partial_volume"])
        uncs.append(r["porosity_partial_volume_uncertainty"])
    sd = np.std(values, ddof=1)
    assert np.mean(uncs) / 3 < sd < 3 * np.mean(uncs)


def test_exact_on_noise_free_linear_mixture_without_blur():
    # Fractional gas content per voxel, g = f*gas + (1-f)*solid: phi = mean f exactly (derived).
    rng = np.random.default_rng(1)
    f = rng.uniform(0, 1, (20, 24, 28))
    env = np.zeros(f.shape, bool)
    env[3:17, 4:20, 5:22] = True
    grey = f * 11.0 + (1 - f) * 73.0
    res = partial_volume_porosity(grey, env, gas_grey=11.0, solid_grey=73.0, shell_um=0)
    assert res["porosity_partial_volume"] == pytest.approx(f[env].mean(), abs=1e-9)
    assert res["gas_grey_source"] == "given" and math.isnan(res["gas_grey_spread"])


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0)])
def test_exact_on_blurred_noise_free_mixture_with_shell(spacing):
    # Blur conserves the grey sum; with a gas shell wider than the blur support (4 SD per axis,
    # scipy's default truncation; diagonal reach 4*sqrt(3) voxels) the result is exact
    # (derived in the docstring). Without the shell, skin leaks out and phi is biased up.
    rng = np.random.default_rng(2)
    solid, env, _ = _wall_phantom(rng, n=48, margin=10, skin=4, step=7, noise=0)
    grey = GAS + (SOLID - GAS) * ndi.gaussian_filter(solid.astype(np.float64), 1.0)
    truth = 1.0 - solid[env].mean()
    shell = 7.0 * max(spacing) + 0.1
    res = partial_volume_porosity(grey, env, gas_grey=GAS, solid_grey=SOLID,
                                  spacing_um=spacing, shell_um=shell)
    assert res["porosity_partial_volume"] == pytest.approx(truth, abs=1e-9)
    plain = partial_volume_porosity(grey, env, gas_grey=GAS, solid_grey=SOLID, shell_um=0)
    # Leak per unit area sigma/sqrt(2 pi) = 0.4 voxel (derived): well above 1e-3 here.
    assert plain["porosity_partial_volume"] - truth > 1e-3


def test_falls_back_to_histogram_peak_without_thick_solid():
    rng = np.random.default_rng(5)
    solid, env, grey = _wall_phantom(rng, n=40, margin=6, skin=1, step=6, noise=0.03,
                                     widths=(1,))
    choice = threshold_value(grey, section=ThresholdSection(method="otsu"))
    # Only 1-voxel walls: no thresholded solid voxel lies 4 voxels from gas (wall crossings
    # reach about 3.5), so the solid grey must come from the histogram peak.
    res = partial_volume_porosity(grey, env, choice=choice, core_depth_um=4.0)
    assert res["solid_grey_source"] == "histogram_peak"
    assert res["solid_grey"] == choice.solid_peak


def test_bad_input():
    with pytest.raises(InputError):
        partial_volume_porosity(np.zeros((4, 4, 4)), np.ones((4, 4, 5), bool))
    with pytest.raises(InputError):
        partial_volume_porosity(np.zeros((4, 4, 4)), np.zeros((4, 4, 4), bool))
    with pytest.raises(InputError):
        partial_volume_porosity(np.zeros((4, 4, 4)), np.ones((4, 4, 4), bool),
                                gas_grey=1.0, solid_grey=1.0)


def test_demo_piece_with_known_greys_matches_truth():
    # ctpore.demo_scenario blurs then adds noise, i.e. linear mixing: with its pure-phase
    # greys the mean-grey porosity equals the true gas porosity (derived; measured 4e-5),
    # while Otsu (Otsu 1979, IEEE Trans. SMC-9:62) misses the 2-voxel walls' partial volume.
    from ctpore.demo_scenario import make_piece

    piece = make_piece(setting="intense", time_s=12.0, seed=4203)
    env = piece.truth_envelope
    truth = 1.0 - np.mean(piece.truth_phases[env] == 2)
    res = partial_volume_porosity(piece.grey, env, gas_grey=6000.0, solid_grey=26000.0,
                                  spacing_um=piece.spacing_um)
    assert abs(res["porosity_partial_volume"] - truth) < 0.002
    otsu = 1.0 - np.mean(piece.grey[env] > threshold_otsu(piece.grey))
    assert abs(otsu - truth) > 0.03


def test_dark_solid_gives_same_porosity(walls):
    solid, env, grey = walls
    bright = partial_volume_porosity(grey, env)
    dark = partial_volume_porosity(1.0 - grey, env, solid_is_bright=False)
    # Otsu's histogram bins of the negated values differ slightly, so the deep-voxel
    # populations may differ by a few voxels: agreement to 1e-4, not to rounding.
    assert dark["porosity_partial_volume"] == pytest.approx(bright["porosity_partial_volume"],
                                                            abs=1e-4)
    assert dark["solid_grey"] == pytest.approx(1.0 - bright["solid_grey"], abs=1e-3)
