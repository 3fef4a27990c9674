"""A ringed cylindrical phantom shared by the ring-reduction and uncertainty tests."""

import edt
import numpy as np
from scipy import ndimage as ndi

GAS, SOLID = 0.2, 0.8


def ringed_cylinder(seed=4, nz=32, ny=96, nx=96, skin=3):
    """Cylindrical piece (radius 40 pixels, axis z, centred on the rotation axis) with a
    3-voxel skin and overlapping spherical pores (radius 4) inside; blur SD 1, noise SD 0.05 on
    a contrast of 0.6; then 8 rings of width ~1 pixel and amplitude 0.1-0.2 about the slice
    centre, the same in every slice (one faulty detector column per ring).

    Returns (solid, envelope, clean grey, ringed grey)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:ny, :nx]
    r = np.hypot(yy - (ny - 1) / 2, xx - (nx - 1) / 2)
    env = np.zeros((nz, ny, nx), bool)
    env[3:nz - 3] = (r <= 40)[None]
    inner = np.zeros_like(env)
    inner[3 + skin:nz - 3 - skin] = (r <= 40 - skin)[None]
    mark = np.zeros(env.shape, bool)
    mark[tuple(rng.integers(0, [nz, ny, nx], (900, 3)).T)] = True
    solid = env & ~((edt.edt(~mark) <= 4.0) & inner)
    clean = GAS + (SOLID - GAS) * ndi.gaussian_filter(solid.astype(np.float64), 1.0)
    clean += rng.normal(0, 0.05, clean.shape)
    rings = np.zeros((ny, nx))
    for radius, amp in zip(rng.uniform(12, 38, 8),
                           rng.uniform(0.1, 0.2, 8) * rng.choice([-1, 1], 8)):
        rings += amp * np.exp(-0.5 * ((r - radius) / 0.6) ** 2)
    return solid, env, clean, clean + rings[None]
