"""Chunked profiles and coarse field versus ctpore.profiles and ctpore.continuum.coarse.

The in-memory functions are the reference (checked in tests/test_profiles.py,
tests/reference/test_profiles_reference.py and tests/continuum against the Delesse principle and
exact cases). Profiles and Gaussian/box fields must be identical; the ball kernel is applied by
FFT, whose rounding depends on the block size (scipy.signal.fftconvolve), so it is compared to
1e-6.
"""

from __future__ import annotations

import numpy as np
import pytest

from chunked_phantom import SPACING, put

pytest.importorskip("dask")


def test_profiles_identical(piece, workspace, runner):
    from ctpore.chunked.porosity import chunked_porosity
    from ctpore.chunked.profiles import chunked_profiles
    from ctpore.profiles import profiles_for_result
    from ctpore.recipe import ProfilesSection

    _, seg, _ = piece
    section = ProfilesSection(axial_window_um=80.0)
    ref = profiles_for_result(seg.phases, spacing_um=SPACING, section=section)
    _, classes = chunked_porosity(workspace, runner, put(workspace, "phases", seg.phases),
                                  spacing_um=SPACING)
    got = chunked_profiles(workspace, runner, classes, spacing=SPACING, section=section)
    assert got["frame"].to_dict() == ref["frame"].to_dict()
    for name in ("depth", "radial", "axial", "rz_map"):
        assert list(got[name]) == list(ref[name])
        for column in ref[name]:
            np.testing.assert_array_equal(got[name][column], ref[name][column],
                                          err_msg=f"{name}.{column}")
    assert np.nansum(ref["depth"]["porosity_closed"]) > 0  # closed pores reach the tables


def test_depth_cap_drops_the_depth_profile(piece, workspace, runner):
    from ctpore.chunked.porosity import chunked_porosity
    from ctpore.chunked.profiles import chunked_profiles

    _, seg, _ = piece
    _, classes = chunked_porosity(workspace, runner, put(workspace, "phases", seg.phases),
                                  spacing_um=SPACING)
    got = chunked_profiles(workspace, runner, classes, spacing=SPACING, max_depth_halo_um=10.0)
    assert got["depth"] is None
    assert "halo of more than 10 µm" in got["depth_note"]
    assert got["axial"]["voxels"].sum() == np.count_nonzero(seg.phases)


@pytest.mark.parametrize("shape, width, exact", [("gaussian", 6.0, True), ("box", 20.0, True),
                                                 ("ball", 20.0, False)])
def test_coarse_field(piece, workspace, runner, shape, width, exact):
    from ctpore.chunked.coarse import chunked_coarsen
    from ctpore.continuum.coarse import coarsen
    from ctpore.continuum.kernels import Kernel

    _, seg, _ = piece
    kernel = Kernel(shape, width)
    ref = coarsen(seg.phases, spacing_um=SPACING, kernel=kernel)
    field = chunked_coarsen(workspace, runner, put(workspace, "phases", seg.phases),
                            spacing=SPACING, kernel=kernel)
    porosity, coverage = field.porosity[...], field.coverage[...]
    np.testing.assert_array_equal(np.isnan(porosity), np.isnan(ref.porosity))
    if exact:
        np.testing.assert_array_equal(porosity, ref.porosity)
        np.testing.assert_array_equal(coverage, ref.coverage)
    else:
        np.testing.assert_allclose(porosity, ref.porosity, rtol=0, atol=1e-6)
        np.testing.assert_allclose(coverage, ref.coverage, rtol=0, atol=1e-6)
    assert np.isfinite(porosity).sum() > 100_000
