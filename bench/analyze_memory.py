"""Benchmark: peak memory of each step of the in-memory ``ctpore.analyze``, in bytes per voxel.

Run by hand (not a test):
    python bench/analyze_memory.py [--size 384] [--structure] [--keep DIR]

The stack is bench/scale.py's generated 16-bit piece (same generator, 10 µm voxels) and the
recipe is bench/scale.py's in-memory one (envelope closing r = 150 µm, no structure measures,
profiles on), followed, like there, by the local thickness of pores and walls;
``--structure`` runs the whole analysis instead. Before each step the kernel's high-water mark
of this process's resident set is reset (``/proc/self/clear_refs`` = 5, Linux); after it the
mark (VmHWM) is the step's peak. Printed per step: resident set before, peak and after, in
bytes per voxel of the stack. The fixed cost of the interpreter and libraries (about 120 MB)
is included, so small stacks read higher; use 384³ or more.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib.util
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent


def _status() -> dict:
    out = {}
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith(("VmRSS", "VmHWM")):
                key, value = line.split(":")
                out[key] = int(value.split()[0]) * 1024
    return out


def _reset_peak() -> None:
    with open("/proc/self/clear_refs", "w") as f:
        f.write("5")


def main():
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--size", type=int, default=384)
    ap.add_argument("--structure", action="store_true", help="the whole analysis")
    ap.add_argument("--keep", type=Path, help="folder for the generated stack (kept)")
    args = ap.parse_args()
    spec = importlib.util.spec_from_file_location("scale", HERE / "scale.py")
    scale = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(scale)

    import ctpore.progress as progress_module
    from ctpore import analyze
    from ctpore.measure.local_thickness import local_thickness, thickness_statistics

    n3 = args.size ** 3
    rows = []
    original_step = progress_module.Progress.step

    @contextlib.contextmanager
    def measured_step(self, name):
        _reset_peak()
        before = _status()["VmRSS"]
        with original_step(self, name):
            yield
        after = _status()
        rows.append((name, before, after["VmHWM"], after["VmRSS"]))

    folder = args.keep or Path(tempfile.mkdtemp(prefix="ctpore-memory-"))
    folder.mkdir(parents=True, exist_ok=True)
    stack = folder / f"piece_{args.size}.ome.tif"
    if not stack.exists():
        scale.write_stack(stack, args.size)
    text = scale.CHUNKED_RECIPE if args.structure else scale.IN_MEMORY_RECIPE
    progress_module.Progress.step = measured_step
    try:
        res = analyze(stack, recipe=scale._recipe(text, str(folder)), quiet=True,
                      memory_limit_bytes=1 << 60)
    finally:
        progress_module.Progress.step = original_step
    if not args.structure:
        for name, label in (("pore", 1), ("wall", 2)):
            _reset_peak()
            before = _status()["VmRSS"]
            mask = res.phases == label
            thickness_statistics(local_thickness(mask, res.scan.spacing_um), mask)
            del mask
            after = _status()
            rows.append((f"local thickness of {name}s (bench)", before, after["VmHWM"],
                         after["VmRSS"]))
    print(f"{args.size}^3 stack, bytes per voxel (resident set before / peak / after)")
    for name, before, peak, after in rows:
        print(f"  {before / n3:6.2f} {peak / n3:6.2f} {after / n3:6.2f}  {name}")
    print(f"largest step peak: {max(r[2] for r in rows) / n3:.2f} B/voxel "
          f"({max(r[2] for r in rows) / 1e9:.2f} GB)")
    if args.keep is None:
        import shutil

        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
