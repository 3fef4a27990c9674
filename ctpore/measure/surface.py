"""Pore–solid interface area and specific surface from the grey image (marching cubes)."""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["specific_surface"]

_UM2_PER_MM2 = 1e6
_UM3_PER_MM3 = 1e9
# Voxels per z-slab handed to marching cubes: bounds the memory of one call (the float copy,
# the smoothed slab and the mesh) to a few hundred MB whatever the size of the stack.
_SLAB_VOXELS = 1 << 24
_TRUNCATE = 4.0  # Gaussian kernel radius in standard deviations (scipy's default)


def specific_surface(grey, *, spacing_um, level, envelope=None, sigma_um=0.0) -> dict:
    """Pore–solid interface area inside the envelope, and the specific surface S_V.

    The interface is the iso-surface of the grey image at the threshold ``level``, extracted by
    marching cubes (Lorensen & Cline 1987; scikit-image's ``measure.marching_cubes``, which uses
    Lewiner et al. 2003 to resolve ambiguous cubes) with vertices placed by linear interpolation
    of the grey values. Working on the grey (partial-volume) image, not on the binary mask,
    matters: on a binary mask marching cubes overestimates a sphere's area by about 8–9 % at any
    resolution, on the partial-volume image it is within 1 % for radii of 10 voxels or more
    (Lindblad 2005 discusses the bias of surface estimators on voxel grids); counting voxel
    faces overestimates an isotropic surface by a factor 1.5.

    Only the surface inside the envelope is counted: a triangle is kept when all eight corners
    of the marching-cubes cell that holds its centroid are envelope voxels. The piece's outer
    skin (solid against exterior) always lies in cells with an exterior corner, so it is left
    out, whatever the grey values outside the piece. Its price is that pore–solid interface in
    the one-cell band along the skin is lost too: a relative underestimate of about one voxel
    times the skin area over the envelope volume (under 1 % for a piece 300 voxels across).

    The volume is processed in z-slabs that share one plane, so every marching-cubes cell is
    counted exactly once and the area is the sum over slabs; memory stays bounded for stacks
    of 512³ and more. With ``sigma_um`` > 0 each slab is smoothed with a halo of 4σ, which gives
    exactly the result of smoothing the whole volume.

    Remaining bias: curvature (within 1 %, either sign, for radii ≥ 10 voxels); edges where
    walls meet are rounded off by the partial-volume blur (downward; on overlapping spheres of
    radius 8 voxels −1.5 % at porosity 0.8, −3.5 % at 0.6, −5 % at 0.5); walls thinner than
    the scanner's blur (often about two voxels) lose contrast and may not reach the level, so
    their faces vanish (downward); noise adds spurious small surfaces (upward), which
    ``sigma_um`` curbs.

    Parameters
    ----------
    grey : ndarray, shape (nz, ny, nx)
        The grey image the threshold was applied to (integer or float), e.g. the denoised stack,
        or a solid-fraction (partial-volume) image with ``level=0.5``. Which phase is bright
        does not matter: the iso-surface is the same.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm; anisotropic voxels are honoured exactly (vertices are
        scaled per axis before areas are taken).
    level : float
        The threshold: the grey value of the interface.
    envelope : ndarray of bool, shape (nz, ny, nx), optional
        The piece's envelope (pore ∪ solid). A phase label array (0 exterior, 1 pore, 2 solid)
        may be given as is: non-zero is envelope. ``None`` takes the whole image.
    sigma_um : float
        Standard deviation in µm of a Gaussian pre-smoothing of the grey image (0: none).

    Returns
    -------
    dict
        ``interface_area_um2`` and ``interface_area_mm2`` (pore–solid interface inside the
        envelope), ``envelope_volume_mm3`` (envelope voxels times the voxel volume),
        ``specific_surface_per_mm`` (interface area over envelope volume, mm²/mm³ = mm⁻¹; the
        area per solid volume is this divided by 1 − porosity), ``triangle_count``, ``level``
        and ``sigma_um``.

    Raises
    ------
    InputError
        If ``grey`` is not a 3-D real array, ``level`` or ``sigma_um`` is not a finite number,
        ``level`` lies outside the grey range of the envelope, ``envelope`` has another shape
        or is empty, or ``spacing_um`` is invalid.

    References
    ----------
    W. E. Lorensen & H. E. Cline (1987), Marching cubes: a high resolution 3D surface
    construction algorithm, Computer Graphics 21(4):163–169, doi:10.1145/37402.37422.
    T. Lewiner, H. Lopes, A. W. Vieira & G. Tavares (2003), Efficient implementation of marching
    cubes' cases with topological guarantees, J. Graphics Tools 8(2):1–15,
    doi:10.1080/10867651.2003.10487582.
    J. Lindblad (2005), Surface area estimation of digitized 3D objects using weighted local
    configurations, Image Vis. Comput. 23:111–122, doi:10.1016/j.imavis.2004.06.012.

    Examples
    --------
    >>> import numpy as np
    >>> z = np.arange(20.0).reshape(-1, 1, 1) * np.ones((1, 8, 8))
    >>> r = specific_surface(z, spacing_um=2.0, level=9.5)  # one plane z = 9.5 voxels
    >>> round(r["interface_area_um2"], 6)  # (8 - 1) voxels x (8 - 1) voxels of 2 µm
    196.0
    """
    spacing = as_spacing_um(spacing_um)
    grey = _checked_grey(grey)
    level = _finite(level, "level")
    sigma_um = _finite(sigma_um, "sigma_um")
    if sigma_um < 0:
        raise InputError(f"sigma_um must be >= 0; got {sigma_um}",
                         "give the smoothing in µm, or 0 for none")
    env = _checked_envelope(envelope, grey.shape)
    n_env = int(np.count_nonzero(env)) if env is not None else grey.size
    if n_env == 0:
        raise InputError("envelope is empty: there is no piece to measure",
                         "pass the piece's envelope (phases != 0)")
    box = _bounding_box(env) if env is not None else tuple(slice(0, n) for n in grey.shape)
    grey_box = grey[box]
    env_box = env[box] if env is not None else None
    lo, hi = _range_in(grey_box, env_box)
    if not lo <= level <= hi:
        raise InputError(
            f"level {level} lies outside the grey range [{lo}, {hi}] of the envelope: "
            "there is no interface at that value",
            "pass the threshold that was applied to this same grey image",
        )
    sigma_vox = tuple(sigma_um / h for h in spacing)
    area_um2, triangles = 0.0, 0
    for vectors in _interface_area_vectors(grey, box, env_box, level, spacing, sigma_vox):
        area_um2 += float(np.sqrt((vectors**2).sum(axis=1)).sum(dtype=np.float64))
        triangles += len(vectors)
    volume_mm3 = n_env * math.prod(spacing) / _UM3_PER_MM3
    area_mm2 = area_um2 / _UM2_PER_MM2
    return {
        "interface_area_um2": area_um2,
        "interface_area_mm2": area_mm2,
        "envelope_volume_mm3": volume_mm3,
        "specific_surface_per_mm": area_mm2 / volume_mm3,
        "triangle_count": triangles,
        "level": level,
        "sigma_um": sigma_um,
    }


def _interface_area_vectors(grey, box, env_box, level, spacing, sigma_vox):
    """Yield, slab by slab, the area vectors (µm², float32, shape (n, 3)) of the iso-surface.

    The area vector of a triangle is its normal times its area, in physical units (z, y, x).
    ``env_box`` (the envelope cropped to ``box``, or ``None`` for all) selects the triangles
    whose marching-cubes cell has all eight corners in it.
    """
    dz, dy, dx = spacing
    # (S e1) x (S e2) = det(S) S^-1 (e1 x e2) for S = diag(spacing): scale the voxel-unit cross
    # product per component instead of scaling every vertex.
    scale = 0.5 * np.array([dy * dx, dz * dx, dz * dy], dtype=np.float32)
    for z0, z1 in _slabs(tuple(s.stop - s.start for s in box)):
        slab = _smoothed_slab(grey, box, z0, z1, sigma_vox)
        cells = _inner_cells(env_box[z0:z1 + 1]) if env_box is not None else None
        v0, v1, v2 = _slab_triangles(slab, level, cells)
        if len(v0):
            yield np.cross(v1 - v0, v2 - v0) * scale


def _slab_triangles(slab, level, cells) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Iso-surface triangles of one slab: their three vertices, each (n, 3), in voxel units.

    ``cells`` (shape of ``slab`` minus one per axis) marks the marching-cubes cells that count;
    ``None`` counts all.
    """
    from skimage.measure import marching_cubes

    lo, hi = float(slab.min()), float(slab.max())
    if min(slab.shape) < 2 or not lo <= level <= hi or lo == hi:
        empty = np.empty((0, 3), dtype=np.float32)
        return empty, empty, empty
    verts, faces, _, _ = marching_cubes(slab, level=level)
    if cells is not None and len(faces):
        centroid = verts[faces[:, 0]] + verts[faces[:, 1]] + verts[faces[:, 2]]
        cell = np.floor(centroid / 3).astype(np.intp)
        np.clip(cell, 0, np.array(cells.shape) - 1, out=cell)
        faces = faces[cells[cell[:, 0], cell[:, 1], cell[:, 2]]]
    return verts[faces[:, 0]], verts[faces[:, 1]], verts[faces[:, 2]]


def _inner_cells(env: np.ndarray) -> np.ndarray:
    """Marching-cubes cells (2×2×2 voxel blocks) whose eight corners all lie in ``env``."""
    a = env[:-1] & env[1:]
    a = a[:, :-1] & a[:, 1:]
    return a[:, :, :-1] & a[:, :, 1:]


def _slabs(shape) -> list[tuple[int, int]]:
    """Inclusive plane ranges (z0, z1) that share their end planes and cover every cell once."""
    nz, ny, nx = shape
    step = max(1, _SLAB_VOXELS // max(1, ny * nx) - 1)
    if nz < 2:
        return []
    return [(z0, min(z0 + step, nz - 1)) for z0 in range(0, nz - 1, step)]


def _smoothed_slab(grey, box, z0, z1, sigma_vox) -> np.ndarray:
    """Planes z0..z1 (inclusive, box coordinates) as float32, smoothed when sigma > 0.

    The smoothing reads a halo of ``4σ`` beyond the slab (and the box), so the slab equals the
    same planes of the whole volume smoothed at once (mode 'nearest' at the image border).
    """
    zs, ys, xs = box
    if not any(sigma_vox):
        return np.asarray(grey[zs.start + z0: zs.start + z1 + 1, ys, xs], dtype=np.float32)
    halo = [int(math.ceil(_TRUNCATE * s)) + 1 for s in sigma_vox]
    lo = [max(0, s.start + off - h) for s, off, h in zip(box, (z0, 0, 0), halo)]
    hi = [min(n, e + h) for n, e, h in zip(
        grey.shape, (zs.start + z1 + 1, ys.stop, xs.stop), halo)]
    block = np.asarray(grey[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]], dtype=np.float32)
    block = ndimage.gaussian_filter(block, sigma_vox, mode="nearest", truncate=_TRUNCATE)
    start = (zs.start + z0 - lo[0], ys.start - lo[1], xs.start - lo[2])
    return block[start[0]: start[0] + z1 - z0 + 1,
                 start[1]: start[1] + ys.stop - ys.start,
                 start[2]: start[2] + xs.stop - xs.start]


def _bounding_box(env: np.ndarray) -> tuple[slice, slice, slice]:
    """Smallest box holding every envelope voxel."""
    box = []
    for axis in range(3):
        other = tuple(a for a in range(3) if a != axis)
        hit = np.flatnonzero(env.any(axis=other))
        box.append(slice(int(hit[0]), int(hit[-1]) + 1))
    return tuple(box)


def _range_in(grey: np.ndarray, env: np.ndarray | None) -> tuple[float, float]:
    """Smallest and largest grey value over the envelope (or the whole box), slab by slab."""
    step = max(1, _SLAB_VOXELS // max(1, grey.shape[1] * grey.shape[2]))
    lo, hi = math.inf, -math.inf
    for z0 in range(0, grey.shape[0], step):
        values = grey[z0:z0 + step]
        if env is not None:
            values = values[env[z0:z0 + step]]
        if values.size:
            lo, hi = min(lo, float(values.min())), max(hi, float(values.max()))
    return lo, hi


def _checked_grey(grey) -> np.ndarray:
    grey = np.asarray(grey)
    if grey.ndim != 3:
        raise InputError(f"grey must be a 3-D (z, y, x) image; got shape {grey.shape}",
                         "pass the grey stack the threshold was applied to")
    if grey.dtype == bool:
        grey = grey.astype(np.uint8)
    if not (np.issubdtype(grey.dtype, np.integer) or np.issubdtype(grey.dtype, np.floating)):
        raise InputError(f"grey must hold real numbers; got dtype {grey.dtype}",
                         "pass the grey stack as an integer or float array")
    if min(grey.shape) < 2:
        raise InputError(f"grey needs at least 2 voxels along each axis; got {grey.shape}",
                         "pass the whole stack, not a single slice")
    return grey


def _checked_envelope(envelope, shape) -> np.ndarray | None:
    if envelope is None:
        return None
    env = np.asarray(envelope)
    if env.shape != shape:
        raise InputError(f"envelope has shape {env.shape}, the grey image {shape}",
                         "pass the envelope (or phases) computed from this same stack")
    return env.astype(bool, copy=False) if env.dtype == bool else env != 0


def _finite(value, name: str) -> float:
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} {value!r} is not a number", f"give {name} as a number") from None
    if not math.isfinite(value):
        raise InputError(f"{name} must be finite; got {value}", f"give {name} as a finite number")
    return value
