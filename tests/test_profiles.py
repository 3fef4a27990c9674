"""Porosity profiles: hand-counted cases, consistency between profiles, files and errors."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest

from ctpore.errors import InputError
from ctpore.measure.porosity import open_pore_mask
from ctpore.piece_frame import piece_frame
from ctpore.profiles import (
    AXIAL_COLUMNS,
    PROFILE_COLUMNS,
    RZ_COLUMNS,
    axial_profile,
    depth_profile,
    profiles_for_result,
    radial_profile,
    rz_map,
)
from ctpore.recipe import ProfilesSection
from ctpore.report.profile_plots import write_profiles

EXTERIOR, PORE, SOLID = 0, 1, 2


def _cube(n_inner=5, pad=1):
    phases = np.zeros((n_inner + 2 * pad,) * 3, dtype=np.uint8)
    phases[(slice(pad, pad + n_inner),) * 3] = SOLID
    return phases


def _porous_rod(seed=0, shape=(40, 16, 16), p=0.4):
    """A square rod along z, random pores with probability p, solid skin-free."""
    rng = np.random.default_rng(seed)
    phases = np.zeros(shape, dtype=np.uint8)
    inner = (slice(2, shape[0] - 2), slice(3, shape[1] - 3), slice(3, shape[2] - 3))
    phases[inner] = np.where(rng.random(phases[inner].shape) < p, PORE, SOLID)
    return phases


def test_depth_layers_of_a_cube_are_hand_counted():
    phases = _cube(5)
    phases[3, 3, 3] = PORE  # the centre voxel: a closed pore
    phases[1, 3, 3] = PORE  # a surface voxel: an open pore
    t = depth_profile(phases, spacing_um=1.0, bin_um=1.0)
    assert tuple(t) == PROFILE_COLUMNS
    # layers of a 5³ cube: 5³ − 3³ = 98 at depth 0.5, 3³ − 1 = 26 at 1.5, 1 at 2.5 (the
    # distance to the nearest exterior voxel centre less half a voxel)
    np.testing.assert_array_equal(t["voxels"], [98, 26, 1])
    np.testing.assert_array_equal(t["bin_start_um"], [0.0, 1.0, 2.0])
    np.testing.assert_array_equal(t["bin_centre_um"], [0.5, 1.5, 2.5])
    np.testing.assert_allclose(t["porosity_open"], [1 / 98, 0, 0])
    np.testing.assert_allclose(t["porosity_closed"], [0, 0, 1])
    np.testing.assert_allclose(t["porosity_gas"], t["porosity_open"] + t["porosity_closed"])
    np.testing.assert_allclose(t["volume_mm3"], t["voxels"] * 1e-9)


def test_image_border_counts_as_exterior_for_depth():
    # a piece filling the whole image: its faces are still its surface (padding with exterior)
    full = np.full((5, 5, 5), SOLID, dtype=np.uint8)
    np.testing.assert_array_equal(depth_profile(full, spacing_um=1.0, bin_um=1.0)["voxels"],
                                  [98, 26, 1])


def test_anisotropic_depth_uses_physical_distances():
    # 9 × 5 × 5 voxels of 1 × 2 × 2 µm: a 9 × 10 × 10 µm block; the nearest surface of any
    # voxel is in z only for the first 2 layers (distance 1, 2 µm), then in y / x (2, 4 µm...)
    phases = np.full((9, 5, 5), SOLID, dtype=np.uint8)
    t = depth_profile(phases, spacing_um=(1.0, 2.0, 2.0), bin_um=1.0)
    # depth = min over faces of the distance to the outside voxel centre, less 0.5 µm
    iz, iy, ix = np.indices(phases.shape)
    dist = np.minimum.reduce([(np.minimum(iz, 8 - iz) + 1) * 1.0,
                              (np.minimum(iy, 4 - iy) + 1) * 2.0,
                              (np.minimum(ix, 4 - ix) + 1) * 2.0])
    expected = np.bincount(np.floor(dist.ravel() - 0.5).astype(int))
    np.testing.assert_array_equal(t["voxels"], expected)


def _two_blocks():
    """A solid block (z 2..7) and a pore block with a solid lid (z 30..35), apart along z."""
    phases = np.zeros((40, 8, 8), dtype=np.uint8)
    phases[2:8, 2:6, 2:6] = SOLID
    phases[30:36, 2:6, 2:6] = PORE
    phases[30:32, 2:6, 2:6] = SOLID
    phases[30, 3, 3] = PORE
    return phases


def test_empty_bins_have_no_voxels_and_nan_porosity():
    phases = _two_blocks()
    t = axial_profile(phases, spacing_um=1.0, bin_um=2.0)
    assert tuple(t) == AXIAL_COLUMNS
    # tips at voxel centres z = 2.5 and 35.5: 33 µm long, 17 bins of 2 µm
    assert len(t["voxels"]) == 17 and t["position_normalised"][-1] == pytest.approx(33 / 33)
    empty = t["voxels"] == 0
    np.testing.assert_array_equal(np.flatnonzero(empty), np.arange(3, 14))  # z 8..29: a gap
    assert np.isnan(t["porosity_gas"][empty]).all() and np.isnan(t["porosity_open"][empty]).all()
    np.testing.assert_array_equal(t["voxels"][~empty], 32)
    np.testing.assert_allclose(t["porosity_gas"][~empty], [0, 0, 0, 1 / 32, 1, 1])


def test_radial_profile_of_a_rod_and_its_axial_window():
    phases = _porous_rod()
    spacing = (1.0, 1.0, 1.0)
    frame = piece_frame(phases, spacing_um=spacing)
    t = radial_profile(phases, spacing_um=spacing, frame=frame, bin_um=1.5)
    # the rod is 10 × 10 voxels in (y, x): its centres lie at r ≤ 4.5·√2 from the axis
    assert t["bin_end_um"][-1] > 4.5 * np.sqrt(2) >= t["bin_start_um"][-1]
    # brute force: distances of the voxel centres from the z axis through the centroid
    idx = np.argwhere(phases > 0).astype(float)
    r = np.hypot(idx[:, 1] - frame.centroid_um[1], idx[:, 2] - frame.centroid_um[2])
    a = idx[:, 0] - frame.centroid_um[0]
    np.testing.assert_array_equal(t["voxels"], np.bincount((r / 1.5).astype(int)))
    pore = phases[phases > 0] == PORE
    keep = np.abs(a) <= 6.0
    w = radial_profile(phases, spacing_um=spacing, frame=frame, bin_um=1.5, axial_window_um=6.0)
    np.testing.assert_array_equal(w["voxels"], np.bincount((r[keep] / 1.5).astype(int)))
    np.testing.assert_allclose(
        w["porosity_gas"], np.bincount((r[keep] / 1.5).astype(int), weights=pore[keep])
        / w["voxels"])
    with pytest.raises(InputError, match="axial window"):
        radial_profile(phases, spacing_um=spacing, frame=frame, axial_window_um=0.1)


def test_rz_map_sums_to_the_axial_and_radial_profiles():
    phases = _porous_rod(seed=2)
    spacing = (2.0, 1.0, 1.0)
    frame = piece_frame(phases, spacing_um=spacing)
    rz = rz_map(phases, spacing_um=spacing, frame=frame, r_bin_um=1.0, z_bin_um=4.0)
    ax = axial_profile(phases, spacing_um=spacing, frame=frame, bin_um=4.0)
    rad = radial_profile(phases, spacing_um=spacing, frame=frame, bin_um=1.0)
    n_z, n_r = len(rz["z_bin_centre_um"]), len(rz["r_bin_centre_um"])
    assert rz["voxels"].shape == rz["porosity_gas"].shape == (n_z, n_r)
    # the cells partition the envelope; summed over r they give the axial bins, over z the
    # radial bins [derived]
    np.testing.assert_array_equal(rz["voxels"].sum(axis=1), ax["voxels"])
    np.testing.assert_array_equal(rz["voxels"].sum(axis=0), rad["voxels"])
    pore_cells = np.nan_to_num(rz["porosity_gas"]) * rz["voxels"]
    np.testing.assert_allclose(pore_cells.sum(axis=1), ax["porosity_gas"] * ax["voxels"])
    np.testing.assert_array_equal(rz["z_bin_start_um"], ax["bin_start_um"])


def test_profiles_for_result_matches_the_single_functions():
    phases = _porous_rod(seed=4)
    spacing = (1.0, 1.0, 2.0)
    section = ProfilesSection(long_axis="z", depth_bin_um=1.0, radial_bin_um=1.5,
                              axial_bin_um=3.0, axial_window_um=10.0)
    out = profiles_for_result(phases, spacing_um=spacing, section=section)
    frame = out["frame"]
    np.testing.assert_array_equal(frame.axes[0], [1.0, 0.0, 0.0])
    single = {
        "depth": depth_profile(phases, spacing_um=spacing, bin_um=1.0),
        "radial": radial_profile(phases, spacing_um=spacing, frame=frame, bin_um=1.5,
                                 axial_window_um=10.0),
        "axial": axial_profile(phases, spacing_um=spacing, frame=frame, bin_um=3.0),
        "rz_map": rz_map(phases, spacing_um=spacing, frame=frame, r_bin_um=1.5, z_bin_um=3.0),
    }
    for name, table in single.items():
        assert list(out[name]) == list(table)
        for key in table:
            np.testing.assert_array_equal(out[name][key], table[key], err_msg=f"{name}.{key}")


def test_default_bins_are_two_coarsest_voxels():
    phases = _porous_rod(seed=5)
    out = profiles_for_result(phases, spacing_um=(3.0, 1.0, 1.0))
    for name in ("depth", "radial", "axial"):
        np.testing.assert_allclose(np.diff(out[name]["bin_start_um"]), 6.0)
    np.testing.assert_allclose(np.diff(out["rz_map"]["r_bin_start_um"]), 6.0)
    assert out["frame"].long_axis == "auto"


def test_open_and_closed_follow_open_pore_mask():
    phases = _porous_rod(seed=6, p=0.3)
    t = depth_profile(phases, spacing_um=1.0, bin_um=1.0)
    open_total = np.count_nonzero(open_pore_mask(phases))
    assert np.sum(t["porosity_open"] * t["voxels"]) == pytest.approx(open_total)
    closed_total = np.count_nonzero(phases == PORE) - open_total
    assert closed_total > 0
    assert np.sum(t["porosity_closed"] * t["voxels"]) == pytest.approx(closed_total)


def test_bad_input():
    phases = _porous_rod()
    with pytest.raises(InputError, match="bin_um"):
        depth_profile(phases, spacing_um=1.0, bin_um=-1.0)
    with pytest.raises(InputError, match="bin_um"):
        axial_profile(phases, spacing_um=1.0, bin_um=float("nan"))
    with pytest.raises(InputError, match="bins would be needed"):
        rz_map(phases, spacing_um=1.0, r_bin_um=1e-6, z_bin_um=1e-6)
    with pytest.raises(InputError, match="empty"):
        depth_profile(np.zeros((4, 4, 4), np.uint8), spacing_um=1.0)
    frame = piece_frame(phases, spacing_um=1.0)
    with pytest.raises(InputError, match="spacing_um"):
        radial_profile(phases, spacing_um=2.0, frame=frame)
    other = phases.copy()
    other[2, 3, 3] = EXTERIOR
    with pytest.raises(InputError, match="another piece"):
        axial_profile(other, spacing_um=1.0, frame=frame)
    with pytest.raises(InputError, match="long_axis"):
        profiles_for_result(phases, spacing_um=1.0, section=ProfilesSection(long_axis="q"))
    with pytest.raises(ValueError, match="0 \\(exterior\\)"):
        depth_profile(np.full((3, 3, 3), 5, np.uint8), spacing_um=1.0)


def _read_csv(path):
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    return rows[0], rows[1:]


def test_write_profiles_files_columns_and_determinism(tmp_path):
    phases = _two_blocks()
    phases[4, 3, 3] = PORE  # a closed pore in the solid block
    spacing = (2.0, 1.0, 1.0)
    out = profiles_for_result(phases, spacing_um=spacing)
    first = write_profiles(tmp_path / "a", out, out["frame"])
    second = write_profiles(tmp_path / "b", out, out["frame"])
    names = sorted(p.name for p in first)
    assert names == sorted([f"{n}.{ext}" for n in ("depth", "radial", "axial", "rz_map")
                            for ext in ("csv", "png", "svg")] + ["frame.json"])
    for p, q in zip(first, second):  # byte-identical files, figures included
        assert p.read_bytes() == q.read_bytes(), p.name
    folder = tmp_path / "a" / "profiles"
    for name, columns in (("depth", PROFILE_COLUMNS), ("radial", PROFILE_COLUMNS),
                          ("axial", AXIAL_COLUMNS)):
        header, rows = _read_csv(folder / f"{name}.csv")
        assert tuple(header) == columns
        assert all(c.endswith(("_um", "_mm3", "_normalised")) or c == "voxels"
                   or c.startswith("porosity_") for c in header)
        assert len(rows) == len(out[name]["voxels"])
        col = [float(r[header.index("porosity_gas")] or "nan") for r in rows]  # NaN: blank
        np.testing.assert_array_equal(col, out[name]["porosity_gas"])  # repr-exact floats
    header, rows = _read_csv(folder / "rz_map.csv")
    assert tuple(header) == RZ_COLUMNS
    rz = out["rz_map"]
    assert len(rows) == rz["voxels"].size
    empty = [r for r in rows if r[2] == "0"]
    assert len(empty) == np.count_nonzero(rz["voxels"] == 0) > 0
    assert all(r[4] == "" for r in empty)  # NaN porosity written blank
    frame = json.loads((folder / "frame.json").read_text(encoding="utf-8"))
    assert frame["centroid_um"] == pytest.approx(list(out["frame"].centroid_um))
    assert frame["axes"]["long"] == pytest.approx(out["frame"].axes[0].tolist())
    assert frame["extents_um"]["long"]["min"] == pytest.approx(out["frame"].extents_um[0, 0])
    svg = (folder / "rz_map.svg").read_text(encoding="utf-8")
    assert "<dc:date>" not in svg and "Matplotlib v" not in svg
    assert (folder / "depth.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
