"""Shared fixtures of the chunked tests: one 192³ phantom and its in-memory segmentation."""

from __future__ import annotations

import pytest

from chunked_phantom import CHUNKS, SPACING, porous_piece, recipe_dict


@pytest.fixture(scope="session")
def piece():
    """(grey stack, in-memory Segmentation, recipe) of the 192³ phantom."""
    from ctpore.recipe import Recipe
    from ctpore.segment.pipeline import segment

    grey = porous_piece()
    recipe = Recipe.from_dict(recipe_dict())
    seg = segment(grey, spacing_um=SPACING, recipe=recipe)
    return grey, seg, recipe


@pytest.fixture()
def workspace(tmp_path):
    from ctpore.chunked.workspace import Workspace

    with Workspace((192, 192, 192), CHUNKS, parent=tmp_path) as ws:
        yield ws


@pytest.fixture(scope="session")
def runner():
    pytest.importorskip("dask")
    from ctpore.chunked._blocks import Runner

    return Runner("threads")
