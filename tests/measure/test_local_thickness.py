"""Unit tests of ctpore.measure.local_thickness: conventions, bad input, statistics, import."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from ctpore.errors import InputError
from ctpore.measure.local_thickness import (local_thickness, thickness_histogram,
                                            thickness_statistics)


def _two_blocks():
    """A 6-voxel slab joined to a 2-voxel fin, background around (plain test body)."""
    mask = np.zeros((20, 16, 16), dtype=bool)
    mask[4:10, 2:14, 2:14] = True
    mask[10:18, 7:9, 2:14] = True
    return mask


def test_zero_outside_mask_and_float32_diameters():
    mask = _two_blocks()
    lt = local_thickness(mask, (5.0, 5.0, 5.0))
    assert lt.dtype == np.float32 and lt.shape == mask.shape
    assert np.all(lt[~mask] == 0)
    assert np.all(lt[mask] > 0)
    # The fin (2 voxels, even) reads 2 voxels = 10 µm away from the slab, the slab 6 voxels
    # away from the junction (2·max distance convention, REFERENCES.md "Local thickness"); the
    # junction fits a larger ball, 2·√10 voxels.
    assert lt[15, 7, 8] == pytest.approx(10.0)
    assert lt[6, 2, 8] == pytest.approx(30.0)
    assert lt[6, 8, 8] == pytest.approx(10.0 * np.sqrt(10.0))


def test_empty_mask_gives_zeros():
    lt = local_thickness(np.zeros((4, 5, 6), dtype=bool), 1.0)
    assert lt.shape == (4, 5, 6) and lt.dtype == np.float32 and not lt.any()


def test_mask_without_background_is_refused():
    # With the image border not counted as background, nothing bounds the balls.
    with pytest.raises(InputError, match="no background"):
        local_thickness(np.ones((5, 5, 5), dtype=bool), 1.0)


@pytest.mark.parametrize("bad, match", [
    (np.zeros((5, 5), dtype=bool), "3-D"),
    (np.zeros((3, 5, 5), dtype=np.float32), "booleans or integers"),
])
def test_bad_mask_is_refused(bad, match):
    with pytest.raises(InputError, match=match):
        local_thickness(bad, 1.0)


@pytest.mark.parametrize("spacing", [None, (1.0, 2.0), (1.0, -1.0, 1.0), "x"])
def test_bad_spacing_is_refused(spacing):
    with pytest.raises(InputError, match="spacing_um"):
        local_thickness(_two_blocks(), spacing)


@pytest.mark.parametrize("parallel", [0, -2, 1.5, True, "2"])
def test_bad_thread_count_is_refused(parallel):
    with pytest.raises(InputError, match="parallel"):
        local_thickness(_two_blocks(), 1.0, parallel=parallel)


def test_integer_mask_and_keyword_spacing_match_boolean():
    mask = _two_blocks()
    a = local_thickness(mask, (2.0, 1.0, 1.0))
    b = local_thickness(mask.astype(np.uint8) * 3, spacing_um=(2.0, 1.0, 1.0))
    assert np.array_equal(a, b)


def test_threads_do_not_change_the_result():
    # Slabs painted concurrently never share a voxel: the map is the same bit for bit.
    rng = np.random.default_rng(4)
    from scipy import ndimage

    field = ndimage.gaussian_filter(rng.standard_normal((96, 40, 40)), 3)
    mask = field > 0
    serial = local_thickness(mask, (1.0, 1.0, 1.0), parallel=1)
    for threads in (2, 3):
        assert np.array_equal(local_thickness(mask, (1.0, 1.0, 1.0), parallel=threads), serial)


def test_non_contiguous_input():
    mask = np.asfortranarray(_two_blocks())
    assert np.array_equal(local_thickness(mask, 1.0), local_thickness(_two_blocks(), 1.0))


# --- statistics -----------------------------------------------------------------------------

def _mixture(fraction_thin):
    """A phase of 100 voxels, a share at 10 µm and the rest at 30 µm; 99 µm outside it."""
    n_thin = round(100 * fraction_thin)
    t = np.zeros((2, 10, 10))
    mask = np.zeros(t.shape, dtype=bool)
    mask[0] = True
    t[0].flat[:n_thin] = 10.0
    t[0].flat[n_thin:] = 30.0
    t[1] = 99.0  # outside the mask: ignored
    return t, mask


def test_statistics_of_a_known_mixture():
    # Plain arithmetic on a two-value mixture (each voxel counts by its volume, all equal):
    # half the volume at 10 µm and half at 30 µm has mean 20 µm and SD 10 µm; D10 = 10 and
    # D90 = 30 µm; D50 is the smallest thickness with at least half the volume at or below it,
    # 10 µm (inverted cumulative distribution).
    t, mask = _mixture(0.5)
    s = thickness_statistics(t, mask)
    assert s["mean_um"] == pytest.approx(20.0)
    assert s["sd_um"] == pytest.approx(10.0)
    assert (s["d10_um"], s["d50_um"], s["d90_um"], s["max_um"]) == (10.0, 10.0, 30.0, 30.0)
    assert s["voxels"] == 100
    # 40 % at 10 µm: more than half the volume is at 30 µm, so D50 = 30 µm; mean 22 µm.
    s = thickness_statistics(*_mixture(0.4))
    assert s["d50_um"] == 30.0 and s["mean_um"] == pytest.approx(22.0)


def test_statistics_of_an_empty_phase_and_shape_mismatch():
    s = thickness_statistics(np.zeros((2, 2, 2)), np.zeros((2, 2, 2), dtype=bool))
    assert s["voxels"] == 0 and np.isnan(s["mean_um"]) and np.isnan(s["d50_um"])
    with pytest.raises(InputError, match="shape"):
        thickness_statistics(np.zeros((2, 2, 2)), np.zeros((2, 2, 3), dtype=bool))


def test_histogram_volume_fractions():
    t, mask = _mixture(0.4)
    h = thickness_histogram(t, mask, bin_width_um=10.0)
    assert h["bin_lower_um"].tolist() == [0.0, 10.0, 20.0, 30.0]
    assert h["bin_upper_um"].tolist() == [10.0, 20.0, 30.0, 40.0]
    assert h["volume_fraction"].tolist() == pytest.approx([0.0, 0.4, 0.0, 0.6])
    assert h["volume_fraction"].sum() == pytest.approx(1.0)
    empty = thickness_histogram(t, np.zeros(t.shape, dtype=bool), bin_width_um=1.0)
    assert empty["volume_fraction"].size == 0
    for width in (0, -1.0, float("nan"), "a"):
        with pytest.raises(InputError, match="bin_width_um"):
            thickness_histogram(t, mask, bin_width_um=width)


def test_statistics_of_a_computed_map():
    # End to end: plates 4 and 8 voxels thick (40 and 80 µm at 10 µm voxels, even thicknesses
    # read exactly), with 256 and 512 voxels: volume-weighted mean (40·256 + 80·512)/768 µm.
    mask = np.zeros((24, 8, 8), dtype=bool)
    mask[2:6] = True
    mask[10:18] = True
    lt = local_thickness(mask, 10.0)
    s = thickness_statistics(lt, mask)
    assert s["voxels"] == 768
    assert s["mean_um"] == pytest.approx((40 * 256 + 80 * 512) / 768)
    assert (s["d10_um"], s["d50_um"], s["d90_um"], s["max_um"]) == (40.0, 80.0, 80.0, 80.0)


# --- import ---------------------------------------------------------------------------------

def test_import_is_light():
    # The module must not pull numba or porespy in at import (STYLE.md: light import).
    code = ("import sys, ctpore.measure.local_thickness; "
            "print(sorted(m for m in ('numba', 'porespy', 'edt') if m in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert done.stdout.strip() == "[]"
