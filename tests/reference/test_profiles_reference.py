"""Porosity profiles against stereology, the Boolean model and a reference library (scipy).

Each check names its source beside it. The pieces are built here from analytic definitions in
their own body coordinates and sampled at voxel centres (i + 0.5)·spacing, so a rotated or
anisotropically sampled piece is the same physical object, not a resampled voxel array.

Pores are a Boolean model of balls of radius ``R_PORE`` (centres Poisson, intensity λ): a point
is pore when a ball covers it, with probability p = 1 − exp(−λ·4πr³/3) (Serra 1982, Image
Analysis and Mathematical Morphology; Stoyan, Kendall & Mecke 1995, ch. 3; from memory for
equation numbers). A piece whose porosity varies is made of zones, each with its own
independent Boolean model.

Noise bound used throughout [derived]: the porosity of a bin is the mean of N voxel indicators
X_i. Var(mean) = N⁻²·Σ_i Σ_j Cov(x_i − x_j), and for the Boolean model Cov(h) =
q²·(exp(η·k(|h|/r)) − 1) ≥ 0 with q = 1 − p and k(t) = 1 − 3t/4 + t³/16 the overlap fraction of
two balls (Serra 1982). As every x_j − x_i lies on the sampling lattice L, Var ≤ S/N with
S = Σ_{h∈L} Cov(h): the point-sampled form of D² = p(1 − p)·A3/V (Kanit, Forest, Galliet,
Mounoury & Jeulin 2003, Int. J. Solids Struct. 40:3647), an upper bound for any bin shape.
Voxels of different zones are independent, so S_max over the zones bounds a mixed bin.
Checks allow 4·sqrt(S/N) (not 3): about a hundred bins are checked in this file, and 4σ keeps
the chance of any false alarm under 1 % (common practice, no source).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from ctpore.measure.porosity import porosity
from ctpore.piece_frame import piece_frame
from ctpore.profiles import axial_profile, depth_profile, profiles_for_result, radial_profile
from ctpore.recipe import ProfilesSection

EXTERIOR, PORE, SOLID = 0, 1, 2
SIGMAS = 4.0
ROTATION = Rotation.from_euler("zyx", [37.0, 23.0, 61.0], degrees=True).as_matrix()


# --- analytic pieces -----------------------------------------------------------------------

class Piece:
    """An analytic piece in body coordinates (axis 0 = long axis), with porosity zones."""

    def __init__(self, kind, size, zone_p, zone_of, r_pore, seed):
        self.kind, self.size, self.zone_p, self.zone_of, self.r_pore = (
            kind, size, zone_p, zone_of, r_pore)
        half = self.half_extents() + r_pore
        rng = np.random.default_rng(seed)
        self.trees = []
        for p in zone_p:  # one independent Boolean model per zone
            lam = -math.log(1 - p) / (4 / 3 * math.pi * r_pore**3)
            n = rng.poisson(lam * np.prod(2 * half))
            self.trees.append(cKDTree(rng.uniform(-half, half, size=(n, 3))))

    def half_extents(self):
        if self.kind == "capsule":
            radius, half_len = self.size
            return np.array([half_len + radius, radius, radius])
        return np.asarray(self.size, dtype=float)  # ellipsoid semi-axes

    def depth(self, q):
        """Capsule: distance below the surface (analytic); ellipsoid: inside test only."""
        if self.kind == "capsule":
            radius, half_len = self.size
            axial = q[:, 0] - np.clip(q[:, 0], -half_len, half_len)
            return radius - np.hypot(axial, np.hypot(q[:, 1], q[:, 2]))
        return 1.0 - np.sqrt(((q / np.asarray(self.size)) ** 2).sum(axis=1))

    def sample(self, spacing, rotation=np.eye(3)):
        """Phases on a grid whose centre is the body's centre; also per-voxel expected p."""
        spacing = np.asarray(spacing, dtype=float)
        half = np.abs(rotation) @ self.half_extents() + 2 * spacing
        shape = tuple(int(v) for v in np.ceil(2 * half / spacing))
        axes = [(np.arange(n) + 0.5) * h - n * h / 2 for n, h in zip(shape, spacing)]
        grid = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)
        q = grid @ rotation  # grid = rotation @ q, columns of rotation = body axes
        inside = np.flatnonzero(self.depth(q) >= 0)
        q = q[inside]
        zone = self.zone_of(q, self)
        pore = np.zeros(len(q), dtype=bool)
        for z, tree in enumerate(self.trees):
            sel = zone == z
            dist, _ = tree.query(q[sel], distance_upper_bound=self.r_pore)
            pore[sel] = dist < self.r_pore
        phases = np.zeros(len(grid), dtype=np.uint8)
        phases[inside] = np.where(pore, PORE, SOLID)
        expected = np.full(len(grid), np.nan)
        expected[inside] = np.asarray(self.zone_p)[zone]
        return phases.reshape(shape), expected.reshape(shape)

    def lattice_sum(self, spacing):
        """S = Σ_{h∈L} Cov(h), largest over the zones (see the module docstring)."""
        r = self.r_pore
        n = [int(math.ceil(2 * r / h)) for h in spacing]
        offsets = np.meshgrid(*[np.arange(-k, k + 1) * h for k, h in zip(n, spacing)],
                              indexing="ij")
        t = np.sqrt(sum(o**2 for o in offsets)) / r
        overlap = np.where(t < 2, 1 - 0.75 * t + t**3 / 16, 0.0)
        return max(((1 - p) ** 2 * np.expm1(-math.log(1 - p) * overlap)).sum()
                   for p in self.zone_p)


def _one_zone(q, piece):
    return np.zeros(len(q), dtype=np.intp)


def _depth_zone(q, piece):  # dense skin within 100 µm of the surface, porous core deeper
    return (piece.depth(q) >= 100.0).astype(np.intp)


def _radial_zone(q, piece):  # porous core within half the radius of the long axis
    return (np.hypot(q[:, 1], q[:, 2]) >= piece.size[0] / 2).astype(np.intp)


def _axial_zone(q, piece):  # one half of the piece (body axis ≥ 0) puffed more
    return (q[:, 0] >= 0).astype(np.intp)


def _bound(table, lattice_sum):
    n = np.asarray(table["voxels"], dtype=float)
    with np.errstate(divide="ignore"):
        return SIGMAS * np.sqrt(lattice_sum / n)


def _assert_level(table, expected, lattice_sum, rows=None, what=""):
    """Bins (all non-empty, or ``rows``) read ``expected`` (scalar or per bin) within noise."""
    got = np.asarray(table["porosity_gas"])
    rows = np.flatnonzero(np.asarray(table["voxels"]) > 0) if rows is None else rows
    bound = _bound(table, lattice_sum)[rows]
    err = np.abs(got - np.broadcast_to(np.asarray(expected, dtype=float), got.shape))[rows]
    assert np.all(err <= bound), (what, rows[err > bound], got[rows][err > bound], bound)


def _assert_same(t1, t2, s1, s2, rows, what=""):
    """Two measurements of the same profile agree within the sum of their noise bounds."""
    g1, g2 = np.asarray(t1["porosity_gas"])[rows], np.asarray(t2["porosity_gas"])[rows]
    bound = _bound(t1, s1)[rows] + _bound(t2, s2)[rows]
    assert np.all(np.abs(g1 - g2) <= bound), (what, rows, g1, g2, bound)


# --- a uniform piece reads flat (Delesse principle) ------------------------------------------

@pytest.fixture(scope="module")
def uniform_piece():
    # ellipsoid with semi-axes 48, 24, 18 µm, Boolean pores r = 1.5 µm, p = 0.5
    return Piece("ellipsoid", (48.0, 24.0, 18.0), (0.5,), _one_zone, 1.5, seed=11)


def test_uniform_piece_gives_flat_profiles_isotropic_and_anisotropic(uniform_piece):
    # Delesse 1847 / Underwood 1970 (V_V = P_P): every bin's point count estimates the same
    # volume fraction p = 1 − exp(−η) (Serra 1982, from memory); noise bound [derived] above.
    results = {}
    for spacing in ((1.0, 1.0, 1.0), (2.0, 1.0, 1.0)):
        phases, _ = uniform_piece.sample(spacing)
        s = uniform_piece.lattice_sum(spacing)
        section = ProfilesSection(depth_bin_um=3.0, radial_bin_um=3.0, axial_bin_um=6.0)
        prof = profiles_for_result(phases, spacing_um=spacing, section=section)
        for name in ("depth", "radial", "axial"):
            _assert_level(prof[name], 0.5, s, what=(spacing, name))
        rz = prof["rz_map"]
        rz_flat = {k: np.ravel(rz[k]) for k in ("voxels", "porosity_gas")}
        _assert_level(rz_flat, 0.5, s, what=(spacing, "rz_map"))
        assert len(prof["depth"]["voxels"]) >= 5 and len(prof["axial"]["voxels"]) >= 15
        results[spacing] = prof, s
    # The same physical piece at (2, 1, 1) and (1, 1, 1) µm: same profiles within noise.
    (p1, s1), (p2, s2) = results.values()
    for name in ("depth", "radial", "axial"):
        n = min(len(p1[name]["voxels"]), len(p2[name]["voxels"]))
        np.testing.assert_array_equal(p1[name]["bin_start_um"][:n], p2[name]["bin_start_um"][:n])
        _assert_same(p1[name], p2[name], s1, s2, np.arange(n), what=name)


def test_profiles_partition_the_envelope(uniform_piece):
    # [derived] the bins partition the envelope, so the volume-weighted mean of any profile
    # (weights = bin volume) is the bulk porosity of ctpore.measure.porosity, to rounding.
    phases, _ = uniform_piece.sample((2.0, 1.0, 1.0))
    bulk = porosity(phases, spacing_um=(2.0, 1.0, 1.0))
    prof = profiles_for_result(phases, spacing_um=(2.0, 1.0, 1.0))
    for name in ("depth", "radial", "axial", "rz_map"):
        t = {k: np.ravel(v) for k, v in prof[name].items()}
        used = t["voxels"] > 0
        assert t["voxels"].sum() == bulk["envelope_voxels"]
        assert t["volume_mm3"].sum() == pytest.approx(bulk["envelope_volume_mm3"], rel=1e-12)
        for key in ("porosity_gas", "porosity_open", "porosity_closed"):
            mean = np.sum(t[key][used] * t["volume_mm3"][used]) / t["volume_mm3"].sum()
            assert mean == pytest.approx(bulk[key], rel=1e-12, abs=1e-15), (name, key)


# --- a piece graded by depth ----------------------------------------------------------------

@pytest.fixture(scope="module")
def graded_piece():
    # capsule, radius 200 µm, cylinder half-length 100 µm; porosity 0.2 within 100 µm of the
    # surface, 0.7 deeper; pores r = 7.5 µm (1.5 voxels at 5 µm)
    return Piece("capsule", (200.0, 100.0), (0.2, 0.7), _depth_zone, 7.5, seed=5)


@pytest.mark.parametrize("spacing", [(5.0, 5.0, 5.0), (10.0, 5.0, 5.0)])
def test_depth_graded_piece_reproduces_its_profile(graded_piece, spacing):
    phases, expected = graded_piece.sample(spacing)
    bin_um = 20.0
    table = depth_profile(phases, spacing_um=spacing, bin_um=bin_um)
    # Reference library: scipy's exact EDT (sampling = spacing) of the envelope padded with
    # exterior, depth = distance − half the finest voxel, binned by ndimage.sum / mean: the
    # same bins, voxel for voxel, and the same porosities.
    inside = np.pad(phases > 0, 1)
    dist = ndimage.distance_transform_edt(inside, sampling=spacing)[1:-1, 1:-1, 1:-1]
    labels = np.where(phases > 0, np.floor((dist - min(spacing) / 2) / bin_um) + 1, 0)
    index = np.arange(1, len(table["voxels"]) + 1)
    np.testing.assert_array_equal(table["voxels"], ndimage.sum(phases > 0, labels, index))
    np.testing.assert_allclose(table["porosity_gas"], ndimage.mean(phases == PORE, labels, index),
                               rtol=1e-12)
    # The known profile: the expectation of each bin is the mean zone porosity of its voxels
    # (Delesse principle per bin); bins clear of the 100 µm step read exactly 0.2 or 0.7.
    s = graded_piece.lattice_sum(spacing)
    known = ndimage.mean(np.nan_to_num(expected), labels, index)
    _assert_level(table, known, s, rows=np.arange(len(index)), what="graded")
    start, end = table["bin_start_um"], table["bin_end_um"]
    np.testing.assert_allclose(known[end <= 100 - 2 * max(spacing)], 0.2, rtol=1e-9)
    np.testing.assert_allclose(known[start >= 100 + 2 * max(spacing)], 0.7, rtol=1e-9)
    assert (end <= 80).sum() == 4 and (start >= 120).sum() >= 3
    # across the step the profile really rises (0.2 → 0.7, far beyond the noise)
    assert table["porosity_gas"][start >= 120].min() > table["porosity_gas"][end <= 80].max()


# --- rotation: the piece's own frame ----------------------------------------------------------

@pytest.fixture(scope="module")
def radial_piece():
    # capsule, radius 60 µm, cylinder half-length 60 µm; porosity 0.65 within 30 µm of the
    # axis, 0.25 outside; pores r = 3 µm (1.5 voxels at 2 µm)
    return Piece("capsule", (60.0, 60.0), (0.65, 0.25), _radial_zone, 3.0, seed=7)


@pytest.fixture(scope="module")
def axial_piece():
    # the same capsule; porosity 0.25 on one half (body axis < 0), 0.6 on the other
    return Piece("capsule", (60.0, 60.0), (0.25, 0.6), _axial_zone, 3.0, seed=8)


def _angle_deg(u, v):
    return math.degrees(math.acos(min(1.0, abs(float(np.dot(u, v))))))


def test_rotated_piece_radial_profile_in_its_own_frame(radial_piece):
    spacing = (2.0, 2.0, 2.0)
    s = radial_piece.lattice_sum(spacing)
    tables = []
    for rotation in (np.eye(3), ROTATION):
        phases, _ = radial_piece.sample(spacing, rotation)
        frame = piece_frame(phases, spacing_um=spacing)
        # the long axis found from the second moments matches the known rotation within 2°
        # (principal axes: Pearson 1901, Phil. Mag. 2:559, from memory; the capsule is twice
        # as long as it is wide)
        assert _angle_deg(frame.axes[0], rotation[:, 0]) < 2.0
        tables.append(radial_profile(phases, spacing_um=spacing, frame=frame, bin_um=6.0))
    aligned, rotated = tables
    n = min(len(aligned["voxels"]), len(rotated["voxels"]))
    assert n == 10  # 60 µm radius in 6 µm bins
    # Known profile: 0.65 in the core, 0.25 in the skin (Delesse principle per bin); the two
    # bins touching the step at 30 µm are left out (the voxel grid blurs it by ~1 voxel).
    core, skin = np.arange(0, 4), np.arange(6, n)
    for t in tables:
        _assert_level(t, 0.65, s, rows=core, what="core")
        _assert_level(t, 0.25, s, rows=skin, what="skin")
    _assert_same(aligned, rotated, s, s, np.arange(n), what="aligned vs rotated")


def test_rotated_piece_axial_profile_in_its_own_frame(axial_piece):
    spacing = (2.0, 2.0, 2.0)
    s = axial_piece.lattice_sum(spacing)
    half_length = 120.0  # tip to centre: cylinder half-length + radius
    for rotation in (np.eye(3), ROTATION):
        phases, _ = axial_piece.sample(spacing, rotation)
        frame = piece_frame(phases, spacing_um=spacing)
        assert _angle_deg(frame.axes[0], rotation[:, 0]) < 2.0
        # the frame's sign rule: the long axis has its largest component positive
        assert frame.axes[0][np.argmax(np.abs(frame.axes[0]))] > 0
        table = axial_profile(phases, spacing_um=spacing, frame=frame, bin_um=12.0)
        assert abs(frame.length_um - 2 * half_length) <= 2 * max(spacing)
        # which half comes first depends on the direction of the long axis: the half at body
        # axis < 0 (porosity 0.25) comes first when the frame's axis points along the body's
        first, second = (0.25, 0.6) if frame.axes[0] @ rotation[:, 0] > 0 else (0.6, 0.25)
        start, end = table["bin_start_um"], table["bin_end_um"]
        near = 3 * max(spacing)  # tip found to about a voxel; bins touching the step skipped
        _assert_level(table, first, s, rows=np.flatnonzero(end <= half_length - near))
        _assert_level(table, second, s, rows=np.flatnonzero(start >= half_length + near))
        assert np.sum(end <= half_length - near) == 9
        np.testing.assert_allclose(table["position_normalised"],
                                   table["bin_centre_um"] / frame.length_um)
