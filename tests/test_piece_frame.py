"""The piece frame: centroid, principal axes and extents of an envelope, in µm."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from ctpore.errors import InputError
from ctpore.piece_frame import PieceFrame, piece_frame, to_frame


def _centres(mask, spacing):
    """Voxel centres i·spacing of the True voxels, (N, 3) in µm."""
    return np.argwhere(mask) * np.asarray(spacing)


def _ellipsoid(semi_axes_um, spacing, rotation=np.eye(3)):
    """Analytic ellipsoid (body axis 0 longest) sampled at voxel centres, centred in the grid."""
    spacing = np.asarray(spacing, dtype=float)
    half = np.sqrt((rotation**2) @ np.asarray(semi_axes_um) ** 2) + 2 * spacing
    shape = tuple(int(v) for v in np.ceil(2 * half / spacing))
    axes = [(np.arange(n) + 0.5) * h - n * h / 2 for n, h in zip(shape, spacing)]
    grid = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1)
    q = grid @ rotation
    return ((q / np.asarray(semi_axes_um)) ** 2).sum(axis=-1) <= 1


def test_single_voxel_centre_convention():
    env = np.zeros((4, 5, 6), dtype=bool)
    env[2, 3, 4] = True
    f = piece_frame(env, spacing_um=(2.0, 1.0, 0.5))
    # documented convention: the centre of voxel (i, j, k) lies at i·spacing
    assert f.centroid_um == (4.0, 3.0, 2.0)
    assert f.voxels == 1 and f.length_um == 0.0
    np.testing.assert_array_equal(f.extents_um, np.zeros((3, 2)))
    # one voxel is a uniform box: sd = h/√12 along each grid axis [derived]
    assert sorted(f.sd_um) == pytest.approx(sorted(np.array([2.0, 1.0, 0.5]) / math.sqrt(12)))


@pytest.mark.parametrize("spacing", [(1.0, 1.0, 1.0), (2.0, 1.0, 1.0), (1.0, 0.5, 2.0)])
def test_box_frame_is_exact(spacing):
    # a box 40 × 24 × 12 µm whose faces lie on voxel faces, long along y
    dz, dy, dx = spacing
    lz, ly, lx = 12.0, 40.0, 24.0
    shape = (int(lz / dz) + 4, int(ly / dy) + 4, int(lx / dx) + 4)
    env = np.zeros(shape, dtype=bool)
    env[2:2 + int(lz / dz), 2:2 + int(ly / dy), 2:2 + int(lx / dx)] = True
    f = piece_frame(env, spacing_um=spacing)
    # the box's lower face is the lower face of voxel 2, at (2 − ½)·spacing (voxel centres
    # at i·spacing)
    corner = np.array([1.5 * dz, 1.5 * dy, 1.5 * dx])
    np.testing.assert_allclose(f.centroid_um, corner + np.array([lz, ly, lx]) / 2, rtol=1e-12)
    np.testing.assert_allclose(np.abs(f.axes), [[0, 1, 0], [0, 0, 1], [1, 0, 0]], atol=1e-12)
    # a uniform box of side L has standard deviation L/√12 along that side [derived]; the
    # voxel self-term h²/12 makes the voxel sum exact: (n² − 1)h²/12 + h²/12 = (nh)²/12
    np.testing.assert_allclose(f.sd_um, np.array([ly, lx, lz]) / math.sqrt(12), rtol=1e-12)
    # extents between extreme voxel centres: ±(L − h)/2
    np.testing.assert_allclose(f.extents_um[:, 1], [(ly - dy) / 2, (lx - dx) / 2, (lz - dz) / 2],
                               rtol=1e-12)
    np.testing.assert_allclose(f.extents_um[:, 0], -f.extents_um[:, 1], rtol=1e-12)


def test_moments_match_numpy_covariance():
    # Reference: numpy's covariance of the voxel-centre coordinates (+ h²/12 per axis, the
    # voxel's own spread) has the frame's axes as eigenvectors and sd² as eigenvalues.
    rng = np.random.default_rng(3)
    env = _ellipsoid((30.0, 12.0, 7.0), (1.5, 1.0, 1.25),
                     Rotation.from_euler("xyz", [10, 50, 80], degrees=True).as_matrix())
    env &= rng.random(env.shape) < 0.8  # irregular, still elongated
    spacing = (1.5, 1.0, 1.25)
    f = piece_frame(env, spacing_um=spacing)
    pts = _centres(env, spacing)
    np.testing.assert_allclose(f.centroid_um, pts.mean(axis=0), rtol=1e-12)
    cov = np.cov(pts, rowvar=False, bias=True) + np.diag(np.square(spacing)) / 12
    np.testing.assert_allclose(f.axes @ cov @ f.axes.T, np.diag(f.sd_um**2), atol=1e-9)
    assert f.sd_um[0] > f.sd_um[1] > f.sd_um[2]
    # extents are the min / max projections of the voxel centres, to the last bit
    a, r, _ = to_frame(f, pts)
    proj = (pts - np.asarray(f.centroid_um)) @ f.axes.T
    np.testing.assert_allclose(f.extents_um[:, 0], proj.min(axis=0), atol=1e-9)
    np.testing.assert_allclose(f.extents_um[:, 1], proj.max(axis=0), atol=1e-9)
    np.testing.assert_allclose(a, proj[:, 0], atol=1e-9)


@pytest.mark.parametrize("angles", [(37, 23, 61), (-80, 5, 140), (12, -67, 3)])
def test_rotated_ellipsoid_axes_match_the_rotation(angles):
    rot = Rotation.from_euler("zyx", angles, degrees=True).as_matrix()
    env = _ellipsoid((40.0, 20.0, 10.0), (1.0, 1.0, 1.0), rot)
    f = piece_frame(env, spacing_um=1.0)
    # each principal axis within 2° of the known body axis (principal axes of a point cloud:
    # Pearson 1901, Phil. Mag. 2:559, from memory)
    for k in range(3):
        cosine = min(1.0, abs(float(f.axes[k] @ rot[:, k])))
        assert math.degrees(math.acos(cosine)) < 2.0, k
    # a solid ellipsoid with semi-axis c has sd c/√5 along it [derived: ∫x² over the unit
    # ball / its volume = 1/5]; 2 % for the voxel staircase (common practice, no source)
    np.testing.assert_allclose(f.sd_um, np.array([40.0, 20.0, 10.0]) / math.sqrt(5), rtol=0.02)


def test_axis_signs_are_deterministic_and_right_handed():
    rot = Rotation.from_euler("zyx", [150, -20, 75], degrees=True).as_matrix()
    env = _ellipsoid((30.0, 15.0, 8.0), (1.0, 1.0, 1.0), rot)
    f = piece_frame(env, spacing_um=1.0)
    for k in (0, 1):
        assert f.axes[k][np.argmax(np.abs(f.axes[k]))] > 0
    np.testing.assert_allclose(f.axes @ f.axes.T, np.eye(3), atol=1e-12)
    np.testing.assert_allclose(f.axes[2], np.cross(f.axes[0], f.axes[1]), atol=1e-12)
    # the sign rule holds for the mirror image too
    g = piece_frame(env[:, ::-1], spacing_um=1.0)
    for k in (0, 1):
        assert g.axes[k][np.argmax(np.abs(g.axes[k]))] > 0


def test_fixed_long_axis():
    env = _ellipsoid((30.0, 12.0, 6.0), (1.0, 1.0, 1.0),
                     np.array([[0.0, 0, 1], [1, 0, 0], [0, 1, 0]]))  # long along y, short z
    auto = piece_frame(env, spacing_um=1.0)
    fixed = piece_frame(env, spacing_um=1.0, long_axis="y")
    np.testing.assert_allclose(auto.axes, fixed.axes, atol=1e-9)
    np.testing.assert_allclose(auto.extents_um, fixed.extents_um, atol=1e-9)
    # long axis forced to z (the piece's short axis): the other two from the (y, x) plane
    f = piece_frame(env, spacing_um=1.0, long_axis="z")
    np.testing.assert_array_equal(f.axes[0], [1.0, 0.0, 0.0])
    np.testing.assert_allclose(np.abs(f.axes[1]), [0, 1, 0], atol=1e-9)
    assert f.long_axis == "z"
    pts = _centres(env, (1.0, 1.0, 1.0))
    assert f.extents_um[0, 1] == pytest.approx(pts[:, 0].max() - f.centroid_um[0], abs=1e-9)
    assert f.length_um == pytest.approx(np.ptp(pts[:, 0]), abs=1e-9)


def test_to_frame_on_known_points():
    env = _ellipsoid((20.0, 10.0, 5.0), (1.0, 1.0, 1.0),
                     Rotation.from_euler("zyx", [30, 40, 50], degrees=True).as_matrix())
    f = piece_frame(env, spacing_um=1.0)
    a_true = np.array([0.0, 3.0, -7.5, 2.0])
    m_true = np.array([1.0, 0.0, 2.0, -4.0])
    s_true = np.array([0.0, 2.0, -2.0, -3.0])
    pts = (np.asarray(f.centroid_um) + a_true[:, None] * f.axes[0] + m_true[:, None] * f.axes[1]
           + s_true[:, None] * f.axes[2])
    a, r, theta = to_frame(f, pts)
    np.testing.assert_allclose(a, a_true, atol=1e-12)
    np.testing.assert_allclose(r, np.hypot(m_true, s_true), atol=1e-12)
    np.testing.assert_allclose(theta, np.arctan2(s_true, m_true), atol=1e-12)
    a2, r2, _ = to_frame(f, pts.reshape(2, 2, 3))  # any leading shape
    assert a2.shape == (2, 2) and np.allclose(r2.ravel(), r)


def test_frame_is_immutable_and_serialisable():
    env = _ellipsoid((10.0, 5.0, 4.0), (1.0, 1.0, 1.0))
    f = piece_frame(env.astype(np.uint8) * 2, spacing_um=1.0)  # phase labels work too
    assert isinstance(f, PieceFrame)
    with pytest.raises(AttributeError):
        f.long_axis = "z"
    with pytest.raises(ValueError):
        f.axes[0, 0] = 2.0
    d = f.to_dict()
    assert set(d) >= {"centroid_um", "axes", "extents_um", "sd_um", "length_um", "spacing_um"}
    assert d["axes"]["long"] == f.axes[0].tolist()


def test_bad_input():
    with pytest.raises(InputError, match="empty"):
        piece_frame(np.zeros((3, 3, 3), bool), spacing_um=1.0)
    with pytest.raises(InputError, match="long_axis"):
        piece_frame(np.ones((3, 3, 3), bool), spacing_um=1.0, long_axis="w")
    with pytest.raises(InputError, match="spacing_um"):
        piece_frame(np.ones((3, 3, 3), bool), spacing_um=(1.0, 0.0, 1.0))
    with pytest.raises(ValueError, match="3-D"):
        piece_frame(np.ones((3, 3), bool), spacing_um=1.0)
