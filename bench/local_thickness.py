"""Benchmark: ctpore's exact local thickness against porespy's default, on the same blobs.

Run by hand (not a test), e.g.::

    python bench/local_thickness.py --sizes 256,384,512 --repeats 3

For each size a Boolean image is made with ``porespy.generators.blobs(shape=[n]*3,
porosity=0.7, blobiness=1, seed=...)`` and saved once. Every timed run happens in a fresh
subprocess that loads the mask, warms up (numba compilation on a small crop, outside the
timing), then runs the filter once:

* wall time: ``time.perf_counter`` around the call;
* peak memory: the subprocess resets its peak resident set (``/proc/self/clear_refs`` = 5,
  Linux) after the warm-up, notes its resident set, runs the call and reads ``VmHWM`` from
  ``/proc/self/status``; the increase, divided by the voxel count, is "bytes per voxel". It
  includes the result map but not the 1-byte input mask (already resident), so the column
  "+ mask" adds 1. Without clear_refs the script falls back to the growth of ``ru_maxrss``.

porespy's result (radii in voxels, isotropic voxels) is converted to diameters (×2) so that
both maps read in voxel units. Reported per size: median wall time of each method, the ratio
porespy/ours, peak bytes per voxel, the mean of each map over the phase, the smallest
difference ours − porespy, and the share of phase voxels where porespy reads more than one
voxel below ours.

The machine's cores and load average are printed: on a shared machine the timings are noisy
and slower than on an idle one.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SEED = 7


def _status_kib(key: str) -> int:
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(key + ":"):
                return int(line.split()[1])
    raise KeyError(key)


def _worker(method: str, mask_path: str, out_path: str | None) -> None:
    """Load the mask, warm up, time one call and print a JSON line with the figures."""
    import resource

    mask = np.load(mask_path)
    if method == "ours":
        from ctpore.measure.local_thickness import local_thickness

        def run(m):
            return local_thickness(m, (1.0, 1.0, 1.0))
    else:
        state = np.geterr()
        import porespy

        np.seterr(**state)

        def run(m):
            return 2.0 * porespy.filters.local_thickness(m)

    run(np.ascontiguousarray(mask[:48, :48, :48]))
    try:
        with open("/proc/self/clear_refs", "w") as f:
            f.write("5")
        memory_method = "VmHWM after clear_refs"
        before = _status_kib("VmRSS")
    except OSError:
        memory_method = "ru_maxrss growth"
        before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    t0 = time.perf_counter()
    result = run(mask)
    seconds = time.perf_counter() - t0
    if memory_method.startswith("VmHWM"):
        peak = _status_kib("VmHWM")
    else:
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    if out_path:
        np.save(out_path, np.asarray(result, dtype=np.float32))
    print(json.dumps({"seconds": seconds, "peak_increase_bytes": (peak - before) * 1024,
                      "memory_method": memory_method}))


def _run(method: str, mask_path: Path, out_path: Path | None) -> dict:
    cmd = [sys.executable, __file__, "--worker", method, str(mask_path)]
    if out_path is not None:
        cmd.append(str(out_path))
    done = subprocess.run(cmd, check=True, capture_output=True, text=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sizes", default="256,384,512",
                        help="edge lengths of the cubic test images (default 256,384,512)")
    parser.add_argument("--repeats", type=int, default=3, help="runs of ours per size")
    parser.add_argument("--porespy-repeats", type=int, default=1,
                        help="runs of porespy per size (it is slow)")
    parser.add_argument("--porespy-max-size", type=int, default=384,
                        help="largest size on which porespy runs (default 384)")
    args = parser.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s]

    import porespy  # only to make the images, in this parent process

    print(f"cores: {os.cpu_count()}, load average at start: {os.getloadavg()} "
          "(shared machine: timings vary with other work)")
    with tempfile.TemporaryDirectory(prefix="ctpore-lt-bench-") as tmp:
        tmp = Path(tmp)
        for n in sizes:
            mask = porespy.generators.blobs(shape=[n] * 3, porosity=0.7, blobiness=1,
                                            seed=SEED)
            mask_path = tmp / f"mask{n}.npy"
            np.save(mask_path, mask)
            nvox = mask.size
            runs = {"ours": [], "porespy": []}
            maps = {}
            plan = [("ours", args.repeats)]
            if n <= args.porespy_max_size:
                plan.append(("porespy", args.porespy_repeats))
            for method, repeats in plan:
                for r in range(repeats):
                    out = tmp / f"{method}{n}.npy" if r == 0 else None
                    runs[method].append(_run(method, mask_path, out))
                    if out is not None:
                        maps[method] = np.load(out)
                        out.unlink()
            print(f"\n{n}^3 blobs (porosity 0.7, blobiness 1, seed {SEED}); phase "
                  f"{mask.mean():.3f} of {nvox} voxels; memory: "
                  f"{runs['ours'][0]['memory_method']}")
            print(f"{'method':8} {'median s':>9} {'runs s':>24} {'B/voxel':>8} "
                  f"{'+ mask':>7} {'mean (voxels)':>14}")
            medians = {}
            for method, rs in runs.items():
                if not rs:
                    continue
                secs = sorted(x["seconds"] for x in rs)
                medians[method] = float(np.median(secs))
                per_voxel = max(x["peak_increase_bytes"] for x in rs) / nvox
                mean = float(maps[method][mask].mean())
                print(f"{method:8} {medians[method]:9.2f} "
                      f"{', '.join(f'{s:.2f}' for s in secs):>24} {per_voxel:8.2f} "
                      f"{per_voxel + 1:7.2f} {mean:14.3f}")
            if "porespy" in maps:
                diff = (maps["ours"] - maps["porespy"])[mask]
                excess = maps["ours"][mask].mean() / maps["porespy"][mask].mean() - 1
                print(f"ratio porespy/ours: {medians['porespy'] / medians['ours']:.1f}x; "
                      f"min(ours - porespy) = {diff.min():.6f} voxels; porespy more than one "
                      f"voxel below ours at {np.mean(diff > 1.0):.1%} of phase voxels; means "
                      f"differ by {excess:.1%}")
            mask_path.unlink()
    print(f"\nload average at end: {os.getloadavg()}")


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--worker":
        _worker(sys.argv[2], sys.argv[3], sys.argv[4] if len(sys.argv) > 4 else None)
    else:
        main()
