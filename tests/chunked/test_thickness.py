"""Chunked local thickness and exact distances versus the in-memory ones (voxel for voxel).

References: the in-memory local thickness (Hildebrand & Rüegsegger 1997, J. Microsc.
185:67; checked against porespy and exact shapes in tests/measure and tests/reference) and the
edt package's exact Euclidean distance transform (Felzenszwalb & Huttenlocher 2012).
"""

from __future__ import annotations

import numpy as np
import pytest

from chunked_phantom import SPACING, put

pytest.importorskip("dask")


def _pore(phases):
    return phases == 1


def _wall(phases):
    return phases == 2


@pytest.mark.parametrize("name, fn, value", [("pore", _pore, 1), ("wall", _wall, 2)])
def test_local_thickness_exact(piece, workspace, runner, name, fn, value):
    import edt

    from ctpore.chunked.thickness import (chunked_local_thickness,
                                          chunked_thickness_histogram,
                                          chunked_thickness_statistics, thickness_halo)
    from ctpore.measure.local_thickness import (local_thickness, thickness_histogram,
                                                thickness_statistics)

    _, seg, _ = piece
    mask = seg.phases == value
    ref = local_thickness(mask, SPACING)
    phases = put(workspace, "phases", seg.phases)
    path, radius, halo = chunked_local_thickness(workspace, runner, fn, [phases],
                                                 spacing=SPACING, name=name)
    # the largest radius is the global maximum of the exact distance map (edt package)
    assert radius == float(edt.edt(mask, anisotropy=SPACING, black_border=False).max())
    assert halo == thickness_halo(radius, SPACING)
    assert all(h > 0 for h in halo)
    np.testing.assert_array_equal(workspace.array(name)[...], ref)
    stats = chunked_thickness_statistics(workspace, runner, path, fn, [phases])
    ref_stats = thickness_statistics(ref, mask)
    for key in ("d10_um", "d50_um", "d90_um", "max_um", "voxels"):
        assert stats[key] == ref_stats[key]  # numpy's inverted_cdf quantiles, exact
    for key in ("mean_um", "sd_um"):
        assert stats[key] == pytest.approx(ref_stats[key], rel=1e-12)
    hist = chunked_thickness_histogram(workspace, runner, path, fn, [phases], bin_width_um=1.5)
    ref_hist = thickness_histogram(ref, mask, bin_width_um=1.5)
    for key in ref_hist:
        np.testing.assert_array_equal(hist[key], ref_hist[key])


def _inside(x):
    return x != 0


def test_block_distance_grows_its_halo_until_exact(tmp_path):
    # A ball of radius 30 voxels in 8³ chunks: every interior block must grow its halo several
    # times; the result must still equal the edt package's transform of the whole volume.
    from ctpore.chunked.distance import block_distance
    from ctpore.chunked.workspace import Workspace

    import edt

    n = 72
    z, y, x = np.ogrid[:n, :n, :n]
    ball = ((z - 35.5) ** 2 + (y - 36.2) ** 2 + (x - 34.9) ** 2) <= 30 ** 2
    spacing = (2.0, 1.5, 1.0)
    ref = edt.edt(np.pad(ball, 1), anisotropy=spacing, black_border=False)[1:-1, 1:-1, 1:-1]
    with Workspace(ball.shape, (16, 16, 16), parent=tmp_path) as ws:
        src = put(ws, "ball", ball.astype(np.uint8))
        out = np.zeros(ball.shape, dtype=np.float32)
        halos = []
        for block in ws.blocks:
            dist, halo = block_distance(block, [src], _inside, spacing, fill=False,
                                        start_halo_um=4.0, max_halo_um=np.inf)
            halos.append(max(halo))
            if dist is not None:
                out[block.slices] = dist
        np.testing.assert_array_equal(out, ref)
        assert max(halos) >= 16  # grown from 4 µm (2-4 voxels)
