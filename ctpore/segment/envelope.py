"""The envelope: the piece's own outer boundary, which defines its volume and its pores.

Pores are gas inside the envelope; exterior air is gas outside it. Three ways to draw it:
a ball closing with hole filling, a ball rolled around the piece from outside, or a convex hull
in each slice. Ball-based methods work on exact anisotropic Euclidean distances.
"""

from __future__ import annotations

import math

import edt
import numpy as np
from scipy import ndimage as ndi

from ..errors import InputError
from ..recipe import EnvelopeSection
from ..spacing import as_spacing_um

__all__ = ["envelope"]

# Relative slack on squared distances (float32) in the "distance <= radius" test, so voxels
# exactly on a ball's surface (radius a multiple of the spacing) count as inside.
_TIE = 1e-6


def envelope(solid, *, spacing_um, section: EnvelopeSection) -> np.ndarray:
    """Outer boundary of the piece as a filled mask that contains every solid voxel.

    Methods (``section.method``), with ``r = section.radius_um``:

    ``"closing"``
        Morphological closing by a closed ball of radius r (points at distance <= r) [1]_,
        then 3-D hole filling (``scipy.ndimage.binary_fill_holes``). Dilation keeps voxels
        whose distance to the solid is <= r; erosion of that keeps voxels whose distance to its
        complement is > r. Openings of the surface narrower than 2r are bridged, so cells cut at
        the surface count as pores; wider ones stay open.
    ``"rolling_sphere"``
        Shrink-wrap by a ball of radius r rolled from outside: possible ball centres are voxels
        farther than r from the solid and 6-connected to the (padded) border; the exterior is
        every point within <= r of such a centre; the envelope is the rest. Unlike the
        closing, a cavity the ball could enter but not reach from outside stays inside.
    ``"slice_hull"``
        Convex hull of the solid in each slice across ``section.hull_axis``
        (``skimage.morphology.convex_hull_image``, Quickhull [2]_); empty slices stay empty.
        ``radius_um`` is not used. A hull is unchanged by scaling, so spacing does not matter.

    The ball methods use exact Euclidean distance transforms on the anisotropic grid (the
    ``edt`` package, [3]_), so their cost does not grow with r (unlike
    footprint morphology, whose cost grows with the ball's volume). The volume is first padded
    with gas by ``ceil(r / spacing) + 1`` voxels per axis, so nothing clips at the borders, and
    cropped back afterwards.

    Parameters
    ----------
    solid : (nz, ny, nx) array_like of bool
        Solid voxels, cleaned.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    section : EnvelopeSection
        The recipe's ``[envelope]`` section.

    Returns
    -------
    envelope : (nz, ny, nx) ndarray of bool
        All False when there is no solid.

    References
    ----------
    .. [1] Serra, J. (1982). Image Analysis and Mathematical Morphology. Academic Press.
    .. [2] Barber, C. B., Dobkin, D. P. & Huhdanpaa, H. (1996). The Quickhull algorithm for
       convex hulls. ACM Trans. Math. Softw. 22(4):469-483. :doi:`10.1145/235815.235821`
    .. [3] Felzenszwalb, P. F. & Huttenlocher, D. P. (2012). Distance transforms of sampled
       functions. Theory Comput. 8:415-428. :doi:`10.4086/toc.2012.v008a019`
    """
    section.check()
    spacing = as_spacing_um(spacing_um)
    solid = np.asarray(solid)
    if solid.ndim != 3:
        raise InputError(f"the solid mask must be 3-D (z, y, x); got shape {solid.shape}",
                         "pass the thresholded stack")
    solid = solid.astype(bool, copy=False)
    if not solid.any():
        return np.zeros(solid.shape, dtype=bool)
    if section.method == "slice_hull":
        return _slice_hull(solid, "zyx".index(section.hull_axis))

    r = float(section.radius_um)
    pad = [int(math.ceil(r / s)) + 1 for s in spacing]
    padded = np.pad(solid, [(p, p) for p in pad])
    if section.method == "closing":
        dilated = _within(padded, spacing, r)
        closed = ~_within(~dilated, spacing, r)
        inside = ndi.binary_fill_holes(closed)
    else:  # rolling_sphere
        free = ~_within(padded, spacing, r)
        inside = ~_within(_border_connected(free), spacing, r)
    crop = tuple(slice(p, p + n) for p, n in zip(pad, solid.shape))
    return np.ascontiguousarray(inside[crop])


def _within(mask: np.ndarray, spacing, r: float) -> np.ndarray:
    """Voxels within distance <= r (µm) of a True voxel of ``mask``: dilation by a closed ball."""
    d2 = edt.edtsq(np.ascontiguousarray(~mask), anisotropy=spacing, black_border=False,
                   parallel=1)
    return d2 <= r * r * (1 + _TIE)


def _border_connected(free: np.ndarray) -> np.ndarray:
    """The 6-connected components of ``free`` that touch the array's border."""
    labels, _ = ndi.label(free, structure=ndi.generate_binary_structure(3, 1))
    faces = [labels[0], labels[-1], labels[:, 0], labels[:, -1], labels[:, :, 0],
             labels[:, :, -1]]
    keep = np.zeros(labels.max() + 1, dtype=bool)
    keep[np.concatenate([f.ravel() for f in faces])] = True
    keep[0] = False
    return keep[labels]


def _slice_hull(solid: np.ndarray, axis: int) -> np.ndarray:
    from skimage.morphology import convex_hull_image

    out = np.zeros(solid.shape, dtype=bool)
    src = np.moveaxis(solid, axis, 0)
    dst = np.moveaxis(out, axis, 0)  # a view: writing into it fills ``out``
    for i, sl in enumerate(src):
        if sl.any():
            dst[i] = convex_hull_image(sl)
    return out
