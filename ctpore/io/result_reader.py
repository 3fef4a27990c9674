"""Read back a result folder written by ``ctpore analyze``: phases, voxel size, recipe, summary."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["ResultFolder", "open_result"]


@dataclass
class ResultFolder:
    """A result folder's contents needed to re-make profiles, coarse fields or the REV study."""

    path: Path
    phases: np.ndarray
    spacing_um: tuple[float, float, float]
    summary: dict
    recipe: object  # ctpore.recipe.Recipe


def open_result(path) -> ResultFolder:
    """Open a result folder; raise InputError naming what is missing and how to fix it."""
    from ..recipe import load_recipe
    from .stack_readers import read_stack

    path = Path(path)
    if not path.is_dir():
        raise InputError(f"result folder {path} does not exist",
                         "give the --out folder of a `ctpore analyze` run")
    missing = [n for n in ("summary.json", "phases.ome.tif", "recipe.toml")
               if not (path / n).is_file()]
    if missing:
        raise InputError(f"{path} is not a complete ctpore result folder (missing "
                         f"{', '.join(missing)})", "run `ctpore analyze STACK --out FOLDER` first")
    scan = read_stack(path / "phases.ome.tif")
    phases = scan.load()
    if phases.dtype != np.uint8 or phases.max(initial=0) > 2:
        raise InputError(f"{path / 'phases.ome.tif'} does not hold phase labels 0/1/2",
                         "re-run `ctpore analyze` to re-make the result folder")
    summary = json.loads((path / "summary.json").read_text(encoding="utf-8"))
    return ResultFolder(path=path, phases=phases, spacing_um=scan.spacing_um, summary=summary,
                        recipe=load_recipe(path / "recipe.toml"))
