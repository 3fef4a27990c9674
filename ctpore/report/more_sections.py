"""Report sections read from a result's sub-folders and side files: profiles, cupping check,
REV study, coarse fields, comparisons with models, recipe, provenance and cautions.

Each function returns a section dict, or None when the folder holds no data for it.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from .blocks import (bullet_list, fmt, note, pre, read_csv_columns, read_json, section, subhead,
                     table, text)
from .report_figures import contrast_trend, cupping_figure, field_slice_figure

__all__ = ["profiles_section", "cupping_section", "rev_section", "fields_section",
           "comparison_section", "comparison_blocks", "other_figures_section", "recipe_section",
           "provenance_section", "cautions_section", "CAUTIONS"]

_PROFILES = (("depth", "Porosity by depth below the envelope surface: a dense skin shows as low "
                       "porosity in the first bins."),
             ("radial", "Porosity by distance from the piece's long axis."),
             ("axial", "Porosity along the long axis, from the first tip."),
             ("rz_map", "Azimuthally averaged porosity over (distance from the axis, position "
                        "along it), mirrored about the axis."))


def profiles_section(folder: Path, summary: dict, figures) -> dict | None:
    prof = folder / "profiles"
    if not prof.is_dir():
        return None
    blocks = []
    for name, caption in _PROFILES:
        blocks.append(figures.embed(prof / f"{name}.png", caption=caption,
                                    shown_as=f"profiles/{name}.png, profiles/{name}.svg"))
    depth = read_csv_columns(prof / "depth.csv")
    vol, por = np.asarray(depth.get("volume_mm3", []), float), \
        np.asarray(depth.get("porosity_gas", []), float)
    ok = np.isfinite(vol) & np.isfinite(por) & (vol > 0)
    if ok.any() and vol.size == por.size:
        mean = float(np.sum(vol[ok] * por[ok]) / np.sum(vol[ok]))
        blocks.append(text(f"The bins partition the piece, so the volume-weighted mean of the "
                           f"depth profile, {mean:.4f}, equals porosity_gas, "
                           f"{fmt(summary.get('porosity_gas'), 'porosity')}."))
    if not any(blocks):
        return None
    if not isinstance(summary.get("cupping"), dict):
        blocks.append(note("No beam-hardening (cupping) correction was run: a porosity that "
                           "rises from skin to core may partly be an artefact of the scan. Rerun "
                           "with corrections.cupping = true in the recipe to check."))
    return section("profiles", "Porosity profiles", blocks)


def cupping_section(folder: Path, summary: dict, figures) -> dict | None:
    cup = summary.get("cupping")
    if not isinstance(cup, dict) or not cup.get("profile_before"):
        return None
    voxel = max(float(v) for v in (summary.get("spacing_um") or [1.0]))
    gas, ref = cup.get("gas_grey"), cup.get("reference_grey")
    rows = []
    for key, label in (("profile_before", "before correction"),
                       ("profile_after", "after correction")):
        if cup.get(key) and isinstance(gas, (int, float)) and isinstance(ref, (int, float)):
            change = contrast_trend(cup[key], gas_grey=gas, reference_grey=ref, voxel_um=voxel)
            rows.append([label, _percent(change)])
    coef = cup.get("trend_coefficients") or []
    return section("cupping", "Beam-hardening (cupping) check", [
        text("Beam hardening makes the same material read darker toward the centre of a piece. "
             "A global threshold then loses solid in the core and a depth profile shows a "
             "porosity gradient that is partly an artefact. The solid's median grey value is "
             "plotted against depth before and after the correction: after it, the trend "
             "should be flat."),
        figures.make("cupping", cupping_figure, cup, voxel_um=voxel,
                     caption="Median grey value of the solid against depth, before and after "
                             "the correction, with the fitted trend."),
        table(["profile", "contrast change from skin to core"], rows,
              caption="straight-line trend of the solid's contrast over gas across the fitted "
                      "depths (weighted by voxels)"),
        text("Fitted trend (polynomial in depth, µm, highest power first): "
             + ", ".join(f"{c:.4g}" for c in coef) + f"; gas grey {fmt(gas)}, reference solid "
             f"grey {fmt(ref)}.") if coef else None,
    ])


def _percent(change: float) -> str:
    """A signed percentage with one decimal; "+0.0 %" rather than "-0.0 %"."""
    if not math.isfinite(change):
        return "n/a"
    value = round(100.0 * change, 1)
    return f"{value + 0.0:+.1f} %"


_REV_ROWS = (("porosity", "porosity", "bulk porosity of the study"),
             ("integral_range_um3", "µm³", "integral range A3 (fitted)"),
             ("correlation_range_um", "µm", "correlation range"),
             ("relative_error", "", "target relative error ε of one average"),
             ("windows", "", "windows per size"),
             ("rev_volume_um3", "µm³", "representative volume for ε"),
             ("recommended_width_um", "µm", "box side for ε"),
             ("recommended_gaussian_sigma_um", "µm", "Gaussian σ for ε"),
             ("recommended_ball_diameter_um", "µm", "ball diameter for ε"))


def rev_section(folder: Path, figures) -> dict | None:
    data = read_json(folder / "rev" / "rev.json")
    if data is None:
        return None
    rows = [[k, fmt(data[k], k), unit, meaning] for k, unit, meaning in _REV_ROWS if k in data]
    return section("rev", "Representative volume (REV)", [
        text("Porosity variance of windows of growing size, fitted with the integral-range law "
             "D² = p(1 − p)·A3/V (Kanit et al. 2003). The recommended widths are the smallest "
             "kernels whose average reaches the target relative error."),
        table(["quantity", "value", "unit", "meaning"], rows),
        figures.embed(folder / "rev" / "rev_variance.png", caption="Variance against window "
                      "volume with the fitted law.", shown_as="rev/rev_variance.png, .svg"),
        figures.embed(folder / "rev" / "rev_mean.png", caption="Mean window porosity ± 2 SD "
                      "against window width.", shown_as="rev/rev_mean.png, .svg"),
        bullet_list(data.get("notes") or []),
    ])


def _field_folders(folder: Path) -> list[Path]:
    return sorted(p for p in folder.glob("coarse_*") if p.is_dir() and
                  (p / "kernel.json").is_file())


def fields_section(folder: Path, figures) -> dict | None:
    """Coarse (continuum-scale) porosity fields written by ``ctpore coarsen``."""
    blocks = []
    for i, sub in enumerate(_field_folders(folder)):
        k = read_json(sub / "kernel.json") or {}
        blocks.append(subhead(sub.name))
        blocks.append(table(["", "value"], [
            ["kernel", fmt(k.get("kernel"))], ["width (µm)", fmt(k.get("width_um"))],
            ["width from", fmt(k.get("width_source"))],
            ["minimum coverage", fmt(k.get("min_coverage"))],
            ["integral range (µm³)", fmt(k.get("integral_range_um3"))]]))
        npz = sub / "coarse_field.npz"
        if npz.is_file():
            with np.load(npz, allow_pickle=False) as data:
                if "spacing_um" in data and data["porosity"].ndim == 3:
                    blocks.append(figures.make(
                        f"field_{i + 1}", field_slice_figure, data["porosity"],
                        spacing_um=data["spacing_um"], origin_um=data["origin_um"],
                        title=str(k.get("kernel", sub.name)),
                        caption=f"{sub.name}: porosity field, middle slice."))
    if not blocks:
        return None
    return section("fields", "Coarse porosity fields", blocks)


_COMPARE_CAPTIONS = {
    "maps": "Scan (kernel-averaged), model and their difference (model − scan) on one section.",
    "parity": "Model against scan porosity at the model's points.",
    "difference": "Difference along the long axis, with the scan's sampling band.",
    "profiles": "Scan and model by depth, distance from the long axis and position along it.",
    "timeseries": "Porosity over time: model curve, scans with ±2u and the differences.",
}


def _comparison_figures(sub: Path, c: dict, figures, prefix: str) -> list:
    """The figures a comparison folder lists (comparison.json "figures"), then any other PNG."""
    names = [n for n in (c.get("figures") or []) if isinstance(n, str)]
    names += sorted(p.name for p in sub.glob("*.png") if p.name not in names
                    and not p.name.startswith("."))
    blocks = []
    for n in names:
        stem = Path(n).stem
        blocks.append(figures.embed(sub / n, caption=_COMPARE_CAPTIONS.get(stem, stem),
                                    shown_as=f"{prefix}{n}"))
    return blocks


def comparison_blocks(sub: Path, figures, *, heading: str = "", own_folder: bool = False) -> list:
    """Blocks of one compare_<name> folder, under a sub-heading when ``heading`` is given.

    File names are shown relative to the report: ``sub``'s own name is left out when the report
    is the comparison folder's own (``own_folder``), which may still have a temporary name.
    """
    c = read_json(sub / "comparison.json")
    if c is None:
        return []
    shape = c.get("shape") or {}
    rows = [["model points", fmt(c.get("n_points"))],
            ["points on the piece", fmt(c.get("n_valid"))],
            ["coverage", fmt(c.get("coverage"), "coverage_fraction")],
            ["RMSE", fmt(c.get("rmse"))], ["MAE", fmt(c.get("mae"))],
            ["bias (model − scan)", fmt(c.get("bias"))],
            ["Pearson r", fmt(c.get("pearson_r"))],
            ["share within the band", fmt(c.get("share_within_band"), "within_share")],
            ["band", fmt(c.get("band"))],
            ["scan kernel", fmt(c.get("kernel"))],
            ["kernel width from", fmt(c.get("width_source"))],
            ["alignment", fmt((c.get("transform") or {}).get("method"))],
            ["model file", fmt(c.get("field_source"))],
            ["length unit", fmt(c.get("length_unit"))]]
    shape_rows = [[k, fmt(shape[k], k)] for k in ("dice", "volume_ratio", "hausdorff_um",
                                                  "mean_surface_distance_um",
                                                  "model_volume_mm3", "scan_volume_mm3")
                  if k in shape]
    blocks = [subhead(heading, sub.name) if heading else None,
              table(["", "value"], rows, caption="point metrics"),
              table(["", "value"], shape_rows, caption="shape of the model's domain against "
                    "the scan's envelope"),
              *_comparison_figures(sub, c, figures, "" if own_folder else f"{sub.name}/")]
    coverage = c.get("coverage")
    if isinstance(coverage, (int, float)) and coverage < 0.5:
        blocks.append(note(f"Only {coverage:.0%} of the model's points fall on the piece: check "
                           "the length unit and the alignment."))
    return blocks


def comparison_section(folders, figures) -> dict | None:
    blocks = []
    for sub in folders:
        name = sub.name[len("compare_"):] if sub.name.startswith("compare_") else sub.name
        blocks += comparison_blocks(sub, figures, heading=f"model field: {name}")
    if not blocks:
        return None
    return section("comparison", "Comparison with simulated fields", [
        text("The scan is averaged with the kernel at each model point after alignment; "
             "differences are model − scan. The band is ±2 SD of the scan's sampling "
             "uncertainty from the integral range.")] + blocks)


def other_figures_section(folder: Path, figures) -> dict | None:
    """PNG figures of the result (figures/, profiles/, rev/) that no other section showed."""
    blocks = []
    for sub in ("figures", "profiles", "rev"):
        for p in sorted((folder / sub).glob("*.png")):
            if p.name.startswith(("report_", ".")) or p.resolve() in figures.embedded:
                continue
            blocks.append(figures.embed(p, caption=p.stem.replace("_", " "),
                                        shown_as=f"{sub}/{p.name}"))
    if not blocks:
        return None
    return section("other-figures", "Other figures", blocks)


def recipe_section(path: Path, caption: str = "") -> dict | None:
    if not path.is_file():
        return None
    return section("recipe", "Recipe", [
        text(caption or "Every parameter of the run, defaults filled in (recipe.toml). Run "
             "ctpore analyze STACK --recipe recipe.toml to repeat it."),
        pre(path.read_text(encoding="utf-8"))])


def provenance_section(path: Path, caption: str = "") -> dict | None:
    prov = read_json(path)
    if prov is None:
        return None
    rows = []
    for key in ("ctpore_version", "python", "platform", "input", "input_sha256",
                "spacing_source", "command_line", "utc_time"):
        if key in prov:
            value = prov[key]
            if isinstance(value, list):
                value = " ".join(str(v) for v in value)
            rows.append([key, fmt(value)])
    packages = [[k, fmt(v)] for k, v in sorted((prov.get("packages") or {}).items())]
    steps = [[k, fmt(v)] for k, v in (prov.get("step_seconds") or {}).items()]
    return section("provenance", "Provenance", [
        text(caption or "As recorded when the result was made (provenance.json). The time is "
             "the run's own, not the report's."),
        table(["", "value"], rows, numeric_from=9),
        table(["package", "version"], packages, caption="package versions", numeric_from=9),
        table(["step", "seconds"], steps, caption="time per step"),
    ])


#: The cautions printed at the end of every report.
CAUTIONS = (
    "These are measurements of structure made from X-ray CT images. They are not by "
    "themselves a validated method for food-safety or product-release decisions; for those, "
    "defer to validated methods, local regulations and licensed professional practice.",
    "Every number depends on the scan (voxel size, blur, contrast, artefacts) and on the "
    "recipe. Compare only results made with one recipe and comparable scans.",
    "X-ray equipment must be operated by licensed personnel under the local radiation-safety "
    "rules.",
)


def cautions_section() -> dict:
    return section("cautions", "Cautions", [bullet_list(CAUTIONS)])
