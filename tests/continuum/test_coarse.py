"""Normalised (masked) averaging: mass balance, flat fields to the surface, honest uncertainty.

Each check names its source beside it. Pieces are built here from i.i.d. random blocks, whose
integral range is known exactly (A3 = b³ voxels, REFERENCES.md "Representative volume").
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import tifffile
from scipy.interpolate import RegularGridInterpolator

from ctpore.continuum.coarse import Grid, coarsen, sampling_uncertainty, write_coarse_field
from ctpore.continuum.kernels import Kernel, apply_kernel
from ctpore.errors import InputError
from ctpore.io.ome_tiff import read_ome_spacing_um

KERNELS = [Kernel("gaussian", 40.0), Kernel("box", 110.0), Kernel("ball", 140.0)]


def _blocks(shape, b, p, rng):
    """Pore indicator of independent b×b×b blocks, each pore with probability p."""
    g = rng.random([-(-n // b) for n in shape]) < p
    for axis in range(3):
        g = np.repeat(g, b, axis)
    return g[: shape[0], : shape[1], : shape[2]]


def _ball_piece(n, radius, b, p, seed):
    """Labels of a ball-shaped piece (0 outside) filled with i.i.d. blocks of porosity p."""
    z, y, x = np.ogrid[:n, :n, :n]
    c = (n - 1) / 2
    inside = (z - c) ** 2 + (y - c) ** 2 + (x - c) ** 2 <= radius**2
    pore = _blocks((n, n, n), b, p, np.random.default_rng(seed))
    return np.where(inside, np.where(pore, 1, 2), 0).astype(np.uint8)


@pytest.fixture(scope="module")
def piece():
    return _ball_piece(112, 46, 2, 0.4, seed=0)


def _bulk(phases):
    return np.count_nonzero(phases == 1) / np.count_nonzero(phases > 0)


def _weighted_mean(field):
    cov = field.coverage.astype(np.float64)
    return np.nansum(cov * field.porosity) / cov[np.isfinite(field.porosity)].sum()


@pytest.mark.parametrize("kernel", KERNELS, ids=lambda k: k.shape)
def test_coverage_weighted_mean_equals_bulk_porosity_exactly(kernel):
    # Mass balance [derived, REFERENCES.md]: the weights sum to 1, so Σ_x K*P = Σ P and
    # Σ_x K*E = Σ E when no kernel mass leaves the grid; Σ cov·por / Σ cov = ΣP/ΣE.
    spacing = (20.0, 10.0, 10.0)
    phases = _ball_piece(72, 30, 3, 0.35, seed=1)[::2]  # anisotropic voxels, a flattened piece
    radius = kernel.radius_voxels(spacing)
    padded = np.pad(phases, [(r, r) for r in radius])  # piece ≥ a kernel radius from the border
    field = coarsen(padded, spacing_um=spacing, kernel=kernel, min_coverage=0.0)
    assert _weighted_mean(field) == pytest.approx(_bulk(phases), rel=1e-6)
    # A piece cut by the field of view (touching the y = 0 face): exact once padded by the
    # kernel radius; unpadded, kernel mass leaves the grid and the balance is off.
    cut = phases[:, phases.shape[1] // 2:]
    exact = coarsen(np.pad(cut, [(r, r) for r in radius]), spacing_um=spacing, kernel=kernel,
                    min_coverage=0.0)
    assert _weighted_mean(exact) == pytest.approx(_bulk(cut), rel=1e-6)
    leaky = coarsen(cut, spacing_um=spacing, kernel=kernel, min_coverage=0.0)
    assert abs(_weighted_mean(leaky) / _bulk(cut) - 1) > 1e-5


@pytest.mark.parametrize("kernel", KERNELS, ids=lambda k: k.shape)
def test_uniform_body_gives_a_flat_field_up_to_the_surface(piece, kernel):
    # A body of uniform porosity (i.i.d. blocks, A3 = b³ voxels: REFERENCES.md) gives, with
    # normalised averaging, values whose deviation from the bulk porosity is sampling noise of
    # the size the integral-range law predicts (Kanit et al. 2003), near the surface
    # (coverage ≈ 0.5) as in the interior: z = (φ − p)/σ has RMS ≈ 1 in both.
    spacing = (10.0, 10.0, 10.0)
    a3 = 2**3 * 1000.0
    p = _bulk(piece)
    field = coarsen(piece, spacing_um=spacing, kernel=kernel, min_coverage=0.2, A3_um3=a3)
    surface = (field.coverage > 0.3) & (field.coverage < 0.7)
    interior = field.coverage > 0.999
    assert surface.sum() > 50_000 and interior.sum() > 50_000
    for region in (surface, interior):
        z = (field.porosity[region] - p) / field.sigma[region]
        assert 0.8 < math.sqrt(np.mean(z**2)) < 1.2  # tolerance: common practice, no source
    # The plain (unnormalised) average reads p·coverage at the surface: biased by p/2, several
    # standard deviations (RMS z ≈ 4 here).
    plain = apply_kernel(piece == 1, kernel=kernel, spacing_um=spacing)[surface]
    assert math.sqrt(np.mean(((plain - p) / field.sigma[surface]) ** 2)) > 3
    # Where the kernel is cut in half by a (nearly flat) surface, V_eff halves [derived:
    # v·(K*E)²/(K²*E) = v·0.25/(0.5·Σw²)], so σ grows by √2.
    half = (field.coverage > 0.48) & (field.coverage < 0.52)
    ratio = field.sigma[half].mean() / field.sigma[interior].mean()
    assert ratio == pytest.approx(math.sqrt(2), rel=0.05)


@pytest.mark.parametrize("kernel", [Kernel("gaussian", 30.0), Kernel("box", 150.0),
                                    Kernel("ball", 180.0)], ids=lambda k: k.shape)
def test_sampling_uncertainty_matches_iid_blocks(kernel):
    # Integral-range law D² = p(1 − p)·A3/V_eff (Kanit et al. 2003, Int. J. Solids Struct.
    # 40:3647) with V_eff = v/Σw² [derived]; i.i.d. blocks of side b have A3 = b³ exactly
    # (REFERENCES.md). Empirical SD of the kernel averages within 20 % of the prediction.
    spacing = (10.0, 10.0, 10.0)
    rng = np.random.default_rng(7)
    phases = np.where(_blocks((128, 128, 128), 2, 0.3, rng), 1, 2).astype(np.uint8)
    a3 = 8 * 1000.0
    field = coarsen(phases, spacing_um=spacing, kernel=kernel, A3_um3=a3)
    inner = tuple(slice(r, -r) for r in kernel.radius_voxels(spacing))
    empirical = float(np.std(field.porosity[inner]))
    p = _bulk(phases)
    predicted = float(sampling_uncertainty(p, kernel=kernel, A3_um3=a3, spacing_um=spacing))
    assert empirical == pytest.approx(predicted, rel=0.2)
    np.testing.assert_allclose(field.sigma[inner].mean(), predicted, rtol=0.02)


def test_grid_and_points_follow_the_voxel_position_convention(piece):
    # Convention: voxel (i, j, k) at (i·dz, j·dy, k·dx) µm. A grid equal to the scan grid and
    # points at voxel positions reproduce the scan-grid field exactly; a point off the image is
    # NaN (no coverage).
    spacing = (20.0, 10.0, 10.0)
    phases = piece[::2]
    kernel = Kernel("gaussian", 30.0)
    scan = coarsen(phases, spacing_um=spacing, kernel=kernel)
    same = coarsen(phases, spacing_um=spacing, kernel=kernel,
                   grid=Grid((0, 0, 0), spacing, phases.shape))
    np.testing.assert_array_equal(same.porosity, scan.porosity)
    idx = np.array([[28, 56, 56], [20, 40, 70], [10, 60, 30]])
    pts = coarsen(phases, spacing_um=spacing, kernel=kernel, grid=idx * np.array(spacing))
    np.testing.assert_allclose(pts.porosity, scan.porosity[tuple(idx.T)], rtol=1e-6)
    off = coarsen(phases, spacing_um=spacing, kernel=kernel, grid=[[-500.0, 0.0, 0.0]])
    assert np.isnan(off.porosity[0]) and off.coverage[0] == 0


def test_model_grid_divides_interpolated_numerator_and_denominator(piece):
    # Reference library: scipy.interpolate.RegularGridInterpolator (linear) of K*P and K*E on
    # the scan grid, divided afterwards, at the points of a coarser, offset model grid.
    spacing = (10.0, 10.0, 10.0)
    kernel = Kernel("box", 90.0)
    grid = Grid(origin_um=(33.0, 47.5, 101.2), spacing_um=(70.0, 55.0, 61.0), shape=(15, 19, 17))
    field = coarsen(piece, spacing_um=spacing, kernel=kernel, grid=grid, min_coverage=0.3)
    axes = [np.arange(n) * s for n, s in zip(piece.shape, spacing)]
    pts = np.stack(np.meshgrid(*grid.axes_um(), indexing="ij"), axis=-1)
    num = RegularGridInterpolator(axes, apply_kernel(piece == 1, kernel=kernel,
                                                     spacing_um=spacing).astype(np.float64),
                                  bounds_error=False, fill_value=0.0)(pts)
    den = RegularGridInterpolator(axes, apply_kernel(piece > 0, kernel=kernel,
                                                     spacing_um=spacing).astype(np.float64),
                                  bounds_error=False, fill_value=0.0)(pts)
    with np.errstate(invalid="ignore", divide="ignore"):
        expected = np.where(den >= 0.3, num / den, np.nan)
    assert field.porosity.shape == grid.shape
    np.testing.assert_allclose(field.coverage, den, atol=1e-6)
    np.testing.assert_allclose(field.porosity, expected, rtol=1e-5, atol=1e-6)
    assert np.isfinite(field.porosity).sum() > 1000


def test_write_coarse_field(tmp_path, piece):
    spacing = (10.0, 10.0, 10.0)
    field = coarsen(piece, spacing_um=spacing, kernel=Kernel("ball", 100.0), A3_um3=8000.0)
    paths = write_coarse_field(tmp_path, field)
    names = sorted(p.name for p in paths)
    assert names == ["coarse_coverage.ome.tif", "coarse_field.csv", "coarse_field.npz",
                     "coarse_porosity.ome.tif", "coarse_sigma.ome.tif"]
    for name, arr in (("coarse_porosity", field.porosity), ("coarse_coverage", field.coverage),
                      ("coarse_sigma", field.sigma)):
        data = tifffile.imread(tmp_path / f"{name}.ome.tif")
        assert data.dtype == np.float32
        np.testing.assert_array_equal(data, arr)
        assert read_ome_spacing_um(tmp_path / f"{name}.ome.tif") == spacing
    with np.load(tmp_path / "coarse_field.npz") as npz:
        assert str(npz["kernel_name"]) == "ball 100 µm diameter"
        np.testing.assert_array_equal(npz["porosity"], field.porosity)
        assert tuple(npz["spacing_um"]) == spacing and tuple(npz["origin_um"]) == (0, 0, 0)
    lines = (tmp_path / "coarse_field.csv").read_text(encoding="utf-8").splitlines()
    assert lines[0] == "z_um,y_um,x_um,porosity,coverage,sigma"
    step = 3  # 112³ = 1.4 M points: the smallest common step with ≤ 100 000 rows
    assert math.ceil(112 / (step - 1)) ** 3 > 100_000 >= math.ceil(112 / step) ** 3
    assert len(lines) - 1 == math.ceil(112 / step) ** 3
    z, y, x, por, *_ = lines[1 + 38 * 38 * 19 + 38 * 19 + 19].split(",")
    assert (float(z), float(y), float(x)) == (570.0, 570.0, 570.0)
    assert float(por) == pytest.approx(float(field.porosity[57, 57, 57]))

    pts = np.array([[100.0, 200.0, 300.0], [560.0, 560.0, 560.0]])
    at_points = coarsen(piece, spacing_um=spacing, kernel=Kernel("box", 50.0), grid=pts)
    out = tmp_path / "points"
    out.mkdir()
    names = sorted(p.name for p in write_coarse_field(out, at_points))
    assert names == ["coarse_field.csv", "coarse_field.npz"]
    with np.load(out / "coarse_field.npz") as npz:
        np.testing.assert_array_equal(npz["points_um"], pts)


def test_bad_input():
    good = _ball_piece(16, 6, 2, 0.4, seed=0)
    kernel = Kernel("box", 3.0)
    with pytest.raises(InputError, match="labels"):
        coarsen(good + 1, spacing_um=1, kernel=kernel)
    with pytest.raises(InputError, match="no piece"):
        coarsen(np.zeros_like(good), spacing_um=1, kernel=kernel)
    with pytest.raises(InputError, match="min_coverage"):
        coarsen(good, spacing_um=1, kernel=kernel, min_coverage=1.5)
    with pytest.raises(InputError, match="A3_um3"):
        coarsen(good, spacing_um=1, kernel=kernel, A3_um3=-1.0)
    with pytest.raises(InputError, match=r"\(n, 3\)"):
        coarsen(good, spacing_um=1, kernel=kernel, grid=np.zeros((4, 2)))
    with pytest.raises(InputError, match="Kernel"):
        coarsen(good, spacing_um=1, kernel="gaussian")
    with pytest.raises(InputError, match="shape"):
        Grid((0, 0, 0), 1.0, (0, 4, 4))
