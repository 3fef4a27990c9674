"""``ctpore convert STACK OUT.ome.zarr``: a TIFF stack or slice folder to multiscale OME-Zarr.

The stack is read lazily and written slab by slab (:func:`ctpore.io.ome_zarr.convert_to_ome_zarr`),
so stacks larger than memory convert; the output folder appears only when complete.
"""

from __future__ import annotations

import os
from pathlib import Path

from .ome_zarr import DEFAULT_CHUNKS

__all__ = ["add_convert_parser", "run_convert"]


def add_convert_parser(subparsers):
    """Add the ``convert`` sub-command to an argparse sub-parser collection."""
    c = subparsers.add_parser("convert", help="write a TIFF stack or slice folder as a "
                              "multiscale OME-Zarr with its voxel size (streaming)")
    c.add_argument("stack", help="stack file (TIFF, BigTIFF, OME-TIFF, ImageJ) or slice folder")
    c.add_argument("out", help="output OME-Zarr folder, e.g. piece.ome.zarr")
    c.add_argument("--spacing", metavar="UM", help="voxel size in µm: one value or z,y,x; "
                   "needed when the file stores none, overrides the file's otherwise")
    c.add_argument("--chunks", metavar="N", default=",".join(map(str, DEFAULT_CHUNKS)),
                   help="zarr chunk shape: one value or z,y,x (default "
                   f"{','.join(map(str, DEFAULT_CHUNKS))})")
    c.add_argument("--levels", type=int, metavar="N", help="number of pyramid levels "
                   "(default: halve until the smallest side is below --min-side)")
    c.add_argument("--min-side", type=int, default=64, metavar="N", help="add coarser levels "
                   "while the smallest side is at least N voxels (default 64)")
    c.add_argument("--memory-mb", type=float, default=256.0, metavar="MB", help="approximate "
                   "memory per slab (default 256; at least one chunk row of whole slices)")
    c.add_argument("--force", action="store_true", help="replace an existing output folder")
    c.add_argument("--quiet", action="store_true", help="no progress lines")
    return c


def run_convert(args) -> int:
    """Run ``ctpore convert`` from parsed arguments; print one line per level; return 0.

    Raises
    ------
    InputError
        Bad stack, missing voxel size, existing output without ``--force``, bad options.
    """
    from .ome_zarr import convert_to_ome_zarr, read_ome_zarr

    quiet = bool(getattr(args, "quiet", False)) or \
        os.environ.get("CI", "").lower() in ("1", "true", "yes")
    out = convert_to_ome_zarr(Path(args.stack), Path(args.out), spacing_um=args.spacing,
                              chunks=args.chunks, min_side=args.min_side,
                              max_levels=args.levels, memory_mb=args.memory_mb,
                              force=args.force, quiet=quiet)
    scan = read_ome_zarr(out)
    m = scan.meta
    print(f"{args.stack} -> {out}: {m['n_levels']} level(s), {m['dtype']}, voxel size "
          f"{','.join(f'{v:g}' for v in scan.spacing_um)} µm (z,y,x)")
    for k, (shape, spacing) in enumerate(zip(m["level_shapes"], m["level_spacing_um"])):
        print(f"  s{k}: {' x '.join(map(str, shape))} voxels, "
              f"{','.join(f'{v:g}' for v in spacing)} µm")
    return 0
