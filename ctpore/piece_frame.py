"""The piece's own frame: centroid and principal axes of its envelope, in µm.

Coordinates are physical, in µm, (z, y, x) order, with the origin at the centre of voxel
(0, 0, 0): the centre of voxel ``(i, j, k)`` lies at ``(i·dz, j·dy, k·dx)`` (the convention of
OME-TIFF viewers and of :mod:`ctpore.continuum`).
This one convention is used for the centroid, the extents and :func:`to_frame`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .spacing import as_spacing_um

__all__ = ["PieceFrame", "piece_frame", "to_frame", "LONG_AXIS_CHOICES",
           "moments_from_projections"]

LONG_AXIS_CHOICES = ("auto", "z", "y", "x")
_GRID_AXIS = {"z": 0, "y": 1, "x": 2}


@dataclass(frozen=True, eq=False)
class PieceFrame:
    """Centroid, principal axes and extents of a piece's envelope.

    Attributes
    ----------
    centroid_um : tuple of 3 floats
        Centre of mass of the envelope voxels (z, y, x), µm, voxel centres at i·spacing.
    axes : ndarray, shape (3, 3)
        Rows are unit vectors of the long, middle and short axis, in (z, y, x) components.
        The long and middle axes have their largest-magnitude component positive; the short
        axis is ``cross(long, middle)`` (computed on the (z, y, x) components).
    extents_um : ndarray, shape (3, 2)
        Per axis (rows as in ``axes``), the smallest and largest projection of an envelope voxel
        centre onto that axis, relative to the centroid, µm.
    sd_um : ndarray, shape (3,)
        Standard deviation of the envelope along each axis, µm (square root of the second
        central moment, each voxel counted as a uniform box).
    long_axis : str
        How the long axis was chosen: "auto" or the fixed grid axis "z", "y", "x".
    spacing_um : tuple of 3 floats
        Voxel size (dz, dy, dx), µm.
    voxels : int
        Number of envelope voxels.
    shape : tuple of 3 ints
        Shape (nz, ny, nx) of the image the frame was computed on.
    """

    centroid_um: tuple
    axes: np.ndarray
    extents_um: np.ndarray
    sd_um: np.ndarray
    long_axis: str
    spacing_um: tuple
    voxels: int
    shape: tuple

    @property
    def length_um(self) -> float:
        """Tip-to-tip length along the long axis (between extreme voxel centres), µm."""
        return float(self.extents_um[0, 1] - self.extents_um[0, 0])

    def to_dict(self) -> dict:
        """A JSON-ready description of the frame (for frame.json)."""
        names = ("long", "middle", "short")
        return {
            "coordinates": "µm, (z, y, x), origin at the centre of voxel (0, 0, 0), voxel centre "
                           "i·spacing",
            "centroid_um": list(self.centroid_um),
            "axes": {n: self.axes[i].tolist() for i, n in enumerate(names)},
            "extents_um": {n: {"min": float(self.extents_um[i, 0]),
                               "max": float(self.extents_um[i, 1])}
                           for i, n in enumerate(names)},
            "sd_um": {n: float(self.sd_um[i]) for i, n in enumerate(names)},
            "length_um": self.length_um,
            "long_axis": self.long_axis,
            "spacing_um": list(self.spacing_um),
            "voxels": self.voxels,
            "shape_voxels": list(self.shape),
        }


def piece_frame(envelope, *, spacing_um, long_axis: str = "auto") -> PieceFrame:
    """Centroid and principal axes of a piece's envelope, in physical coordinates.

    The axes are the eigenvectors of the envelope's second-moment (covariance) tensor computed
    in µm, so anisotropic voxels are honoured; each voxel counts as a uniform box, adding
    h²/12 to the variance along its axis. The long axis has the largest spread (smallest
    moment of inertia). All moments come from the three 2-D projections of the envelope
    (sums along one grid axis), so no coordinate grid is built; the extents come from one pass
    over the slices.

    Parameters
    ----------
    envelope : ndarray, shape (nz, ny, nx)
        Nonzero inside the piece: a boolean envelope, or phase labels (0 exterior).
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    long_axis : {"auto", "z", "y", "x"}
        "auto": principal axis of largest spread. A grid axis fixes the long axis to it; the
        middle and short axes then come from the tensor in the perpendicular plane.

    Returns
    -------
    PieceFrame

    Raises
    ------
    InputError
        If the envelope is empty, ``long_axis`` is unknown or ``spacing_um`` is invalid.
    ValueError
        If ``envelope`` is not 3-D.

    References
    ----------
    H. Goldstein, C. Poole & J. Safko (2002), Classical Mechanics, 3rd ed., ch. 5 (principal
    axes of the inertia tensor). K. Pearson (1901), Phil. Mag. 2:559,
    doi:10.1080/14786440109462720 (principal axes of a point cloud).

    Examples
    --------
    >>> import numpy as np
    >>> box = np.zeros((4, 10, 4), bool); box[1:3, 1:9, 1:3] = True
    >>> f = piece_frame(box, spacing_um=1.0)
    >>> f.axes[0].round(6).tolist(), f.centroid_um, f.length_um
    ([0.0, 1.0, 0.0], (1.5, 4.5, 1.5), 7.0)
    """
    spacing = as_spacing_um(spacing_um)
    if long_axis not in LONG_AXIS_CHOICES:
        raise InputError(f"long_axis = {long_axis!r} is not one of {list(LONG_AXIS_CHOICES)}",
                         f"choose one of {list(LONG_AXIS_CHOICES)}")
    env = np.asarray(envelope)
    if env.ndim != 3:
        raise ValueError(f"envelope must be a 3-D (z, y, x) array; got shape {env.shape}")
    env = env if env.dtype == bool else env != 0
    centroid, cov, n = _moments(env, spacing)
    axes = _principal_axes(cov, long_axis)
    sd = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", axes, cov, axes), 0.0))
    lo = np.full(3, np.inf)
    hi = np.full(3, -np.inf)
    planes, tables = _projection_tables(env.shape, spacing, centroid, axes)
    for z in range(env.shape[0]):
        inside = env[z]
        if not inside.any():
            continue
        for k in range(3):
            p = planes[k][inside]
            lo[k] = min(lo[k], p.min() + tables[k][z])
            hi[k] = max(hi[k], p.max() + tables[k][z])
    # min(p) + t == min(p + t) bit for bit (rounding is monotone): the profile passes,
    # which compute plane + table per voxel, see exactly these extremes.
    extents = np.stack([lo, hi], axis=1)
    axes.setflags(write=False)
    extents.setflags(write=False)
    sd.setflags(write=False)
    return PieceFrame(centroid_um=tuple(float(c) for c in centroid), axes=axes,
                      extents_um=extents, sd_um=sd, long_axis=long_axis,
                      spacing_um=spacing, voxels=n, shape=tuple(int(s) for s in env.shape))


def to_frame(frame: PieceFrame, coords_um):
    """Axial position, radial distance and azimuth of points in the piece's frame.

    Parameters
    ----------
    frame : PieceFrame
    coords_um : array_like, shape (..., 3)
        Points (z, y, x) in µm, same convention as the frame (voxel centre i·spacing).

    Returns
    -------
    a : ndarray, shape (...)
        Position along the long axis relative to the centroid, µm.
    r : ndarray, shape (...)
        Distance from the long axis (through the centroid), µm, ≥ 0.
    theta : ndarray, shape (...)
        Azimuth in radians, in (-π, π], measured from the middle axis towards the short axis.
    """
    p = np.asarray(coords_um, dtype=np.float64)
    if p.shape[-1:] != (3,):
        raise ValueError(f"coords_um must have shape (..., 3) in (z, y, x); got {p.shape}")
    d = p - np.asarray(frame.centroid_um)
    a = d @ frame.axes[0]
    m = d @ frame.axes[1]
    s = d @ frame.axes[2]
    return a, np.hypot(m, s), np.arctan2(s, m)


def _moments(env: np.ndarray, spacing) -> tuple[np.ndarray, np.ndarray, int]:
    """Centroid (3,), covariance (3, 3) in µm² and voxel count, from the 2-D projections."""
    return moments_from_projections(np.count_nonzero(env, axis=2),  # (nz, ny)
                                    np.count_nonzero(env, axis=1),  # (nz, nx)
                                    np.count_nonzero(env, axis=0),  # (ny, nx)
                                    env.shape, spacing)


def moments_from_projections(p_zy, p_zx, p_yx, shape, spacing
                             ) -> tuple[np.ndarray, np.ndarray, int]:
    """Centroid (3,), covariance (3, 3) in µm² and voxel count of a mask from its voxel counts
    projected along x (``p_zy``), y (``p_zx``) and z (``p_yx``).

    Second moments of a set of voxels need only these three 2-D projections (each pair of axes
    appears in one of them); each voxel adds its own ``h² / 12`` per axis (uniform box of side
    h). Used by :func:`piece_frame` and by the chunked path, which sums projections over chunks.
    """
    p_zy = np.asarray(p_zy).astype(np.float64)
    p_zx = np.asarray(p_zx).astype(np.float64)
    p_yx = np.asarray(p_yx).astype(np.float64)
    n = float(p_zy.sum())
    if n == 0:
        raise InputError("envelope: no voxel inside the piece (the envelope is empty)",
                         "check the segmentation: the piece was not found")
    coords = [np.arange(s) * h for s, h in zip(shape, spacing)]
    marg = [p_zy.sum(axis=1), p_zy.sum(axis=0), p_zx.sum(axis=0)]
    centroid = np.array([(m * c).sum() / n for m, c in zip(marg, coords)])
    d = [c - c0 for c, c0 in zip(coords, centroid)]
    cov = np.empty((3, 3))
    for i in range(3):
        cov[i, i] = (marg[i] * d[i] ** 2).sum() / n + spacing[i] ** 2 / 12.0
    cov[0, 1] = cov[1, 0] = (d[0] @ p_zy @ d[1]) / n
    cov[0, 2] = cov[2, 0] = (d[0] @ p_zx @ d[2]) / n
    cov[1, 2] = cov[2, 1] = (d[1] @ p_yx @ d[2]) / n
    return centroid, cov, int(n)


def _signed(v: np.ndarray) -> np.ndarray:
    """``v`` with its largest-magnitude component made positive."""
    return -v if v[np.argmax(np.abs(v))] < 0 else v


def _principal_axes(cov: np.ndarray, long_axis: str) -> np.ndarray:
    """Rows long, middle, short: unit vectors with deterministic signs."""
    if long_axis == "auto":
        w, v = np.linalg.eigh(cov)  # ascending eigenvalues
        long, middle = v[:, 2], v[:, 1]
    else:
        k = _GRID_AXIS[long_axis]
        rest = [i for i in range(3) if i != k]
        w, v = np.linalg.eigh(cov[np.ix_(rest, rest)])
        long = np.zeros(3)
        long[k] = 1.0
        middle = np.zeros(3)
        middle[rest] = v[:, 1]
    long, middle = _signed(long), _signed(middle)
    middle = middle - (middle @ long) * long  # exact orthogonality against rounding
    middle /= np.linalg.norm(middle)
    short = np.cross(long, middle)
    return np.array([long, middle, short / np.linalg.norm(short)])


def _projection_tables(shape, spacing, centroid, axes):
    """Per frame axis k: a (ny, nx) plane and an (nz,) table whose sum is the projection.

    The projection of voxel centre (i, j, l) onto axis k, relative to the centroid, is
    ``tables[k][i] + planes[k][j, l]``; every pass uses this same expression so that values
    agree to the last bit with the extents.
    """
    coords = [np.arange(s) * h - c for s, h, c in zip(shape, spacing, centroid)]
    planes, tables = [], []
    for k in range(3):
        u = axes[k]
        tables.append(coords[0] * u[0])
        planes.append(coords[1][:, None] * u[1] + coords[2][None, :] * u[2])
    return planes, tables
