"""A synthetic puffed piece for the chunked-versus-in-memory tests (made here, no data files)."""

from __future__ import annotations

import numpy as np

SPACING = (2.0, 1.5, 1.5)


def porous_piece(shape=(192, 192, 192), spacing=SPACING, seed=0, noise=120.0, cells=1200):
    """uint16 grey stack of an ellipsoidal solid body with spherical cells.

    ``cells`` cells of radius 5-13 µm are scattered through the body; isolated ones are
    closed, those crossing the surface or joined to it through others are open. A few crumbs
    float outside the body and a few one-voxel pores sit in the solid, so the cleaning steps
    have something to do. Gas about 1000, solid about 3000, with
    Gaussian noise.
    """
    rng = np.random.default_rng(seed)
    dz, dy, dx = spacing
    nz, ny, nx = shape
    z = (np.arange(nz) * dz)[:, None, None]
    y = (np.arange(ny) * dy)[None, :, None]
    x = (np.arange(nx) * dx)[None, None, :]
    cz, cy, cx = nz * dz / 2, ny * dy / 2, nx * dx / 2
    az, ay, ax = 0.40 * nz * dz, 0.38 * ny * dy, 0.36 * nx * dx
    body = ((z - cz) / az) ** 2 + ((y - cy) / ay) ** 2 + ((x - cx) / ax) ** 2 <= 1.0
    solid = body.copy()
    for _ in range(cells):
        r = rng.uniform(5.0, 13.0)
        u = rng.normal(size=3)
        u /= np.linalg.norm(u)
        t = rng.uniform(0, 1.05) ** (1 / 3)
        c = (cz + u[0] * az * t, cy + u[1] * ay * t, cx + u[2] * ax * t)
        lo = [max(0, int((ci - r) / s) - 1) for ci, s in zip(c, spacing)]
        hi = [min(n, int((ci + r) / s) + 2) for ci, s, n in zip(c, spacing, shape)]
        sl = tuple(slice(a, b) for a, b in zip(lo, hi))
        ball = ((z[sl[0]] - c[0]) ** 2 + (y[:, sl[1]] - c[1]) ** 2
                + (x[:, :, sl[2]] - c[2]) ** 2) <= r * r
        solid[sl] &= ~ball
    # crumbs outside the body and single-voxel pores inside the solid
    for _ in range(6):
        p = [rng.integers(2, n - 4) for n in shape]
        if not body[tuple(p)]:
            solid[p[0]:p[0] + 2, p[1]:p[1] + 2, p[2]:p[2] + 2] = True
    idx = np.flatnonzero(solid.ravel())
    pick = rng.choice(idx, size=min(40, idx.size), replace=False)
    solid.ravel()[pick] = False
    grey = np.where(solid, 3000.0, 1000.0) + rng.normal(0.0, noise, size=shape)
    return np.clip(grey, 0, 65535).astype(np.uint16)


#: Small, uneven chunks: 192 = 80 + 80 + 32 along z, 72 + 72 + 48 along y, 3 × 64 along x.
CHUNKS = (80, 72, 64)


def recipe_dict():
    """A recipe exercising every chunked step (median, three cleaning steps, closing)."""
    return {"denoise": {"method": "median", "radius_um": 2.0},
            "envelope": {"radius_um": 20.0},
            "clean": {"min_solid_speck_um3": 200.0, "min_pore_speck_um3": 30.0,
                      "keep_largest_solid": True}}


def put(ws, name, array):
    """Store a numpy array in the workspace; returns its path."""
    path = ws.create(name, array.dtype)
    ws.array(name, "r+")[...] = np.asarray(array)
    return path
