"""Command line: ``ctpore analyze``, ``demo``, ``batch``, ``convert``, ``compare``, ... .

A thin shell over the Python API. Exit status 0 on success, 2 on bad input or usage with a
one-line reason naming the file and the fix; nothing is written on failure.
"""

from __future__ import annotations

import argparse
import json
import os
import sys

from . import __version__
from .errors import InputError

__all__ = ["main"]


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # usage errors: one line, exit 2
        self.print_usage(sys.stderr)
        print(f"ctpore: error: {message}", file=sys.stderr)
        raise SystemExit(2)


def _build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="ctpore", description="Porosity and cell structure of puffed and "
                     "expanded foods from X-ray micro-CT stacks.")
    parser.add_argument("--version", action="version", version=f"ctpore {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    a = sub.add_parser("analyze", help="segment a stack and measure its porosity")
    a.add_argument("stack", help="stack file (TIFF, BigTIFF, OME-TIFF, ImageJ) or slice folder")
    a.add_argument("--spacing", metavar="UM", help="voxel size in µm: one value or z,y,x; "
                   "overrides the file's metadata")
    a.add_argument("--recipe", metavar="TOML", help="recipe file (defaults when left out)")
    a.add_argument("--out", metavar="DIR", help="result folder (default: ./<stack name>_ctpore)")
    a.add_argument("--force", action="store_true", help="replace an existing result folder")
    a.add_argument("--quiet", action="store_true", help="no progress lines")
    a.add_argument("--json", action="store_true", help="print summary.json to standard output")
    a.add_argument("--memory", metavar="SIZE", help="memory budget, e.g. 4GB or 512MiB: a stack "
                   "whose in-memory analysis would need more is analysed chunk by chunk on disk "
                   "(default: 80%% of the memory available; with --scheduler, the budget of each "
                   "worker, lowered to the workers' own memory limit)")
    a.add_argument("--scheduler", metavar="ADDRESS", help="dask.distributed scheduler address "
                   "(e.g. tcp://127.0.0.1:8786) for the chunked analysis (implies chunked)")

    d = sub.add_parser("demo", help="generate the demo scenario and analyse every piece")
    d.add_argument("--out", metavar="DIR", default="ctpore_demo", help="demo folder "
                   "(default ./ctpore_demo)")
    d.add_argument("--force", action="store_true", help="replace an existing demo folder")
    d.add_argument("--quiet", action="store_true", help="no progress lines")

    p = sub.add_parser("profiles", help="re-make the porosity profiles of a result folder "
                       "(depth, radial, axial, r-z map) without re-segmenting")
    p.add_argument("result", help="result folder of `ctpore analyze`")
    p.add_argument("--recipe", metavar="TOML", help="recipe whose [profiles] section to use "
                   "(default: the result's own recipe.toml)")
    p.add_argument("--force", action="store_true", help="replace existing profiles")
    p.add_argument("--quiet", action="store_true", help="no progress lines")

    v = sub.add_parser("rev", help="representative-volume study: porosity variance against "
                       "window size, integral range, recommended kernel width")
    v.add_argument("result", help="result folder of `ctpore analyze`")
    v.add_argument("--recipe", metavar="TOML", help="recipe whose [rev] section to use "
                   "(default: the result's own recipe.toml)")
    v.add_argument("--relative-error", type=float, metavar="EPS",
                   help="target relative error of the porosity (overrides rev.relative_error)")
    v.add_argument("--force", action="store_true", help="replace an existing rev/ folder")
    v.add_argument("--quiet", action="store_true", help="no progress lines")

    c = sub.add_parser("coarsen", help="continuum-scale porosity field: normalised averaging "
                       "with a named kernel and width")
    c.add_argument("result", help="result folder of `ctpore analyze`")
    c.add_argument("--kernel", choices=("box", "ball", "gaussian"),
                   help="kernel shape (default: the recipe's coarsen.kernel)")
    c.add_argument("--width", metavar="W", help="kernel width, e.g. 400um or 0.4mm (box side, "
                   "ball diameter, Gaussian sigma), or 'auto' for the REV recommendation")
    c.add_argument("--grid-spacing", metavar="UM", help="sample on a regular grid with this "
                   "step (one value or z,y,x in µm) instead of the scan grid")
    c.add_argument("--grid-origin", metavar="UM", default="0", help="grid origin z,y,x in µm "
                   "from the centre of the scan's first voxel (default 0)")
    c.add_argument("--grid-shape", metavar="N", help="grid points along z,y,x (default: "
                   "enough to cover the scan)")
    c.add_argument("--recipe", metavar="TOML", help="recipe whose [coarsen] and [rev] sections "
                   "to use (default: the result's own recipe.toml)")
    c.add_argument("--force", action="store_true", help="replace an existing field folder")
    c.add_argument("--quiet", action="store_true", help="no progress lines")

    b = sub.add_parser("batch", help="run one recipe over many pieces; piece-level statistics "
                       "and equivalence to a reference batch")
    b.add_argument("manifest", help="manifest CSV (sample_id, batch, stack_path, optional "
                   "spacing_um, mass_mg, moisture_wb, ...) or a folder with one sub-folder per "
                   "batch")
    b.add_argument("--recipe", metavar="TOML", help="recipe for every piece; its [batch] "
                   "section names the reference batch, measures and margins")
    b.add_argument("--out", metavar="DIR", required=True, help="batch folder (resumable)")
    b.add_argument("--workers", type=int, default=2, metavar="N", help="worker processes "
                   "(default 2)")
    b.add_argument("--spacing", metavar="UM", help="voxel size for pieces whose manifest row "
                   "and file give none")
    b.add_argument("--batch-column", default="batch", metavar="NAME", help="manifest column "
                   "that names the batch (default 'batch')")
    b.add_argument("--scheduler", metavar="ADDRESS", help="run the pieces on a dask.distributed "
                   "cluster (e.g. tcp://10.0.0.5:8786) instead of local worker processes")
    b.add_argument("--force", action="store_true", help="recompute every piece")
    b.add_argument("--quiet", action="store_true", help="no progress lines")

    from .compare.command import add_compare_parser

    add_compare_parser(sub)

    from .io.convert_command import add_convert_parser

    add_convert_parser(sub)

    from .report.command import add_report_parser

    add_report_parser(sub)

    from .viewer.command import add_view_parser  # light: napari is imported only by `view`

    add_view_parser(sub)

    r = sub.add_parser("recipe", help="print the default recipe (all keys, documented in "
                       "docs/recipe.md) or check one")
    r.add_argument("--check", metavar="TOML", help="validate a recipe file and print it in full")
    return parser


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``ctpore`` command; returns the exit status."""
    argv = list(sys.argv[1:] if argv is None else argv)
    args = _build_parser().parse_args(argv)
    quiet = getattr(args, "quiet", False) or _in_ci()
    try:
        if args.command == "analyze":
            return _analyze(args, argv, quiet)
        if args.command == "demo":
            from .demo import run_demo

            run_demo(args.out, force=args.force, quiet=quiet)
            return 0
        if args.command in ("profiles", "rev", "coarsen"):
            from .result_commands import run_result_command

            return run_result_command(args)
        if args.command == "compare":
            from .compare.command import run_compare

            return run_compare(args)
        if args.command == "convert":
            from .io.convert_command import run_convert

            return run_convert(args)
        if args.command == "batch":
            return _batch(args, quiet)
        if args.command == "view":
            from .viewer.command import run_view

            return run_view(args)
        if args.command == "report":
            from .report.command import run_report

            return run_report(args)
        if args.command == "recipe":
            from .recipe import load_recipe

            print(load_recipe(args.check).to_toml(), end="")
            return 0
    except InputError as err:
        print(f"ctpore: error: {err}", file=sys.stderr)
        return 2
    return 2


def _analyze(args, argv, quiet) -> int:
    from pathlib import Path

    from .analysis import analyze

    stack = Path(args.stack)
    out = Path(args.out) if args.out else Path.cwd() / f"{_stem(stack)}_ctpore"
    memory = None
    if args.memory is not None:
        from .chunked.memory import parse_memory

        memory = parse_memory(args.memory)
    result = analyze(stack, spacing_um=args.spacing, recipe=args.recipe, out=out,
                     force=args.force, quiet=quiet, argv=["ctpore", *argv],
                     memory_limit_bytes=memory, scheduler=args.scheduler)
    s = result.summary
    if args.json:
        print(json.dumps(s, indent=2, sort_keys=True, default=str))
    else:
        t = s["threshold"]
        print(f"{stack}: gas porosity {s['porosity_gas']:.4f} "
              f"(band {t['porosity_low']:.4f}–{t['porosity_high']:.4f}), "
              f"open {s['porosity_open']:.4f}, closed {s['porosity_closed']:.4f}, "
              f"envelope {s['envelope_volume_mm3']:.4g} mm³ -> {result.out}")
        for w in s["warnings"]:
            print(f"  warning: {w}")
    return 0


def _batch(args, quiet) -> int:
    from .batch.manifest import read_manifest
    from .batch.runner import run_batch
    from .batch.verdicts import batch_report, write_batch_outputs
    from .recipe import load_recipe

    recipe = load_recipe(args.recipe)
    if args.workers < 1:
        raise InputError(f"--workers must be at least 1; got {args.workers}", "use e.g. 2")
    rows = read_manifest(args.manifest, spacing_um=args.spacing, batch_column=args.batch_column)
    if args.scheduler:
        from .batch.distributed import run_batch_distributed

        run = run_batch_distributed(rows, recipe=recipe, out_dir=args.out, client=args.scheduler,
                                    force=args.force, quiet=quiet)
    else:
        run = run_batch(rows, recipe=recipe, out_dir=args.out, workers=args.workers,
                        force=args.force, quiet=quiet)
    b = recipe.batch
    report = batch_report(run.table, reference=b.reference or None, margins=dict(b.margins),
                          measures=b.measures, alpha=b.alpha,
                          control_measure=b.control_measure or None, pieces_dir=run.pieces_dir)
    write_batch_outputs(run.out_dir, report)
    from .report.html import write_report

    write_report(run.out_dir, force=True)
    _print_verdicts(report, run)
    return 0


def _print_verdicts(report, run) -> None:
    ok = sum(1 for p in run.table if p.get("status") in ("ok", "skipped-existing"))
    print(f"{run.out_dir}: {ok} of {len(run.table)} pieces analysed; "
          f"{len(run.failures)} failed")
    for f in run.failures:
        print(f"  failed: {f.get('sample_id')}: {f.get('error')}")
    ref = report["reference"]
    for batch, per_measure in report["verdicts"].items():
        for measure, cmp in per_measure.items():
            print(f"  {batch} vs {ref}: {measure}: {cmp['verdict']} "
                  f"(difference {cmp['difference']:+.4g}, margin {cmp.get('margin', '-')})")
    for note in report.get("notes", []):
        print(f"  note: {note}")


def _stem(path) -> str:
    name = path.name
    for suffix in (".ome.tiff", ".ome.tif", ".tiff", ".tif"):
        if name.lower().endswith(suffix):
            return name[: -len(suffix)]
    return name


def _in_ci() -> bool:
    return os.environ.get("CI", "").lower() in ("1", "true", "yes")


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
