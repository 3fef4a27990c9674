"""Write an analysis result folder: numbers, phases, recipe, provenance and figures."""

from __future__ import annotations

from pathlib import Path

__all__ = ["write_result", "flatten_summary"]


def write_result(result, out, *, force: bool, argv=None) -> Path:
    """Write ``result`` (an AnalysisResult) to the folder ``out``, whole or not at all.

    Files: summary.json, measurements.csv (one row per number, unit in the name),
    phases.ome.tif (uint8, voxel size in µm), recipe.toml (defaults filled in),
    provenance.json, figures/threshold_histogram.png and figures/slices.png, and report.html
    (the self-contained HTML report, :mod:`ctpore.report.html`).
    """
    from ..provenance import provenance_record
    from ..report.figures import save_segmentation_figures
    from .ome_tiff import write_ome_tiff
    from .result_folder import result_folder, write_csv_rows, write_json

    out = Path(out)
    with result_folder(out, force=force) as tmp:
        write_json(tmp / "summary.json", result.summary)
        rows = [[k, v] for k, v in flatten_summary(result.summary).items()]
        write_csv_rows(tmp / "measurements.csv", ["quantity", "value"], rows)
        write_ome_tiff(tmp / "phases.ome.tif", result.phases, result.scan.spacing_um,
                       name="phases: 0 exterior, 1 pore, 2 solid")
        (tmp / "recipe.toml").write_text(result.recipe.to_toml(), encoding="utf-8")
        write_json(tmp / "provenance.json",
                   provenance_record(source=result.scan.source, argv=argv,
                                     spacing_source=result.scan.spacing_source,
                                     timings_s=result.timings_s,
                                     files=result.scan.meta.get("files")))
        save_segmentation_figures(result, tmp / "figures")
        if result.structure is not None:
            _write_structure(tmp, result.structure, result.scan.spacing_um)
        if result.profiles is not None:
            from ..report.profile_plots import write_profiles

            write_profiles(tmp, result.profiles, result.profiles["frame"])
        from ..report.html import write_report

        write_report(tmp, name=out.name)  # inside the folder, so it is whole or absent
    return out


def _write_structure(folder: Path, structure, spacing_um) -> None:
    """Thickness maps, distribution tables and figures of the structure measures."""
    from ..measure.cells import CELL_COLUMNS, cell_table_rows
    from ..report.figures import save_structure_figures
    from .ome_tiff import write_ome_tiff
    from .result_folder import write_csv_rows

    write_ome_tiff(folder / "pore_thickness.ome.tif", structure.pore_thickness, spacing_um,
                   name="pore local thickness (cell size), µm")
    write_ome_tiff(folder / "wall_thickness.ome.tif", structure.wall_thickness, spacing_um,
                   name="wall local thickness, µm")
    _write_columns(folder / "thickness_distribution.csv", structure.thickness_table)
    _write_columns(folder / "chord_lengths.csv", structure.chord_table)
    rows = cell_table_rows(structure.cell_table)
    write_csv_rows(folder / "cells.csv", list(CELL_COLUMNS),
                   [[row[c] for c in CELL_COLUMNS] for row in rows])
    save_structure_figures(structure, folder / "figures")


def _write_columns(path: Path, table: dict) -> None:
    from .result_folder import write_csv_rows

    names = list(table)
    columns = [list(table[n]) for n in names]
    write_csv_rows(path, names, [list(r) for r in zip(*columns)])


def flatten_summary(summary: dict, prefix: str = "") -> dict:
    """Flatten nested keys with dots (threshold.value); lists stay whole."""
    flat = {}
    for key, value in summary.items():
        name = f"{prefix}{key}"
        if isinstance(value, dict):
            flat.update(flatten_summary(value, prefix=f"{name}."))
        elif isinstance(value, list) and value and isinstance(value[0], str):
            flat[name] = " | ".join(value)
        else:
            flat[name] = value
    return flat
