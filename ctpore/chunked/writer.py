"""The result folder of a chunked run: the layout of ``analyze``, written slice by slice.

Same files as :func:`ctpore.io.result_writer.write_result` where the chunked path computes
them (summary.json, measurements.csv, phases.ome.tif, recipe.toml, provenance.json, the
threshold and slice figures, pore/wall thickness maps and thickness_distribution.csv, the
profiles folder). The OME-TIFF writer reads the chunked arrays one z slice at a time. Cells and
chord tables are not written (the chunked path does not compute them).
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["write_chunked_result"]


def write_chunked_result(result, out, *, force: bool, argv=None, thickness=None,
                         thickness_table=None) -> Path:
    """Write ``result`` (an AnalysisResult with on-disk ``phases``) to ``out``, whole or not at all.

    ``thickness`` maps ``"pore"``/``"wall"`` to chunked arrays of local thickness (µm).
    """
    from ..io.ome_tiff import write_ome_tiff
    from ..io.result_folder import result_folder, write_csv_rows, write_json
    from ..io.result_writer import flatten_summary
    from ..provenance import provenance_record
    from .figures import save_chunked_figures

    out = Path(out)
    scan = result.scan
    with result_folder(out, force=force) as tmp:
        write_json(tmp / "summary.json", result.summary)
        rows = [[k, v] for k, v in flatten_summary(result.summary).items()]
        write_csv_rows(tmp / "measurements.csv", ["quantity", "value"], rows)
        write_ome_tiff(tmp / "phases.ome.tif", result.phases, scan.spacing_um,
                       name="phases: 0 exterior, 1 pore, 2 solid")
        (tmp / "recipe.toml").write_text(result.recipe.to_toml(), encoding="utf-8")
        write_json(tmp / "provenance.json",
                   provenance_record(source=scan.source, argv=argv,
                                     spacing_source=scan.spacing_source,
                                     timings_s=result.timings_s, files=scan.meta.get("files")))
        save_chunked_figures(scan.data, result.phases, spacing_um=scan.spacing_um,
                             threshold=result.summary["threshold"], histogram=result.histogram,
                             folder=tmp / "figures")
        if thickness:
            for key, title in (("pore", "pore local thickness (cell size), µm"),
                               ("wall", "wall local thickness, µm")):
                write_ome_tiff(tmp / f"{key}_thickness.ome.tif", thickness[key],
                               scan.spacing_um, name=title)
        if thickness_table is not None:
            names = list(thickness_table)
            columns = [list(thickness_table[n]) for n in names]
            write_csv_rows(tmp / "thickness_distribution.csv", names,
                           [list(r) for r in zip(*columns)])
        if result.profiles is not None and result.profiles.get("depth") is not None:
            from ..report.profile_plots import write_profiles

            write_profiles(tmp, result.profiles, result.profiles["frame"])
        from ..report.html import write_report

        write_report(tmp, name=Path(out).name)
    return out
