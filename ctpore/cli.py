"""Command line: ``ctpore analyze``, ``ctpore demo``, ``ctpore recipe``.

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

    d = sub.add_parser("demo", help="generate the demo scenario and analyse every piece")
    d.add_argument("--out", metavar="DIR", default="ctpore_demo", help="demo folder "
                   "(default ./ctpore_demo)")
    d.add_argument("--force", action="store_true", help="replace an existing demo folder")
    d.add_argument("--quiet", action="store_true", help="no progress lines")

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
    result = analyze(stack, spacing_um=args.spacing, recipe=args.recipe, out=out,
                     force=args.force, quiet=quiet, argv=["ctpore", *argv])
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
