"""Figures of a single comparison: maps on the model's own coordinates, profile overlays in the
bins of :mod:`ctpore.profiles`, and PNG files that are byte-identical from run to run.

The phantom is a prolate piece whose voxels are pore independently with probability
p(z) = 0.35 + 0.4·z/L (linear along the long axis, z), so the truth of every profile is known.
"""

import numpy as np
import pytest

from ctpore.compare.command import compare_field
from ctpore.compare.fields import ModelField
from ctpore.continuum.kernels import Kernel
from ctpore.profiles import axial_profile
from ctpore.report.compare_plots import (_binned, maps_figure, profile_overlays,
                                         save_comparison_figures, save_png, section_maps)

H = 10.0
SHAPE = (60, 30, 26)
SEMI = np.array([27.0, 12.0, 10.0])
CENTRE = np.array([(n - 1) / 2 for n in SHAPE])
KERNEL = Kernel("box", 70.0)


def truth(z_um):
    return 0.35 + 0.4 * np.asarray(z_um) / (SHAPE[0] * H)


@pytest.fixture(scope="module")
def phantom():
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in SHAPE], indexing="ij"), axis=-1)
    env = (((idx - CENTRE) / SEMI) ** 2).sum(axis=-1) <= 1.0
    pore = np.random.default_rng(3).random(SHAPE) < truth(idx[..., 0] * H)
    return np.where(env, np.where(pore, 1, 2), 0).astype(np.uint8)


@pytest.fixture(scope="module")
def grid_model():
    idx = np.stack(np.meshgrid(*[np.arange(1, n, 3) for n in SHAPE], indexing="ij"),
                   axis=-1).reshape(-1, 3)
    idx = idx[(((idx - CENTRE) / SEMI) ** 2).sum(axis=1) <= 1.0]
    pts = idx * H
    return ModelField(points_um=pts, porosity=truth(pts[:, 0]), axisymmetric=False,
                      source="grid")


@pytest.fixture(scope="module")
def rz_model(phantom):
    from ctpore.piece_frame import piece_frame

    frame = piece_frame(phantom, spacing_um=H)
    rr, zz = np.meshgrid(np.arange(0.0, 100.0, 20.0), np.arange(20.0, frame.length_um - 20,
                                                                 20.0), indexing="ij")
    # the long axis runs along +z from the first tip at extents[0, 0] (relative to the centroid)
    z_abs = frame.centroid_um[0] + frame.extents_um[0, 0] + zz.ravel()
    return ModelField(points_um=np.column_stack([rr.ravel(), zz.ravel()]),
                      porosity=truth(z_abs), axisymmetric=True, source="rz")


def test_rz_map_puts_each_model_value_at_its_own_coordinates(phantom, rz_model):
    out = compare_field(phantom, rz_model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3,
                        shape_metrics=False)
    maps = section_maps(out, rz_model, phantom, spacing_um=H, kernel=KERNEL)
    # the (r, z) grid has a 20 µm step: pixels of half a step land on every node, and linear
    # interpolation over a triangulation reproduces the node values there exactly
    xs, ys = maps["x_um"], maps["y_um"]
    for (r, z), m, s in zip(rz_model.points_um, out["model"], out["scan"]):
        i = int(np.argmin(np.abs(ys - (z + 0.0))))  # axial from the first tip = model z here
        j = int(np.argmin(np.abs(xs - r)))
        assert abs(xs[j] - r) < 1e-9 and abs(ys[i] - z) < 1e-6
        assert maps["model"][i, j] == pytest.approx(m, abs=1e-12)
        if np.isfinite(s):
            assert maps["scan"][i, j] == pytest.approx(s, abs=1e-9)
    assert maps["kind"] == "r-z plane"
    ok = np.isfinite(maps["difference"])
    assert np.allclose(maps["difference"][ok], (maps["model"] - maps["scan"])[ok])


def test_mid_plane_section_of_a_3d_model_follows_the_truth(phantom, grid_model):
    out = compare_field(phantom, grid_model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3,
                        align="none", shape_metrics=False)
    maps = section_maps(out, grid_model, phantom, spacing_um=H, kernel=KERNEL)
    assert maps["kind"] == "mid-plane section"
    both = np.isfinite(maps["scan"]) & np.isfinite(maps["model"])
    assert both.sum() > 50
    # the model is the truth: the difference is the scan's sampling error, σ ≈ √(p(1−p)/343)
    # ≈ 0.026 for a 7³-voxel box (Kanit et al. 2003, doi:10.1016/S0020-7683(03)00143-4),
    # plus the nearest-point step of the model (0.4/600 µm · 15 µm = 0.01); RMS below 0.05
    # (common practice, no source)
    assert np.sqrt(np.mean(maps["difference"][both] ** 2)) < 0.05
    # along the long axis (x of the map) the model rises by 0.4 over the 600 µm field of view
    cols = np.isfinite(maps["model"])
    good = cols.any(axis=0)
    m = np.nansum(maps["model"][:, good], axis=0) / cols[:, good].sum(axis=0)
    slope = np.polyfit(maps["x_um"][good], m, 1)[0]
    assert slope == pytest.approx(0.4 / 600.0, rel=0.1)


def test_binning_by_hand():
    coord = np.array([5.0, 15.0, 12.0, 25.0, np.nan, -1.0])
    values = np.array([0.2, 0.4, 0.6, 0.8, 0.5, 0.5])
    weights = np.array([1.0, 1.0, 3.0, 2.0, 1.0, 1.0])
    # bins of 10: [0,10) holds 0.2; [10,20) holds 0.4 (w 1) and 0.6 (w 3) -> 0.55; [20,30) 0.8
    got = _binned(coord, values, weights, 10.0, 4)
    assert got[:3] == pytest.approx([0.2, 0.55, 0.8])
    assert np.isnan(got[3])


def test_profile_overlays_track_the_scan(phantom, grid_model):
    out = compare_field(phantom, grid_model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3,
                        align="none", shape_metrics=False)
    ov = profile_overlays(out, grid_model, phantom, spacing_um=H, bin_um=60.0)
    # the scan's line is ctpore.profiles' own axial profile in the same bins
    ref = axial_profile(phantom, spacing_um=H, frame=out["frame"], bin_um=60.0)
    assert np.allclose(ov["axial"]["scan"], ref["porosity_gas"], equal_nan=True)
    # the model (= truth, linear along the axis) and the scan's voxel profile agree within the
    # binomial sampling error of a bin, √(p(1−p)/n) with n ≥ 600 voxels: < 0.02; 0.06 allowed
    # for the bins' unequal filling near the tips (common practice, no source)
    a = ov["axial"]
    inner = slice(1, -1)
    ok = np.isfinite(a["model"][inner]) & np.isfinite(a["scan"][inner])
    assert ok.sum() >= 6
    assert np.max(np.abs(a["model"][inner][ok] - a["scan"][inner][ok])) < 0.06
    assert set(ov) == {"depth", "radial", "axial", "bin_um"}
    for name in ("depth", "radial"):  # the piece is 200 µm thick: 60 µm bins give 2 or more
        assert np.isfinite(ov[name]["model"]).sum() >= 2


def test_figures_are_written_and_byte_identical(phantom, grid_model, rz_model, tmp_path):
    out = compare_field(phantom, rz_model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3,
                        shape_metrics=False)
    runs = []
    for k in range(2):
        folder = tmp_path / f"run_{k}"
        folder.mkdir()
        paths = save_comparison_figures(folder, out, rz_model, phantom, spacing_um=H,
                                        kernel=KERNEL)
        runs.append({p.name: p.read_bytes() for p in paths})
    # the 3-D model's section map (the one figure that differs in kind)
    out3 = compare_field(phantom, grid_model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3,
                         align="none", shape_metrics=False)
    for k, run in enumerate(runs):
        maps = section_maps(out3, grid_model, phantom, spacing_um=H, kernel=KERNEL)
        run["maps_3d.png"] = save_png(maps_figure(maps), tmp_path / f"m{k}.png").read_bytes()
    assert sorted(runs[0]) == ["difference.png", "maps.png", "maps_3d.png", "parity.png",
                               "profiles.png"]
    for name, data in runs[0].items():
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        assert b"Software" not in data  # no software stamp: same figure, same bytes
        assert runs[1][name] == data, name


def test_maps_figure_handles_an_empty_difference():
    maps = {"x_um": np.arange(4.0), "y_um": np.arange(3.0), "scan": np.full((3, 4), np.nan),
            "model": np.full((3, 4), 0.5), "difference": np.full((3, 4), np.nan),
            "xlabel": "x", "ylabel": "y", "kind": "test"}
    fig = maps_figure(maps)
    assert len(fig.axes) == 5  # three panels, two colour bars
