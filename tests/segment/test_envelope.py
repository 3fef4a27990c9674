"""Tests for ctpore.segment.envelope (and the phase image built from it)."""

import math

import numpy as np
import pytest
from numpy.testing import assert_array_equal
from scipy import ndimage as ndi
from skimage.morphology import closing, convex_hull_image

from ctpore.errors import InputError
from ctpore.recipe import EnvelopeSection
from ctpore.segment.envelope import envelope
from ctpore.segment.phases import EXTERIOR, PORE, SOLID, make_phases

METHODS = ("closing", "rolling_sphere", "slice_hull")


def _footprint(radius_um, spacing):
    """Ellipsoid of physical radius r on the grid: offsets with distance <= r (closed ball)."""
    half = [int(math.floor(radius_um / s)) for s in spacing]
    grids = np.ogrid[tuple(slice(-h, h + 1) for h in half)]
    d2 = sum((g * s) ** 2 for g, s in zip(grids, spacing))
    return d2 <= radius_um**2


def _shell(shape, spacing, centre_um, r_out, r_in, mouth=0.0):
    """Hollow ball (outer r_out, inner r_in, µm) with an optional round hole of radius
    ``mouth`` through the wall along +x: a body with a C-shaped cross-section."""
    idx = np.ogrid[tuple(slice(0, n) for n in shape)]
    z, y, x = [(i + 0.5) * s - c for i, s, c in zip(idx, spacing, centre_um)]
    d2 = z**2 + y**2 + x**2
    body = (d2 <= r_out**2) & (d2 > r_in**2)
    if mouth > 0:
        body &= ~((z**2 + y**2 < mouth**2) & (x > 0))
    return body


def _ball(shape, spacing, centre_um, r):
    return _shell(shape, spacing, centre_um, r, -1.0)


def _blobs(shape, seed, level=0.55):
    """A random porous body: smoothed noise above a level."""
    rng = np.random.default_rng(seed)
    field = ndi.gaussian_filter(rng.random(shape), 1.5)
    return field > np.quantile(field, level)


def test_closing_equals_skimage_binary_closing_on_anisotropic_grid():
    # Reference library: skimage.morphology.closing with an ellipsoidal footprint of the same
    # physical radius (closed ball, <= r; ties occur at 4 µm = 2 voxels in z), gas outside the
    # image, followed by scipy.ndimage.binary_fill_holes. Padded generously as well.
    spacing = (2.0, 1.0, 1.0)
    r = 4.0
    solid = _blobs((16, 32, 32), seed=1)
    fp = _footprint(r, spacing)
    pad = [2 * (n // 2) + 2 for n in fp.shape]
    padded = np.pad(solid, [(p, p) for p in pad])
    ref = ndi.binary_fill_holes(closing(padded, fp, mode="constant", cval=0).astype(bool))
    ref = ref[tuple(slice(p, p + n) for p, n in zip(pad, solid.shape))]
    out = envelope(solid, spacing_um=spacing,
                   section=EnvelopeSection(method="closing", radius_um=r))
    assert_array_equal(out, ref)
    assert out.sum() > solid.sum()


def test_rolling_sphere_equals_footprint_morphology():
    # Reference library: scipy.ndimage binary dilation with the same ellipsoid footprint.
    # Ball centres = voxels not reached by the dilated solid and connected to the outside;
    # exterior = their dilation [derived from the definition of a rolled ball].
    spacing = (2.0, 1.0, 1.0)
    r = 5.0
    solid = _blobs((16, 32, 32), seed=2)
    fp = _footprint(r, spacing)
    pad = [n // 2 + 1 for n in fp.shape]
    padded = np.pad(solid, [(p, p) for p in pad])
    free = ~ndi.binary_dilation(padded, fp)
    labels, _ = ndi.label(free)
    border = np.unique(np.concatenate([labels[0].ravel(), labels[-1].ravel(),
                                       labels[:, 0].ravel(), labels[:, -1].ravel(),
                                       labels[:, :, 0].ravel(), labels[:, :, -1].ravel()]))
    centres = np.isin(labels, border[border > 0])
    ref = ~ndi.binary_dilation(centres, fp)
    ref = ref[tuple(slice(p, p + n) for p, n in zip(pad, solid.shape))]
    out = envelope(solid, spacing_um=spacing,
                   section=EnvelopeSection(method="rolling_sphere", radius_um=r))
    assert_array_equal(out, ref)
    assert out.sum() > solid.sum()


@pytest.mark.parametrize("method", METHODS)
def test_envelope_contains_all_solid(method):
    solid = _blobs((20, 28, 24), seed=3, level=0.6)
    out = envelope(solid, spacing_um=(1.5, 1.0, 1.0),
                   section=EnvelopeSection(method=method, radius_um=3.0))
    assert out.shape == solid.shape and out.dtype == bool
    assert not (solid & ~out).any()


@pytest.mark.parametrize("method", METHODS)
def test_hollow_sphere_envelope_is_the_full_ball(method):
    # The envelope of a closed hollow ball is the ball: the cavity is pore, not exterior.
    shape, spacing, c = (48, 48, 48), (1.0, 1.0, 1.0), (24.0, 24.0, 24.0)
    solid = _shell(shape, spacing, c, 20.0, 12.0)
    ball = _ball(shape, spacing, c, 20.0)
    out = envelope(solid, spacing_um=spacing,
                   section=EnvelopeSection(method=method, radius_um=6.0))
    assert out[ball & ~solid].all()
    if method == "slice_hull":
        # Each slice of the shell has the outline of the ball's slice, so the same hull
        # (skimage.morphology.convex_hull_image on the filled slice).
        ref = np.array([convex_hull_image(sl) if sl.any() else sl for sl in ball])
        assert_array_equal(out, ref)
    else:
        # Closing a digital ball adds at most a few surface voxels.
        assert np.count_nonzero(out ^ ball) <= 0.002 * ball.sum()


@pytest.mark.parametrize("method", ["closing", "rolling_sphere"])
def test_mouth_narrower_than_the_ball_is_bridged(method):
    # Shell 28/18 µm with a hole of radius 4 µm through the wall; a ball of radius 8 µm cannot
    # pass, so the cavity is inside the envelope and the envelope is the full ball.
    shape, spacing, c = (64, 64, 64), (1.0, 1.0, 1.0), (32.0, 32.0, 32.0)
    solid = _shell(shape, spacing, c, 28.0, 18.0, mouth=4.0)
    cavity = _ball(shape, spacing, c, 18.0)
    ball = _ball(shape, spacing, c, 28.0)
    out = envelope(solid, spacing_um=spacing,
                   section=EnvelopeSection(method=method, radius_um=8.0))
    assert out[cavity].all()
    assert np.count_nonzero(out ^ ball) <= 0.01 * ball.sum()


@pytest.mark.parametrize("method", ["closing", "rolling_sphere"])
def test_mouth_wider_than_the_ball_stays_open(method):
    # Hole of radius 14 µm: the 8 µm ball enters, so most of the cavity is exterior.
    shape, spacing, c = (64, 64, 64), (1.0, 1.0, 1.0), (32.0, 32.0, 32.0)
    solid = _shell(shape, spacing, c, 28.0, 18.0, mouth=14.0)
    cavity = _ball(shape, spacing, c, 18.0)
    ball = _ball(shape, spacing, c, 28.0)
    out = envelope(solid, spacing_um=spacing,
                   section=EnvelopeSection(method=method, radius_um=8.0))
    assert not out[32, 32, 32]
    assert out.sum() < ball.sum() - 0.5 * cavity.sum()
    assert not (solid & ~out).any()


def test_slice_hull_of_a_ring_is_a_disc():
    # The convex hull of a ring equals the hull of the filled disc (same extreme points)
    # [derived]; checked with skimage.morphology.convex_hull_image on the disc itself.
    shape, spacing = (16, 32, 32), (2.0, 1.0, 1.0)
    idx = np.ogrid[:32, :32]
    d2 = (idx[0] - 15.5) ** 2 + (idx[1] - 15.5) ** 2
    disc = d2 <= 12.0**2
    ring = disc & (d2 > 8.0**2)
    solid = np.zeros(shape, dtype=bool)
    solid[4:12] = ring
    out = envelope(solid, spacing_um=spacing, section=EnvelopeSection(method="slice_hull"))
    hull = convex_hull_image(disc)
    for k in range(shape[0]):
        if 4 <= k < 12:
            assert_array_equal(out[k], hull)
        else:
            assert not out[k].any()  # empty slices stay empty
    assert disc.sum() <= hull.sum() <= 1.03 * math.pi * 12.0**2
    # Along another axis: the same tube lying along x, hulls taken across x.
    lying = np.ascontiguousarray(np.moveaxis(solid, 0, 2))
    out_x = envelope(lying, spacing_um=(1.0, 1.0, 2.0),
                     section=EnvelopeSection(method="slice_hull", hull_axis="x"))
    assert_array_equal(out_x, np.moveaxis(out, 0, 2))


@pytest.mark.parametrize("method", METHODS)
def test_anisotropic_voxels_give_the_same_physical_volume(method):
    # One physical body (shell 28/18 µm, mouth 4 µm) voxelised at (1, 1, 1) µm and at
    # (2, 1, 1) µm: envelope volumes agree within voxelisation error (2 %), and both are near
    # the ball volume 4/3 pi 28³ = 91 952 µm³ [derived].
    vols = []
    for spacing, shape in (((1.0, 1.0, 1.0), (64, 64, 64)), ((2.0, 1.0, 1.0), (32, 64, 64))):
        solid = _shell(shape, spacing, (32.0, 32.0, 32.0), 28.0, 18.0, mouth=4.0)
        out = envelope(solid, spacing_um=spacing,
                       section=EnvelopeSection(method=method, radius_um=8.0))
        vols.append(out.sum() * math.prod(spacing))
    assert vols[1] == pytest.approx(vols[0], rel=0.02)
    assert vols[0] == pytest.approx(4 / 3 * math.pi * 28.0**3, rel=0.03)


def test_body_touching_the_border_is_not_clipped():
    # A half ball cut by the volume's face: closing must not invent solid at the face nor
    # remove any; the padding keeps the outside of the face as gas.
    shape, spacing = (20, 40, 40), (1.0, 1.0, 1.0)
    solid = _ball(shape, spacing, (0.0, 20.0, 20.0), 16.0)
    for method in ("closing", "rolling_sphere"):
        out = envelope(solid, spacing_um=spacing,
                       section=EnvelopeSection(method=method, radius_um=6.0))
        assert not (solid & ~out).any()
        assert np.count_nonzero(out ^ solid) <= 0.01 * solid.sum()


def test_empty_and_bad_input():
    empty = np.zeros((8, 8, 8), dtype=bool)
    for method in METHODS:
        out = envelope(empty, spacing_um=1.0, section=EnvelopeSection(method=method))
        assert out.shape == empty.shape and not out.any()
    with pytest.raises(InputError, match="3-D"):
        envelope(empty[0], spacing_um=1.0, section=EnvelopeSection())
    with pytest.raises(InputError, match="radius_um"):
        envelope(empty, spacing_um=1.0, section=EnvelopeSection(radius_um=0.0))
    with pytest.raises(InputError, match="spacing"):
        envelope(empty, spacing_um=(1.0, 1.0), section=EnvelopeSection())


def test_make_phases():
    shape, spacing, c = (48, 48, 48), (1.0, 1.0, 1.0), (24.0, 24.0, 24.0)
    solid = _shell(shape, spacing, c, 20.0, 12.0)
    env = envelope(solid, spacing_um=spacing, section=EnvelopeSection(radius_um=6.0))
    phases = make_phases(solid, env)
    assert (EXTERIOR, PORE, SOLID) == (0, 1, 2)
    assert phases.dtype == np.uint8 and phases.shape == shape
    assert_array_equal(phases == SOLID, solid)
    assert_array_equal(phases == PORE, env & ~solid)
    assert_array_equal(phases == EXTERIOR, ~env)
    cavity = _ball(shape, spacing, c, 12.0)
    assert (phases[cavity] == PORE).all()
    assert (phases == PORE).sum() - cavity.sum() <= 0.002 * env.sum()  # surface voxels
    with pytest.raises(ValueError, match="shape"):
        make_phases(solid, env[:-1])
    with pytest.raises(ValueError, match="outside the envelope"):
        make_phases(solid, np.zeros(shape, dtype=bool))
