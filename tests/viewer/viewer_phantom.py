"""The viewer tests' phantom: a solid ball with spherical pores, on anisotropic voxels."""

from __future__ import annotations

import numpy as np

#: Anisotropic voxels (dz, dy, dx) in µm, so every scale check sees three different axes' sizes.
SPACING_UM = (3.0, 2.0, 2.0)
SHAPE = (32, 48, 48)
BALL_RADIUS_UM = 38.0
# Spherical pores (offset z, y, x from the piece centre, radius), all in µm, inside the ball.
PORES_UM = ((0, 0, 0, 14), (-14, 14, 8, 8), (14, -10, -14, 9), (10, 16, 14, 7),
            (-12, -16, -8, 8))
GAS_GREY, SOLID_GREY, NOISE = 50.0, 200.0, 8.0
COARSE_GRID = {"origin_um": (1.5, 3.0, 4.0), "spacing_um": (6.0, 6.0, 6.0)}


def make_phantom(shape=SHAPE, spacing_um=SPACING_UM, seed=1):
    """A ball of solid with spherical pores, grey values with Gaussian noise, and the truth."""
    axes = [np.arange(n) * d for n, d in zip(shape, spacing_um)]
    z, y, x = np.meshgrid(*axes, indexing="ij")
    centre = [(n - 1) * d / 2 for n, d in zip(shape, spacing_um)]
    dz, dy, dx = z - centre[0], y - centre[1], x - centre[2]
    piece = dz**2 + dy**2 + dx**2 <= BALL_RADIUS_UM**2
    pores = np.zeros(shape, bool)
    for oz, oy, ox, r in PORES_UM:
        pores |= (dz - oz) ** 2 + (dy - oy) ** 2 + (dx - ox) ** 2 <= r**2
    truth = np.where(piece, np.where(pores, 1, 2), 0).astype(np.uint8)
    rng = np.random.default_rng(seed)
    grey = np.where(truth == 2, SOLID_GREY, GAS_GREY) + rng.normal(0.0, NOISE, shape)
    return np.clip(np.rint(grey), 0, 255).astype(np.uint8), truth


def write_jittered_difference(src_csv, folder, *, seed=3, jitter_um=2.0):
    """Copy a compare difference.csv into ``folder`` with its points moved off their grid.

    Returns the rows of the source table (dicts of strings).
    """
    import csv

    with open(src_csv, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    with open(folder / "difference.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        for r in rows:
            moved = dict(r)
            for c in ("z_um", "y_um", "x_um"):
                moved[c] = float(r[c]) + rng.uniform(-jitter_um, jitter_um)
            w.writerow(moved)
    return rows
