"""Unit tests of the structure measures: surface, topology, anisotropy and chords.

Bookkeeping, invariances and bad input; the checks against outside values are in
tests/reference/.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage
from skimage.measure import euler_number

import ctpore.measure.chords as chords_module
import ctpore.measure.surface as surface_module
import ctpore.measure.topology as topology_module
from ctpore.errors import InputError
from ctpore.measure.anisotropy import mil_anisotropy
from ctpore.measure.chords import chord_histogram, chord_lengths, chord_summary
from ctpore.measure.surface import specific_surface
from ctpore.measure.topology import connectivity_density, euler_characteristic

EXTERIOR, PORE, SOLID = 0, 1, 2


def _blobs(shape=(40, 36, 32), seed=0, sigma=2.5):
    """A smooth random grey image with many interfaces (values about 0..1)."""
    rng = np.random.default_rng(seed)
    grey = ndimage.gaussian_filter(rng.random(shape), sigma)
    return (grey - grey.min()) / (grey.max() - grey.min())


# --- surface ------------------------------------------------------------------------------

def test_plane_area_is_exact_on_anisotropic_voxels():
    grey = np.arange(12.0).reshape(-1, 1, 1) * np.ones((1, 6, 9))
    r = specific_surface(grey, spacing_um=(3.0, 2.0, 5.0), level=4.25)
    # The plane z = 4.25 voxels across the 5 x 8 cells between voxel centres, of 2 x 5 µm.
    assert r["interface_area_um2"] == pytest.approx(5 * 2.0 * 8 * 5.0)
    assert r["interface_area_mm2"] == pytest.approx(r["interface_area_um2"] * 1e-6)


@pytest.mark.parametrize("sigma_um", [0.0, 3.0])
def test_slabs_sum_to_the_whole(monkeypatch, sigma_um):
    grey = _blobs()
    envelope = np.zeros(grey.shape, dtype=bool)
    envelope[3:-2, 2:-3, 4:-1] = True
    whole = specific_surface(grey, spacing_um=(2.0, 1.5, 1.0), level=0.5, envelope=envelope,
                             sigma_um=sigma_um)
    monkeypatch.setattr(surface_module, "_SLAB_VOXELS", 36 * 32 * 4)  # slabs of 3 cells
    slabbed = specific_surface(grey, spacing_um=(2.0, 1.5, 1.0), level=0.5, envelope=envelope,
                               sigma_um=sigma_um)
    assert slabbed["triangle_count"] == whole["triangle_count"]
    assert slabbed["interface_area_um2"] == pytest.approx(whole["interface_area_um2"], rel=1e-6)


def test_smoothing_equals_smoothing_the_whole_volume_first():
    grey = _blobs(seed=1).astype(np.float32)
    spacing = (2.0, 1.0, 1.0)
    sigma_um = 2.0
    pre = ndimage.gaussian_filter(grey, [sigma_um / h for h in spacing], mode="nearest")
    a = specific_surface(grey, spacing_um=spacing, level=0.5, sigma_um=sigma_um)
    b = specific_surface(pre, spacing_um=spacing, level=0.5)
    assert a["interface_area_um2"] == pytest.approx(b["interface_area_um2"], rel=1e-5)


def test_bright_or_dark_solid_gives_the_same_surface():
    grey = _blobs(seed=2)
    a = specific_surface(grey, spacing_um=1.0, level=0.4)
    b = specific_surface(1.0 - grey, spacing_um=1.0, level=0.6)
    assert a["interface_area_um2"] == pytest.approx(b["interface_area_um2"], rel=1e-6)


def test_envelope_may_be_given_as_phase_labels():
    grey = _blobs(seed=3)
    phases = np.full(grey.shape, EXTERIOR, dtype=np.uint8)
    phases[5:-5, 5:-5, 5:-5] = np.where(grey[5:-5, 5:-5, 5:-5] > 0.5, SOLID, PORE)
    a = specific_surface(grey, spacing_um=1.0, level=0.5, envelope=phases)
    b = specific_surface(grey, spacing_um=1.0, level=0.5, envelope=phases != EXTERIOR)
    assert a == b
    assert a["envelope_volume_mm3"] == pytest.approx(np.count_nonzero(phases) * 1e-9)
    whole = specific_surface(grey, spacing_um=1.0, level=0.5)
    assert a["interface_area_um2"] < whole["interface_area_um2"]


@pytest.mark.parametrize("kwargs, match", [
    ({"level": 5.0}, "outside the grey range"),
    ({"level": float("nan")}, "finite"),
    ({"level": 0.5, "sigma_um": -1.0}, "sigma_um"),
    ({"level": 0.5, "envelope": np.ones((3, 3, 3), dtype=bool)}, "shape"),
    ({"level": 0.5, "envelope": np.zeros((40, 36, 32), dtype=bool)}, "empty"),
    ({"level": 0.5, "spacing_um": (1.0, 0.0, 1.0)}, "spacing_um"),
])
def test_surface_bad_input(kwargs, match):
    kwargs = {"spacing_um": 1.0, **kwargs}
    with pytest.raises(InputError, match=match):
        specific_surface(_blobs(), **kwargs)


def test_surface_rejects_a_slice():
    with pytest.raises(InputError, match="3-D"):
        specific_surface(np.zeros((8, 8)), spacing_um=1.0, level=0.5)


# --- topology -----------------------------------------------------------------------------

@pytest.mark.parametrize("connectivity, hops", [(26, 3), (6, 1)])
def test_slabbed_euler_characteristic_equals_one_call(monkeypatch, connectivity, hops):
    rng = np.random.default_rng(4)
    for i, fraction in enumerate([0.2, 0.35, 0.5, 0.65]):
        mask = rng.random((23, 17, 19)) < fraction
        monkeypatch.setattr(topology_module, "_SLAB_VOXELS", 17 * 19 * (2 + i))
        assert euler_characteristic(mask, connectivity=connectivity) == euler_number(
            mask, connectivity=hops)


def test_corner_neighbours_join_only_with_26_adjacency():
    mask = np.zeros((4, 4, 4), dtype=bool)
    mask[1, 1, 1] = mask[2, 2, 2] = True
    assert euler_characteristic(mask, connectivity=26) == 1
    assert euler_characteristic(mask, connectivity=6) == 2
    assert euler_characteristic(np.zeros((3, 3, 3), dtype=bool)) == 0


def test_connectivity_density_scales_with_voxel_volume():
    ring = np.zeros((3, 9, 9), dtype=bool)
    ring[1, 1:8, 1:8] = True
    ring[1, 3:6, 3:6] = False
    envelope = np.ones_like(ring)
    a = connectivity_density(ring, spacing_um=10.0, envelope=envelope)
    b = connectivity_density(ring, spacing_um=20.0, envelope=envelope)
    assert a["connectivity"] == b["connectivity"] == 1
    assert a["connectivity_density_per_mm3"] == pytest.approx(8 * b["connectivity_density_per_mm3"])


def test_solid_outside_the_envelope_is_ignored():
    ring = np.zeros((3, 9, 9), dtype=bool)
    ring[1, 1:8, 1:8] = True
    ring[1, 3:6, 3:6] = False
    envelope = np.zeros_like(ring)
    envelope[:, :, :5] = True  # cuts the ring open: no loop left
    r = connectivity_density(ring, spacing_um=1.0, envelope=envelope)
    assert (r["components"], r["connectivity"]) == (1, 0)


@pytest.mark.parametrize("solid, envelope, match", [
    (np.full((4, 4, 4), 2, dtype=np.uint8), np.ones((4, 4, 4), dtype=bool), "phases == 2"),
    (np.ones((4, 4, 4), dtype=bool), np.ones((4, 4, 5), dtype=bool), "shape"),
    (np.ones((4, 4, 4), dtype=bool), np.zeros((4, 4, 4), dtype=bool), "empty"),
    (np.ones((4, 4), dtype=bool), np.ones((4, 4), dtype=bool), "3-D"),
])
def test_topology_bad_input(solid, envelope, match):
    with pytest.raises(InputError, match=match):
        connectivity_density(solid, spacing_um=1.0, envelope=envelope)


def test_euler_rejects_other_connectivity():
    with pytest.raises(InputError, match="26 or 6"):
        euler_characteristic(np.ones((3, 3, 3), dtype=bool), connectivity=18)


# --- anisotropy ---------------------------------------------------------------------------

def _stretched(shape=(48, 48, 48), seed=5, semi_axes=(4.0, 4.0, 8.0), count=60):
    """Random overlapping ellipsoids (solid) stretched along x, in a box of pore."""
    rng = np.random.default_rng(seed)
    z, y, x = np.ogrid[:shape[0], :shape[1], :shape[2]]
    solid = np.zeros(shape, dtype=bool)
    for c in rng.uniform(0, 1, size=(count, 3)) * shape:
        solid |= sum(((g - ci) / a) ** 2 for g, ci, a in zip((z, y, x), c, semi_axes)) <= 1
    return np.where(solid, SOLID, PORE).astype(np.uint8)


def test_main_orientation_follows_the_axes():
    phases = _stretched()
    r = mil_anisotropy(phases, spacing_um=1.0, n_directions=30)
    assert abs(r["main_orientation_zyx"][2]) > 0.9
    assert r["degree_of_anisotropy"] > 1.3
    assert np.linalg.norm(r["main_orientation_zyx"]) == pytest.approx(1.0)
    turned = mil_anisotropy(np.ascontiguousarray(phases.transpose(2, 1, 0)), spacing_um=1.0,
                            n_directions=30)
    assert abs(turned["main_orientation_zyx"][0]) > 0.9
    assert turned["degree_of_anisotropy"] == pytest.approx(r["degree_of_anisotropy"], rel=0.05)


def test_mil_per_direction_is_consistent_with_the_fit():
    r = mil_anisotropy(_stretched(), spacing_um=(1.0, 1.0, 1.0), n_directions=40)
    n = r["directions_zyx"]
    fitted = 1 / np.sqrt(np.einsum("ij,jk,ik->i", n, r["fabric_tensor_per_um2"], n))
    np.testing.assert_allclose(r["mil_um"], fitted, rtol=0.1)
    assert r["mil_principal_um"][0] >= r["mil_principal_um"][1] >= r["mil_principal_um"][2]
    axes = r["principal_axes_zyx"]
    np.testing.assert_allclose(axes @ axes.T, np.eye(3), atol=1e-9)


def test_exterior_is_not_part_of_the_structure():
    phases = _stretched()
    padded = np.pad(phases, 6, constant_values=EXTERIOR)
    a = mil_anisotropy(phases, spacing_um=1.0, n_directions=30)
    b = mil_anisotropy(padded, spacing_um=1.0, n_directions=30)
    # The skin of the piece (solid or pore against exterior) adds no crossings; only the
    # smoothing near the edge differs (exterior counts as non-solid, the image border repeats
    # the edge voxel), so a few % are allowed (common practice, no source).
    assert b["degree_of_anisotropy"] == pytest.approx(a["degree_of_anisotropy"], rel=0.05)
    np.testing.assert_allclose(b["mil_principal_um"], a["mil_principal_um"], rtol=0.05)
    # Plates across x in a block surrounded by exterior: were the block's skin counted, lines
    # along y and z would cross it; as it is not, they cross nothing.
    plates = np.ones((24, 24, 24), dtype=np.uint8)
    plates[:, :, 4::8] = SOLID
    plates[:, :, 5::8] = SOLID
    r = mil_anisotropy(np.pad(plates, 5, constant_values=EXTERIOR), spacing_um=1.0)
    assert r["degree_of_anisotropy"] > 100
    np.testing.assert_allclose(np.abs(r["principal_axes_zyx"][2]), [0, 0, 1], atol=1e-6)
    assert b["envelope_volume_mm3"] == pytest.approx(a["envelope_volume_mm3"])


@pytest.mark.parametrize("phases, kwargs, match", [
    (np.zeros((8, 8, 8), dtype=np.uint8), {}, "empty"),
    (np.ones((8, 8, 8), dtype=np.uint8), {}, "no pore–solid boundary"),
    (np.ones((8, 8, 8), dtype=np.uint8), {"n_directions": 5}, "n_directions"),
    (np.ones((8, 8, 8), dtype=np.uint8), {"smoothing_um": -1}, "smoothing_um"),
])
def test_anisotropy_bad_input(phases, kwargs, match):
    with pytest.raises(InputError, match=match):
        mil_anisotropy(phases, spacing_um=1.0, **kwargs)


# --- chords -------------------------------------------------------------------------------

def _line(*values):
    return np.array(values, dtype=np.uint8).reshape(1, 1, -1)


def test_runs_cut_by_the_border_or_the_exterior_are_not_chords():
    phases = _line(1, 1, 2, 1, 1, 1, 2, 0, 2, 1, 2, 2, 1, 1)
    c = chord_lengths(phases, spacing_um=2.0)
    # P2 (border) S1 P3 S1 | exterior | S1 P1 S2 P2 (border): complete chords are P3, P1 and
    # the solid runs between two pores (S1, S2); runs touching 0 or the border are cut.
    assert c["pore"]["x"].tolist() == [6.0, 2.0]
    assert c["solid"]["x"].tolist() == [2.0, 4.0]
    assert all(c[p][a].size == 0 for p in ("pore", "solid") for a in ("z", "y"))


def test_lines_do_not_join_at_their_ends():
    phases = np.array([[[2, 1, 2, 1, 1]], [[1, 1, 2, 1, 2]]], dtype=np.uint8).transpose(1, 0, 2)
    c = chord_lengths(phases, spacing_um=1.0)
    # Row 0 ends in P2 (cut) and row 1 starts with P2 (cut): they must not merge into a chord.
    assert sorted(c["pore"]["x"].tolist()) == [1.0, 1.0]


def test_blocks_give_the_same_chords(monkeypatch):
    phases = np.where(_blobs(seed=6) > 0.5, SOLID, PORE).astype(np.uint8)
    phases[:2] = EXTERIOR
    whole = chord_lengths(phases, spacing_um=(2.0, 1.0, 1.5))
    monkeypatch.setattr(chords_module, "_BLOCK_VOXELS", 100)
    blocked = chord_lengths(phases, spacing_um=(2.0, 1.0, 1.5))
    for p in ("pore", "solid"):
        for a in ("z", "y", "x"):
            np.testing.assert_array_equal(np.sort(blocked[p][a]), np.sort(whole[p][a]))


def test_corrected_mean_by_hand():
    phases = _line(2, 1, 1, 2, 1, 1, 1, 1, 2, 2)
    s = chord_summary(phases, spacing_um=1.0)
    # Window of 10 voxels: a chord of n voxels fits wholly, with a bounding voxel each side,
    # in 10 − n − 1 places; weights 1/7 (n = 2) and 1/5 (n = 4).
    expected = (2 / 7 + 4 / 5) / (1 / 7 + 1 / 5)
    assert s["pore_chord_x_mean_corrected_um"] == pytest.approx(expected)
    assert s["pore_chord_x_mean_um"] == pytest.approx(3.0)
    assert s["pore_chord_x_count"] == 2 and s["pore_chord_count"] == 2
    assert s["solid_chord_x_count"] == 1 and s["solid_chord_x_median_um"] == 1.0
    assert s["solid_chord_z_count"] == 0 and math.isnan(s["solid_chord_z_mean_um"])


def test_histogram_columns_and_counts():
    phases = np.where(_blobs(seed=7) > 0.5, SOLID, PORE).astype(np.uint8)
    spacing = (2.0, 1.0, 1.0)
    c = chord_lengths(phases, spacing_um=spacing)
    h = chord_histogram(c, spacing_um=spacing)
    n = len(h["chord_length_um"])
    assert all(len(v) == n for v in h.values())
    np.testing.assert_allclose(h["chord_length_um"], 2.0 * np.arange(1, n + 1))
    for p in ("pore", "solid"):
        for a in ("z", "y", "x"):
            assert h[f"{p}_{a}_count"].sum() == c[p][a].size
    fine = chord_histogram(c, spacing_um=spacing, bin_width_um=1.0)
    assert fine["pore_x_count"].sum() == c["pore"]["x"].size
    assert fine["bin_end_um"][-1] >= max(v.max() for d in c.values() for v in d.values())


@pytest.mark.parametrize("kwargs, match", [
    ({"bin_width_um": 0}, "bin_width_um"),
    ({"bin_width_um": "wide"}, "bin_width_um"),
])
def test_histogram_bad_input(kwargs, match):
    c = chord_lengths(_line(2, 1, 2), spacing_um=1.0)
    with pytest.raises(InputError, match=match):
        chord_histogram(c, spacing_um=1.0, **kwargs)
    with pytest.raises(InputError, match="chord_lengths"):
        chord_histogram({"pore": {}}, spacing_um=1.0)


def test_chords_reject_bad_labels():
    with pytest.raises(ValueError, match="0 \\(exterior\\), 1 \\(pore\\) and 2 \\(solid\\)"):
        chord_lengths(_line(1, 3, 1), spacing_um=1.0)
