"""Coarse-grained (kernel-averaged) porosity fields by normalised averaging.

The porosity field of a continuum model is a local volume average of the pore indicator over
the piece. Near the surface a plain average would mix in the exterior; the normalised (masked)
average divides by the averaged envelope instead::

    coverage(x) = (K * E)(x)            E = envelope indicator (pore or solid)
    porosity(x) = (K * P)(x) / (K * E)(x)   P = pore indicator

so a piece of uniform porosity gives a flat field up to its surface. Points whose kernel holds
less than ``min_coverage`` of piece volume are NaN.

Coordinates
-----------
Voxel ``(i, j, k)`` of the scan sits at ``(i·dz, j·dy, k·dx)`` µm from the scan origin (the
position OME-TIFF viewers assume), and field point ``(i, j, k)`` of a :class:`CoarseField` at
``origin_um + (i, j, k)·spacing_um``. Points given in µm use the same frame.

Mass balance
------------
The kernel weights sum to 1, so ``Σ_x (K*P)(x) = Σ_y P(y)`` and ``Σ_x (K*E)(x) = Σ_y E(y)``
whenever no kernel mass falls outside the output grid. Hence the coverage-weighted mean of the
field, ``Σ coverage·porosity / Σ coverage`` over the scan grid with ``min_coverage = 0``, equals
the bulk porosity ΣP / ΣE exactly, provided the piece lies at least
``kernel.radius_voxels(spacing)`` voxels from the image border (pad the phases with exterior
first if it does not).

References
----------
Whitaker S. (1999). *The Method of Volume Averaging*. Kluwer.
https://doi.org/10.1007/978-94-017-3389-2
Knutsson H. & Westin C.-F. (1993). Normalized and differential convolution. Proc. IEEE CVPR,
515–523. https://doi.org/10.1109/CVPR.1993.341081
Kanit T., Forest S., Galliet I., Mounoury V. & Jeulin D. (2003). Determination of the size of the
representative volume element for random composites. Int. J. Solids Struct. 40:3647–3679.
https://doi.org/10.1016/S0020-7683(03)00143-4
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..spacing import as_spacing_um, voxel_volume_um3
from .kernels import Kernel, apply_kernel, apply_squared_kernel

__all__ = ["Grid", "CoarseField", "coarsen", "sampling_uncertainty", "write_coarse_field"]

PORE, EXTERIOR = 1, 0
_MAX_CSV_ROWS = 100_000


@dataclass(frozen=True)
class Grid:
    """A regular grid in the scan's frame: point (i, j, k) at ``origin_um + (i, j, k)·spacing_um``.

    Parameters
    ----------
    origin_um : sequence of 3 floats
        Position (z, y, x) in µm of point (0, 0, 0), from the scan origin (the centre of voxel
        (0, 0, 0)).
    spacing_um : float or sequence of 3 floats
        Grid step (dz, dy, dx) in µm.
    shape : sequence of 3 ints
        Number of points per axis.
    """

    origin_um: tuple[float, float, float]
    spacing_um: tuple[float, float, float]
    shape: tuple[int, int, int]

    def __post_init__(self):
        origin = tuple(float(v) for v in np.broadcast_to(np.asarray(self.origin_um, float), 3))
        if not all(math.isfinite(v) for v in origin):
            raise InputError(f"grid origin_um must be 3 finite numbers; got {self.origin_um!r}",
                             "give (z, y, x) in µm")
        shape = tuple(int(v) for v in np.broadcast_to(np.asarray(self.shape), 3))
        if min(shape) < 1:
            raise InputError(f"grid shape must be 3 positive integers; got {self.shape!r}",
                             "give the number of points along z, y, x")
        object.__setattr__(self, "origin_um", origin)
        object.__setattr__(self, "spacing_um", as_spacing_um(self.spacing_um,
                                                             name="grid spacing_um"))
        object.__setattr__(self, "shape", shape)

    def axes_um(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Coordinates in µm of the points along z, y and x."""
        return tuple(o + np.arange(n) * s
                     for o, s, n in zip(self.origin_um, self.spacing_um, self.shape))


@dataclass(frozen=True, eq=False)
class CoarseField:
    """A kernel-averaged porosity field.

    Attributes
    ----------
    porosity : ndarray of float32
        Normalised average ``(K*P)/(K*E)``; NaN where coverage < ``min_coverage``. Shape of the
        grid, or (n,) for points.
    coverage : ndarray of float32
        ``K*E``: the fraction of the kernel's weight that falls inside the piece.
    kernel : Kernel
        The kernel used.
    spacing_um, origin_um : tuple of 3 floats or None
        The field's grid (``None`` for a field at arbitrary points).
    sigma : ndarray of float32 or None
        Sampling standard deviation of ``porosity`` from the integral-range law (present when an
        integral range was given), see :func:`sampling_uncertainty`.
    points_um : ndarray of float64, shape (n, 3), or None
        The (z, y, x) positions in µm of a field at arbitrary points.
    min_coverage : float
        Coverage below which points are masked.
    integral_range_um3 : float or None
        The integral range used for ``sigma``.
    """

    porosity: np.ndarray
    coverage: np.ndarray
    kernel: Kernel
    spacing_um: tuple[float, float, float] | None
    origin_um: tuple[float, float, float] | None
    sigma: np.ndarray | None = None
    points_um: np.ndarray | None = None
    min_coverage: float = 0.5
    integral_range_um3: float | None = None


def _indicators(phases):
    phases = np.asarray(phases)
    if phases.ndim != 3:
        raise InputError(f"phases must be a 3-D (z, y, x) label array; got shape {phases.shape}",
                         "pass the labels 0 exterior, 1 pore, 2 solid of a segmented scan")
    if not np.issubdtype(phases.dtype, np.integer):
        raise InputError(f"phases must hold integer labels; got dtype {phases.dtype}",
                         "pass the uint8 labels 0 exterior, 1 pore, 2 solid")
    if phases.size and (int(phases.max()) > 2 or int(phases.min()) < 0):
        raise InputError("phases holds labels outside {0, 1, 2}",
                         "use 0 exterior, 1 pore, 2 solid")
    envelope = phases != EXTERIOR
    if not envelope.any():
        raise InputError("the phases hold no piece (no pore or solid voxel)",
                         "check the segmentation and envelope")
    return phases == PORE, envelope


def _averaged(mask, kernel, spacing):
    out = apply_kernel(mask, kernel=kernel, spacing_um=spacing)
    if kernel.shape == "ball":
        # An average of an indicator over n equal weights is a multiple of 1/n: values below
        # half of that are FFT rounding of true zeros (and negative ones are too).
        n = round(1.0 / kernel.sum_of_squared_weights(spacing))
        out[out < 0.5 / n] = 0.0
    return out


def coarsen(phases, *, spacing_um, kernel: Kernel, min_coverage: float = 0.5, grid=None,
            A3_um3: float | None = None) -> CoarseField:
    """Kernel-averaged porosity field of a labelled piece, by normalised averaging.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    kernel : Kernel
        Averaging kernel in µm (see :class:`~ctpore.continuum.kernels.Kernel`).
    min_coverage : float
        Points whose kernel holds less than this fraction of piece volume are NaN.
    grid : None, Grid or array-like of shape (n, 3)
        ``None``: the scan grid. A :class:`Grid`: the field sampled on that regular grid. An
        (n, 3) array: the field at those (z, y, x) points in µm. Off the scan grid, numerator
        ``K*P`` and denominator ``K*E`` are sampled trilinearly
        (:func:`scipy.ndimage.map_coordinates`, ``order=1``) and then divided, so the
        normalisation still holds; outside the image both are 0 and the point is NaN.
    A3_um3 : float, optional
        Integral range of the porosity (from :func:`ctpore.continuum.rev.rev_study`); when given,
        ``sigma`` holds the sampling standard deviation of each value.

    Returns
    -------
    CoarseField

    Raises
    ------
    InputError
        On bad phases, spacing, kernel, coverage, grid or integral range.

    Notes
    -----
    The coverage-weighted mean of the field on the scan grid equals the bulk porosity exactly
    when no kernel mass leaves the image (module notes). Memory: about 5 float32 volumes of the
    scan (7 with ``A3_um3``); the ball's FFT needs about 3 more of the padded size.

    Examples
    --------
    >>> import numpy as np
    >>> ph = np.zeros((24, 24, 24), np.uint8)
    >>> ph[6:18, 6:18, 6:18] = 2; ph[6:18:2, 6:18, 6:18] = 1  # pore slabs, porosity 0.5
    >>> f = coarsen(ph, spacing_um=10, kernel=Kernel("box", 40), min_coverage=0)
    >>> round(float(f.porosity[12, 12, 12]), 6)  # 5 slabs in the 5-voxel box, 3 of them pore
    0.6
    >>> round(float(np.nansum(f.coverage * f.porosity) / f.coverage.sum()), 6)
    0.5
    """
    spacing = as_spacing_um(spacing_um)
    _check_kernel(kernel, min_coverage)
    if A3_um3 is not None and not (math.isfinite(A3_um3) and A3_um3 > 0):
        raise InputError(f"A3_um3 must be a positive integral range in µm³; got {A3_um3!r}",
                         "take it from the REV study (rev.json integral_range_um3)")
    pore, envelope = _indicators(phases)
    num = _averaged(pore, kernel, spacing)
    del pore
    den = _averaged(envelope, kernel, spacing)
    den_sq = None
    if A3_um3 is not None:
        if kernel.shape == "gaussian":
            den_sq = apply_squared_kernel(envelope, kernel=kernel, spacing_um=spacing)
        else:  # equal weights: w² = w·Σw²
            den_sq = den * np.float32(kernel.sum_of_squared_weights(spacing))
    del envelope

    points = None
    if grid is None:
        field_spacing, origin = spacing, (0.0, 0.0, 0.0)
    else:
        if isinstance(grid, Grid):
            coords = np.stack(np.meshgrid(*grid.axes_um(), indexing="ij"), axis=0)
            field_spacing, origin = grid.spacing_um, grid.origin_um
        else:
            points = np.asarray(grid, dtype=np.float64)
            if points.ndim != 2 or points.shape[1] != 3 or not np.isfinite(points).all():
                raise InputError(f"grid points must be an (n, 3) array of finite (z, y, x) µm; "
                                 f"got shape {points.shape}",
                                 "pass a Grid, or an array with one (z, y, x) row per point")
            coords = points.T
            field_spacing = origin = None
        index = [c / s for c, s in zip(coords, spacing)]
        num = _sample(num, index)
        den = _sample(den, index)
        if den_sq is not None:
            den_sq = _sample(den_sq, index)

    porosity = _porosity(num, den, min_coverage)
    sigma = None
    if A3_um3 is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            v_eff = voxel_volume_um3(spacing) * den * den / den_sq
        sigma = sampling_uncertainty(porosity, kernel=kernel, A3_um3=A3_um3, spacing_um=spacing,
                                     effective_volume_um3=v_eff)
    return CoarseField(porosity=porosity, coverage=np.asarray(den, np.float32), kernel=kernel,
                       spacing_um=field_spacing, origin_um=origin, sigma=sigma, points_um=points,
                       min_coverage=float(min_coverage), integral_range_um3=A3_um3)


def _check_kernel(kernel, min_coverage):
    """Raise InputError unless ``kernel`` is a Kernel and ``min_coverage`` is in [0, 1]."""
    if not isinstance(kernel, Kernel):
        raise InputError(f"kernel must be a ctpore Kernel; got {type(kernel).__name__}",
                         "build one with Kernel('gaussian', width_um) or Kernel.from_section")
    if not (isinstance(min_coverage, (int, float)) and 0 <= min_coverage <= 1):
        raise InputError(f"min_coverage must be in [0, 1]; got {min_coverage!r}",
                         "0.5 is the default")


def _porosity(num, den, min_coverage):
    """``(K*P)/(K*E)`` clipped to [0, 1] as float32, NaN where the coverage ``den`` is 0 or
    below ``min_coverage``."""
    with np.errstate(invalid="ignore", divide="ignore"):
        porosity = np.clip(num / den, 0.0, 1.0).astype(np.float32)
    porosity[~(den > 0) | (den < min_coverage)] = np.nan
    return porosity


def _sample(volume, index):
    return ndimage.map_coordinates(volume, index, order=1, mode="grid-constant", cval=0.0,
                                   prefilter=False, output=np.float32)


def sampling_uncertainty(porosity, *, kernel: Kernel, A3_um3: float, spacing_um,
                         effective_volume_um3=None) -> np.ndarray:
    """Standard deviation of a kernel-averaged porosity from the integral-range law.

    ``D = sqrt(p(1 − p)·A3 / V_eff)``, with ``V_eff = v / Σ w²`` the kernel's effective volume
    (``v`` the voxel volume, ``w`` the normalised weights; see
    :meth:`Kernel.effective_volume_um3` for the derivation). The law holds for ``V_eff ≫ A3``;
    ``A3 / V_eff`` is capped at 1 so D never exceeds the single-point value ``sqrt(p(1 − p))``.

    Parameters
    ----------
    porosity : array-like
        Kernel-averaged porosity (NaN propagates).
    kernel : Kernel
        The averaging kernel.
    A3_um3 : float
        Integral range in µm³.
    spacing_um : float or sequence of 3 floats
        Voxel size of the scan the average was taken on.
    effective_volume_um3 : float or array-like, optional
        Local effective volume; :func:`coarsen` passes ``v·(K*E)² / (K²*E)``, the effective
        volume of the weights ``w·E / Σ w·E`` that remain where the kernel is cut by the surface.
        Default: the whole kernel's.

    Returns
    -------
    ndarray of float32

    References
    ----------
    Kanit T. et al. (2003), Int. J. Solids Struct. 40:3647–3679,
    https://doi.org/10.1016/S0020-7683(03)00143-4; Lantuéjoul C. (1991), J. Microsc. 161:387
    (integral range).

    Examples
    --------
    >>> k = Kernel("box", 90)  # 9 voxels of 10 µm per axis: V_eff = 729 000 µm³
    >>> round(float(sampling_uncertainty(0.5, kernel=k, A3_um3=7290, spacing_um=10)), 6)
    0.05
    """
    if not (math.isfinite(A3_um3) and A3_um3 > 0):
        raise InputError(f"A3_um3 must be a positive integral range in µm³; got {A3_um3!r}",
                         "take it from the REV study")
    p = np.asarray(porosity, dtype=np.float64)
    v_eff = (kernel.effective_volume_um3(spacing_um) if effective_volume_um3 is None
             else np.asarray(effective_volume_um3, dtype=np.float64))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.minimum(1.0, A3_um3 / v_eff)
        return np.sqrt(p * (1.0 - p) * ratio).astype(np.float32)


def _csv_rows(field: CoarseField):
    """Rows (z_um, y_um, x_um, porosity, coverage, sigma) on a subsampled grid, ≤ 100 000."""
    if field.points_um is not None:
        n = len(field.points_um)
        step = max(1, math.ceil(n / _MAX_CSV_ROWS))
        sel = np.arange(0, n, step)
        pts = field.points_um[sel]
        values = [field.porosity[sel], field.coverage[sel],
                  field.sigma[sel] if field.sigma is not None else None]
    else:
        shape = field.porosity.shape
        step = 1
        while math.prod(math.ceil(n / step) for n in shape) > _MAX_CSV_ROWS:
            step += 1
        sl = (slice(None, None, step),) * 3
        axes = [o + np.arange(0, n, step) * s
                for o, s, n in zip(field.origin_um, field.spacing_um, shape)]
        pts = np.stack([a.ravel() for a in np.meshgrid(*axes, indexing="ij")], axis=1)
        values = [field.porosity[sl].ravel(), field.coverage[sl].ravel(),
                  field.sigma[sl].ravel() if field.sigma is not None else None]
    por, cov, sig = values
    rows = []
    for i in range(len(pts)):
        rows.append([float(pts[i, 0]), float(pts[i, 1]), float(pts[i, 2]), float(por[i]),
                     float(cov[i]), float(sig[i]) if sig is not None else math.nan])
    return rows


def write_coarse_field(folder, field: CoarseField) -> list[Path]:
    """Write a coarse field: OME-TIFFs, an ``.npz`` with everything, and a subsampled CSV.

    Files: ``coarse_porosity.ome.tif``, ``coarse_coverage.ome.tif`` and (with an integral range)
    ``coarse_sigma.ome.tif`` as float32 with the field's voxel size (grid fields only: a field
    at points has no image); ``coarse_field.npz`` (porosity, coverage, sigma if present,
    origin_um, spacing_um or points_um, kernel_name, kernel_shape, kernel_width_um,
    kernel_truncate_sigma, min_coverage); ``coarse_field.csv`` with columns
    ``z_um,y_um,x_um,porosity,coverage,sigma`` on a grid subsampled by a common step so that it
    has at most 100 000 rows (NaN as an empty cell). The OME-TIFF voxel size is the field's
    spacing; its origin is in the ``.npz`` and the CSV coordinates.

    Returns
    -------
    list of Path
        The files written.
    """
    from ..io.ome_tiff import write_ome_tiff
    from ..io.result_folder import write_csv_rows

    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"cannot write the coarse field: folder {folder} does not exist",
                         "create the folder first")
    paths = []
    if field.points_um is None:
        images = [("coarse_porosity", field.porosity), ("coarse_coverage", field.coverage)]
        if field.sigma is not None:
            images.append(("coarse_sigma", field.sigma))
        for name, arr in images:
            paths.append(write_ome_tiff(folder / f"{name}.ome.tif",
                                        np.asarray(arr, np.float32), field.spacing_um))
    data = {
        "porosity": field.porosity, "coverage": field.coverage,
        "kernel_name": np.array(field.kernel.name), "kernel_shape": np.array(field.kernel.shape),
        "kernel_width_um": np.array(field.kernel.width_um),
        "kernel_truncate_sigma": np.array(field.kernel.truncate_sigma),
        "min_coverage": np.array(field.min_coverage),
    }
    if field.sigma is not None:
        data["sigma"] = field.sigma
        data["integral_range_um3"] = np.array(field.integral_range_um3)
    if field.points_um is None:
        data["origin_um"] = np.array(field.origin_um)
        data["spacing_um"] = np.array(field.spacing_um)
    else:
        data["points_um"] = field.points_um
    paths.append(folder / "coarse_field.npz")
    np.savez_compressed(paths[-1], **data)
    paths.append(folder / "coarse_field.csv")
    write_csv_rows(paths[-1], ["z_um", "y_um", "x_um", "porosity", "coverage", "sigma"],
                   _csv_rows(field))
    return paths
