"""Cross-chunk connected components against scipy.ndimage.label on the whole volume."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage as ndi

from chunked_phantom import put

pytest.importorskip("dask")


def _random_mask(shape, fraction, seed):
    rng = np.random.default_rng(seed)
    # smoothed noise gives components of many sizes that wind across chunk faces,
    # edges and corners
    field = ndi.gaussian_filter(rng.normal(size=shape), 1.2)
    return field > np.quantile(field, 1 - fraction)


def _as_bool(x):
    return x.astype(bool)


def _first(mask, marker):
    return mask.astype(bool)


def _second(mask, marker):
    return marker.astype(bool)


@pytest.mark.parametrize("kind, connectivity", [("face", 1), ("full", 3)])
def test_components_match_scipy_label(tmp_path, kind, connectivity):
    # Reference library: scipy.ndimage.label on the whole volume (Rosenfeld & Pfaltz 1966).
    from ctpore.chunked._blocks import Runner
    from ctpore.chunked.labels import label_components
    from ctpore.chunked.workspace import Workspace

    shape = (41, 37, 33)
    mask = _random_mask(shape, 0.35, seed=3)
    labels, n = ndi.label(mask, structure=ndi.generate_binary_structure(3, connectivity))
    with Workspace(shape, (7, 9, 8), parent=tmp_path) as ws:  # uneven last chunks
        src = put(ws, "mask", mask)
        comps = label_components(ws, Runner("threads"), _as_bool, [src], kind=kind,
                                 first=True)
        assert comps.count == n
        sizes = np.bincount(labels.ravel())[1:]
        # components in scan order of their first voxel, as ndimage numbers them
        order = np.argsort(comps.first)
        np.testing.assert_array_equal(comps.size[order], sizes)
        first_ref = np.array([np.flatnonzero(labels.ravel() == k)[0] for k in range(1, n + 1)])
        np.testing.assert_array_equal(comps.first[order], first_ref)
        faces = np.unique(np.concatenate([labels[0].ravel(), labels[-1].ravel(),
                                          labels[:, 0].ravel(), labels[:, -1].ravel(),
                                          labels[:, :, 0].ravel(), labels[:, :, -1].ravel()]))
        border_ref = np.zeros(n + 1, dtype=bool)
        border_ref[faces] = True
        np.testing.assert_array_equal(comps.border[order], border_ref[1:])
        # voxel-level partition: the same voxels share a component
        lab = ws.array("labels")[...].astype(np.int64)
        node = np.zeros(lab.shape, dtype=np.int64)
        for i, b in enumerate(ws.blocks):
            part = lab[b.slices]
            node[b.slices] = np.where(part > 0, part + comps.offsets[i], 0)
        table = comps.node_table(np.arange(1, comps.count + 1), 0)
        chunked = table[node]
        pairs = np.unique(np.stack([labels[mask], chunked[mask]]), axis=1)
        assert pairs.shape[1] == n  # one-to-one between the two labellings


def test_marker_flags(tmp_path):
    from ctpore.chunked._blocks import Runner
    from ctpore.chunked.labels import label_components
    from ctpore.chunked.workspace import Workspace

    shape = (30, 28, 26)
    mask = _random_mask(shape, 0.3, seed=5)
    labels, n = ndi.label(mask)
    with Workspace(shape, (8, 8, 8), parent=tmp_path) as ws:
        marker = np.zeros(shape, dtype=bool)
        marker[:, :, 13] = True  # one global plane, crossing the chunks
        sources = [put(ws, "mask", mask), put(ws, "marker", marker)]
        comps = label_components(ws, Runner("synchronous"), _first, sources, kind="face",
                                 marker_fn=_second, first=True)
        order = np.argsort(comps.first)
        ref = np.zeros(n + 1, dtype=bool)
        ref[np.unique(labels[marker])] = True
        np.testing.assert_array_equal(comps.marked[order], ref[1:])
        assert comps.marked.any() and not comps.marked.all()  # the check can fail
