"""Behaviour of ctpore.measure.cells: units, filtering, edge cases, CSV rows, determinism."""

from __future__ import annotations

import csv
import io
import math

import numpy as np
import pytest
from scipy import ndimage, spatial

from ctpore.errors import InputError
from ctpore.measure.cells import CELL_COLUMNS, _ball_maxima, _ball_offsets, cell_table_rows, cells
from ctpore.measure.porosity import porosity

EXTERIOR, PORE, SOLID = 0, 1, 2


def _balls(shape, centres, radii, *, background=SOLID):
    """Phases in voxel units: pore inside any ball, ``background`` elsewhere."""
    grid = np.ogrid[tuple(slice(0, n) for n in shape)]
    phases = np.full(shape, background, dtype=np.uint8)
    for centre, radius in zip(centres, radii):
        d2 = sum((g - c) ** 2 for g, c in zip(grid, centre))
        phases[d2 < radius**2] = PORE
    return phases


def _foam(n=64, seed=5):
    """Overlapping random pores (radius 5 voxels) in a solid block, about half pore."""
    rng = np.random.default_rng(seed)
    count = int(round(math.log(2) * n**3 / (4 / 3 * math.pi * 5**3)))
    seeds = np.ones((n, n, n), dtype=bool)
    seeds[tuple(rng.integers(0, n, size=(count, 3)).T)] = False
    pore = ndimage.distance_transform_edt(seeds) < 5
    return np.where(pore, PORE, SOLID).astype(np.uint8)


def test_density_counts_cells_per_envelope_volume():
    phases = _balls((30, 30, 50), [(15, 15, 12), (15, 15, 37)], [7, 7])
    spacing = (4.0, 2.0, 2.0)
    table = cells(phases, spacing_um=spacing)
    envelope_mm3 = phases.size * math.prod(spacing) * 1e-9  # pore + solid, every voxel here
    assert table.summary["cell_count"] == 2
    assert table.summary["cell_density_per_mm3"] == pytest.approx(2 / envelope_mm3)
    # Exterior around the piece is not envelope: padding with air changes nothing.
    padded = np.pad(phases, 6, constant_values=EXTERIOR)
    assert cells(padded, spacing_um=spacing).summary["cell_density_per_mm3"] == pytest.approx(
        2 / envelope_mm3)
    # The envelope volume is the one porosity() reports.
    env = porosity(padded, spacing_um=spacing)["envelope_volume_mm3"]
    assert table.summary["cell_density_per_mm3"] == pytest.approx(2 / env)


def test_volumes_partition_the_pore_space():
    phases = _foam()
    spacing = (3.0, 2.0, 2.0)
    table = cells(phases, spacing_um=spacing)
    assert table.labels.dtype == np.int32
    assert np.array_equal(table.labels > 0, phases == PORE)
    assert table.volume_um3.sum() == pytest.approx(
        np.count_nonzero(phases == PORE) * math.prod(spacing))
    assert np.allclose(table.diameter_um, np.cbrt(6 * table.volume_um3 / math.pi))
    assert table.summary["cell_count"] > 20  # the foam is split, not one connected blob
    assert table.summary["open_cell_count"] + table.summary["closed_cell_count"] == table.label.size
    assert table.summary["cell_diameter_d10_um"] <= table.summary["cell_diameter_d50_um"]
    assert table.summary["cell_diameter_d50_um"] <= table.summary["cell_diameter_d90_um"]
    assert table.summary["cell_diameter_mean_um"] == pytest.approx(table.diameter_um.mean())
    assert table.summary["cell_diameter_sd_um"] == pytest.approx(table.diameter_um.std(ddof=1))


def test_min_cell_volume_drops_isolated_small_pores():
    big = [(12, 12, 12), (12, 12, 36)]
    phases = _balls((24, 24, 48), big, [8, 8])
    phases[3:5, 20:22, 20:22] = PORE  # two sealed specks of 8 voxels
    phases[19:21, 2:4, 44:46] = PORE
    assert cells(phases, spacing_um=1.0).summary["cell_count"] == 4
    table = cells(phases, spacing_um=2.0, min_cell_volume_um3=8 * 8.0 + 1)
    assert table.summary["cell_count"] == 2
    assert table.summary["dropped_cell_count"] == 2
    assert np.count_nonzero(table.labels) == np.count_nonzero(phases == PORE) - 16
    assert table.volume_um3.min() >= 8 * 8.0 + 1
    # A threshold of exactly the speck volume keeps them (smaller than, not equal to, drops).
    assert cells(phases, spacing_um=2.0, min_cell_volume_um3=64.0).summary["cell_count"] == 4


def test_min_cell_volume_merges_a_small_cell_into_its_neighbour():
    # A small ball hanging on a large one by a narrow neck: two cells, then one when the small
    # cell is under the threshold (merged into the neighbour it touches, volume kept).
    phases = _balls((28, 28, 44), [(14, 14, 13), (14, 14, 31)], [10, 5])
    phases[13:15, 13:15, 20:30] = PORE  # neck
    table = cells(phases, spacing_um=1.0, r_max_vox=2)
    assert table.summary["cell_count"] == 2
    small = table.volume_um3.min()
    merged = cells(phases, spacing_um=1.0, r_max_vox=2, min_cell_volume_um3=small + 1)
    assert merged.summary["cell_count"] == 1
    assert merged.summary["dropped_cell_count"] == 0
    assert merged.volume_um3[0] == pytest.approx(table.volume_um3.sum())


@pytest.mark.parametrize("fill", [SOLID, EXTERIOR])
def test_empty_pore_phase(fill):
    phases = np.full((10, 12, 14), fill, dtype=np.uint8)
    table = cells(phases, spacing_um=(2.0, 1.0, 1.0))
    summary = table.summary
    assert summary["cell_count"] == 0
    assert summary["open_cell_count"] == summary["closed_cell_count"] == 0
    for key in ("cell_diameter_mean_um", "cell_diameter_sd_um", "cell_diameter_d10_um",
                "cell_diameter_d50_um", "cell_diameter_d90_um"):
        assert math.isnan(summary[key])
    if fill == SOLID:  # an envelope without cells
        assert summary["cell_density_per_mm3"] == 0.0
    else:  # no envelope at all
        assert math.isnan(summary["cell_density_per_mm3"])
    assert not table.labels.any() and table.labels.shape == phases.shape
    assert table.centroid_um.shape == (0, 3)
    assert cell_table_rows(table) == []


def test_all_pore_is_one_cell():
    # No wall anywhere: the distance map has no zero, so the whole image is one (cut) cell.
    table = cells(np.full((6, 7, 8), PORE, dtype=np.uint8), spacing_um=(2.0, 1.0, 1.0))
    assert table.summary["cell_count"] == 1
    assert table.volume_um3.tolist() == [6 * 7 * 8 * 2.0]
    assert table.touches_border.tolist() == [True] and table.open.tolist() == [True]


def test_single_cell_has_nan_sd():
    phases = _balls((20, 20, 20), [(10, 10, 10)], [6])
    summary = cells(phases, spacing_um=1.0).summary
    assert summary["cell_count"] == 1 and math.isnan(summary["cell_diameter_sd_um"])


def test_rows_have_unit_columns_and_round_trip_through_csv():
    phases = np.pad(_balls((24, 24, 48), [(12, 12, 12), (12, 12, 36)], [7, 9]), 2,
                    constant_values=EXTERIOR)
    phases[2:7, 14, 38] = PORE  # a one-voxel channel opens the second ball to the outside
    table = cells(phases, spacing_um=(2.0, 1.0, 1.0))
    rows = cell_table_rows(table)
    assert CELL_COLUMNS == ("label", "volume_um3", "diameter_um", "centroid_z_um",
                            "centroid_y_um", "centroid_x_um", "open", "touches_border")
    assert [tuple(r) for r in rows] == [CELL_COLUMNS] * 2
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=CELL_COLUMNS)
    writer.writeheader()
    writer.writerows(rows)
    back = list(csv.DictReader(io.StringIO(buffer.getvalue())))
    assert [int(r["label"]) for r in back] == table.label.tolist()
    assert [float(r["volume_um3"]) for r in back] == table.volume_um3.tolist()
    assert [float(r["centroid_x_um"]) for r in back] == table.centroid_um[:, 2].tolist()
    assert [r["open"] for r in back] == [str(bool(v)) for v in table.open]
    assert sorted(r["open"] for r in back) == ["False", "True"]


def test_touches_border():
    phases = _balls((20, 20, 40), [(10, 10, 10), (10, 10, 36)], [6, 6])
    table = cells(phases, spacing_um=1.0)
    flags = dict(zip(np.round(table.centroid_um[:, 2]).astype(int) < 20, table.touches_border))
    assert flags == {True: False, False: True}
    assert table.summary["border_cell_count"] == 1
    assert table.open[table.touches_border].all()  # the field of view counts as outside


def _physical_foam(spacing, *, extent=72.0, radius=6.0, seed=3):
    """Periodic overlapping pores (radius 6 µm) in a 72 µm cube, sampled at voxel centres."""
    rng = np.random.default_rng(seed)
    count = int(round(math.log(2) * extent**3 / (4 / 3 * math.pi * radius**3)))
    centres = rng.uniform(0.0, extent, size=(count, 3))
    shape = [int(round(extent / h)) for h in spacing]
    axes = [(np.arange(n) + 0.5) * h for n, h in zip(shape, spacing)]
    points = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
    gap, _ = spatial.cKDTree(centres, boxsize=extent).query(points)
    return np.where((gap < radius).reshape(shape), PORE, SOLID).astype(np.uint8)


def test_anisotropic_sampling_gives_the_same_cells():
    # Sampling invariance (plain geometry): one physical foam sampled at (1, 1, 1) µm and at
    # (2, 1, 1) µm has the same cells; tolerances 10 % on the count, 5 % on the median
    # diameter (common practice, no source).
    fine = cells(_physical_foam((1.0, 1.0, 1.0)), spacing_um=(1.0, 1.0, 1.0)).summary
    coarse_phases = _physical_foam((2.0, 1.0, 1.0))
    coarse = cells(coarse_phases, spacing_um=(2.0, 1.0, 1.0)).summary
    assert fine["cell_count"] > 100
    assert coarse["cell_count"] == pytest.approx(fine["cell_count"], rel=0.10)
    assert coarse["cell_diameter_d50_um"] == pytest.approx(fine["cell_diameter_d50_um"],
                                                           rel=0.05)
    # The check bites: partitioning the coarse image as if its voxels were cubes gives a
    # different cell count.
    naive = cells(coarse_phases, spacing_um=1.0).summary
    assert abs(naive["cell_count"] - fine["cell_count"]) > 0.15 * fine["cell_count"]


def test_same_input_gives_identical_labels():
    phases = _foam(n=48, seed=11)
    first = cells(phases, spacing_um=(2.0, 1.0, 1.0))
    second = cells(phases.copy(), spacing_um=(2.0, 1.0, 1.0))
    assert np.array_equal(first.labels, second.labels)
    assert cell_table_rows(first) == cell_table_rows(second)


def test_pores_meeting_at_a_corner_are_separate_cells():
    # Face connectivity for pores, as in ctpore.measure.porosity (Toriwaki & Yonekura 2002,
    # Forma 17:183): two pores that share only a corner are two cells.
    phases = np.full((8, 8, 8), SOLID, dtype=np.uint8)
    phases[2:4, 2:4, 2:4] = PORE
    phases[4:6, 4:6, 4:6] = PORE
    assert cells(phases, spacing_um=1.0).summary["cell_count"] == 2


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0), (1.5, 1.0, 0.7)])
@pytest.mark.parametrize("r_max", [2, 3.5, 4])
def test_ball_maxima_match_scipy_maximum_filter(spacing, r_max):
    # Reference library: scipy.ndimage.maximum_filter with the same ball footprint; its default
    # mirror mode never brings in a value from outside the ball, like ignoring the border.
    rng = np.random.default_rng(2)
    smooth = ndimage.gaussian_filter(rng.random((24, 25, 26)), 1.5).astype(np.float32)
    pore = rng.random(smooth.shape) < 0.9
    smooth *= pore
    offsets = _ball_offsets(spacing, r_max)
    reach = np.abs(offsets).max(axis=0)
    footprint = np.zeros(2 * reach + 1, dtype=bool)
    footprint[tuple((offsets + reach).T)] = True
    value = smooth + np.float32(0.2) * ~pore
    expected = (smooth == ndimage.maximum_filter(value, footprint=footprint)) & pore
    assert expected.sum() > 10
    assert np.array_equal(_ball_maxima(smooth, pore, spacing, r_max, bump=0.2), expected)


def test_ball_is_round_in_physical_space():
    offsets = _ball_offsets((2.0, 1.0, 1.0), 4)
    assert np.abs(offsets).max(axis=0).tolist() == [1, 3, 3]  # 2·1 < 4 but 2·2 = 4 is out
    physical = offsets * np.array([2.0, 1.0, 1.0])
    assert (np.linalg.norm(physical, axis=1) < 4).all()


@pytest.mark.parametrize("kwargs, name", [
    ({"spacing_um": 0}, "spacing_um"),
    ({"spacing_um": 1, "min_cell_volume_um3": -1}, "min_cell_volume_um3"),
    ({"spacing_um": 1, "sigma_vox": float("nan")}, "sigma_vox"),
    ({"spacing_um": 1, "r_max_vox": 1}, "r_max_vox"),
    ({"spacing_um": 1, "r_max_vox": "four"}, "r_max_vox"),
])
def test_bad_options_raise_input_error(kwargs, name):
    with pytest.raises(InputError, match=name):
        cells(np.ones((4, 4, 4), dtype=np.uint8), **kwargs)


def test_bad_phases_raise_value_error():
    with pytest.raises(ValueError, match="phases"):
        cells(np.full((4, 4, 4), 3, dtype=np.uint8), spacing_um=1)
    with pytest.raises(ValueError, match="phases"):
        cells(np.ones((4, 4), dtype=np.uint8), spacing_um=1)
