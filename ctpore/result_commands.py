"""Commands that work on an existing result folder: ``profiles``, ``rev`` and ``coarsen``.

Each reads the folder's phases, voxel size and recipe (never re-segments), and writes a new
sub-folder whole or not at all: ``profiles/``, ``rev/`` or ``coarse_<kernel>_<width>um/``. An
existing sub-folder is replaced only with ``--force``.
"""

from __future__ import annotations

import json
import math
import re
import sys
from pathlib import Path

import numpy as np

from .errors import InputError

__all__ = ["run_result_command", "parse_length_um"]

_UNITS_UM = {"um": 1.0, "µm": 1.0, "micron": 1.0, "mm": 1000.0, "m": 1e6, "nm": 1e-3}


def parse_length_um(text: str, *, name: str = "--width") -> float:
    """Parse a length with its unit ('400um', '0.4 mm', '400 µm') into µm. A bare number is
    refused: lengths are never guessed to be in µm."""
    m = re.fullmatch(r"\s*([0-9.eE+-]+)\s*([a-zµ]+)\s*", str(text))
    if not m or m.group(2) not in _UNITS_UM:
        raise InputError(f"{name} {text!r} is not a length with a unit",
                         "write e.g. 400um or 0.4mm (units: nm, um, µm, mm, m)")
    try:
        value = float(m.group(1)) * _UNITS_UM[m.group(2)]
    except ValueError:
        raise InputError(f"{name} {text!r} is not a number", "write e.g. 400um") from None
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{name} must be positive; got {text!r}", "write e.g. 400um")
    return value


def run_result_command(args) -> int:
    """Dispatch ``ctpore profiles|rev|coarsen RESULT``; returns the exit status."""
    from .io.result_reader import open_result
    from .recipe import load_recipe

    result = open_result(args.result)
    recipe = load_recipe(args.recipe) if args.recipe else result.recipe
    return {"profiles": _profiles, "rev": _rev, "coarsen": _coarsen}[args.command](
        result, recipe, args)


def _profiles(result, recipe, args) -> int:
    from .io.result_folder import result_folder
    from .profiles import profiles_for_result
    from .report.profile_plots import write_profiles

    profiles = profiles_for_result(result.phases, spacing_um=result.spacing_um,
                                   section=recipe.profiles)
    target = result.path / "profiles"
    with result_folder(target, force=args.force) as tmp:
        write_profiles(tmp, profiles, profiles["frame"])  # writes tmp/profiles/*
        for f in (tmp / "profiles").iterdir():
            f.rename(tmp / f.name)
        (tmp / "profiles").rmdir()
    print(f"{result.path}: profiles written to {target}")
    return 0


def _rev(result, recipe, args) -> int:
    from .continuum.rev import rev_study, write_rev
    from .io.result_folder import result_folder

    section = recipe.rev
    if args.relative_error is not None:
        section = recipe.replace("rev", relative_error=float(args.relative_error)).rev
    target = result.path / "rev"
    from .io.result_folder import check_destination

    check_destination(target, force=args.force)
    study = rev_study(result.phases, spacing_um=result.spacing_um, section=section)
    with result_folder(target, force=args.force) as tmp:
        write_rev(tmp, study)
    print(f"{result.path}: integral range A3 = {study.integral_range_um3:.4g} µm³, "
          f"porosity {study.porosity:.4f}; for a relative error of {section.relative_error:g} "
          f"a single average needs a box of {study.recommended_width_um:.4g} µm "
          f"(Gaussian σ {study.recommended_gaussian_sigma_um:.4g} µm, ball diameter "
          f"{study.recommended_ball_diameter_um:.4g} µm) -> {target}")
    for note in study.notes:
        print(f"  note: {note}")
    return 0


def _coarsen(result, recipe, args) -> int:
    from .continuum.coarse import Grid, coarsen, write_coarse_field
    from .continuum.kernels import Kernel
    from .io.result_folder import check_destination, result_folder
    from .compare.command import rev_for
    from .spacing import as_spacing_um

    section = recipe.coarsen
    shape = args.kernel or section.kernel
    rev = rev_for(result, recipe)
    if args.width and args.width.strip().lower() != "auto":
        width = parse_length_um(args.width)
        width_source = "command line"
    elif not args.width and section.width_um > 0:
        width, width_source = section.width_um, "recipe"
    else:
        width, width_source = rev["widths"][shape], "REV study"
    kernel = Kernel(shape, width, truncate_sigma=section.truncate_sigma)
    grid = None
    if args.grid_spacing:
        step = as_spacing_um(args.grid_spacing, name="--grid-spacing")
        origin = _three(args.grid_origin, "--grid-origin")
        if args.grid_shape:
            n = [int(v) for v in _three(args.grid_shape, "--grid-shape")]
        else:
            extent = [(s - 1) * d for s, d in zip(result.phases.shape, result.spacing_um)]
            n = [int(math.floor((e - o) / h)) + 1 for e, o, h in zip(extent, origin, step)]
        grid = Grid(origin_um=origin, spacing_um=step, shape=tuple(n))
    target = result.path / f"coarse_{shape}_{width:.6g}um"
    if grid is not None:
        target = target.with_name(target.name + "_grid_" + "x".join(f"{v:g}" for v in
                                                                     grid.spacing_um) + "um")
    check_destination(target, force=args.force)
    field = coarsen(result.phases, spacing_um=result.spacing_um, kernel=kernel,
                    min_coverage=section.min_coverage, grid=grid, A3_um3=rev["A3_um3"])
    with result_folder(target, force=args.force) as tmp:
        write_coarse_field(tmp, field)
        (tmp / "kernel.json").write_text(json.dumps({
            "kernel": kernel.name, "shape": shape, "width_um": width,
            "width_source": width_source, "truncate_sigma": section.truncate_sigma,
            "min_coverage": section.min_coverage, "integral_range_um3": rev["A3_um3"],
            "integral_range_source": rev["source"]}, indent=2, ensure_ascii=False) + "\n",
            encoding="utf-8")
    valid = int(np.count_nonzero(np.isfinite(field.porosity)))
    if valid == 0:
        print(f"{result.path}: warning: no point of the field reaches min_coverage "
              f"{section.min_coverage:g}: the kernel ({kernel.name}) is too wide for this "
              "piece; give a smaller --width or lower coarsen.min_coverage", file=sys.stderr)
    print(f"{result.path}: {kernel.name} field (width from the {width_source}; sampling "
          f"uncertainty from A3 = {rev['A3_um3']:.4g} µm³, {rev['source']}) -> {target}")
    return 0


def _three(text, name):
    parts = [p for p in str(text).replace(" ", ",").split(",") if p]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise InputError(f"{name} {text!r} is not a list of numbers", "write z,y,x") from None
    if len(values) == 1:
        values *= 3
    if len(values) != 3:
        raise InputError(f"{name} needs one value or three (z,y,x); got {text!r}", "write z,y,x")
    return values
