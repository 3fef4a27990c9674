"""The viewer under Xvfb: layers, physical scale, what the screen shows, the live widget."""

import math
import os
from pathlib import Path

import numpy as np
import pytest

napari = pytest.importorskip("napari")
pytest.importorskip("pytestqt")
if not (os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")):
    # Without a display Qt aborts the process; pytest-xvfb provides one when Xvfb is installed.
    pytest.skip("no display: install xvfb (Debian package) for pytest-xvfb",
                allow_module_level=True)

from scipy.stats import norm  # noqa: E402
from viewer_phantom import (  # noqa: E402
    BALL_RADIUS_UM, COARSE_GRID, NOISE, SHAPE, SOLID_GREY, SPACING_UM,
)

from ctpore.recipe import load_recipe  # noqa: E402
from ctpore.viewer.command import populate_viewer  # noqa: E402
from ctpore.viewer.reader import scale_bar  # noqa: E402

MANIFEST = Path(__file__).parents[2] / "ctpore" / "viewer" / "napari.yaml"
SCAN_LAYERS = ("grey: piece.ome.tif", "phases (exterior / pore / solid)", "envelope outline",
               "pore thickness (µm)", "wall thickness (µm)")
LABEL_LAYERS = ("phases (exterior / pore / solid)", "envelope outline")


def _true_porosity(piece):
    return np.count_nonzero(piece.truth == 1) / np.count_nonzero(piece.truth)


def test_screenshot_shows_labels_as_round_as_the_piece(make_napari_viewer, piece):
    viewer = make_napari_viewer(show=True)
    populate_viewer(viewer, piece.result, widget=False)
    viewer.dims.order = (1, 0, 2)  # show z (rows) against x (columns): the anisotropic plane
    centre_y = (SHAPE[1] - 1) * SPACING_UM[1] / 2
    viewer.dims.set_point(1, centre_y)
    viewer.reset_view()
    on = viewer.screenshot(canvas_only=True, flash=False).astype(int)
    for name in LABEL_LAYERS:
        viewer.layers[name].visible = False
    off = viewer.screenshot(canvas_only=True, flash=False).astype(int)
    assert off[..., :3].std() > 5  # not blank: the grey stack is drawn
    changed = np.abs(on[..., :3] - off[..., :3]).max(axis=-1) > 10
    assert changed.any()
    rows, cols = np.nonzero(changed)
    height, width = np.ptp(rows) + 1, np.ptp(cols) + 1
    # A ball's section is a circle: with the z voxels drawn 3 µm tall and x voxels 2 µm wide
    # the labelled region is as tall as it is wide (it would be 32/48 = 0.67 if the scale were
    # ignored); ±1 voxel of 3 µm on a 76 µm diameter [derived].
    assert height / width == pytest.approx(1.0, abs=0.08)
    # Nothing changes far outside the piece (the exterior is transparent).
    assert not changed[: rows.min(), :].any() and not changed[:, : cols.min()].any()
    # The centre of the section is the central pore (sky blue: blue > red); half-way to the
    # surface is solid (vermillion: red > blue).
    r0, c0 = int(round(rows.mean())), int(round(cols.mean()))
    assert on[r0, c0, 2] > on[r0, c0, 0] + 20
    c1 = c0 + int(round(0.65 * width / 2))
    assert on[r0, c1, 0] > on[r0, c1, 2] + 20


def _run_view(argv, monkeypatch):
    """Run `ctpore view` (its run_view) without entering napari's event loop."""
    import argparse

    from ctpore.viewer.command import add_view_parser, run_view

    parser = argparse.ArgumentParser(prog="ctpore")
    add_view_parser(parser.add_subparsers(dest="command"))
    monkeypatch.setattr(napari, "run", lambda *a, **k: None)
    assert run_view(parser.parse_args(argv)) == 0
    return napari.current_viewer()


def test_ctpore_view_and_its_live_widget(piece, qtbot, monkeypatch, capsys, tmp_path):
    viewer = _run_view(["view", str(piece.result)], monkeypatch)
    try:
        _check_widget(viewer, piece, qtbot, tmp_path)
    finally:
        viewer.close()
    # What was left out is said on standard error.
    assert "compare_model" in capsys.readouterr().err


def _check_widget(viewer, piece, qtbot, tmp_path):
    from ctpore.viewer.widget import SegmentationWidget

    assert scale_bar(viewer).visible
    w = viewer.window.dock_widgets["ctpore segmentation"]
    assert isinstance(w, SegmentationWidget)
    w._timer.setInterval(10)
    assert w.layer_box.value is viewer.layers["grey: piece.ome.tif"]
    assert w.radius_box.value == 12.0  # from the result's recipe.toml
    out = w.recompute()
    p = out["porosity"]["porosity_gas"]
    # Delesse: the voxel count of the segmented pores is the phantom's pore fraction.
    phi = _true_porosity(piece)
    assert p == pytest.approx(phi, abs=0.005)
    assert out["band"]["porosity_low"] <= p <= out["band"]["porosity_high"]
    assert out["stride"] == 1 and "full resolution" in w.preview_label.value
    assert "ctpore preview phases" in viewer.layers
    assert not viewer.layers["phases (exterior / pore / solid)"].visible

    # Typing a value switches to a manual threshold and re-segments after the debounce.
    # With Gaussian noise of σ on the solid grey value, a threshold t turns the fraction
    # Φ((t − solid)/σ) of the solid into gas, so the porosity becomes
    # φ + (1 − φ)·Φ((t − solid)/σ) (normal distribution; scipy.stats as reference).
    for t in (185.5, 190.5):
        before = w.result_label.value
        w.value_box.value = t
        assert w.method_box.value == "manual"
        qtbot.waitUntil(lambda: w.result_label.value != before, timeout=10000)
        expect = phi + (1 - phi) * norm.cdf((t - SOLID_GREY) / NOISE)
        assert w.last["porosity"]["porosity_gas"] == pytest.approx(expect, abs=0.012)
        assert w.last["threshold"].value == t
    assert w.last["porosity"]["porosity_gas"] > p + 0.05

    w.envelope_box.value = "rolling_sphere"
    w.radius_box.value = 15.0
    saved = w.save_recipe(path=tmp_path / "tuned.toml")
    recipe = load_recipe(saved)
    assert (recipe.threshold.method, recipe.threshold.value) == ("manual", 190.5)
    assert (recipe.envelope.method, recipe.envelope.radius_um) == ("rolling_sphere", 15.0)
    assert recipe.structure.enabled and not recipe.profiles.enabled  # rest of the base recipe
    assert "saved" in w.status_label.value

    # At the brightest grey value nothing is strictly above the threshold: no piece is found,
    # which the widget says (no crash). The spin box spans the stack's grey range.
    assert w.value_box.max == float(piece.grey.max())
    w.value_box.value = w.value_box.max
    assert w.recompute() is None
    assert "cannot segment" in w.status_label.value and w.result_label.value == ""

    # A large stack is previewed on one voxel in s along each axis.
    w.method_box.value = "otsu"
    w.envelope_box.value = "closing"
    w.radius_box.value = 12.0
    w.max_preview_voxels = 8000
    out = w.recompute()
    assert out["stride"] == 3 and out["preview_shape"] == (11, 16, 16)
    assert "preview" in w.preview_label.value and "one voxel in 3" in w.preview_label.value
    np.testing.assert_allclose(viewer.layers["ctpore preview phases"].scale,
                               np.multiply(SPACING_UM, 3))
    # Systematic point count (Delesse 1847; ASTM E562): within 3 standard errors of the
    # pore fraction, SE = sqrt(p(1 − p)/n) for n points in the envelope.
    n = out["porosity"]["envelope_voxels"]
    se = math.sqrt(phi * (1 - phi) / n)
    assert out["porosity"]["porosity_gas"] == pytest.approx(phi, abs=3 * se)


def test_napari_opens_a_result_folder_with_the_ctpore_reader(make_napari_viewer, npe2pm, piece):
    # napari's own open(), through the npe2 manifest, as File > Open Folder does.
    with npe2pm.tmp_plugin(manifest=str(MANIFEST)):
        viewer = make_napari_viewer()
        added = viewer.open(str(piece.result), plugin="ctpore")
    assert [layer.name for layer in added] == [layer.name for layer in viewer.layers]
    names = [layer.name for layer in viewer.layers]
    for name in SCAN_LAYERS:
        assert name in names
    assert "coarse porosity: coarse_box_12um_grid_6x6x6um" in names
    assert "scan − model porosity: compare_model" in names
    for layer in viewer.layers:
        assert [str(u) for u in layer.units] == ["micrometer"] * 3, layer.name
    for name in SCAN_LAYERS:
        layer = viewer.layers[name]
        np.testing.assert_allclose(layer.scale, SPACING_UM)
        # voxel centre at index·spacing, origin at the centre of voxel (0, 0, 0)
        np.testing.assert_allclose(layer.data_to_world((5, 7, 11)), (15.0, 14.0, 22.0))
    coarse = viewer.layers["coarse porosity: coarse_box_12um_grid_6x6x6um"]
    np.testing.assert_allclose(coarse.data_to_world((0, 0, 0)), COARSE_GRID["origin_um"])
    np.testing.assert_allclose(
        coarse.data_to_world((1, 2, 3)),
        np.add(COARSE_GRID["origin_um"], np.multiply((1, 2, 3), COARSE_GRID["spacing_um"])))
    assert scale_bar(viewer).visible
    for name in ("pore thickness (µm)", "wall thickness (µm)",
                 "coarse porosity: coarse_box_12um_grid_6x6x6um"):
        assert viewer.layers[name].colorbar.visible
    assert viewer.layers["envelope outline"].contour > 0
    # Overlay: at the centre of the ball (a pore, by construction) the phase layer reads 1.
    centre = [(n - 1) * d / 2 for n, d in zip(SHAPE, SPACING_UM)]
    phases = viewer.layers["phases (exterior / pore / solid)"]
    assert phases.get_value(centre, world=True) == 1
    # 6 µm past the ball's surface (along x) is exterior.
    outside = [centre[0], centre[1], centre[2] + BALL_RADIUS_UM + 6.0]
    assert phases.get_value(outside, world=True) == 0

