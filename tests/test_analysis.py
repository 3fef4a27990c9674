"""analyze(): the Python API, end to end on constructed bodies with known porosity."""

import json

import numpy as np
import pytest
from scipy import ndimage

import ctpore
from ctpore.analysis import STRUCTURE_KEYS, SUMMARY_KEYS
from ctpore.errors import InputError


def _porous_ellipsoid(spacing_um, *, seed=1, blur_um=0.0):
    """An ellipsoid (semi-axes 300, 220, 200 µm) with spherical cells of radius 45 µm, sampled
    in physical coordinates on a grid of the given spacing; grey 6000 gas / 26000 solid."""
    dz, dy, dx = spacing_um
    shape = (int(round(760 / dz)), int(round(560 / dy)), int(round(520 / dx)))
    z, y, x = [(np.arange(n) + 0.5) * d - n * d / 2 for n, d in zip(shape, spacing_um)]
    Z, Y, X = np.meshgrid(z, y, x, indexing="ij")
    body = (Z / 300) ** 2 + (Y / 220) ** 2 + (X / 200) ** 2 <= 1
    rng = np.random.default_rng(seed)
    cells = np.zeros(shape, bool)
    centres = rng.uniform(-1, 1, size=(600, 3)) * (235, 155, 135)
    kept = []
    inner = np.array([300, 220, 200]) - 45 - 20  # cell centres this far inside the surface
    for c in centres:  # non-overlapping, sealed cells well inside the body
        if np.sum((c / inner) ** 2) <= 1 and all(np.sum((c - k) ** 2) > (2 * 45 + 12) ** 2 for k in kept):
            kept.append(c)
    for c in kept:
        cells |= (Z - c[0]) ** 2 + (Y - c[1]) ** 2 + (X - c[2]) ** 2 <= 45**2
    solid = body & ~cells
    grey = np.where(solid, 26000.0, 6000.0)
    if blur_um:  # the same physical blur at any voxel size
        grey = ndimage.gaussian_filter(grey, [blur_um / d for d in spacing_um])
    truth = cells.sum() / body.sum()
    return grey.astype(np.uint16), truth, body.sum() * dz * dy * dx / 1e9


def test_summary_has_stable_keys_and_units():
    grey, truth, _ = _porous_ellipsoid((10.0, 10.0, 10.0))
    r = ctpore.analyze(grey, spacing_um=10)
    for key in SUMMARY_KEYS + STRUCTURE_KEYS:
        assert key in r.summary, key
    assert set(r.summary["threshold"]) >= {"method", "value", "porosity_low", "porosity_high"}
    assert r.summary["threshold"]["porosity_low"] <= r.summary["porosity_gas"] \
        <= r.summary["threshold"]["porosity_high"]
    assert r.phases.dtype == np.uint8 and set(np.unique(r.phases)) == {0, 1, 2}
    json.dumps(r.summary)  # plain JSON types only (NaN aside, handled by the writer)


def test_sealed_cells_are_closed_and_porosity_matches_construction():
    # Noise-free, unblurred: the segmentation must return the constructed body exactly
    # (sealed spherical cells inside a convex body: all closed; ISO 4590 sense).
    grey, truth, env_mm3 = _porous_ellipsoid((10.0, 10.0, 10.0))
    s = ctpore.analyze(grey, spacing_um=10).summary
    assert s["porosity_gas"] == pytest.approx(truth, abs=1e-12)
    assert s["porosity_closed"] == pytest.approx(truth, abs=1e-12)
    assert s["porosity_open"] == 0.0
    assert s["envelope_volume_mm3"] == pytest.approx(env_mm3, rel=1e-12)


def test_anisotropic_voxels_give_the_same_body():
    # The same physical piece sampled at (20, 10, 10) µm and (10, 10, 10) µm: porosity and
    # volumes agree within voxelisation error (2 %, common practice, no source).
    iso, truth_iso, env_iso = _porous_ellipsoid((10.0, 10.0, 10.0), blur_um=7.0)
    ani, truth_ani, env_ani = _porous_ellipsoid((20.0, 10.0, 10.0), blur_um=7.0)
    si = ctpore.analyze(iso, spacing_um=10).summary
    sa = ctpore.analyze(ani, spacing_um=(20, 10, 10)).summary
    assert sa["porosity_gas"] == pytest.approx(si["porosity_gas"], abs=0.01)
    assert sa["envelope_volume_mm3"] == pytest.approx(si["envelope_volume_mm3"], rel=0.02)
    assert sa["pore_volume_mm3"] == pytest.approx(si["pore_volume_mm3"], rel=0.03)
    assert sa["porosity_gas"] == pytest.approx(truth_ani, abs=0.01)
    assert si["porosity_gas"] == pytest.approx(truth_iso, abs=0.01)


def test_api_mirrors_cli_and_is_reproducible(tmp_path):
    grey, _, _ = _porous_ellipsoid((10.0, 10.0, 10.0), blur_um=7.0)
    stack = tmp_path / "p.ome.tif"
    ctpore.write_ome_tiff(stack, grey, (10.0, 10.0, 10.0))
    from ctpore.cli import main

    assert main(["analyze", str(stack), "--out", str(tmp_path / "cli"), "--quiet"]) == 0
    api = ctpore.analyze(stack, out=tmp_path / "api")
    cli_summary = json.loads((tmp_path / "cli" / "summary.json").read_text())
    assert (tmp_path / "api" / "summary.json").read_text() == \
        (tmp_path / "cli" / "summary.json").read_text()
    assert cli_summary["porosity_gas"] == api.summary["porosity_gas"]
    back = ctpore.read_stack(tmp_path / "api" / "phases.ome.tif")
    assert back.spacing_um == (10.0, 10.0, 10.0)
    np.testing.assert_array_equal(back.load(), api.phases)


def test_sample_facts_reach_the_summary():
    grey, _, _ = _porous_ellipsoid((10.0, 10.0, 10.0))
    recipe = ctpore.Recipe().replace("sample", moisture=0.12, solid_density_g_cm3=1.5,
                                     mass_mg=0.02)
    d = ctpore.analyze(grey, spacing_um=10, recipe=recipe).summary["derived"]
    assert {"porosity_total", "apparent_density_g_cm3", "moisture_dry_basis"} <= set(d)


def test_array_without_spacing_is_refused():
    with pytest.raises(InputError, match="spacing_um"):
        ctpore.analyze(np.zeros((4, 4, 4), np.uint16))


def test_structure_measures_on_sealed_spherical_cells(tmp_path):
    # Sealed spheres of radius 45 µm in a solid ellipsoid: cell count equals the number of
    # spheres, each cell's local thickness is its diameter (Hildebrand & Rüegsegger 1997), no
    # cell is open, and the solid has one component with one cavity per cell (χ = 1 + cells;
    # Odgaard & Gundersen 1993).
    grey, truth, _ = _porous_ellipsoid((10.0, 10.0, 10.0))
    r = ctpore.analyze(grey, spacing_um=10, out=tmp_path / "res")
    s = r.summary
    n = s["closed_pore_count"]
    assert s["cell_count"] == n and s["closed_cell_count"] == n and s["open_cell_count"] == 0
    assert s["pore_thickness_d50_um"] == pytest.approx(90.0, abs=10.0)  # one voxel
    assert s["euler_characteristic"] == 1 + n and s["connectivity"] == 0
    for name in ("pore_thickness.ome.tif", "wall_thickness.ome.tif", "cells.csv",
                 "thickness_distribution.csv", "chord_lengths.csv",
                 "figures/thickness_distributions.png", "profiles/depth.csv",
                 "profiles/rz_map.csv", "profiles/frame.json", "profiles/axial.svg"):
        assert (tmp_path / "res" / name).is_file(), name
    back = ctpore.read_stack(tmp_path / "res" / "pore_thickness.ome.tif").load()
    np.testing.assert_array_equal(back, r.structure.pore_thickness)
