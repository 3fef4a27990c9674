"""Averaging kernels in physical units: box, ball and Gaussian, at any voxel size.

A kernel is defined in micrometres, so the same physical kernel is applied whatever the voxel
size, anisotropic voxels included. Each kernel is a set of non-negative weights on voxel
offsets that sums to 1:

box (``width_um`` = side of the cube)
    Uniform weights on the voxels whose centres lie in the closed cube of side ``width_um``
    centred on the point: in axis *i* the half-width is ``h_i = floor(width_um / 2 / spacing_i)``
    voxels, so the box is ``2 h_i + 1`` voxels wide, an odd number, and stays centred on the
    point (an even-sized box cannot be). The voxels cover ``(2 h_i + 1)·spacing_i``: exactly
    ``width_um`` when it is an odd number of voxels, one voxel more when it is even. This is
    the same rule as the ball's (voxel centres inside the physical body).
ball (``width_um`` = diameter)
    Uniform weights on the voxels whose centre offset ``(k_z dz, k_y dy, k_x dx)`` lies within
    ``width_um / 2`` of the point (a ball in µm, an ellipsoid in voxel units).
gaussian (``width_um`` = σ)
    ``exp(-x²/(2σ²))`` per axis with σ in voxels ``width_um / spacing_i``, cut at
    ``truncate_sigma``·σ (radius ``int(truncate_sigma·σ_i + 0.5)`` voxels, scipy's rule) and
    renormalised: exactly the kernel of :func:`scipy.ndimage.gaussian_filter`.

Box and Gaussian kernels are separable and applied axis by axis
(:func:`scipy.ndimage.uniform_filter1d`, :func:`scipy.ndimage.gaussian_filter1d`); the ball is
applied by FFT convolution (:func:`scipy.signal.fftconvolve`). Outside the image the volume is
taken as 0 (``mode="constant"``, ``cval=0``): the normalised averaging of
:mod:`ctpore.continuum.coarse` divides by the kernel-averaged envelope, which takes care of the
normalisation near the surface and the image border.

References
----------
Whitaker S. (1999). *The Method of Volume Averaging*. Kluwer, Dordrecht.
https://doi.org/10.1007/978-94-017-3389-2 (local volume averages with a weighting function).
Knutsson H. & Westin C.-F. (1993). Normalized and differential convolution. Proc. IEEE CVPR,
515–523. https://doi.org/10.1109/CVPR.1993.341081 (normalised averaging of masked data).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..spacing import as_spacing_um, voxel_volume_um3

__all__ = ["Kernel", "KERNEL_SHAPES", "kernel_weights", "apply_kernel", "apply_squared_kernel"]

KERNEL_SHAPES = ("box", "ball", "gaussian")


@dataclass(frozen=True)
class Kernel:
    """An averaging kernel in physical units.

    Parameters
    ----------
    shape : {"box", "ball", "gaussian"}
        Kernel shape (see the module notes for the exact voxel sets).
    width_um : float
        Side of the box, diameter of the ball, or σ of the Gaussian, in µm.
    truncate_sigma : float
        Gaussian only: the kernel is cut at this many σ (scipy's ``truncate``).

    Raises
    ------
    InputError
        If the shape is unknown or a width is not positive and finite.

    Examples
    --------
    >>> Kernel("gaussian", 400).name
    'gaussian σ=400 µm, truncated at 3σ'
    >>> Kernel("box", 400).name, Kernel("ball", 400).name
    ('box 400 µm cube', 'ball 400 µm diameter')
    """

    shape: str = "gaussian"
    width_um: float = 0.0
    truncate_sigma: float = 3.0

    def __post_init__(self):
        if self.shape not in KERNEL_SHAPES:
            raise InputError(f"kernel shape {self.shape!r} is not one of {list(KERNEL_SHAPES)}",
                             f"choose one of {list(KERNEL_SHAPES)}")
        if not (isinstance(self.width_um, (int, float)) and math.isfinite(self.width_um)
                and self.width_um > 0):
            raise InputError(f"kernel width_um must be a positive number; got {self.width_um!r}",
                             "give the box side, ball diameter or Gaussian σ in µm "
                             "(or run the REV study for a recommended width)")
        if not (math.isfinite(self.truncate_sigma) and self.truncate_sigma > 0):
            raise InputError(f"kernel truncate_sigma must be > 0; got {self.truncate_sigma!r}",
                             "3.0 is the usual value")

    @classmethod
    def from_section(cls, section, *, width_um: float | None = None) -> "Kernel":
        """The kernel of a recipe ``[coarsen]`` section.

        ``width_um`` overrides the section's width (use it to pass the REV study's
        recommendation when the section says 0).
        """
        width = section.width_um if width_um is None else width_um
        if not width > 0:
            raise InputError("coarsen.width_um is 0 and no width was given",
                             "set coarsen.width_um, or pass the REV study's recommended width")
        return cls(section.kernel, float(width), float(section.truncate_sigma))

    @property
    def name(self) -> str:
        """Human-readable description with units, e.g. ``'ball 400 µm diameter'``."""
        if self.shape == "gaussian":
            return (f"gaussian σ={self.width_um:g} µm, truncated at "
                    f"{self.truncate_sigma:g}σ")
        if self.shape == "box":
            return f"box {self.width_um:g} µm cube"
        return f"ball {self.width_um:g} µm diameter"

    def radius_voxels(self, spacing_um) -> tuple[int, int, int]:
        """Half-size of the kernel's support in voxels per axis (z, y, x).

        Pad a volume by this many voxels per side so that no kernel mass falls outside it.
        """
        spacing = as_spacing_um(spacing_um)
        if self.shape in ("box", "ball"):
            # Voxel centres k·s with |k·s| ≤ width/2 (a relative 1e-12 absorbs rounding).
            return tuple(int(math.floor(self.width_um / 2 / s * (1 + 1e-12))) for s in spacing)
        return tuple(int(self.truncate_sigma * (self.width_um / s) + 0.5) for s in spacing)

    def sum_of_squared_weights(self, spacing_um) -> float:
        """Σ w² over the normalised kernel weights (1 / number of voxels for box and ball)."""
        if self.shape == "ball":
            return 1.0 / float(np.count_nonzero(_ball_mask(self, as_spacing_um(spacing_um))))
        return math.prod(float(np.sum(w.astype(np.float64) ** 2))
                         for w in _weights_1d(self, as_spacing_um(spacing_um)))

    def effective_volume_um3(self, spacing_um) -> float:
        """Effective volume of the weighted average: voxel volume / Σ w² (see Notes).

        Notes
        -----
        For a weighted mean ``X̄ = Σ w_i X_i`` (Σ w_i = 1) of a stationary field whose
        covariance χ has a range small compared with the kernel,
        ``Var X̄ = Σ_i Σ_j w_i w_j χ(x_i − x_j) ≈ Σ_i w_i² Σ_h χ(h) = Σ w² · p(1 − p)·A3 / v``
        with ``A3 = v Σ_h χ(h) / (p(1 − p))`` the integral range and ``v`` the voxel volume.
        Writing this as the integral-range law ``p(1 − p)·A3 / V_eff`` gives
        ``V_eff = v / Σ w²``: the box's own volume ``n·v`` for uniform weights, and
        ``(2√π σ)³`` for a continuous Gaussian.
        """
        return voxel_volume_um3(spacing_um) / self.sum_of_squared_weights(spacing_um)


def _weights_1d(kernel: Kernel, spacing) -> list[np.ndarray]:
    """The normalised 1-D weights per axis of a separable kernel (box or Gaussian)."""
    out = []
    for s, r in zip(spacing, kernel.radius_voxels(spacing)):
        if kernel.shape == "box":
            w = np.full(2 * r + 1, 1.0 / (2 * r + 1))
        else:
            # scipy.ndimage's _gaussian_kernel1d: exp(-x²/(2σ²)) on -r..r, normalised.
            sigma = kernel.width_um / s
            x = np.arange(-r, r + 1, dtype=np.float64)
            w = np.exp(-0.5 / (sigma * sigma) * x * x)
            w /= w.sum()
        out.append(w)
    return out


def _ball_mask(kernel: Kernel, spacing) -> np.ndarray:
    """Voxel offsets whose physical distance from the centre is ≤ the ball's radius."""
    radius = kernel.width_um / 2
    rz, ry, rx = kernel.radius_voxels(spacing)
    z = (np.arange(-rz, rz + 1) * spacing[0])[:, None, None]
    y = (np.arange(-ry, ry + 1) * spacing[1])[None, :, None]
    x = (np.arange(-rx, rx + 1) * spacing[2])[None, None, :]
    return z * z + y * y + x * x <= radius * radius * (1 + 1e-12)


def kernel_weights(kernel: Kernel, *, spacing_um) -> np.ndarray:
    """The kernel's normalised 3-D weights on voxel offsets (odd size per axis, centred).

    Parameters
    ----------
    kernel : Kernel
        The physical kernel.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.

    Returns
    -------
    ndarray of float64, shape (2 r_z + 1, 2 r_y + 1, 2 r_x + 1)
        Non-negative weights summing to 1; the centre element is the point itself. Box and
        Gaussian weights are the outer product of their 1-D weights.

    Examples
    --------
    >>> w = kernel_weights(Kernel("box", 20), spacing_um=(10, 5, 5))
    >>> w.shape, float(w.sum())
    ((3, 5, 5), 1.0)
    """
    spacing = as_spacing_um(spacing_um)
    if kernel.shape == "ball":
        mask = _ball_mask(kernel, spacing)
        return mask / float(np.count_nonzero(mask))
    wz, wy, wx = _weights_1d(kernel, spacing)
    return wz[:, None, None] * wy[None, :, None] * wx[None, None, :]


def apply_kernel(volume, *, kernel: Kernel, spacing_um, dtype=np.float32) -> np.ndarray:
    """Average a volume with a physical kernel; zero outside the image.

    Parameters
    ----------
    volume : array-like, shape (nz, ny, nx)
        Values to average (bool or numeric).
    kernel : Kernel
        Box, ball or Gaussian in µm.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    dtype : numpy dtype, optional
        Working and output precision; float32 (default) halves the memory.

    Returns
    -------
    ndarray of ``dtype``, shape (nz, ny, nx)
        ``Σ_k w_k · volume[i + k]`` with the weights of :func:`kernel_weights` and zeros beyond
        the image border.

    Notes
    -----
    Box: :func:`scipy.ndimage.uniform_filter1d` with size ``2 h_i + 1`` per axis; Gaussian:
    :func:`scipy.ndimage.gaussian_filter1d` with ``sigma = width_um / spacing_i`` and
    ``truncate``; both with ``mode="constant", cval=0``, axes in the order z, y, x, as
    :func:`scipy.ndimage.uniform_filter` and :func:`scipy.ndimage.gaussian_filter` do. Ball:
    :func:`scipy.signal.fftconvolve` with ``mode="same"`` (linear convolution, so zero
    padding); its FFT rounding is of order 1e-7 of the largest value in float32.

    Examples
    --------
    >>> import numpy as np
    >>> v = np.zeros((5, 5, 5)); v[2, 2, 2] = 1
    >>> out = apply_kernel(v, kernel=Kernel("box", 30), spacing_um=10)
    >>> round(float(out[1, 1, 1]) * 27, 6), float(out[0, 0, 0])
    (1.0, 0.0)
    """
    spacing = as_spacing_um(spacing_um)
    if not isinstance(kernel, Kernel):
        raise InputError(f"kernel must be a ctpore Kernel; got {type(kernel).__name__}",
                         "build one with Kernel('gaussian', width_um) or Kernel.from_section")
    data = np.asarray(volume)
    if data.ndim != 3:
        raise InputError(f"apply_kernel needs a 3-D (z, y, x) volume; got shape {data.shape}",
                         "pass a 3-D array")
    dtype = np.dtype(dtype)
    out = np.asarray(data, dtype=dtype)
    if kernel.shape == "box":
        for axis, h in enumerate(kernel.radius_voxels(spacing)):
            out = ndimage.uniform_filter1d(out, size=2 * h + 1, axis=axis, mode="constant",
                                           cval=0.0, output=dtype)
        return out
    if kernel.shape == "gaussian":
        for axis, s in enumerate(spacing):
            out = ndimage.gaussian_filter1d(out, kernel.width_um / s, axis=axis, mode="constant",
                                            cval=0.0, truncate=kernel.truncate_sigma,
                                            output=dtype)
        return out
    from scipy.signal import fftconvolve

    weights = kernel_weights(kernel, spacing_um=spacing).astype(dtype)
    return np.asarray(fftconvolve(out, weights, mode="same"), dtype=dtype)


def apply_squared_kernel(volume, *, kernel: Kernel, spacing_um, dtype=np.float32) -> np.ndarray:
    """``Σ_k w_k² · volume[i + k]``: the kernel with squared weights (not normalised).

    Used for the effective volume of a kernel cut by the piece's surface. For box and ball,
    whose weights are equal, ``w² = w · Σw²``; for the Gaussian the squared 1-D weights are
    applied axis by axis (:func:`scipy.ndimage.correlate1d`).
    """
    spacing = as_spacing_um(spacing_um)
    if kernel.shape in ("box", "ball"):
        out = apply_kernel(volume, kernel=kernel, spacing_um=spacing, dtype=dtype)
        out *= np.dtype(dtype).type(kernel.sum_of_squared_weights(spacing))
        return out
    out = np.asarray(volume, dtype=dtype)
    for axis, w in enumerate(_weights_1d(kernel, spacing)):
        out = ndimage.correlate1d(out, w * w, axis=axis, mode="constant", cval=0.0,
                                  output=np.dtype(dtype))
    return out
