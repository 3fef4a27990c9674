"""Benchmark: ctpore.profiles.profiles_for_result against a naive scipy / full-grid peer.

Run by hand (not a test):  python bench/profiles.py [--sizes 256,512] [--repeats 3]

Both sides compute the same four profiles (depth, radial, axial, r–z map) with open and closed
porosity, from the same phases and the same open-pore labelling:

- ctpore: one exact EDT (edt, float32) for depth; frame moments from 2-D projections; one pass
  over the slices with ``np.bincount`` for radial, axial and r–z.
- naive peer: ``scipy.ndimage.distance_transform_edt`` (float64) for depth; the frame from the
  coordinates of every envelope voxel (``np.nonzero``); full-size float64 axial and radial
  coordinate grids; each profile by ``scipy.ndimage.sum`` over bin labels.

Prints the median wall time of each (``--repeats`` runs), the ratio, and the largest porosity
difference between the two with the number of voxels binned differently (0, or rounding at
exact bin edges: a check that the peer computes the same thing).
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
from scipy import ndimage


def _phases(n, seed=0):
    """A tilted ellipsoid (semi-axes 0.47n, 0.33n, 0.3n; about a fifth of the image) holding
    blob pores, porosity about 0.5."""
    from scipy.spatial.transform import Rotation

    rng = np.random.default_rng(seed)
    rot = Rotation.from_euler("zyx", [20.0, 10.0, 5.0], degrees=True).as_matrix()
    semi = np.array([0.47, 0.33, 0.3]) * n
    inside = np.zeros((n, n, n), dtype=bool)
    y, x = np.mgrid[:n, :n] - n / 2 + 0.5
    for z in range(n):  # slab by slab, so no full-size float grids here either
        p = np.stack([np.full_like(y, z - n / 2 + 0.5), y, x], axis=-1) @ rot
        inside[z] = ((p / semi) ** 2).sum(axis=-1) <= 1
    noise = ndimage.gaussian_filter(rng.random((n, n, n), dtype=np.float32), 2.0)
    level = np.quantile(noise[::7, ::7, ::7], 0.5)
    phases = np.where(inside, np.where(noise > level, 1, 2), 0).astype(np.uint8)
    del noise
    return phases


def _median_time(fn, repeats):
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def _naive(phases, spacing, bin_um):
    """Same profiles the plain way (scipy EDT, full coordinate grids, ndimage.sum by label)."""
    from ctpore.measure.porosity import open_pore_mask

    env = phases > 0
    pore = (phases == 1).astype(np.float64)
    opened = open_pore_mask(phases).astype(np.float64)

    def by_label(labels, n):
        index = np.arange(1, n + 1)
        vox = ndimage.sum(env, labels, index)
        with np.errstate(invalid="ignore", divide="ignore"):
            return {"voxels": vox, "porosity_gas": ndimage.sum(pore, labels, index) / vox,
                    "porosity_open": ndimage.sum(opened, labels, index) / vox}

    out = {}
    dist = ndimage.distance_transform_edt(np.pad(env, 1), sampling=spacing)[1:-1, 1:-1, 1:-1]
    depth = dist - min(spacing) / 2
    del dist
    labels = np.where(env, np.floor(depth / bin_um).astype(np.int64) + 1, 0)
    out["depth"] = by_label(labels, int(labels.max()))
    del depth
    pts = (np.array(np.nonzero(env), dtype=np.float64).T + 0.5) * np.asarray(spacing)
    centroid = pts.mean(axis=0)
    cov = np.cov(pts, rowvar=False, bias=True) + np.diag(np.square(spacing)) / 12
    del pts
    w, v = np.linalg.eigh(cov)
    axes = v[:, ::-1].T
    for k in (0, 1):
        if axes[k][np.argmax(np.abs(axes[k]))] < 0:
            axes[k] = -axes[k]
    axes[2] = np.cross(axes[0], axes[1])
    grids = [(np.arange(s) + 0.5) * h - c for s, h, c in zip(phases.shape, spacing, centroid)]
    z, y, x = np.meshgrid(*grids, indexing="ij", sparse=True)
    a = z * axes[0, 0] + y * axes[0, 1] + x * axes[0, 2]  # full-size float64
    m = z * axes[1, 0] + y * axes[1, 1] + x * axes[1, 2]
    s = z * axes[2, 0] + y * axes[2, 1] + x * axes[2, 2]
    r = np.hypot(m, s)
    del m, s
    a0 = a[env].min()
    ia = np.floor((a - a0) / bin_um).astype(np.int64)
    ir = np.floor(r / bin_um).astype(np.int64)
    del a, r
    n_a, n_r = int(ia[env].max()) + 1, int(ir[env].max()) + 1
    out["axial"] = by_label(np.where(env, ia + 1, 0), n_a)
    out["radial"] = by_label(np.where(env, ir + 1, 0), n_r)
    out["rz_map"] = by_label(np.where(env, ia * n_r + ir + 1, 0), n_a * n_r)
    return out


def _differences(ours, peer):
    """Largest porosity difference, and voxels counted in a different bin (rounding ties)."""
    worst, moved = 0.0, 0
    for name in ("depth", "radial", "axial", "rz_map"):
        t = ours[name]
        for key in ("voxels", "porosity_gas", "porosity_open"):
            mine = np.ravel(np.asarray(t[key], dtype=float))
            theirs = np.ravel(peer[name][key])
            n = min(len(mine), len(theirs))
            if np.any(np.nan_to_num(mine[n:])) or np.any(np.nan_to_num(theirs[n:])):
                return float("inf"), -1
            d = np.abs(np.nan_to_num(mine[:n]) - np.nan_to_num(theirs[:n]))
            if key == "voxels":
                moved += int(d.sum())
            else:
                worst = max(worst, float(d.max()))
    return worst, moved


def main():
    from ctpore.profiles import profiles_for_result
    from ctpore.recipe import ProfilesSection

    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--sizes", default="256,512")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    spacing = (1.0, 1.0, 1.0)
    bin_um = 2.0 * max(spacing)
    section = ProfilesSection(depth_bin_um=bin_um, radial_bin_um=bin_um, axial_bin_um=bin_um)
    print(f"profiles_for_result vs naive peer, median of {args.repeats} runs "
          f"(2 shared cores: figures are noisy)")
    print(f"{'size':>6}{'ctpore (s)':>12}{'naive (s)':>11}{'ratio':>8}{'max |Δφ|':>10}"
          f"{'moved':>7}")
    for n in (int(v) for v in args.sizes.split(",")):
        phases = _phases(n)
        t_ours, ours = _median_time(
            lambda: profiles_for_result(phases, spacing_um=spacing, section=section),
            args.repeats)
        t_peer, peer = _median_time(lambda: _naive(phases, spacing, bin_um), args.repeats)
        worst, moved = _differences(ours, peer)
        print(f"{n:>5}³{t_ours:>12.2f}{t_peer:>11.2f}{t_peer / t_ours:>8.1f}{worst:>10.2g}"
              f"{moved:>7}", flush=True)


if __name__ == "__main__":
    main()
