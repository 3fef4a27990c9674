"""Removal of specks after thresholding: small solid bits, small enclosed pores, loose crumbs."""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from ..errors import InputError
from ..recipe import CleanSection
from ..spacing import as_spacing_um, voxel_volume_um3

__all__ = ["clean_solid", "label_sizes", "SOLID_CONNECTIVITY", "PORE_CONNECTIVITY"]

SOLID_CONNECTIVITY = ndi.generate_binary_structure(3, 3)
"""26-connectivity: solid voxels touching by a face, an edge or a corner are connected."""
PORE_CONNECTIVITY = ndi.generate_binary_structure(3, 1)
"""6-connectivity: pore voxels are connected through faces only (the complement of 26)."""


def clean_solid(solid, *, spacing_um, section: CleanSection) -> np.ndarray:
    """Remove solid specks, fill pore specks and keep the largest solid piece.

    Three steps, in this order, each skipped when its parameter is 0 / False:

    1. Solid components (26-connected) with volume strictly below
       ``section.min_solid_speck_um3`` become gas.
    2. Pore components (6-connected components of the gas) that do not touch the border of the
       volume and have volume strictly below ``section.min_pore_speck_um3`` become solid. Gas
       touching the border (the air around the piece, cells cut open by the field of view) is
       never filled.
    3. With ``section.keep_largest_solid``, only the largest 26-connected solid component is
       kept (drops crumbs and mounting material); on a tie the first in scan order wins.

    Volumes are voxel counts times ``dz * dy * dx``, so anisotropic voxels are weighed exactly.
    Solid and gas use complementary connectivities (26 and 6) so that a thin diagonal wall
    separates two pores while still holding together as one solid piece [1]_.

    Parameters
    ----------
    solid : (nz, ny, nx) array_like of bool
        Solid voxels (e.g. from :func:`ctpore.segment.threshold.solid_mask`).
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    section : CleanSection
        The recipe's ``[clean]`` section.

    Returns
    -------
    cleaned : (nz, ny, nx) ndarray of bool
        A new array; the input is not modified.

    References
    ----------
    .. [1] Kong, T. Y. & Rosenfeld, A. (1989). Digital topology: introduction and survey.
       Comput. Vis. Graph. Image Process. 48(3):357-393.
    """
    section.check()
    spacing = as_spacing_um(spacing_um)
    solid = np.asarray(solid)
    if solid.ndim != 3:
        raise InputError(f"the solid mask must be 3-D (z, y, x); got shape {solid.shape}",
                         "pass the thresholded stack")
    voxel_um3 = voxel_volume_um3(spacing)
    out = np.array(solid, dtype=bool, copy=True)
    # One int32 label image reused by the three labellings: at most one is alive at a time, so
    # the peak is the mask, the labels and one boolean temporary (6 bytes per voxel).
    labels = np.empty(out.shape, dtype=np.int32)

    if section.min_solid_speck_um3 > 0:
        n = ndi.label(out, structure=SOLID_CONNECTIVITY, output=labels)
        small = label_sizes(labels, n) * voxel_um3 < section.min_solid_speck_um3
        small[0] = False
        if small.any():
            out[small[labels]] = False

    if section.min_pore_speck_um3 > 0:
        np.logical_not(out, out=out)
        n = ndi.label(out, structure=PORE_CONNECTIVITY, output=labels)
        np.logical_not(out, out=out)
        small = label_sizes(labels, n) * voxel_um3 < section.min_pore_speck_um3
        small[0] = False
        small[_border_labels(labels)] = False
        if small.any():
            out[small[labels]] = True

    if section.keep_largest_solid:
        n = ndi.label(out, structure=SOLID_CONNECTIVITY, output=labels)
        if n > 1:
            sizes = label_sizes(labels, n)
            sizes[0] = 0
            np.equal(labels, np.argmax(sizes), out=out)
    return out


def label_sizes(labels: np.ndarray, n: int | None = None, *, planes: int = 16) -> np.ndarray:
    """Voxel count of each label 0..n, as ``np.bincount(labels.ravel())`` gives it.

    ``np.bincount`` casts its input to int64, which for an int32 label image is a copy of
    8 bytes per voxel; counting a few planes at a time keeps that copy small.
    """
    labels = np.asarray(labels)
    if n is None:
        n = int(labels.max()) if labels.size else 0
    counts = np.zeros(n + 1, dtype=np.int64)
    for z in range(0, labels.shape[0], planes):
        counts += np.bincount(labels[z:z + planes].ravel(), minlength=n + 1)
    return counts


def _border_labels(labels: np.ndarray) -> np.ndarray:
    """Labels present on any face of the volume."""
    faces = [labels[0], labels[-1], labels[:, 0], labels[:, -1], labels[:, :, 0],
             labels[:, :, -1]]
    return np.unique(np.concatenate([f.ravel() for f in faces]))
