"""Degree of anisotropy and main orientation of the cell structure by mean intercept length."""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..spacing import as_spacing_um
from .porosity import _checked_phases
from .surface import _interface_area_vectors

__all__ = ["mil_anisotropy"]

EXTERIOR, SOLID = 0, 2
_UM3_PER_MM3 = 1e9
_CHUNK = 1 << 18  # triangles per matrix product (bounds the temporary to ~70 MB)
_GOLDEN_ANGLE = math.pi * (3.0 - math.sqrt(5.0))
_TRUNCATE = 4.0  # Gaussian kernel radius in standard deviations (as in surface.py)


def mil_anisotropy(phases, *, spacing_um, n_directions=64, smoothing_um=None) -> dict:
    """Mean intercept length (MIL) fabric tensor, degree of anisotropy and main orientation.

    The mean intercept length in direction n is the test-line length inside the envelope over
    the number of pore–solid boundary crossings on it, MIL(n) = L / I (Whitehouse 1974). For
    test lines laid uniformly in direction n, the crossings per unit length equal the
    boundary's projected area per unit volume, P_L(n) = (1/V) ∫ |n·ν| dS (Cauchy–Crofton; the
    directional form of S_V = 2·P_L, Underwood 1970). ctpore evaluates this exactly, i.e. for
    infinitely many test lines, on the marching-cubes mesh of the solid indicator smoothed by a
    Gaussian of ``smoothing_um`` (the same in µm along every axis): P_L(n) = Σ |n·a_t| / V over the
    area vectors a_t of the mesh triangles, for ``n_directions`` directions spread evenly over
    the hemisphere (a Fibonacci lattice). Coordinates are physical, so anisotropic voxels are
    honoured. Only triangles whose marching-cubes cell lies wholly in the envelope count (as in
    :func:`ctpore.measure.surface.specific_surface`), and V is the envelope volume; before the
    smoothing, the indicator is continued a few voxels into the exterior from the nearest
    envelope voxels, so walls are not closed off against the exterior just inside the skin.
    Memory: a float32 copy of the envelope's bounding box, plus one z-slab at a time.

    Why not step along digital test lines: a line that crosses a voxel staircase at a slant
    crosses it several times. Counting along sampled lines (nearest voxel) overcounted slanted
    directions by 20–30 % in our tests and flattened a true DA of 2 to 1.5; the light
    smoothing removes the staircase. It also rounds off features of about a voxel: walls
    thinner than about 1.3 voxels may vanish, and the MIL reads long (by 3–11 % on Boolean
    grains of 6–12 voxels, most along the short axes). Boolean ellipsoids of semi-axes 6, 6
    and 12 voxels (true DA 2) read DA ≈ 1.9; isotropic Boolean spheres ≈ 1.03, on voxels of
    2×1×1 µm too. The smoothing is isotropic in µm: smoothing by a fixed number of voxels per
    axis smooths the coarse axis more, and made isotropic structures on 2×1×1 µm voxels read
    DA ≈ 1.1.

    The MIL ellipsoid is fitted by linear least squares, 1 / MIL(n)² = nᵀ M n, with M a
    symmetric 3×3 tensor (Harrigan & Mann 1984). Its eigenvectors are the principal axes; the
    MIL along axis i is 1 / √m_i. Convention used here: the degree of anisotropy is the longest
    over the shortest principal MIL, DA = √(m_max / m_min) ≥ 1 (1 = isotropic; some authors
    report 1 − min/max, or the ratio of eigenvalues of M), and the main orientation is the
    axis of the longest MIL: the direction in which test lines cross fewest walls, the
    direction in which cells are stretched.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    n_directions : int
        Number of directions on the hemisphere at which the MIL is evaluated and fitted
        (at least 9; the cost is small, the default 64 is plenty).
    smoothing_um : float, optional
        Standard deviation in µm of the Gaussian applied to the solid indicator before the
        mesh is taken; default 0.8 times the smallest voxel size (0: none, which keeps the
        staircase bias).

    Returns
    -------
    dict
        ``degree_of_anisotropy`` (float ≥ 1, ``inf`` when some direction meets no boundary),
        ``main_orientation_zyx`` (unit vector as a tuple (z, y, x), sign chosen so that its
        largest component is positive), ``mil_principal_um`` (MIL along the principal axes,
        longest first), ``principal_axes_zyx`` (3×3 array, row i is the axis of
        ``mil_principal_um[i]``), ``fabric_tensor_per_um2`` (M, 3×3, z-y-x order),
        ``directions_zyx`` (n×3), ``mil_um`` (n, MIL per direction) and
        ``envelope_volume_mm3``.

    Raises
    ------
    InputError
        If the envelope is empty, holds no pore–solid boundary, or an option is out of range.
    ValueError
        If ``phases`` is not a 3-D label array with values in {0, 1, 2}.

    References
    ----------
    W. J. Whitehouse (1974), The quantitative morphology of anisotropic trabecular bone,
    J. Microsc. 101:153–168, doi:10.1111/j.1365-2818.1974.tb03878.x.
    T. P. Harrigan & R. W. Mann (1984), Characterization of microstructural anisotropy in
    orthotropic materials using a second rank tensor, J. Mater. Sci. 19:761–767,
    doi:10.1007/BF00540446.
    E. E. Underwood (1970), Quantitative Stereology, Addison-Wesley (P_L and S_V).
    W. E. Lorensen & H. E. Cline (1987), Computer Graphics 21(4):163–169,
    doi:10.1145/37402.37422 (marching cubes).

    Examples
    --------
    >>> import numpy as np
    >>> phases = np.ones((24, 24, 24), dtype=np.uint8)
    >>> phases[:, :, 4::8] = 2  # solid plates two voxels thick across x, every 8 voxels
    >>> phases[:, :, 5::8] = 2
    >>> r = mil_anisotropy(phases, spacing_um=10.0)
    >>> r["degree_of_anisotropy"]  # lines along the plates never cross a wall
    inf
    >>> np.round(np.abs(r["principal_axes_zyx"][2]), 3)  # shortest MIL: across the plates
    array([0., 0., 1.])
    """
    spacing = as_spacing_um(spacing_um)
    phases = _checked_phases(phases)
    n_directions = _int_option(n_directions, "n_directions", 9)
    smoothing = (0.8 * min(spacing) if smoothing_um is None
                 else _nonnegative(smoothing_um, "smoothing_um"))
    envelope = phases != EXTERIOR
    n_env = int(np.count_nonzero(envelope))
    if n_env == 0:
        raise InputError("phases: the envelope is empty (no pore or solid voxel)",
                         "check the segmentation: there is no piece to measure")
    box = _bounding_box(envelope)
    directions = _hemisphere(n_directions)
    projected = np.zeros(n_directions)  # Σ |n·a_t| in µm²
    sigma_vox = tuple(smoothing / h for h in spacing)
    indicator = _extended_indicator(phases[box], math.ceil(_TRUNCATE * max(sigma_vox)) + 1)
    whole = tuple(slice(0, n) for n in indicator.shape)
    dirs32 = directions.T.astype(np.float32)
    for area in _interface_area_vectors(indicator, whole, envelope[box], 0.5, spacing,
                                        sigma_vox):
        for i in range(0, len(area), _CHUNK):
            proj = area[i:i + _CHUNK] @ dirs32
            projected += np.abs(proj, out=proj).sum(axis=0, dtype=np.float64)
    if not projected.any():
        raise InputError("phases: the envelope holds no pore–solid boundary",
                         "check the segmentation: only one phase was found in the piece")
    volume_um3 = n_env * math.prod(spacing)
    p_l = projected / volume_um3  # boundary crossings per µm of test line = 1 / MIL
    tensor = _fit_ellipsoid(directions, p_l)
    eigval, eigvec = np.linalg.eigh(tensor)  # ascending m: longest MIL first
    with np.errstate(divide="ignore", invalid="ignore"):
        mil_axes = np.where(eigval > 0, 1.0 / np.sqrt(np.maximum(eigval, 0)), np.inf)
        mil = np.where(p_l > 0, 1.0 / p_l, np.inf)
    da = float(mil_axes[0] / mil_axes[2]) if eigval[0] > 0 else math.inf
    axes = np.array([_oriented(eigvec[:, i]) for i in range(3)])
    return {
        "degree_of_anisotropy": da,
        "main_orientation_zyx": tuple(float(c) for c in axes[0]),
        "mil_principal_um": tuple(float(m) for m in mil_axes),
        "principal_axes_zyx": axes,
        "fabric_tensor_per_um2": tensor,
        "directions_zyx": directions,
        "mil_um": mil,
        "envelope_volume_mm3": volume_um3 / _UM3_PER_MM3,
    }


def _extended_indicator(labels: np.ndarray, steps: int) -> np.ndarray:
    """Solid indicator (float32) with the exterior filled from the envelope, ``steps`` deep.

    Each step gives the exterior voxels next to known ones the mean of their known face
    neighbours, so the smoothing sees the structure continue across the skin instead of
    closing walls off against the exterior (which would put false surfaces just inside the
    envelope).
    """
    value = (labels == SOLID).astype(np.float32)
    known = labels != EXTERIOR
    for _ in range(steps):
        if known.all():
            break
        total = np.zeros_like(value)
        count = np.zeros(value.shape, dtype=np.uint8)
        masked = np.where(known, value, 0.0).astype(np.float32)
        for axis in range(3):
            n = value.shape[axis]
            for src, dst in ((slice(0, n - 1), slice(1, n)), (slice(1, n), slice(0, n - 1))):
                s_idx = [slice(None)] * 3
                d_idx = [slice(None)] * 3
                s_idx[axis], d_idx[axis] = src, dst
                total[tuple(d_idx)] += masked[tuple(s_idx)]
                count[tuple(d_idx)] += known[tuple(s_idx)]
        new = ~known & (count > 0)
        value[new] = total[new] / count[new]
        known |= new
    return value


def _fit_ellipsoid(directions, p_l) -> np.ndarray:
    """Least-squares symmetric M with nᵀ M n = P_L(n)² (z, y, x order)."""
    nz, ny, nx = directions.T
    design = np.column_stack([nz * nz, ny * ny, nx * nx, 2 * nz * ny, 2 * nz * nx, 2 * ny * nx])
    m, *_ = np.linalg.lstsq(design, p_l**2, rcond=None)
    return np.array([[m[0], m[3], m[4]], [m[3], m[1], m[5]], [m[4], m[5], m[2]]])


def _hemisphere(n: int) -> np.ndarray:
    """``n`` unit vectors (z, y, x) spread evenly over the upper hemisphere (Fibonacci lattice)."""
    k = np.arange(n)
    z = (k + 0.5) / n  # equal-area bands: cos θ uniform on (0, 1)
    s = np.sqrt(1.0 - z**2)
    phi = k * _GOLDEN_ANGLE
    return np.column_stack([z, s * np.sin(phi), s * np.cos(phi)])


def _oriented(vector: np.ndarray) -> np.ndarray:
    """The vector with the sign that makes its largest component positive."""
    return vector if vector[np.argmax(np.abs(vector))] >= 0 else -vector


def _bounding_box(mask: np.ndarray) -> tuple[slice, slice, slice]:
    box = []
    for axis in range(3):
        other = tuple(a for a in range(3) if a != axis)
        hit = np.flatnonzero(mask.any(axis=other))
        box.append(slice(int(hit[0]), int(hit[-1]) + 1))
    return tuple(box)


def _int_option(value, name: str, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InputError(f"{name} must be an integer >= {minimum}; got {value!r}",
                         f"give {name} as a whole number of at least {minimum}")
    return int(value)


def _nonnegative(value, name: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        number = math.nan
    if not (math.isfinite(number) and number >= 0):
        raise InputError(f"{name} must be a number >= 0; got {value!r}",
                         f"give {name} in µm, or 0 for none")
    return number
