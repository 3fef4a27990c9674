"""Report sections of one analysis result: summary, warnings, threshold, porosity estimates,
segmentation uncertainty, slices, thickness distributions and structure.

Each function takes the result folder (and its summary.json as a dict) and returns a section
dict (:func:`ctpore.report.blocks.section`), or None when the folder holds no data for it.
"""

from __future__ import annotations

import math
from pathlib import Path

from .blocks import (bullet_list, fmt, note, read_csv_columns, section, subhead, table, text,
                     unit_of)
from .report_figures import porosity_estimates_figure, thickness_cumulative_figure

__all__ = ["summary_section", "warnings_section", "threshold_section",
           "partial_volume_section", "uncertainty_section", "slices_section",
           "thickness_section", "structure_section"]

#: Headline rows of the summary table: key and meaning (the unit comes from the key's name).
_HEADLINE = (
    ("porosity_gas", "gas inside the envelope / envelope volume (segmented)"),
    ("porosity_open", "pore connected to the outside through gas"),
    ("porosity_closed", "sealed pore; open + closed = gas"),
    ("porosity_partial_volume", "from the mean grey value (linear mixing), no threshold"),
    ("envelope_volume_mm3", "the piece's own volume (pore + solid)"),
    ("solid_volume_mm3", "solid inside the envelope"),
    ("pore_volume_mm3", "gas inside the envelope"),
    ("open_pore_volume_mm3", "open part of the pore volume"),
    ("closed_pore_volume_mm3", "closed part of the pore volume"),
    ("closed_pore_count", "separate sealed gas regions"),
    ("pore_thickness_d50_um", "median local thickness of the pores (cell size), by volume"),
    ("wall_thickness_d50_um", "median local thickness of the walls, by volume"),
    ("cell_count", "cells after the watershed and the minimum-volume rule"),
    ("cell_density_per_mm3", "cells per mm³ of envelope"),
    ("cell_diameter_mean_um", "mean equivalent-sphere diameter of the cells"),
    ("specific_surface_per_mm", "pore–solid interface area / envelope volume"),
    ("connectivity_density_per_mm3", "independent loops of the solid network per mm³"),
    ("degree_of_anisotropy", "longest / shortest mean intercept length (1: isotropic)"),
)
_SCAN = (("input", "stack the result was made from"),
         ("spacing_um", "voxel size (z, y, x)"),
         ("spacing_source", "where the voxel size came from"),
         ("shape_voxels", "stack size (z, y, x)"),
         ("touches_border", "the envelope reaches the image border"),
         ("ctpore_version", "ctpore version that made the result"))


def _row(key, value, meaning):
    unit = "µm" if key == "spacing_um" else ("voxels" if key == "shape_voxels" else
                                             unit_of(key))
    if key in ("input", "spacing_source", "touches_border", "ctpore_version"):
        unit = ""
    return [key, fmt(value, key), unit, meaning]


def summary_section(folder: Path, summary: dict) -> dict:
    """The main numbers, the derived quantities and the scan facts."""
    rows = []
    thr = summary.get("threshold") or {}
    for key, meaning in _HEADLINE:
        if key not in summary:
            continue
        row = _row(key, summary[key], meaning)
        if key == "porosity_gas" and "porosity_low" in thr:
            row[1] += (f" (band {fmt(thr.get('porosity_low'), key)}–"
                       f"{fmt(thr.get('porosity_high'), key)})")
        if key == "porosity_partial_volume":
            sd = (summary.get("partial_volume") or {}).get("porosity_partial_volume_uncertainty")
            if sd is not None:
                row[1] += f" ± {fmt(sd, key)}"
        rows.append(row)
    derived = summary.get("derived") or {}
    derived_rows = [_row(k, v, "derived from the sample facts")
                    for k, v in sorted(derived.items())]
    scan_rows = [_row(k, summary[k], m) for k, m in _SCAN if k in summary]
    header = ["quantity", "value", "unit", "meaning"]
    blocks = [
        text("All porosities are fractions of the envelope volume, the piece's own volume; "
             "air outside the envelope never counts. The band after the gas porosity is the "
             "porosity at the threshold moved down and up by delta."),
        table(header, rows, caption="main results", numeric_from=1),
        table(header, derived_rows, caption="derived quantities", numeric_from=1),
        bullet_list(summary.get("derived_notes") or []),
        table(header, scan_rows, caption="the scan", numeric_from=1),
    ]
    return section("summary", "Summary", blocks)


def warnings_section(folder: Path, summary: dict) -> dict | None:
    items = summary.get("warnings") or []
    if not items:
        return None
    return section("warnings", "Warnings", [
        text("The analysis flagged the following. Read them before using the numbers."),
        bullet_list(items)])


def threshold_section(folder: Path, summary: dict, figures) -> dict | None:
    thr = summary.get("threshold")
    if not isinstance(thr, dict):
        return None
    lo, hi = thr.get("porosity_low"), thr.get("porosity_high")
    width = hi - lo if isinstance(lo, (int, float)) and isinstance(hi, (int, float)) else None
    rows = [["method", fmt(thr.get("method")), "how the threshold was chosen"],
            ["threshold", fmt(thr.get("value")), "grey value; a voxel at it is gas"],
            ["gas peak", fmt(thr.get("gas_peak")), "mode of the histogram on the gas side"],
            ["solid peak", fmt(thr.get("solid_peak")), "mode on the solid side"],
            ["delta", fmt(thr.get("delta")), "step of the sensitivity band (grey values)"],
            ["porosity, band low", fmt(lo, "porosity"), "the lower porosity of the two "
             "re-runs at threshold ± delta (envelope fixed)"],
            ["porosity, band high", fmt(hi, "porosity"), "the higher of the two"],
            ["band width", fmt(width, "porosity"), "above 0.05 the result depends strongly on "
             "the threshold (walls thin, blurred or low in contrast)"]]
    fig = figures.embed(folder / "figures" / "threshold_histogram.png",
                        caption="Grey-value histogram (log scale) with the threshold (red line) "
                                "and the sensitivity band (shaded).",
                        shown_as="figures/threshold_histogram.png")
    return section("threshold", "Threshold and sensitivity band", [
        fig, table(["", "value", "meaning"], [r for r in rows if r[1] != "n/a"])])


def partial_volume_section(folder: Path, summary: dict, figures) -> dict | None:
    """The threshold-free porosity beside the segmented one, with its pure-phase estimates."""
    pv = summary.get("partial_volume")
    if "porosity_partial_volume" not in summary or not isinstance(pv, dict):
        return None
    phi, phi_pv = summary.get("porosity_gas"), summary.get("porosity_partial_volume")
    diff = phi_pv - phi if isinstance(phi, (int, float)) and isinstance(phi_pv, (int, float)) \
        else None
    rows = [["segmented porosity_gas", fmt(phi, "porosity")],
            ["partial-volume porosity", fmt(phi_pv, "porosity")],
            ["its uncertainty (1 SD)", fmt(pv.get("porosity_partial_volume_uncertainty"),
                                           "porosity")],
            ["partial volume − segmented", fmt(diff, "porosity")]]
    phase_rows = []
    for phase in ("gas", "solid"):
        phase_rows.append([phase, fmt(pv.get(f"{phase}_grey")),
                           fmt(pv.get(f"{phase}_grey_spread")),
                           fmt(pv.get(f"{phase}_voxels_used")),
                           fmt(pv.get(f"{phase}_grey_source"))])
    blocks = [
        text("Under linear mixing, a voxel's grey value is the volume-weighted mean of the pure "
             "gas and solid grey values, so the porosity follows from the mean grey value of "
             "the piece without any threshold. It rests on the two pure-phase grey values, "
             "taken from voxels deep inside each phase. A segmented porosity well above it "
             "suggests thin walls lost to the threshold; one well below, blur or noise counted "
             "as solid."),
        figures.make("porosity_estimates", porosity_estimates_figure, summary,
                     caption="The segmented porosity with its threshold band, the "
                             "segmentation-uncertainty range (when computed) and the "
                             "partial-volume porosity ± 2 SD."),
        table(["", "porosity"], rows, caption="segmented against partial volume"),
        table(["phase", "pure grey value", "spread (robust SD)", "voxels used", "source"],
              phase_rows, caption="pure-phase estimates"),
    ]
    used = pv.get("solid_voxels_used")
    if isinstance(used, (int, float)) and used < 100:
        blocks.append(note(f"The solid grey value rests on {fmt(used)} deep solid voxels: the "
                           "walls are too thin to show pure solid, so the partial-volume "
                           "porosity is uncertain."))
    return section("partial-volume", "Partial-volume porosity", blocks)


def uncertainty_section(folder: Path, summary: dict) -> dict | None:
    """Ranges over the threshold ± delta × envelope-method ensemble."""
    unc = summary.get("uncertainty")
    if not isinstance(unc, dict) or not unc:
        return None
    phi, open_ = summary.get("porosity_gas"), summary.get("porosity_open")
    nominal = {"porosity_gas": phi,
               "open_share": open_ / phi if isinstance(phi, (int, float)) and phi and
               isinstance(open_, (int, float)) else None,
               "wall_thickness_d50_um": summary.get("wall_thickness_d50_um")}
    meaning = {"porosity_gas": "gas porosity", "open_share": "open porosity / gas porosity",
               "wall_thickness_d50_um": "median wall thickness (µm)"}
    rows = []
    for key in ("porosity_gas", "open_share", "wall_thickness_d50_um"):
        lo, hi = unc.get(f"{key}_min"), unc.get(f"{key}_max")
        if lo is None and hi is None:
            continue
        spread = hi - lo if isinstance(lo, (int, float)) and isinstance(hi, (int, float)) \
            else None
        rows.append([key, fmt(nominal[key], key), fmt(lo, key), fmt(hi, key),
                     fmt(spread, key), meaning[key]])
    members = []
    for m in unc.get("members") or []:
        members.append([fmt(m.get("threshold_value")), fmt(m.get("envelope_method")),
                        fmt(m.get("porosity_gas"), "porosity"),
                        fmt(m.get("open_share"), "open_share"),
                        fmt(m.get("wall_thickness_d50_um"))])
    return section("uncertainty", "Segmentation uncertainty", [
        text("The segmentation was repeated with the threshold moved by −delta, 0 and +delta, "
             "each with the closing and the rolling-sphere envelope: the two choices that "
             "laboratories disagree on most. The ranges below span these six runs."),
        table(["quantity", "nominal", "min", "max", "range", "meaning"], rows,
              caption="ranges over the ensemble"),
        table(["threshold", "envelope", "porosity_gas", "open share", "wall D50 (µm)"],
              members, caption="the runs of the ensemble", numeric_from=0),
    ])


def slices_section(folder: Path, figures) -> dict | None:
    fig = figures.embed(folder / "figures" / "slices.png",
                        caption="Middle slices across z, y and x (axes in µm): solid outline in "
                                "orange, envelope in blue.",
                        shown_as="figures/slices.png")
    if fig is None:
        return None
    return section("slices", "Orthogonal slices with the segmentation", [
        fig, text("The blue envelope line should follow the outer skin, run straight across "
                  "the mouths of open cells and not span the crease or other concavities.")])


def _stats_rows(summary, prefix, label):
    keys = ("mean", "sd", "d10", "d50", "d90", "max")
    vals = [summary.get(f"{prefix}_{k}_um") for k in keys]
    if all(v is None for v in vals):
        return []
    return [[label] + [fmt(v) for v in vals]]


def thickness_section(folder: Path, summary: dict, figures) -> dict | None:
    """Local-thickness distributions of pores and walls."""
    table_path = folder / "thickness_distribution.csv"
    columns = read_csv_columns(table_path) if table_path.is_file() else {}
    rows = (_stats_rows(summary, "pore_thickness", "pores (cell size)")
            + _stats_rows(summary, "wall_thickness", "walls"))
    existing = figures.embed(folder / "figures" / "thickness_distributions.png",
                             caption="Volume fraction per thickness bin.",
                             shown_as="figures/thickness_distributions.png")
    made = figures.make("thickness_cumulative", thickness_cumulative_figure, columns, summary,
                        caption="Cumulative volume fraction; dotted lines at the medians "
                                "(D50).") if columns else None
    if not rows and existing is None and made is None:
        return None
    return section("thickness", "Thickness distributions", [
        text("Local thickness: at each point, the diameter of the largest ball inside the "
             "phase that contains the point (in the pores, the cell size; in the solid, the "
             "wall thickness). Statistics are weighted by volume."),
        table(["phase", "mean (µm)", "SD (µm)", "D10 (µm)", "D50 (µm)", "D90 (µm)",
               "max (µm)"], rows),
        existing, made,
        text("Walls thinner than about two voxels, or than the scanner's blur, read thin or "
             "vanish: every thickness here is read at the scan's resolution."),
    ])


_STRUCTURE = (
    ("cell_count", "cells"), ("open_cell_count", "cells reachable by gas from outside"),
    ("closed_cell_count", "sealed cells"), ("border_cell_count", "cells cut by the image border"),
    ("dropped_cell_count", "pores below the minimum cell volume, left out of cell statistics"),
    ("cell_density_per_mm3", "cells per mm³ of envelope"),
    ("cell_diameter_mean_um", "number-weighted mean equivalent diameter"),
    ("cell_diameter_sd_um", "SD of the equivalent diameters"),
    ("cell_diameter_d50_um", "median equivalent diameter"),
    ("interface_area_mm2", "pore–solid interface inside the envelope"),
    ("specific_surface_per_mm", "interface area / envelope volume"),
    ("euler_characteristic", "χ of the solid"),
    ("connectivity", "independent loops of the solid (β1)"),
    ("connectivity_density_per_mm3", "β1 per mm³ of envelope"),
    ("degree_of_anisotropy", "longest / shortest mean intercept length"),
    ("main_orientation_zyx", "direction of the longest mean intercept length (z, y, x)"),
    ("mil_principal_um", "mean intercept lengths, longest first"),
    ("pore_chord_mean_um", "mean pore chord, all axes"),
    ("pore_chord_mean_corrected_um", "the same, corrected for chords cut by the surface"),
    ("solid_chord_mean_um", "mean solid chord, all axes"),
    ("solid_chord_mean_corrected_um", "the same, corrected"),
)


def structure_section(folder: Path, summary: dict) -> dict | None:
    """Cells, surface, topology, anisotropy and chords."""
    rows = [[k, fmt(summary[k], k), unit_of(k) if k != "mil_principal_um" else "µm", m]
            for k, m in _STRUCTURE if k in summary]
    if not rows:
        return None
    blocks = [table(["quantity", "value", "unit", "meaning"], rows)]
    phi, sv = summary.get("porosity_gas"), summary.get("specific_surface_per_mm")
    chord = summary.get("pore_chord_mean_um")
    if all(isinstance(v, (int, float)) for v in (phi, sv, chord)) and sv and \
            math.isfinite(sv) and sv > 0:
        est = 4000.0 * phi / sv  # 4 V_V / S_V in µm (S_V in 1/mm)
        blocks.append(text(f"Cross-check (Underwood 1970, mean intercept length "
                           f"L = 4·V_V/S_V): 4·porosity_gas / specific_surface = {est:.4g} µm "
                           f"against a measured mean pore chord of {chord:.4g} µm; they agree "
                           "for an isotropic structure."))
    return section("structure", "Cell and wall structure", [subhead("Measures")] + blocks)
