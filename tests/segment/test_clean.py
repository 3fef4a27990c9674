"""Tests for ctpore.segment.clean: speck removal by physical volume, largest piece."""

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from skimage.morphology import remove_small_holes, remove_small_objects

from ctpore.errors import InputError
from ctpore.recipe import CleanSection
from ctpore.segment.clean import clean_solid

ANISO = (2.0, 1.0, 1.0)  # one voxel is 2 µm³


def _section(solid_um3=0.0, pore_um3=0.0, largest=False):
    return CleanSection(min_solid_speck_um3=solid_um3, min_pore_speck_um3=pore_um3,
                        keep_largest_solid=largest)


def _specks_scene():
    """A big block plus isolated cubes of 8 (2x2x2) and 27 (3x3x3) voxels."""
    solid = np.zeros((30, 30, 30), dtype=bool)
    solid[2:14, 2:28, 2:28] = True  # big block, 12*26*26 voxels
    solid[18:20, 5:7, 5:7] = True  # 8 voxels = 16 µm³ at spacing (2, 1, 1)
    solid[18:21, 15:18, 15:18] = True  # 27 voxels = 54 µm³
    solid[24, 24, 24] = True  # 1 voxel = 2 µm³
    return solid


def test_solid_specks_removed_by_volume_in_um3():
    solid = _specks_scene()
    out = clean_solid(solid, spacing_um=ANISO, section=_section(solid_um3=20.0))
    assert not out[18:20, 5:7, 5:7].any()  # 16 µm³ < 20 µm³: removed
    assert not out[24, 24, 24]
    assert out[18:21, 15:18, 15:18].all()  # 54 µm³ kept
    assert out[2:14, 2:28, 2:28].all()
    # "Smaller than" is strict: a speck of exactly 16 µm³ stays with a 16 µm³ limit.
    out = clean_solid(solid, spacing_um=ANISO, section=_section(solid_um3=16.0))
    assert out[18:20, 5:7, 5:7].all() and not out[24, 24, 24]
    # The same speck at isotropic 1 µm voxels is 8 µm³: the limit is physical, not in voxels.
    out = clean_solid(solid, spacing_um=1.0, section=_section(solid_um3=10.0))
    assert not out[18:20, 5:7, 5:7].any() and out[18:21, 15:18, 15:18].all()


def test_solid_specks_agree_with_skimage_remove_small_objects():
    # Reference library: skimage.morphology.remove_small_objects (26-connectivity =
    # connectivity 3; max_size = largest voxel count removed). Limit 50 µm³ at 2 µm³ per voxel:
    # components of fewer than 25 voxels go, i.e. max_size = 24.
    rng = np.random.default_rng(0)
    solid = rng.random((24, 24, 24)) < 0.2
    out = clean_solid(solid, spacing_um=ANISO, section=_section(solid_um3=50.0))
    ref = remove_small_objects(solid, max_size=24, connectivity=3)
    assert_array_equal(out, ref)
    assert out.sum() < solid.sum()


def test_pore_specks_filled_by_volume_in_um3():
    solid = np.ones((24, 24, 24), dtype=bool)
    solid[4:6, 4:6, 4:6] = False  # enclosed pore, 8 voxels = 16 µm³
    solid[10:13, 10:13, 10:13] = False  # enclosed pore, 27 voxels = 54 µm³
    solid[0:2, 18:20, 18:20] = False  # small pore open to the volume border
    out = clean_solid(solid, spacing_um=ANISO, section=_section(pore_um3=20.0))
    assert out[4:6, 4:6, 4:6].all()
    assert not out[10:13, 10:13, 10:13].any()
    assert not out[0:2, 18:20, 18:20].any()  # touches the border: never filled
    # Reference library: skimage.morphology.remove_small_holes fills the same enclosed pores
    # (it does not spare the border pore, so compare away from it).
    ref = remove_small_holes(solid, max_size=9, connectivity=1)
    assert_array_equal(out[3:], ref[3:])


def test_pores_are_6_connected():
    # Two 4-voxel pores touching only along an edge are separate 6-connected pores, each
    # 8 µm³ at spacing (2, 1, 1): both are filled with a 10 µm³ limit although together they
    # would be 16 µm³ (complementary 26/6 connectivity: Kong & Rosenfeld 1989, CVGIP 48:357,
    # from memory).
    solid = np.ones((12, 12, 12), dtype=bool)
    solid[4:6, 4:6, 4] = False
    solid[4:6, 6:8, 5] = False  # shares only an edge with the first
    out = clean_solid(solid, spacing_um=ANISO, section=_section(pore_um3=10.0))
    assert out.all()
    out = clean_solid(solid, spacing_um=ANISO, section=_section(pore_um3=8.0))
    assert_array_equal(out, solid)


def test_keep_largest_solid():
    solid = _specks_scene()
    solid[22:29, 2:12, 2:12] = True  # a second, smaller piece (7*10*10 voxels)
    out = clean_solid(solid, spacing_um=ANISO, section=_section(largest=True))
    expected = np.zeros_like(solid)
    expected[2:14, 2:28, 2:28] = True
    assert_array_equal(out, expected)
    # Off by default in this helper: nothing changes.
    assert_array_equal(clean_solid(solid, spacing_um=ANISO, section=_section()), solid)


def test_diagonal_contact_holds_solid_together():
    # Solid is 26-connected: a block attached to the main piece by a corner stays.
    solid = np.zeros((20, 20, 20), dtype=bool)
    solid[2:10, 2:10, 2:10] = True
    solid[10:13, 10:13, 10:13] = True  # touches the big block at one corner only
    out = clean_solid(solid, spacing_um=ANISO,
                      section=_section(solid_um3=100.0, largest=True))
    assert_array_equal(out, solid)


def test_thin_connected_wall_is_kept():
    # A one-voxel-thick wall joining two blocks is part of their component: speck cleaning
    # by volume never erodes it, even when the wall alone is below the limit.
    solid = np.zeros((20, 30, 20), dtype=bool)
    solid[5:15, 2:10, 5:15] = True
    solid[5:15, 20:28, 5:15] = True
    solid[10, 10:20, 5:15] = True  # wall: 1 x 10 x 10 voxels = 200 µm³ at (2, 1, 1)
    out = clean_solid(solid, spacing_um=ANISO,
                      section=_section(solid_um3=500.0, pore_um3=500.0, largest=True))
    assert_array_equal(out, solid)
    # A closed shell with one-voxel walls is kept whole and its inside is not a speck.
    shell = np.zeros((16, 16, 16), dtype=bool)
    shell[3:13, 3:13, 3:13] = True
    shell[4:12, 4:12, 4:12] = False  # cavity of 512 voxels = 1024 µm³
    out = clean_solid(shell, spacing_um=ANISO,
                      section=_section(solid_um3=900.0, pore_um3=1000.0, largest=True))
    assert_array_equal(out, shell)
    assert shell.sum() * 2.0 == 976.0  # precondition: 488 voxels, above the 900 µm³ limit


def test_input_not_modified_and_errors():
    solid = _specks_scene()
    before = solid.copy()
    clean_solid(solid, spacing_um=ANISO, section=_section(solid_um3=20.0, largest=True))
    assert_array_equal(solid, before)
    with pytest.raises(InputError, match="3-D"):
        clean_solid(solid[0], spacing_um=ANISO, section=_section())
    with pytest.raises(InputError, match="min_solid_speck_um3"):
        clean_solid(solid, spacing_um=ANISO, section=_section(solid_um3=-1.0))


def test_label_sizes_equals_numpy_bincount():
    # Reference: numpy.bincount over the flattened labels (what label_sizes replaces, in
    # slabs, to avoid numpy's int64 copy of the whole label image).
    from scipy import ndimage as ndi

    from ctpore.segment.clean import label_sizes

    rng = np.random.default_rng(3)
    labels, n = ndi.label(rng.random((37, 21, 19)) > 0.6)
    assert labels.dtype == np.int32
    expected = np.bincount(labels.ravel(), minlength=n + 1)
    np.testing.assert_array_equal(label_sizes(labels, n, planes=4), expected)
    np.testing.assert_array_equal(label_sizes(labels), expected)
