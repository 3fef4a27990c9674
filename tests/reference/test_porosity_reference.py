"""Porosity measures against published values, standards and a reference library.

Each check names its source beside it. Synthetic images are built here, in physical coordinates.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage, stats
from skimage.filters import threshold_otsu

from ctpore.measure.porosity import open_pore_mask, porosity

EXTERIOR, PORE, SOLID = 0, 1, 2

# Lattice points of the cubic unit cells, as fractions of the cell edge a, and the edge for
# touching spheres of radius R (standard crystallography; Kittel, Introduction to Solid State
# Physics, ch. 1, from memory).
CELLS = {
    # name: (basis, a / R, expected porosity)
    "simple cubic": ([(0, 0, 0)], 2.0, 1 - math.pi / 6),
    "body-centred cubic": ([(0, 0, 0), (0.5, 0.5, 0.5)], 4 / math.sqrt(3),
                           1 - math.pi * math.sqrt(3) / 8),
    "face-centred cubic": ([(0, 0, 0), (0, 0.5, 0.5), (0.5, 0, 0.5), (0.5, 0.5, 0)],
                           2 * math.sqrt(2), 1 - math.pi / (3 * math.sqrt(2))),
}


def _unit_cell(basis, edge_um, shape, radius_um):
    """Phases of one periodic unit cell: solid spheres at the lattice points, pore elsewhere.

    The cell [0, a)³ is sampled at voxel centres (i + 0.5)·(a / n) in each axis, so the grid
    covers exactly one period; returns the phases and the spacing (dz, dy, dx) in µm.
    """
    spacing = tuple(edge_um / n for n in shape)
    axes = [(np.arange(n) + 0.5) * h for n, h in zip(shape, spacing)]
    solid = np.zeros(shape, dtype=bool)
    for point in basis:
        dist2 = 0.0
        for ax, (coord, frac) in enumerate(zip(axes, point)):
            d = np.abs(coord - frac * edge_um)
            d = np.minimum(d, edge_um - d)  # periodic (minimum image) distance
            dist2 = dist2 + (d**2).reshape([-1 if i == ax else 1 for i in range(3)])
        solid |= dist2 < radius_um**2
    return np.where(solid, SOLID, PORE).astype(np.uint8), spacing


@pytest.mark.parametrize("name", list(CELLS))
def test_unit_cell_porosity_isotropic(name):
    basis, edge_per_radius, expected = CELLS[name]
    radius = 20.0
    edge = edge_per_radius * radius
    n = math.ceil(edge)  # voxel size a/n <= 1, so R >= 20 voxels
    phases, spacing = _unit_cell(basis, edge, (n, n, n), radius)
    result = porosity(phases, spacing_um=spacing)
    # Kittel, Introduction to Solid State Physics, ch. 1 (from memory); REFERENCES.md: a
    # voxelised periodic unit cell is within 1 % relative for R >= 20 voxels.
    assert result["porosity_gas"] == pytest.approx(expected, rel=0.01)
    # The whole cell is the envelope: its volume is a³ exactly (plain geometry).
    assert result["envelope_volume_mm3"] == pytest.approx(edge**3 * 1e-9, rel=1e-12)


@pytest.mark.parametrize("name", list(CELLS))
def test_unit_cell_porosity_anisotropic(name):
    basis, edge_per_radius, expected = CELLS[name]
    radius = 20.0
    edge = edge_per_radius * radius
    n = 2 * math.ceil(edge / 2)  # even, so z has exactly half as many voxels
    phases, spacing = _unit_cell(basis, edge, (n // 2, n, n), radius)
    assert spacing[0] == pytest.approx(2 * spacing[1])  # spacing (2, 1, 1) in units of a/n
    result = porosity(phases, spacing_um=spacing)
    # Kittel, ch. 1 (from memory): same value, sampled twice as coarsely in z; 1 % relative.
    assert result["porosity_gas"] == pytest.approx(expected, rel=0.01)
    assert result["envelope_volume_mm3"] == pytest.approx(edge**3 * 1e-9, rel=1e-12)
    solid_fraction = result["solid_volume_mm3"] / result["envelope_volume_mm3"]
    assert solid_fraction == pytest.approx(1 - expected, rel=0.01)


def _noisy_phantom(seed=3, n=96, radius=7.0, eta=0.5, blur=1.0, noise=0.15):
    """Random overlapping solid spheres (Boolean model) in gas, blurred, noisy and thresholded.

    Returns the true phases and the phases segmented with Otsu's threshold.
    """
    rng = np.random.default_rng(seed)
    count = rng.poisson(eta * n**3 / (4 / 3 * math.pi * radius**3))
    centres = rng.uniform(0, n, size=(count, 3)).astype(int)
    seeds = np.ones((n, n, n), dtype=bool)
    seeds[tuple(centres.T)] = False
    solid = ndimage.distance_transform_edt(seeds) < radius
    truth = np.where(solid, SOLID, PORE).astype(np.uint8)
    grey = ndimage.gaussian_filter(solid.astype(float), blur)
    grey += rng.normal(0.0, noise, grey.shape)
    threshold = threshold_otsu(grey)  # Otsu 1979, IEEE Trans. SMC-9:62
    segmented = np.where(grey > threshold, SOLID, PORE).astype(np.uint8)
    return truth, segmented


def test_voxel_porosity_within_point_count_confidence_interval():
    truth, segmented = _noisy_phantom()
    n = segmented.shape[0]
    # ASTM E562 systematic point count on the image being measured (the segmented one):
    # n fields = 12 equally spaced z-slices, a systematic 12 x 12 grid of test points on each,
    # per-field point fraction P_P; Delesse principle V_V = P_P (Delesse 1847; Underwood 1970).
    step = 8
    slices = np.arange(step // 2, n, step)
    fields = np.array([np.mean(segmented[z, step // 2::step, step // 2::step] == PORE)
                       for z in slices])
    k = fields.size
    mean = fields.mean()
    # ASTM E562: 95 % CI = t(0.975, n - 1) · s / √n.
    half_width = stats.t.ppf(0.975, k - 1) * fields.std(ddof=1) / math.sqrt(k)
    assert half_width < 0.06  # the interval is narrow enough for the check to bite
    measured = porosity(segmented, spacing_um=(5.0, 5.0, 5.0))["porosity_gas"]
    # ASTM E562 / REFERENCES.md: the voxel porosity of the test volume lies inside the CI.
    assert abs(measured - mean) <= half_width
    # Against the truth: Gaussian blur moves a curved boundary by about σ²/r (Verbeek & van
    # Vliet 1994, IEEE PAMI 16:726). The Boolean model's surface density S_V = 4πr²λ·exp(−η)
    # ≈ 0.13 per voxel here (Serra 1982, from memory), so the porosity shifts by at most about
    # S_V·σ²/r ≈ 0.02 (derived estimate; seeds 3-12 give shifts of 0.003-0.008).
    true_porosity = porosity(truth, spacing_um=(5.0, 5.0, 5.0))["porosity_gas"]
    assert 0.4 < true_porosity < 0.8  # a puffed-product-like porosity: the test is not trivial
    assert measured == pytest.approx(true_porosity, abs=0.02)


def _ball(shape, centre, radius):
    zz, yy, xx = np.ogrid[: shape[0], : shape[1], : shape[2]]
    return (zz - centre[0]) ** 2 + (yy - centre[1]) ** 2 + (xx - centre[2]) ** 2 <= radius**2


def _cellular_cube():
    """A solid cube with sealed cells, cells cut by its surface and a sealed box met diagonally.

    Returns the phases and the true open and closed pore masks built from the construction.
    """
    shape = (64, 64, 64)
    cube = np.zeros(shape, dtype=bool)
    cube[8:56, 8:56, 8:56] = True  # the envelope
    sealed = [  # (centre, radius) of cells entirely inside, at least one wall voxel deep
        ((22, 22, 44), 6), ((42, 42, 42), 6), ((40, 20, 24), 6),
        ((15, 46, 20), 6),  # one-voxel wall under the face z = 8: still closed
    ]
    cut = [  # cells whose centre is on the surface: hemispherical dents, a cell cut by an edge
        ((8, 44, 44), 6), ((55, 30, 14), 6), ((30, 8, 55), 6),
    ]
    open_truth = np.zeros(shape, dtype=bool)
    for centre, radius in cut:
        open_truth |= _ball(shape, centre, radius)
    # A cell inside, linked to the face x = 55 by a straight channel one voxel wide: open.
    open_truth |= _ball(shape, (30, 44, 30), 5)
    open_truth[30, 44, 35:56] = True
    # A pinhole from the face z = 8 down to z = 14 ...
    open_truth[8:15, 30, 30] = True
    closed_truth = np.zeros(shape, dtype=bool)
    for centre, radius in sealed:
        closed_truth |= _ball(shape, centre, radius)
    # ... and a 3x3x3 cell whose corner voxel (15, 31, 30) meets the pinhole's end (14, 30, 30)
    # only along an edge: closed under 6-adjacency of the gas, 26-adjacency of the solid.
    closed_truth[15:18, 31:34, 30:33] = True
    open_truth &= cube
    closed_truth &= cube
    phases = np.where(cube, SOLID, EXTERIOR).astype(np.uint8)
    phases[open_truth | closed_truth] = PORE
    return phases, open_truth, closed_truth, len(sealed) + 1


def test_open_and_closed_cells_of_a_constructed_body():
    phases, open_truth, closed_truth, n_closed = _cellular_cube()
    # The construction keeps closed cells apart from open ones (no shared face).
    grown = ndimage.binary_dilation(open_truth, structure=ndimage.generate_binary_structure(3, 1))
    assert not (grown & closed_truth).any()
    spacing = (4.0, 3.0, 3.0)
    voxel_mm3 = 4.0 * 3.0 * 3.0 * 1e-9
    result = porosity(phases, spacing_um=spacing)
    envelope = 48**3
    # ISO 4590 / ASTM D6226: open cells reach the outside (cells cut at the surface included),
    # closed cells do not; expected counts come from the construction, not from labelling.
    assert result["envelope_voxels"] == envelope
    assert result["open_pore_volume_mm3"] == pytest.approx(open_truth.sum() * voxel_mm3, rel=1e-12)
    assert result["closed_pore_volume_mm3"] == pytest.approx(closed_truth.sum() * voxel_mm3,
                                                             rel=1e-12)
    assert result["porosity_open"] == pytest.approx(open_truth.sum() / envelope, rel=1e-12)
    assert result["porosity_closed"] == pytest.approx(closed_truth.sum() / envelope, rel=1e-12)
    # Toriwaki & Yonekura 2002, Forma 17:183: 6-adjacent gas / 26-adjacent solid, so the box
    # met only along an edge is a separate closed cell.
    assert result["closed_pore_count"] == n_closed
    assert result["touches_border"] is False
    np.testing.assert_array_equal(open_pore_mask(phases), open_truth)
    # Delesse principle (V_V = P_P): volumes are voxel counts times the voxel volume.
    assert result["envelope_volume_mm3"] == pytest.approx(envelope * voxel_mm3, rel=1e-12)


def test_gas_porosity_matches_porespy():
    phases, _, _, _ = _cellular_cube()
    # porespy.metrics.porosity counts 1 as void, 0 as solid and ignores other values; voxels
    # outside a `mask` would count as solid (ECOSYSTEM.md), so label the exterior 2 instead.
    as_porespy = np.choose(phases, [2, 1, 0]).astype(np.uint8)
    saved = np.geterr()
    try:
        import porespy

        reference = porespy.metrics.porosity(as_porespy)
    finally:
        np.seterr(**saved)  # porespy changes numpy's error state for the whole process
    result = porosity(phases, spacing_um=10.0)
    # Reference library: porespy 3.2, metrics.porosity on the same labelled volume.
    assert result["porosity_gas"] == pytest.approx(reference, rel=1e-12)
