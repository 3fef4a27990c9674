"""Benchmark: coarse porosity fields (separable filters / FFT) against direct 3-D convolution.

Run by hand (not a test):  python bench/coarsen.py [--sizes 128,256,512] [--repeats 3]

For each kernel (box, Gaussian, ball) this prints the median wall time of
``ctpore.continuum.coarse.coarsen`` at each size and, at the smallest size only, of a naive
peer measured in the same run: the same normalised average computed with
``scipy.ndimage.convolve`` and the explicit 3-D weights (numerator and denominator), whose cost
grows with the kernel's volume. The largest difference between the two fields is printed too.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
from scipy import ndimage


def _phases(n, seed=0):
    """Labels of an ellipsoidal piece with random pores (0 exterior, 1 pore, 2 solid)."""
    rng = np.random.default_rng(seed)
    z, y, x = np.ogrid[:n, :n, :n]
    c = (n - 1) / 2
    body = (((z - c) / (0.45 * n)) ** 2 + ((y - c) / (0.35 * n)) ** 2
            + ((x - c) / (0.35 * n)) ** 2) <= 1
    noise = ndimage.gaussian_filter(rng.random((n, n, n), dtype=np.float32), 2)
    pore = noise > np.quantile(noise[::4, ::4, ::4], 0.4)
    return np.where(body, np.where(pore, 1, 2), 0).astype(np.uint8)


def _median_time(fn, repeats):
    times, out = [], None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def _naive(phases, kernel, spacing):
    from ctpore.continuum.kernels import kernel_weights

    w = kernel_weights(kernel, spacing_um=spacing).astype(np.float32)
    num = ndimage.convolve((phases == 1).astype(np.float32), w, mode="constant", cval=0.0)
    den = ndimage.convolve((phases > 0).astype(np.float32), w, mode="constant", cval=0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den >= 0.5, num / den, np.nan)


def main():
    from ctpore.continuum.coarse import coarsen
    from ctpore.continuum.kernels import Kernel

    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--sizes", default="128,256,512")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    sizes = [int(v) for v in args.sizes.split(",")]
    spacing = (10.0, 10.0, 10.0)
    kernels = [Kernel("box", 90.0), Kernel("gaussian", 30.0), Kernel("ball", 120.0)]
    print(f"coarsen, median of {args.repeats} runs; voxel 10 µm; naive peer at {sizes[0]}^3 "
          "only (2 shared cores: figures are noisy)")
    print(f"{'kernel':<36}{'size':>6}{'ctpore (s)':>12}{'naive (s)':>11}{'ratio':>8}"
          f"{'max |diff|':>12}")
    for n in sizes:
        phases = _phases(n)
        for kernel in kernels:
            t_ours, ours = _median_time(
                lambda: coarsen(phases, spacing_um=spacing, kernel=kernel), args.repeats)
            if n == sizes[0]:
                t_ref, ref = _median_time(lambda: _naive(phases, kernel, spacing),
                                          max(1, args.repeats))
                diff = float(np.nanmax(np.abs(ours.porosity - ref)))
                print(f"{kernel.name:<36}{n:>6}{t_ours:>12.3f}{t_ref:>11.2f}"
                      f"{t_ref / t_ours:>8.1f}{diff:>12.2e}")
            else:
                print(f"{kernel.name:<36}{n:>6}{t_ours:>12.3f}{'':>11}{'':>8}{'':>12}")
            del ours


if __name__ == "__main__":
    main()
