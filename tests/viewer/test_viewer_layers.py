"""Layer tuples of a result folder (no napari needed): data, scale, origin, units, notes."""

import json
import shutil

import numpy as np
import pytest
import tifffile

from ctpore.errors import InputError
from ctpore.viewer import layers as L

from viewer_phantom import COARSE_GRID, SPACING_UM, write_jittered_difference


def _by_kind(tuples):
    return {t[1]["metadata"]["ctpore"]["kind"]: t for t in tuples}


def test_result_layers_cover_everything_with_physical_placement(piece):
    tuples, notes = L.result_layers(piece.result)
    kinds = _by_kind(tuples)
    assert set(kinds) == {"grey", "phases", "envelope", "pore_thickness", "wall_thickness",
                          "coarse_porosity", "difference"}
    assert [t[2] for t in tuples][-2:] == ["labels", "labels"]  # labels drawn on top
    for data, kwargs, _ in tuples:
        assert kwargs["units"] == ("µm", "µm", "µm"), kwargs["name"]  # same units everywhere
        assert kwargs["axis_labels"] == ("z", "y", "x")
    # The scan's voxel size, as OME-TIFF PhysicalSizeZ/Y/X stores it (OME schema 2016-06),
    # read back with tifffile as the reference reader.
    with tifffile.TiffFile(piece.result / "phases.ome.tif") as tf:
        px = tifffile.xml2dict(tf.ome_metadata)["OME"]["Image"]["Pixels"]
    ome_spacing = (px["PhysicalSizeZ"], px["PhysicalSizeY"], px["PhysicalSizeX"])
    assert ome_spacing == SPACING_UM
    for kind in ("grey", "phases", "envelope", "pore_thickness", "wall_thickness"):
        assert kinds[kind][1]["scale"] == ome_spacing
        assert kinds[kind][1]["translate"] == (0.0, 0.0, 0.0)  # origin: centre of voxel 0
    coarse = kinds["coarse_porosity"][1]
    assert coarse["scale"] == COARSE_GRID["spacing_um"]
    assert coarse["translate"] == COARSE_GRID["origin_um"]
    # The only note: model points off the piece have no scan value.
    assert len(notes) == 1 and "compare_model" in notes[0]


def test_grey_and_thickness_data_are_the_files(piece):
    kinds = _by_kind(L.result_layers(piece.result)[0])
    np.testing.assert_array_equal(np.asarray(kinds["grey"][0]), piece.grey)
    for kind, name in (("pore_thickness", "pore_thickness.ome.tif"),
                       ("wall_thickness", "wall_thickness.ome.tif")):
        data, kwargs, _ = kinds[kind]
        ref = tifffile.imread(piece.result / name)
        np.testing.assert_array_equal(np.asarray(data), ref)
        assert kwargs["contrast_limits"] == (0.0, float(ref.max()))
        assert kwargs["metadata"]["ctpore"]["colorbar"] is True
    phases = kinds["phases"][0]
    np.testing.assert_array_equal(phases, tifffile.imread(piece.result / "phases.ome.tif"))
    np.testing.assert_array_equal(kinds["envelope"][0], (phases != 0).astype(np.uint8))


def test_grey_contrast_spans_gas_and_solid_peaks(piece):
    lo, hi = _by_kind(L.result_layers(piece.result)[0])["grey"][1]["contrast_limits"]
    t = piece.summary["threshold"]
    assert lo < t["gas_peak"] < t["solid_peak"] < hi


def test_difference_is_scan_minus_model_on_the_model_grid(piece):
    data, kwargs, kind = _by_kind(L.result_layers(piece.result)[0])["difference"]
    assert kind == "image"  # the model was a regular 12 µm grid starting at 6 µm
    assert kwargs["scale"] == (12.0, 12.0, 12.0) and kwargs["translate"] == (6.0, 6.0, 6.0)
    table = np.genfromtxt(piece.compare / "difference.csv", delimiter=",", names=True)
    # compare writes model − scan; the layer shows the opposite sign.
    idx = np.rint((np.column_stack([table["z_um"], table["y_um"], table["x_um"]]) - 6.0)
                  / 12.0).astype(int)
    shown = data[tuple(idx.T)]
    ok = np.isfinite(table["difference"])
    np.testing.assert_allclose(shown[ok], -table["difference"][ok], rtol=1e-6)
    assert np.isnan(shown[~ok]).all()
    lo, hi = kwargs["contrast_limits"]
    assert lo == -hi and hi == pytest.approx(np.nanmax(np.abs(table["difference"])), rel=1e-6)


def test_scattered_differences_are_drawn_on_a_grid(piece, tmp_path):
    from scipy.spatial import cKDTree

    folder = tmp_path / "compare_jitter"
    rows = write_jittered_difference(piece.compare / "difference.csv", folder)
    data, kwargs, kind = L.difference_layer(folder / "difference.csv")
    assert kind == "image" and kwargs["metadata"]["ctpore"]["rasterised"]
    table = np.genfromtxt(folder / "difference.csv", delimiter=",", names=True)
    pts = np.column_stack([table["z_um"], table["y_um"], table["x_um"]])
    ok = np.isfinite(table["scan_porosity"])
    assert len(rows) == len(pts) and ok.sum() < len(pts)
    step = kwargs["scale"][0]
    assert kwargs["scale"] == (step,) * 3 and kwargs["translate"] == tuple(pts[ok].min(axis=0))
    # Each grid point shows its nearest valid model point within 0.5·√3·h (scipy's cKDTree
    # as reference), h the median nearest-neighbour distance; NaN elsewhere.
    h = 2 * step
    assert 10.0 < h < 14.0  # the 12 µm model grid, jittered by ±2 µm
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in data.shape], indexing="ij"), -1)
    centres = pts[ok].min(axis=0) + idx.reshape(-1, 3) * step
    dist, near = cKDTree(pts[ok]).query(centres, distance_upper_bound=0.5 * np.sqrt(3) * h)
    expect = np.full(len(centres), np.nan)
    hit = np.isfinite(dist)
    diff = (table["scan_porosity"] - table["model_porosity"])[ok]
    expect[hit] = diff[near[hit]]
    np.testing.assert_allclose(data.reshape(-1), expect, rtol=1e-6)


def test_coarse_field_at_points_is_drawn_on_a_grid(piece, tmp_path):
    from ctpore.continuum.coarse import coarsen, write_coarse_field
    from ctpore.continuum.kernels import Kernel

    rng = np.random.default_rng(5)
    ext = np.multiply(np.subtract(piece.truth.shape, 1), SPACING_UM)
    points = rng.uniform(0.2 * ext, 0.8 * ext, size=(300, 3))
    field = coarsen(piece.truth, spacing_um=SPACING_UM, kernel=Kernel("box", 12.0),
                    min_coverage=0.0, grid=points)
    write_coarse_field(tmp_path, field)
    data, kwargs, kind = L.coarse_field_layer(tmp_path)
    assert kind == "image" and kwargs["metadata"]["ctpore"]["rasterised"]
    assert kwargs["translate"] == tuple(points.min(axis=0))
    inside = data[np.isfinite(data)]
    assert inside.size and set(np.unique(inside)) <= set(field.porosity.astype(np.float32))


def test_missing_grey_stack_is_reported_and_the_rest_opens(piece, tmp_path):
    moved = tmp_path / "moved_result"
    shutil.copytree(piece.result, moved)
    prov = json.loads((moved / "provenance.json").read_text(encoding="utf-8"))
    prov["input"] = str(tmp_path / "gone" / "piece.ome.tif")
    (moved / "provenance.json").write_text(json.dumps(prov), encoding="utf-8")
    tuples, notes = L.result_layers(moved)
    kinds = _by_kind(tuples)
    assert "grey" not in kinds and {"phases", "envelope", "pore_thickness"} <= set(kinds)
    assert any("not found" in n and "--stack" in n for n in notes)
    # --stack finds it again
    tuples, notes = L.result_layers(moved, stack=piece.stack)
    assert "grey" in _by_kind(tuples)
    assert not any("not found" in n for n in notes)


def test_relative_stack_path_is_found_beside_the_result(piece, tmp_path, monkeypatch):
    root = tmp_path / "rel"
    shutil.copytree(piece.result, root / "res")
    shutil.copy(piece.stack, root / "piece.ome.tif")
    prov = json.loads((root / "res" / "provenance.json").read_text(encoding="utf-8"))
    prov["input"] = "piece.ome.tif"
    (root / "res" / "provenance.json").write_text(json.dumps(prov), encoding="utf-8")
    monkeypatch.chdir(tmp_path)  # not the folder the path is relative to
    path, note = L.find_grey_stack(root / "res")
    assert path == root / "piece.ome.tif" and note is None


def test_wrong_shape_stack_is_refused_with_a_note(piece, tmp_path):
    from ctpore.io.ome_tiff import write_ome_tiff

    other = write_ome_tiff(tmp_path / "other.ome.tif", piece.grey[:-2], SPACING_UM)
    tuples, notes = L.result_layers(piece.result, stack=other)
    assert "grey" not in _by_kind(tuples)
    assert any("shape" in n for n in notes)


def test_not_a_result_folder(tmp_path):
    assert not L.is_result_folder(tmp_path)
    with pytest.raises(InputError, match="not a complete ctpore result folder"):
        L.result_layers(tmp_path)


def test_regular_grid_detection():
    z, y, x = np.meshgrid([0.0, 5.0], [1.0, 4.0, 7.0], [2.0, 3.0], indexing="ij")
    pts = np.column_stack([z.ravel(), y.ravel(), x.ravel()])
    origin, steps, index, shape = L._regular_grid(pts[::-1])
    assert origin == [0.0, 1.0, 2.0] and steps == [5.0, 3.0, 1.0] and shape == (2, 3, 2)
    np.testing.assert_array_equal(index[::-1][5], [0, 2, 1])
    pts[3, 1] += 0.5  # one point off the grid
    assert L._regular_grid(pts) is None
