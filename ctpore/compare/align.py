"""Place a model field in the scan's frame: by centroids and principal axes, or explicitly.

A transform maps a model point ``p`` (µm, (z, y, x)) to the scan point
``scale · R · p + t``. The principal-axes alignment takes the model's centroid and the
eigenvectors of its point cloud's covariance (unweighted: every model point counts once, so a
model on a regular grid is weighted by volume; a mesh with graded node density is biased towards
its fine parts) and maps them onto the centroid and axes of the scan envelope
(:func:`ctpore.piece_frame.piece_frame`). Eigenvectors have no sign: of the four proper
rotations that map the axes onto each other (identity and the three half-turns about one axis)
the one whose porosity agrees best with the scan (lowest RMSE) is kept when a sampler of the
scan is given; otherwise the sign rule of :mod:`ctpore.piece_frame` (largest component of the
long and middle axes positive) is applied to both frames.

Axisymmetric (r, z) models are placed on the scan's long axis: the model's axial coordinate z is
measured from the scan's first tip (the envelope point with the smallest projection on the long
axis, as in :func:`ctpore.profiles.rz_map`), or from the centroid with ``z_origin="centroid"``;
each (r, z) point stands for a ring of ``n_azimuths`` points, and the scan value compared is the
mean over the ring (an azimuthal average, NaNs skipped).

References
----------
Pearson K. (1901). On lines and planes of closest fit. Phil. Mag. 2:559.
https://doi.org/10.1080/14786440109462720 (principal axes of a point cloud).
Horn B. K. P. (1987). Closed-form solution of absolute orientation using unit quaternions.
J. Opt. Soc. Am. A 4:629. https://doi.org/10.1364/JOSAA.4.000629 (rigid transforms, scale).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..piece_frame import PieceFrame, _principal_axes

__all__ = ["Transform", "explicit_transform", "principal_transform", "ring_points",
           "rotation_angle_deg"]

_FLIPS = (np.diag([1.0, 1.0, 1.0]), np.diag([1.0, -1.0, -1.0]), np.diag([-1.0, 1.0, -1.0]),
          np.diag([-1.0, -1.0, 1.0]))


@dataclass(frozen=True, eq=False)
class Transform:
    """``scan = scale · rotation @ model + translation_um`` in (z, y, x) µm.

    Attributes
    ----------
    rotation : ndarray (3, 3)
        Proper rotation (det +1) acting on (z, y, x) column vectors.
    translation_um : ndarray (3,)
        Translation in µm.
    scale : float
        Uniform scale factor (1 when the units are declared right).
    method : str
        "principal", "explicit" or "axisymmetric".
    """

    rotation: np.ndarray
    translation_um: np.ndarray
    scale: float = 1.0
    method: str = "explicit"

    def apply(self, points_um) -> np.ndarray:
        """Map (n, 3) model points (µm, z, y, x) into the scan frame."""
        p = np.asarray(points_um, dtype=np.float64)
        return self.scale * p @ self.rotation.T + self.translation_um

    def to_dict(self) -> dict:
        """JSON-ready description."""
        return {"rotation": self.rotation.tolist(), "translation_um": self.translation_um.tolist(),
                "scale": float(self.scale), "method": self.method,
                "rotation_angle_deg": rotation_angle_deg(self.rotation),
                "convention": "scan (z, y, x) µm = scale * rotation @ model + translation_um"}


def rotation_angle_deg(rotation) -> float:
    """Angle of a rotation matrix in degrees, from its trace (``cos θ = (tr R − 1) / 2``)."""
    c = (np.trace(np.asarray(rotation, float)) - 1.0) / 2.0
    return float(np.degrees(np.arccos(np.clip(c, -1.0, 1.0))))


def explicit_transform(*, rotation=None, translation_um=None, scale: float = 1.0) -> Transform:
    """A user-given transform; the rotation must be orthonormal with determinant +1.

    Raises
    ------
    InputError
        If the rotation is not a proper 3×3 rotation, the translation not 3 numbers, or the
        scale not positive.
    """
    r = np.eye(3) if rotation is None else np.asarray(rotation, dtype=np.float64)
    if r.size == 9:
        r = r.reshape(3, 3)
    if r.shape != (3, 3) or not np.isfinite(r).all() or not np.allclose(r @ r.T, np.eye(3),
                                                                       atol=1e-6) \
            or np.linalg.det(r) < 0:
        raise InputError(f"rotation must be a proper 3x3 rotation matrix; got {r.tolist()}",
                         "give 9 numbers row by row (z, y, x), orthonormal, determinant +1")
    t = np.zeros(3) if translation_um is None else np.asarray(translation_um, float).reshape(-1)
    if t.shape != (3,) or not np.isfinite(t).all():
        raise InputError(f"translation must be 3 numbers (z, y, x) in µm; got {translation_um!r}",
                         "give z,y,x in µm")
    if not (np.isfinite(scale) and scale > 0):
        raise InputError(f"scale must be positive; got {scale!r}", "give e.g. 1")
    return Transform(rotation=r, translation_um=t, scale=float(scale), method="explicit")


def _cloud_frame(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    c = points.mean(axis=0)
    d = points - c
    cov = d.T @ d / len(points)
    return c, _principal_axes(cov, "auto")


def principal_transform(points_um, frame: PieceFrame, *, porosity=None,
                        sampler=None) -> tuple[Transform, dict]:
    """Map the model's centroid and principal axes onto those of the scan's envelope.

    Parameters
    ----------
    points_um : ndarray (n, 3)
        Model points (µm, z, y, x) in the model's frame.
    frame : PieceFrame
        The scan envelope's frame.
    porosity : ndarray (n,), optional
        Model porosity, used with ``sampler`` to resolve the sign of the axes.
    sampler : callable, optional
        ``sampler(points_um (m, 3)) -> porosity (m,)`` of the scan (NaN where not valid).

    Returns
    -------
    Transform, dict
        The transform and a note on how the sign was chosen (``{"sign_rule": ..., "rmse":
        [per candidate]}``).

    Raises
    ------
    InputError
        If the model has fewer than 4 points or its points are degenerate (a plane or a line).
    """
    p = np.asarray(points_um, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 3 or len(p) < 4:
        raise InputError(f"principal-axes alignment needs >= 4 model points (z, y, x); got "
                         f"shape {p.shape}", "give a 3-D field or use --align none")
    c_m, a_m = _cloud_frame(p)
    if np.linalg.matrix_rank(p[:: max(1, len(p) // 5000)] - c_m, tol=1e-9 * np.ptp(p)) < 3:
        raise InputError("the model points lie in a plane or on a line: no principal axes",
                         "give a 3-D field or an explicit transform (--align none)")
    a_s = np.asarray(frame.axes)
    c_s = np.asarray(frame.centroid_um)
    candidates = []
    for flip in _FLIPS:
        r = a_s.T @ flip @ a_m  # model axis k -> ±scan axis k
        candidates.append(Transform(rotation=r, translation_um=c_s - r @ c_m, scale=1.0,
                                    method="principal"))
    if sampler is None or porosity is None:
        return candidates[0], {"sign_rule": "largest component positive (piece_frame rule)"}
    por = np.asarray(porosity, float)
    step = max(1, len(p) // 20000)
    rmse = []
    for t in candidates:
        s = sampler(t.apply(p[::step]))
        ok = np.isfinite(s)
        rmse.append(float(np.sqrt(np.mean((s[ok] - por[::step][ok]) ** 2))) if ok.any()
                    else np.inf)
    best = int(np.argmin(rmse))
    return candidates[best], {"sign_rule": "best porosity agreement of 4 axis-sign choices",
                              "rmse_candidates": rmse, "chosen": best}


def ring_points(rz_um, frame: PieceFrame, *, n_azimuths: int = 16,
                z_origin: str = "first_tip") -> np.ndarray:
    """3-D scan points (m, n_azimuths, 3) of the rings that (r, z) model points stand for.

    Parameters
    ----------
    rz_um : ndarray (m, 2)
        Radius from the axis and axial position, µm.
    frame : PieceFrame
        The scan envelope's frame; the ring axis is its long axis through its centroid.
    n_azimuths : int
        Points per ring, evenly spaced in azimuth from the middle axis.
    z_origin : {"first_tip", "centroid"}
        Where model z = 0 lies on the long axis.
    """
    if z_origin not in ("first_tip", "centroid"):
        raise InputError(f"z_origin {z_origin!r} is not 'first_tip' or 'centroid'",
                         "choose first_tip or centroid")
    rz = np.asarray(rz_um, float)
    a0 = float(frame.extents_um[0, 0]) if z_origin == "first_tip" else 0.0
    theta = 2 * np.pi * np.arange(n_azimuths) / n_azimuths
    ax = np.asarray(frame.axes)
    a = (rz[:, 1] + a0)[:, None, None] * ax[0]
    ring = (np.cos(theta)[:, None] * ax[1] + np.sin(theta)[:, None] * ax[2])[None]
    return np.asarray(frame.centroid_um) + a + rz[:, 0][:, None, None] * ring
