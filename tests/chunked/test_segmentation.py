"""Chunked denoise, threshold, cleaning, envelope, phases and porosity versus the in-memory ones.

The in-memory functions are the reference (they are checked against scikit-image, scipy and
published values in tests/segment and tests/measure); here the chunked results must equal them
bit for bit on a 192³ phantom with anisotropic voxels split into small, uneven chunks.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from chunked_phantom import SPACING, put

pytest.importorskip("dask")


def test_denoise_threshold_histogram(piece, workspace, runner):
    from ctpore.chunked.filters import chunked_denoise, denoise_halo
    from ctpore.chunked.histogram import chunked_histogram, chunked_threshold
    from ctpore.segment.threshold import grey_histogram

    grey, seg, recipe = piece
    assert denoise_halo(recipe.denoise, SPACING) == (1, 1, 1)
    path = chunked_denoise(workspace, runner, put(workspace, "input", grey), spacing=SPACING,
                           section=recipe.denoise)
    out = workspace.array("grey")
    np.testing.assert_array_equal(out[...], seg.grey)  # median: bit for bit
    choice = chunked_threshold(out, workspace.blocks, section=recipe.threshold)
    assert choice == seg.threshold  # Otsu 1979 via skimage, same histogram, same value
    counts, centres = chunked_histogram(out, workspace.blocks)
    ref_counts, ref_centres = grey_histogram(seg.grey)
    np.testing.assert_array_equal(counts, ref_counts)
    np.testing.assert_array_equal(centres, ref_centres)
    assert Path(path).name == "grey"


def test_gaussian_denoise_exact(workspace, runner):
    # The Gaussian's halo is scipy's truncation radius int(4σ/spacing + 0.5) per axis.
    from ctpore.chunked.filters import chunked_denoise, denoise_halo
    from ctpore.recipe import DenoiseSection
    from ctpore.segment.denoise import denoise

    rng = np.random.default_rng(1)
    grey = rng.normal(1000, 200, size=(192, 192, 192)).astype(np.float32)
    section = DenoiseSection(method="gaussian", sigma_um=3.0)
    assert denoise_halo(section, SPACING) == (6, 8, 8)
    chunked_denoise(workspace, runner, put(workspace, "input", grey), spacing=SPACING,
                    section=section)
    np.testing.assert_array_equal(workspace.array("grey")[...],
                                  denoise(grey, spacing_um=SPACING, section=section))


@pytest.mark.parametrize("method", ["li", "triangle"])
def test_li_and_triangle_from_the_streamed_histogram(piece, workspace, method):
    # Reference: scikit-image's threshold_li / threshold_triangle on the whole grey stack in
    # memory; the chunked path sees only the streamed histogram and must give the same value.
    from skimage import filters

    from ctpore.chunked.histogram import chunked_threshold
    from ctpore.recipe import ThresholdSection

    grey = piece[0]
    assert grey.dtype.kind == "u"
    put(workspace, "g", grey)
    choice = chunked_threshold(workspace.array("g"), workspace.blocks,
                               section=ThresholdSection(method=method))
    reference = getattr(filters, f"threshold_{method}")(np.asarray(grey))
    assert choice.value == float(reference)


def test_li_on_a_float_stack_is_refused(workspace):
    from ctpore.chunked.histogram import chunked_threshold
    from ctpore.errors import InputError
    from ctpore.recipe import ThresholdSection

    rng = np.random.default_rng(0)
    put(workspace, "g", rng.random((192, 192, 192), dtype=np.float32))
    with pytest.raises(InputError, match="threshold.method = 'li' on a float stack"):
        chunked_threshold(workspace.array("g"), workspace.blocks,
                          section=ThresholdSection(method="li"))


def test_clean_envelope_phases(piece, workspace, runner):
    from ctpore.chunked.clean import chunked_solid_at
    from ctpore.chunked.envelope import chunked_envelope
    from ctpore.chunked.porosity import chunked_phases
    from ctpore.segment.threshold import solid_mask

    grey, seg, recipe = piece
    g = put(workspace, "grey", seg.grey)
    solid = chunked_solid_at(workspace, runner, g, seg.threshold.value, spacing=SPACING,
                             recipe=recipe)
    cleaned = workspace.array(Path(solid).stem)[...]
    # the three cleaning steps change the raw threshold mask (the check is not vacuous)
    assert not np.array_equal(cleaned, solid_mask(seg.grey, seg.threshold.value))
    np.testing.assert_array_equal(cleaned, seg.phases == 2)
    env = chunked_envelope(workspace, runner, solid, spacing=SPACING, section=recipe.envelope)
    np.testing.assert_array_equal(workspace.array("envelope")[...], seg.envelope)
    chunked_phases(workspace, runner, solid, env)
    np.testing.assert_array_equal(workspace.array("phases")[...], seg.phases)


def test_porosity_open_closed(piece, workspace, runner):
    from ctpore.chunked.porosity import chunked_porosity
    from ctpore.measure.porosity import open_pore_mask, porosity

    _, seg, _ = piece
    measured, classes = chunked_porosity(workspace, runner, put(workspace, "phases", seg.phases),
                                         spacing_um=SPACING)
    ref = porosity(seg.phases, spacing_um=SPACING)
    assert measured == ref  # ISO 4590 open/closed rule, counts bit for bit
    assert ref["closed_pore_count"] > 10 and ref["porosity_open"] > 0.1  # both kinds present
    cls = workspace.array("classes")[...]
    np.testing.assert_array_equal(cls == 3, open_pore_mask(seg.phases))


def test_partial_volume_porosity(piece, workspace, runner):
    # Reference: ctpore.segment.partial_volume (linear mixing; Verbeek & van Vliet 1994 for the
    # blur argument), with deep-voxel medians as np.median gives them.
    from ctpore.chunked.partial_volume import chunked_partial_volume
    from ctpore.segment.partial_volume import partial_volume_porosity

    _, seg, _ = piece
    ref = partial_volume_porosity(seg.grey, seg.envelope, choice=seg.threshold,
                                  spacing_um=SPACING)
    got = chunked_partial_volume(workspace, runner, put(workspace, "grey", seg.grey),
                                 put(workspace, "env", seg.envelope), choice=seg.threshold,
                                 spacing=SPACING)
    assert set(got) == set(ref)
    for key, value in ref.items():
        if key in ("porosity_partial_volume", "porosity_partial_volume_uncertainty",
                   "dporosity_dsolid_grey", "dporosity_dgas_grey"):
            assert got[key] == pytest.approx(value, rel=1e-12), key  # sums in another order
        else:
            assert got[key] == value, key
    assert ref["solid_voxels_used"] > 1000 and ref["gas_voxels_used"] > 1000
