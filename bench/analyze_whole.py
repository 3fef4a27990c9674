"""Benchmark: the whole ``ctpore analyze`` (segmentation, porosity, every structure measure,
profiles) on a generated 16-bit stack of one porous piece.

Run by hand (not a test):  python bench/analyze_whole.py [--size 512] [--keep]

Prints the wall time of each step (from provenance.json), the total, and the peak resident
memory of the analysing process (it runs in a child process so the figure is its own).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage


def make_stack(n: int, seed: int = 0) -> np.ndarray:
    """A prolate porous piece (pores ~70 % of the body, cell scale ~n/40) on a gas background,
    blurred by one voxel and noisy, as uint16."""
    rng = np.random.default_rng(seed)
    field = ndimage.gaussian_filter(rng.standard_normal((n, n, n), dtype=np.float32), n / 64)
    pore = field > np.quantile(field, 0.3)
    del field
    z, y, x = np.ogrid[:n, :n, :n]
    c = (n - 1) / 2
    body = ((z - c) / (0.45 * n)) ** 2 + ((y - c) / (0.3 * n)) ** 2 + ((x - c) / (0.3 * n)) ** 2 <= 1
    solid = body & ~pore
    del pore, body
    grey = np.where(solid, np.float32(26000), np.float32(6000))
    del solid
    grey = ndimage.gaussian_filter(grey, 1.0)
    grey += rng.normal(0, 1200, grey.shape).astype(np.float32)
    return np.clip(grey, 0, 65535).astype(np.uint16)


def main():
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--size", type=int, default=512)
    ap.add_argument("--keep", action="store_true", help="keep the temporary folder")
    args = ap.parse_args()
    import ctpore

    tmp = Path(tempfile.mkdtemp(prefix="ctpore-bench-"))
    t0 = time.perf_counter()
    stack = tmp / f"piece_{args.size}.ome.tif"
    ctpore.write_ome_tiff(stack, make_stack(args.size), (10.0, 10.0, 10.0))
    print(f"generated {args.size}^3 uint16 stack in {time.perf_counter() - t0:.1f} s")
    recipe = tmp / "recipe.toml"
    recipe.write_text("[envelope]\nradius_um = 150.0\n[structure]\nmin_cell_volume_um3 = 1e5\n")
    code = ("import sys, ctpore; ctpore.analyze(sys.argv[1], recipe=sys.argv[2], "
            "out=sys.argv[3], quiet=False)")
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", code, str(stack), str(recipe), str(tmp / "result")],
                   check=True)
    wall = time.perf_counter() - t0
    peak_gb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024 ** 2
    prov = json.loads((tmp / "result" / "provenance.json").read_text())
    summary = json.loads((tmp / "result" / "summary.json").read_text())
    print(f"\nwhole analyze of {args.size}^3: {wall:.1f} s wall, peak RSS {peak_gb:.2f} GB "
          f"({peak_gb * 1024 ** 3 / args.size ** 3:.1f} bytes per voxel)")
    for step, seconds in prov["step_seconds"].items():
        print(f"  {seconds:8.1f} s  {step}")
    print(f"porosity_gas {summary['porosity_gas']:.4f}, cells {summary['cell_count']}, "
          f"wall D50 {summary['wall_thickness_d50_um']:.1f} µm")
    if not args.keep:
        import shutil

        shutil.rmtree(tmp)


if __name__ == "__main__":
    main()
