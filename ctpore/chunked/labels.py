"""Connected components across chunks: label each chunk, then merge labels over chunk faces.

Each chunk is labelled on its own (``scipy.ndimage.label``) and its labels are numbered after
those of the chunks before it. Two voxels in different chunks that are neighbours differ by one
in every axis in which their chunks differ, so they lie on the two planes on either side of a
chunk boundary along such an axis; reading, for every boundary, the two global planes and
pairing each voxel of one with its neighbours in the other (the structure's offsets within the
plane) finds every link between chunks, edges and corners included. The links are merged with
a graph connected-components pass (``scipy.sparse.csgraph.connected_components``, a union of
equivalences), giving the same components as labelling the whole volume at once [1]_.

Per component the pass gathers: voxel count, the raster index of its first voxel (so ties are
broken in scan order, as ``ndimage.label`` numbers components), whether it touches the image
border and whether it holds a voxel of a marker mask. Memory: the per-chunk labels on disk
(int32), two global planes per boundary task, and a few numbers per chunk-local label.

References
----------
.. [1] Rosenfeld, A. & Pfaltz, J. L. (1966). Sequential operations in digital picture
   processing. J. ACM 13(4):471-494. :doi:`10.1145/321356.321357` (two-pass labelling with
   label equivalences, here with the chunks as the first pass).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage as ndi

from ._blocks import Block, open_array

__all__ = ["Components", "label_components", "FACE", "FULL"]

FACE = "face"  # 6-connectivity
FULL = "full"  # 26-connectivity


@dataclass
class Components:
    """Components of a mask labelled across chunks.

    Attributes
    ----------
    labels_path : str
        Zarr array of chunk-local labels (0 background).
    offsets : ndarray of int64
        Per block (workspace order), the number added to its local labels to get node ids.
    node_component : ndarray of int64
        Component (0..n-1) of every node id 1..N (index 0 unused).
    size : ndarray of int64
        Voxels per component.
    first : ndarray of int64 or None
        Raster index (z·ny·nx + y·nx + x) of each component's first voxel.
    border : ndarray of bool
        Component touches the image border.
    marked : ndarray of bool or None
        Component holds a voxel of the marker mask.
    """

    labels_path: str
    offsets: np.ndarray
    node_component: np.ndarray
    size: np.ndarray
    first: np.ndarray | None
    border: np.ndarray
    marked: np.ndarray | None

    @property
    def count(self) -> int:
        return int(self.size.size)

    def node_table(self, per_component, background) -> np.ndarray:
        """A look-up table node id → value (node 0, the background, gets ``background``)."""
        per_component = np.asarray(per_component)
        out = np.empty(self.node_component.size, dtype=per_component.dtype)
        out[0] = background
        out[1:] = per_component[self.node_component[1:]]
        return out


def _structure(kind):
    return ndi.generate_binary_structure(3, 1 if kind == FACE else 3)


def label_components(ws, runner, mask_fn, sources, *, kind, name="labels", marker_fn=None,
                     first=False) -> Components:
    """Label ``mask_fn(*source blocks)`` across the chunks of workspace ``ws``.

    Parameters
    ----------
    ws : Workspace
    runner : Runner
    mask_fn : callable
        Top-level function of the source blocks (numpy arrays) returning the bool mask.
    sources : list of str
        Paths of the workspace arrays passed to ``mask_fn`` (and to ``marker_fn``).
    kind : "face" or "full"
        6- or 26-connectivity.
    name : str
        Name of the workspace array that keeps the chunk-local labels.
    marker_fn : callable, optional
        Top-level function of the source blocks giving a marker mask; ``Components.marked``
        says which components hold a marker voxel.
    first : bool
        Also find each component's first voxel in raster order.
    """
    labels_path = ws.create(name, np.int32)
    stats = runner.map(_label_block, ws.blocks, ws.shape, mask_fn, marker_fn, tuple(sources),
                       kind, labels_path, first)
    counts = [s[0] for s in stats]
    offsets = np.zeros(len(counts), dtype=np.int64)
    np.cumsum(counts[:-1], out=offsets[1:])
    n_nodes = int(sum(counts))
    index = {b.index: i for i, b in enumerate(ws.blocks)}
    grid = tuple(max(b.index[a] for b in ws.blocks) + 1 for a in range(3))
    offset_grid = np.zeros(grid, dtype=np.int64)
    for b in ws.blocks:
        offset_grid[b.index] = offsets[index[b.index]]
    tasks = [(axis, k * ws.chunks[axis]) for axis in range(3) for k in range(1, grid[axis])]
    pairs = runner.map(_boundary_pairs, tasks, labels_path, runner.share(offset_grid),
                       ws.chunks, kind)
    node_component, n_comp = _merge(n_nodes, pairs)

    live = [(s, off) for s, off in zip(stats, offsets) if s[0] > 0]
    comp_of = node_component[1:]
    if live:
        counts_all = np.concatenate([s[1] for s, _ in live])
        size = np.bincount(comp_of, weights=counts_all, minlength=n_comp).astype(np.int64)
    else:
        size = np.zeros(n_comp, dtype=np.int64)
    border = np.zeros(n_comp, dtype=bool)
    marked = np.zeros(n_comp, dtype=bool) if marker_fn is not None else None
    for s, off in live:
        border[node_component[off + s[2]]] = True
        if marked is not None:
            marked[node_component[off + s[3]]] = True
    first_voxel = None
    if first:
        first_voxel = np.full(n_comp, np.iinfo(np.int64).max, dtype=np.int64)
        if live:
            fst_all = np.concatenate([s[4] for s, _ in live])
            order = np.lexsort((fst_all, comp_of))
            sorted_comp = comp_of[order]
            starts = np.flatnonzero(np.diff(sorted_comp, prepend=-1) != 0)
            first_voxel[sorted_comp[starts]] = fst_all[order][starts]
    return Components(labels_path=labels_path, offsets=offsets, node_component=node_component,
                      size=size, first=first_voxel, border=border, marked=marked)


def _label_block(block: Block, shape, mask_fn, marker_fn, sources, kind, labels_path, first):
    arrays = [np.asarray(open_array(p)[block.slices]) for p in sources]
    mask = mask_fn(*arrays)
    labels, n = ndi.label(mask, structure=_structure(kind))
    open_array(labels_path, "r+")[block.slices] = labels.astype(np.int32, copy=False)
    if n == 0:
        return 0, None, None, None, None
    counts = np.bincount(labels.ravel(), minlength=n + 1)[1:]
    faces = []
    for axis in range(3):
        if block.lo[axis] == 0:
            faces.append(np.take(labels, 0, axis=axis).ravel())
        if block.hi[axis] == shape[axis]:
            faces.append(np.take(labels, -1, axis=axis).ravel())
    border = np.unique(np.concatenate(faces)) if faces else np.zeros(0, np.int64)
    border = border[border > 0].astype(np.int64)
    marked = None
    if marker_fn is not None:
        m = labels[marker_fn(*arrays)]
        marked = np.unique(m[m > 0]).astype(np.int64)
    fst = None
    if first:
        flat = labels.ravel()
        # ndimage.label numbers components in order of first appearance in raster order, so
        # a voxel is a component's first exactly where the running maximum increases.
        running = np.maximum.accumulate(flat)
        starts = np.flatnonzero(np.diff(running, prepend=0) > 0)
        z, y, x = np.unravel_index(starts, labels.shape)
        fst = ((z + block.lo[0]) * shape[1] + (y + block.lo[1])) * shape[2] + (x + block.lo[2])
        fst = fst.astype(np.int64)
    return n, counts, border, marked, fst


def _boundary_pairs(task, labels_path, offset_grid, chunks, kind):
    """Node-id pairs linked across the chunk boundary ``task = (axis, position)``."""
    axis, pos = task
    labels = open_array(labels_path)
    idx = [slice(None)] * 3
    idx[axis] = pos - 1
    lo = _global_ids(np.asarray(labels[tuple(idx)]), axis, (pos - 1) // chunks[axis],
                     offset_grid, chunks)
    idx[axis] = pos
    hi = _global_ids(np.asarray(labels[tuple(idx)]), axis, pos // chunks[axis], offset_grid,
                     chunks)
    shifts = [(0, 0)] if kind == FACE else [(a, b) for a in (-1, 0, 1) for b in (-1, 0, 1)]
    out = []
    n0, n1 = lo.shape
    for d0, d1 in shifts:
        s_lo = (slice(max(0, -d0), n0 - max(0, d0)), slice(max(0, -d1), n1 - max(0, d1)))
        s_hi = (slice(max(0, d0), n0 - max(0, -d0)), slice(max(0, d1), n1 - max(0, -d1)))
        a, b = lo[s_lo], hi[s_hi]
        keep = (a > 0) & (b > 0)
        if keep.any():
            out.append(np.stack([a[keep], b[keep]]))
    if not out:
        return np.zeros((2, 0), dtype=np.int64)
    return np.unique(np.concatenate(out, axis=1), axis=1)


def _global_ids(plane, axis, k, offset_grid, chunks):
    """Chunk-local labels of a global plane turned into node ids (0 stays 0)."""
    plane = plane.astype(np.int64)
    other = [a for a in range(3) if a != axis]
    grid_plane = np.take(offset_grid, k, axis=axis)  # offsets of the chunks the plane crosses
    c0, c1 = chunks[other[0]], chunks[other[1]]
    rep = np.repeat(np.repeat(grid_plane, c0, axis=0), c1, axis=1)[:plane.shape[0],
                                                                     :plane.shape[1]]
    return np.where(plane > 0, plane + rep, 0)


def _merge(n_nodes: int, pairs) -> tuple[np.ndarray, int]:
    """Component (0..n-1) of every node 1..n_nodes from the link pairs (index 0 unused)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    node_component = np.zeros(n_nodes + 1, dtype=np.int64)
    if n_nodes == 0:
        return node_component, 0
    links = np.concatenate([p for p in pairs if p.size] or [np.zeros((2, 0), np.int64)], axis=1)
    links = links - 1  # node ids 1..N → graph vertices 0..N-1
    graph = coo_matrix((np.ones(links.shape[1], dtype=np.int8), (links[0], links[1])),
                       shape=(n_nodes, n_nodes))
    n_comp, comp = connected_components(graph, directed=True, connection="weak")
    node_component[1:] = comp
    return node_component, int(n_comp)
