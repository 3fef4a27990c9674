"""A small analysed piece for the viewer tests: grey OME-TIFF, result folder, coarse field and
a scan-vs-model comparison, built once per test session (about 5–10 s)."""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from viewer_phantom import COARSE_GRID, SHAPE, SPACING_UM, make_phantom


@dataclass
class Piece:
    grey: np.ndarray          # uint8 (z, y, x)
    truth: np.ndarray         # uint8 phases by construction
    stack: Path               # the grey OME-TIFF
    result: Path              # result folder of ctpore.analyze
    coarse: Path              # coarse field folder
    compare: Path             # compare_<name> folder
    summary: dict


def _model_csv(path: Path, phases, spacing_um):
    """A model porosity field on a regular grid in the scan frame (x, y, z in µm)."""
    step = 12.0
    ext = [(n - 1) * d for n, d in zip(phases.shape, spacing_um)]
    zs, ys, xs = (np.arange(6.0, e - 5.0, step) for e in ext)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["x", "y", "z", "porosity"])
        for zz in zs:
            for yy in ys:
                for xx in xs:
                    w.writerow([xx, yy, zz, 0.1])


@pytest.fixture(scope="session")
def piece(tmp_path_factory) -> Piece:
    from ctpore import analyze
    from ctpore.cli import main
    from ctpore.continuum.coarse import Grid, coarsen, write_coarse_field
    from ctpore.continuum.kernels import Kernel
    from ctpore.io.ome_tiff import write_ome_tiff
    from ctpore.recipe import Recipe

    root = tmp_path_factory.mktemp("viewer")
    grey, truth = make_phantom()
    stack = write_ome_tiff(root / "piece.ome.tif", grey, SPACING_UM)
    recipe = Recipe().replace("envelope", radius_um=12.0).replace("profiles", enabled=False)
    res = analyze(stack, recipe=recipe, out=root / "piece_ctpore")
    assert (res.out / "pore_thickness.ome.tif").is_file()

    ext = [(n - 1) * d for n, d in zip(SHAPE, SPACING_UM)]
    g = COARSE_GRID
    grid = Grid(origin_um=g["origin_um"], spacing_um=g["spacing_um"],
                shape=tuple(int((e - o) // s) + 1 for e, o, s in
                            zip(ext, g["origin_um"], g["spacing_um"])))
    field = coarsen(res.phases, spacing_um=SPACING_UM, kernel=Kernel("box", 12.0),
                    min_coverage=0.5, grid=grid)
    coarse = res.out / "coarse_box_12um_grid_6x6x6um"
    coarse.mkdir()
    write_coarse_field(coarse, field)

    model = root / "model.csv"
    _model_csv(model, res.phases, SPACING_UM)
    status = main(["compare", str(res.out), str(model), "--length-unit", "um", "--align",
                   "none", "--kernel", "box", "--width", "12um", "--quiet"])
    assert status == 0
    return Piece(grey=grey, truth=truth, stack=stack, result=res.out, coarse=coarse,
                 compare=res.out / "compare_model", summary=res.summary)
