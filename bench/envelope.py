"""Benchmark: EDT-based envelope closing against scikit-image's footprint closing.

Run by hand (not a test):  python bench/envelope.py [--size 192] [--radii 4,8,16] [--repeats 3]

Both compute the same closing (checked voxel for voxel in tests/segment/test_envelope.py); this
prints the median wall time of each and the ratio, measured in the same run on the same
machine. The footprint method's cost grows with the ball's volume (r³); the EDT method's does
not.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
from scipy import ndimage


def _body(n, seed=0):
    rng = np.random.default_rng(seed)
    z, y, x = np.mgrid[:n, :n, :n] - n / 2
    body = (z / (0.42 * n)) ** 2 + (y / (0.3 * n)) ** 2 + (x / (0.3 * n)) ** 2 <= 1
    noise = ndimage.gaussian_filter(rng.random((n, n, n)), 3)
    return body & (noise > np.quantile(noise, 0.6))  # a porous solid


def _median_time(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main():
    from skimage.morphology import ball, closing

    from ctpore.recipe import EnvelopeSection
    from ctpore.segment.envelope import envelope

    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--size", type=int, default=192)
    ap.add_argument("--radii", default="4,8,16")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    solid = _body(args.size)
    print(f"envelope closing on {args.size}^3, median of {args.repeats} runs "
          f"(2 shared cores: figures are noisy)")
    print(f"{'radius (vox)':>12}{'ctpore EDT (s)':>16}{'skimage (s)':>13}{'ratio':>8}{'equal':>7}")
    for r in (int(v) for v in args.radii.split(",")):
        section = EnvelopeSection(method="closing", radius_um=float(r))
        t_ours, ours = _median_time(lambda: envelope(solid, spacing_um=1.0, section=section),
                                    args.repeats)

        def reference():
            pad = np.pad(solid, r + 1)
            closed = closing(pad, ball(r))[r + 1:-r - 1, r + 1:-r - 1, r + 1:-r - 1]
            return ndimage.binary_fill_holes(closed)

        t_ref, ref = _median_time(reference, max(1, args.repeats if r <= 8 else 1))
        print(f"{r:>12}{t_ours:>16.2f}{t_ref:>13.2f}{t_ref / t_ours:>8.1f}"
              f"{str(bool(np.array_equal(ours, ref))):>7}")


if __name__ == "__main__":
    main()
