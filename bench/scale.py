"""Benchmark: chunked analyze (``ctpore.chunked.analyze_chunked``, 2 GiB budget) against the
in-memory ``ctpore.analyze`` on generated 16-bit stacks of one porous piece, at growing sizes.

Run by hand (not a test):
    python bench/scale.py [--sizes 512 1024] [--repeat 1] [--modes in-memory chunked]
                          [--save-runs DIR] [--add-runs FILE ...] [--keep] [--json FILE]

What is compared. Both runs compute the same steps with the same recipe (default recipe,
10 µm voxels, envelope closing r = 150 µm = 15 voxels, no denoising, profiles on):
read, threshold (Otsu), clean, envelope, sensitivity band, porosity (gas/open/closed),
partial-volume porosity, local thickness of pores and walls (statistics and distribution) and
the profiles. The in-memory ``analyze`` cannot run local thickness without also running cells,
surface, topology, anisotropy and chords (all of ``[structure]``), which the chunked path does
not compute; so the in-memory run uses ``[structure] enabled = false`` and then computes the
local thickness of pores and walls itself in the same process with the functions
``analyze`` uses (``ctpore.measure.local_thickness``). The chunked run uses
``[structure] enabled = true`` (its structure step is local thickness only). Neither writes a
result folder (``out=None``): the times are computation, reading the stack included.

Each analysis runs in its own child process; its peak memory is that process's peak resident
set size (``getrusage(RUSAGE_SELF).ru_maxrss`` read at its end), so runs do not see each
other's peaks. Pages of the memory-mapped input stack and of the chunked path's work files
count in the resident set too, so each run also reports its anonymous peak (RSS minus
file-backed pages, sampled every 50 ms by ``ctpore.chunked.memory.PeakMemory``): the memory
the work itself holds, which is what a memory budget has to bound.

The stack is generated slab by slab (32 slices plus halos) and streamed page by page into an
uncompressed OME-TIFF, so the generator never holds the whole volume: a smooth Gaussian
random field (white noise on a coarse grid of spacing g = n/64 voxels, spread by a separable
Gaussian of standard deviation g and normalised to unit variance voxel by voxel) is
thresholded at its 30 % quantile (pores = 70 % of the body, as in bench/analyze_whole.py),
inside a prolate ellipsoid; grey values 26000 (solid) / 6000 (gas), blurred by one voxel and
with Gaussian noise (σ = 1200) seeded per slice.

The in-memory run is skipped when its estimated peak (``IN_MEMORY_BENCH_BYTES_PER_VOXEL``
bytes per voxel, measured) exceeds 90 % of the memory available now. A long run of one mode can
be saved (``--save-runs DIR``) and reported later beside the other mode's
(``--modes in-memory --add-runs DIR/chunked-1024-*.json``).
"""

from __future__ import annotations

import argparse
import json
import math
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import ndimage

SPACING_UM = (10.0, 10.0, 10.0)
MEMORY_LIMIT_BYTES = 2 * 1024**3
MODES = ("in-memory", "chunked")
#: Peak bytes per voxel of this benchmark's in-memory run (no cells/surface/topology; local
#: thickness of pores and walls), measured at 384³ and 512³, with margin; it decides whether
#: the in-memory run is attempted.
IN_MEMORY_BENCH_BYTES_PER_VOXEL = 18
SLAB = 32
#: Standard normal quantile at 0.3 (pores are the 70 % of the field above it).
Z_030 = -0.5244005127080407
#: Keys compared between the two runs (top level and inside "threshold" / "partial_volume").
POROSITY_KEYS = ("porosity_gas", "porosity_open", "porosity_closed")
THICKNESS_KEYS = tuple(f"{p}_thickness_{k}" for p in ("pore", "wall")
                       for k in ("mean_um", "sd_um", "d10_um", "d50_um", "d90_um", "max_um"))

IN_MEMORY_RECIPE = "[envelope]\nradius_um = 150.0\n[structure]\nenabled = false\n"
CHUNKED_RECIPE = "[envelope]\nradius_um = 150.0\n[structure]\nenabled = true\n"


# ----------------------------------------------------------------------------- generator
def _spread(n: int, g: int, sigma: float):
    """Gaussian spreading weights (n fine × m coarse nodes) and each fine voxel's variance."""
    pad = int(math.ceil(4 * sigma / g)) + 1
    m = int(math.ceil(n / g)) + 2 * pad
    centres = (np.arange(m) - pad) * g + (g - 1) / 2
    i = np.arange(n)[:, None]
    w = np.exp(-((i - centres[None, :]) ** 2) / (2 * sigma**2)).astype(np.float32)
    return w, (w.astype(np.float64) ** 2).sum(axis=1)


def _pore_slab(z0, z1, n, coarse, wz, wy, wx, vz, vy, vx):
    """Boolean pores (field above its 30 % quantile) for slices z0..z1 (unit-variance field)."""
    a = np.tensordot(wz[z0:z1], coarse, axes=1)           # (s, my, mx)
    b = np.matmul(wy, a)                                   # (s, n, mx)
    f = np.matmul(b, wx.T)                                 # (s, n, n)
    sd = np.sqrt(vz[z0:z1, None, None] * vy[None, :, None] * vx[None, None, :])
    return f > (Z_030 * sd).astype(np.float32)


def iter_slices(n: int, seed: int = 0):
    """The generated stack, one uint16 (y, x) slice at a time (see the module docstring)."""
    g = max(2, n // 64)
    sigma = float(g)
    rng = np.random.default_rng(seed)
    wz, vz = _spread(n, g, sigma)
    wy, vy = wz, vz
    wx, vx = wz, vz
    coarse = rng.standard_normal((wz.shape[1],) * 3, dtype=np.float32)
    c = (n - 1) / 2
    y, x = np.ogrid[:n, :n]
    rad_yx = ((y - c) / (0.3 * n)) ** 2 + ((x - c) / (0.3 * n)) ** 2
    halo = 4  # the one-voxel blur is truncated at 4 σ, so 4 slices of halo make slabs exact
    for z0 in range(0, n, SLAB):
        z1 = min(z0 + SLAB, n)
        h0, h1 = max(0, z0 - halo), min(n, z1 + halo)
        pore = _pore_slab(h0, h1, n, coarse, wz, wy, wx, vz, vy, vx)
        z = np.arange(h0, h1)[:, None, None]
        body = ((z - c) / (0.45 * n)) ** 2 + rad_yx[None] <= 1
        grey = np.where(body & ~pore, np.float32(26000), np.float32(6000))
        del pore, body
        grey = _blur_slab(grey, z0 - h0, z1 - h0, h0 == 0, h1 == n)
        for k in range(z1 - z0):
            noise = np.random.default_rng([seed, 1, z0 + k]).normal(0, 1200, (n, n))
            sl = grey[k] + noise.astype(np.float32)
            yield np.clip(sl, 0, 65535).astype(np.uint16)


def _blur_slab(grey, a, b, at_top, at_bottom):
    """One-voxel Gaussian blur of grey[a:b] with its halo, reflecting only at the real border."""
    pad_lo = 4 if at_top else 0
    pad_hi = 4 if at_bottom else 0
    if pad_lo or pad_hi:
        grey = np.pad(grey, ((pad_lo, pad_hi), (0, 0), (0, 0)), mode="symmetric")
    out = ndimage.gaussian_filter(grey, 1.0, truncate=4.0, mode="reflect")
    return out[a + pad_lo:b + pad_lo]


def write_stack(path: Path, n: int, seed: int = 0) -> Path:
    """Stream the generated n³ stack into an uncompressed OME-TIFF (memory-mappable)."""
    import tifffile

    meta = {"axes": "ZYX"}
    for ax, v in zip("ZYX", SPACING_UM):
        meta[f"PhysicalSize{ax}"] = v
        meta[f"PhysicalSize{ax}Unit"] = "µm"
    tifffile.imwrite(path, data=iter_slices(n, seed), shape=(n, n, n), dtype=np.uint16,
                     photometric="minisblack", ome=True, metadata=meta,
                     bigtiff=2 * n**3 > 2**31 - 2**25)
    return path


# ----------------------------------------------------------------------------- child runs
def _child(mode: str, stack: str, out_json: str, workdir: str):
    import resource

    from ctpore.chunked.memory import PeakMemory

    with PeakMemory(interval_s=0.05) as sampler:
        t0 = time.perf_counter()
        summary, timings, chunked = _work(mode, stack, workdir)
        wall = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    keep = {k: summary.get(k) for k in POROSITY_KEYS + THICKNESS_KEYS}
    keep["threshold"] = summary["threshold"]
    keep["partial_volume"] = summary.get("partial_volume")
    Path(out_json).write_text(json.dumps({"mode": mode, "size": int(tifffile_shape(stack)[0]),
                                          "wall_s": wall, "peak_rss_bytes": peak,
                                          "peak_anonymous_bytes": sampler.peak_anonymous_bytes,
                                          "timings_s": timings, "summary": keep,
                                          "chunked": chunked}, default=float))


def _work(mode: str, stack: str, workdir: str):
    """One analysis; returns (summary, timings_s, chunked facts or None)."""
    import ctpore

    if mode == "in-memory":
        from ctpore.measure.local_thickness import local_thickness, thickness_statistics

        # An explicit budget far above the machine's memory keeps analyze in memory (without
        # one it goes chunked when its estimate exceeds 80 % of the available memory).
        res = ctpore.analyze(stack, recipe=_recipe(IN_MEMORY_RECIPE, workdir),
                             memory_limit_bytes=1 << 60)
        if "chunked" in res.summary:
            raise RuntimeError("the in-memory run went chunked")
        t1 = time.perf_counter()
        phases, spacing = res.phases, res.scan.spacing_um
        summary = dict(res.summary)
        for name, label in (("pore", 1), ("wall", 2)):
            mask = phases == label
            stats = thickness_statistics(local_thickness(mask, spacing), mask)
            for key in ("mean_um", "sd_um", "d10_um", "d50_um", "d90_um", "max_um"):
                summary[f"{name}_thickness_{key}"] = stats[key]
            del mask
        timings = dict(res.timings_s)
        timings["local thickness of pores and walls"] = time.perf_counter() - t1
        return summary, timings, None
    from ctpore.chunked import analyze_chunked

    res = analyze_chunked(stack, recipe=_recipe(CHUNKED_RECIPE, workdir),
                          memory_limit_bytes=MEMORY_LIMIT_BYTES, temp_dir=workdir)
    return res.summary, dict(res.timings_s), res.summary["chunked"]


def tifffile_shape(stack) -> tuple:
    import tifffile

    with tifffile.TiffFile(stack) as tif:
        return tuple(tif.series[0].shape)


def _recipe(text, workdir):
    from ctpore.recipe import load_recipe

    path = Path(tempfile.mkdtemp(prefix="recipe-", dir=workdir)) / "recipe.toml"
    path.write_text(text)
    return load_recipe(path)


def run_child(mode: str, stack: Path, tmp: Path, save_dir: Path | None = None) -> dict:
    out = tmp / f"{mode}-{time.monotonic_ns()}.json"
    load = os.getloadavg()[0]
    subprocess.run([sys.executable, __file__, "--child", mode, str(stack), str(out), str(tmp)],
                   check=True)
    result = json.loads(out.read_text())
    result["load_before"] = load
    if save_dir is not None:
        save_dir.mkdir(parents=True, exist_ok=True)
        (save_dir / f"{mode}-{result['size']}-{time.strftime('%Y%m%dT%H%M%S')}.json").write_text(
            json.dumps(result, default=float))
    return result


# ----------------------------------------------------------------------------- comparison
def _flatten(d, prefix=""):
    out = {}
    for k, v in (d or {}).items():
        if isinstance(v, dict):
            out.update(_flatten(v, f"{prefix}{k}."))
        elif isinstance(v, (int, float)) and not isinstance(v, bool):
            out[prefix + k] = float(v)
    return out


def compare(a: dict, b: dict) -> dict:
    """Keys equal bit for bit, and the largest relative difference among the others."""
    fa, fb = _flatten(a), _flatten(b)
    common = sorted(set(fa) & set(fb))
    differ = {k: (fa[k], fb[k]) for k in common if fa[k] != fb[k]
              and not (math.isnan(fa[k]) and math.isnan(fb[k]))}
    rel = max((abs(x - y) / max(abs(x), abs(y)) for x, y in differ.values()), default=0.0)
    porosity_equal = all(fa.get(k) == fb.get(k) for k in POROSITY_KEYS)
    return {"keys": len(common), "identical": len(common) - len(differ), "differ": differ,
            "max_rel_diff": rel, "porosity_identical": porosity_equal}


def _median(values):
    return statistics.median(values) if values else float("nan")


def _gb_median(runs, key):
    values = [r[key] for r in runs if r.get(key) is not None]
    return _median(values) / 1e9 if values else float("nan")


def report(n: int, runs: dict, generated_s: float, skipped_note: str | None) -> dict:
    """Print the medians for one size; return them."""
    mem, chk = runs.get("in-memory", []), runs.get("chunked", [])
    row = {"size": n, "generated_s": generated_s, "repeats_chunked": len(chk),
           "repeats_in_memory": len(mem), "loads": [r["load_before"] for r in mem + chk]}
    print(f"\n=== {n}^3 uint16 ({2 * n**3 / 1e9:.2f} GB)")
    if mem:
        row["in_memory_s"] = _median([r["wall_s"] for r in mem])
        row["in_memory_peak_gb"] = _gb_median(mem, "peak_rss_bytes")
        row["in_memory_peak_anonymous_gb"] = _gb_median(mem, "peak_anonymous_bytes")
        row["in_memory_bytes_per_voxel"] = row["in_memory_peak_gb"] * 1e9 / n**3
        row["in_memory_step_s"] = {k: _median([r["timings_s"].get(k, float("nan"))
                                               for r in mem]) for k in mem[0]["timings_s"]}
        print(f"in-memory : {row['in_memory_s']:8.1f} s  peak RSS {row['in_memory_peak_gb']:.2f} GB "
              f"({row['in_memory_bytes_per_voxel']:.1f} B/voxel), anonymous "
              f"{row['in_memory_peak_anonymous_gb']:.2f} GB  [{len(mem)} run(s)]")
        for k, v in row["in_memory_step_s"].items():
            print(f"      {v:8.1f} s  {k}")
    else:
        print(f"in-memory : skipped ({skipped_note})")
    if chk:
        c0 = chk[0]["chunked"]
        chunks = c0["chunk_shape_voxels"]
        n_chunks = math.prod(math.ceil(n / c) for c in chunks)
        row.update({"chunk_shape": chunks, "n_chunks": n_chunks, "halos": c0["halo_voxels"],
                    "chunked_s": _median([r["wall_s"] for r in chk]),
                    "chunked_peak_gb": _gb_median(chk, "peak_rss_bytes"),
                    "chunked_peak_anonymous_gb": _gb_median(chk, "peak_anonymous_bytes"),
                    "chunked_peak_reported_gb": _median([r["chunked"]["peak_memory_bytes"]
                                                         for r in chk]) / 1e9})
        steps = {step: _median([r["timings_s"].get(step, float("nan")) for r in chk])
                 for step in chk[0]["timings_s"]}
        row["chunked_step_s"] = steps
        row["chunked_step_s_per_chunk"] = {k: v / n_chunks for k, v in steps.items()}
        row["chunked_peak_gb_by_step"] = {k: v / 1e9 for k, v in
                                          c0["peak_memory_bytes_by_step"].items()}
        print(f"chunked   : {row['chunked_s']:8.1f} s  peak RSS {row['chunked_peak_gb']:.2f} GB, "
              f"anonymous {row['chunked_peak_anonymous_gb']:.2f} GB (budget "
              f"{MEMORY_LIMIT_BYTES / 1e9:.2f} GB); chunks {chunks} ({n_chunks}), halos "
              f"{c0['halo_voxels']}  [{len(chk)} run(s)]")
        for k, v in steps.items():
            print(f"      {v:8.1f} s  {v / n_chunks:7.2f} s/chunk  "
                  f"peak RSS {row['chunked_peak_gb_by_step'].get(k, float('nan')):.2f} GB  {k}")
    if mem and chk:
        row["ratio_time"] = row["chunked_s"] / row["in_memory_s"]
        cmp = compare(mem[0]["summary"], chk[0]["summary"])
        row["compare"] = {k: v for k, v in cmp.items() if k != "differ"}
        row["compare"]["differ"] = {k: list(v) for k, v in cmp["differ"].items()}
        print(f"time chunked / in-memory: {row['ratio_time']:.2f}")
        print(f"porosity identical (gas/open/closed): {cmp['porosity_identical']}; "
              f"{cmp['identical']} of {cmp['keys']} compared numbers identical, largest "
              f"relative difference {cmp['max_rel_diff']:.2e}")
        for k, (x, y) in cmp["differ"].items():
            print(f"      differs: {k}: in-memory {x!r}, chunked {y!r}")
    print(f"load average before each run: {', '.join(f'{v:.2f}' for v in row['loads'])}")
    return row


def main():
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        _child(*sys.argv[2:6])
        return
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", type=int, nargs="+", default=[512, 1024])
    ap.add_argument("--repeat", type=int, default=1, help="runs per size (medians are printed)")
    ap.add_argument("--modes", nargs="+", choices=MODES, default=list(MODES),
                    help="which analyses to run (default both)")
    ap.add_argument("--save-runs", type=Path, metavar="DIR",
                    help="copy each run's raw record (JSON) into DIR")
    ap.add_argument("--add-runs", type=Path, nargs="+", default=[], metavar="FILE",
                    help="raw run records saved earlier (--save-runs) to report with this "
                         "run's, matched by size (e.g. a long chunked run at 1024^3)")
    ap.add_argument("--keep", action="store_true", help="keep the temporary folder")
    ap.add_argument("--json", type=Path, help="also write the medians to this JSON file")
    args = ap.parse_args()
    import psutil

    earlier = [json.loads(p.read_text()) for p in args.add_runs]
    tmp = Path(tempfile.mkdtemp(prefix="ctpore-scale-"))
    print(f"working folder {tmp}; {os.cpu_count()} CPUs, "
          f"{psutil.virtual_memory().total / 1e9:.1f} GB RAM, load {os.getloadavg()}")
    rows = []
    try:
        for n in args.sizes:
            t0 = time.perf_counter()
            stack = write_stack(tmp / f"piece_{n}.ome.tif", n)
            generated = time.perf_counter() - t0
            print(f"generated {n}^3 uint16 stack in {generated:.1f} s")
            est = IN_MEMORY_BENCH_BYTES_PER_VOXEL * n**3
            avail = psutil.virtual_memory().available
            skip = None
            if "in-memory" not in args.modes:
                skip = "not asked for (--modes)"
            elif est > 0.9 * avail:
                skip = (f"estimated in-memory peak {est / 1e9:.1f} GB > 90 % of the "
                        f"{avail / 1e9:.1f} GB available")
            runs = {m: [r for r in earlier if r["mode"] == m and r.get("size") == n]
                    for m in MODES}
            for _ in range(args.repeat):
                if skip is None:
                    runs["in-memory"].append(run_child("in-memory", stack, tmp, args.save_runs))
                if "chunked" in args.modes:
                    runs["chunked"].append(run_child("chunked", stack, tmp, args.save_runs))
            rows.append(report(n, runs, generated, skip))
            if not args.keep:
                stack.unlink()
        if args.json:
            args.json.write_text(json.dumps(rows, indent=1, default=float))
    finally:
        if not args.keep:
            import shutil

            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
