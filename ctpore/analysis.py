"""``analyze``: one call from a stack (or array) to porosity numbers and a result folder."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import __version__
from .errors import InputError
from .progress import Progress
from .recipe import Recipe, load_recipe
from .scan import Scan
from .segment.uncertainty import segmentation_uncertainty

__all__ = ["AnalysisResult", "analyze", "SUMMARY_KEYS", "STRUCTURE_KEYS"]

#: Keys every summary.json carries (later versions only add keys).
SUMMARY_KEYS = (
    "porosity_gas", "porosity_open", "porosity_closed",
    "envelope_volume_mm3", "solid_volume_mm3", "pore_volume_mm3",
    "open_pore_volume_mm3", "closed_pore_volume_mm3", "closed_pore_count",
    "spacing_um", "shape_voxels", "threshold", "envelope", "derived", "warnings", "input",
    "porosity_partial_volume", "partial_volume",
)


#: Keys added when the [structure] measures run (the default).
STRUCTURE_KEYS = (
    "pore_thickness_mean_um", "pore_thickness_d50_um", "wall_thickness_mean_um",
    "wall_thickness_d50_um", "cell_count", "cell_density_per_mm3", "cell_diameter_mean_um",
    "specific_surface_per_mm", "euler_characteristic", "connectivity_density_per_mm3",
    "degree_of_anisotropy",
)


@dataclass
class AnalysisResult:
    """The outcome of :func:`analyze`.

    Attributes
    ----------
    summary : dict
        Exactly what summary.json holds.
    phases : uint8 array
        0 exterior, 1 pore, 2 solid.
    scan : Scan
        The grey stack and its voxel size.
    recipe : Recipe
        The parameters used, defaults filled in.
    out : Path or None
        The result folder, when one was written.
    """

    summary: dict
    phases: np.ndarray
    scan: Scan
    recipe: Recipe
    out: Path | None = None
    timings_s: dict = field(default_factory=dict)
    histogram: tuple | None = None  # (counts, bin centres) of the grey values thresholded
    structure: object | None = None  # ctpore.measure.structure.StructureResult, when run
    profiles: dict | None = None  # ctpore.profiles.profiles_for_result output, when run


def analyze(stack, *, spacing_um=None, recipe=None, out=None, force: bool = False,
            quiet: bool = True, argv: list[str] | None = None,
            memory_limit_bytes: int | None = None, scheduler=None) -> AnalysisResult:
    """Segment a micro-CT stack of one piece and measure its porosity.

    Parameters
    ----------
    stack : str, Path, Scan or array (z, y, x)
        A stack file or slice folder (see :func:`ctpore.read_stack`), a :class:`Scan`, or an
        array (then ``spacing_um`` is required).
    spacing_um : float or 3 floats, optional
        Voxel size (dz, dy, dx) in µm; overrides the file's metadata.
    recipe : Recipe, path of a TOML recipe, or None
        Parameters; defaults when None.
    out : str or Path, optional
        Result folder to write (summary.json, measurements.csv, phases.ome.tif, recipe.toml,
        provenance.json). Nothing is written when None.
    force : bool
        Replace an existing result folder.
    quiet : bool
        Print no progress.
    argv : list of str, optional
        Command line, recorded in provenance.json.
    memory_limit_bytes : int, optional
        Memory budget. When the in-memory analysis of this stack would need more (about 55
        bytes per voxel, measured), the stack is analysed chunk by chunk on disk
        (:func:`ctpore.chunked.analyze_chunked`, same numbers, fewer measures). Without a
        budget, 80 % of the memory available now is the budget (when psutil is installed).
    scheduler : str or dask.distributed.Client, optional
        Run the chunked path on this dask scheduler (implies the chunked path).

    Returns
    -------
    AnalysisResult
        ``.summary`` is the summary.json dict.

    Raises
    ------
    InputError
        Bad input (file, voxel size, recipe, destination); nothing is written.
    """
    from .io.stack_readers import check_finite, read_stack
    from .measure.derived import derived_quantities
    from .measure.porosity import porosity
    from .segment.pipeline import segment

    if not isinstance(recipe, Recipe):
        recipe = load_recipe(recipe)
    if out is not None:
        from .io.result_folder import check_destination

        inputs = (Path(stack),) if isinstance(stack, (str, Path)) else ()
        check_destination(out, force=force, inputs=inputs)

    progress = Progress(6 + (3 if recipe.structure.enabled else 0)
                        + (1 if recipe.profiles.enabled else 0)
                        + (1 if recipe.corrections.cupping else 0)
                        + (1 if recipe.corrections.uncertainty else 0), quiet=quiet)
    scan = _as_scan(stack, spacing_um, read_stack)  # lazy: nothing is read yet
    if _use_chunked(scan.shape, memory_limit_bytes, scheduler,
                    structure=recipe.structure.enabled):
        from .chunked import analyze_chunked

        return analyze_chunked(scan, recipe=recipe, memory_limit_bytes=memory_limit_bytes,
                               scheduler=scheduler, out=out, force=force, quiet=quiet,
                               argv=argv)
    with progress.step("read stack"):
        grey = scan.load()
        check_finite(grey, scan.source)
        _check_contrast(grey, scan.source)
    seg = segment(grey, spacing_um=scan.spacing_um, recipe=recipe, progress=progress)
    with progress.step("porosity"):
        measured = porosity(seg.phases, spacing_um=scan.spacing_um)
        derived = derived_quantities(measured, recipe.sample)
        measured.update(_partial_volume(seg, scan.spacing_um, recipe))
    if recipe.corrections.uncertainty:
        with progress.step("segmentation uncertainty (threshold span, two envelopes)"):
            measured["uncertainty"] = segmentation_uncertainty(
                seg, spacing_um=scan.spacing_um, recipe=recipe,
                wall_thickness=recipe.structure.enabled,
                partial_volume=measured["partial_volume"])
    if seg.cupping is not None:
        measured["cupping"] = {k: seg.cupping[k] for k in
                               ("trend_coefficients", "reference_grey", "gas_grey")}
        measured["cupping"]["profile_before"] = _columns(seg.cupping["profile_before"])
        measured["cupping"]["profile_after"] = _columns(seg.cupping["profile_after"])
    summary = _summary(scan, recipe, seg, measured, derived)
    structure = None
    if recipe.structure.enabled:
        from .measure.structure import structure_measures

        structure = structure_measures(seg.phases, seg.grey, threshold_value=seg.threshold.value,
                                       spacing_um=scan.spacing_um, section=recipe.structure,
                                       step=progress.step)
        summary.update(structure.summary)
        summary["warnings"].extend(_structure_warnings(structure, scan.spacing_um))
    profiles = None
    if recipe.profiles.enabled:
        from .profiles import profiles_for_result

        with progress.step("profiles: depth, radial, axial, r-z map"):
            profiles = profiles_for_result(seg.phases, spacing_um=scan.spacing_um,
                                           section=recipe.profiles)
        summary["piece_frame"] = profiles["frame"].to_dict()
    from .segment.threshold import grey_histogram

    result = AnalysisResult(summary=summary, phases=seg.phases, scan=scan, recipe=recipe,
                            timings_s=progress.timings_s, histogram=grey_histogram(seg.grey),
                            structure=structure, profiles=profiles)
    if out is not None:
        from .io.result_writer import write_result

        result.out = write_result(result, out, force=force, argv=argv)
    return result


def _as_scan(stack, spacing_um, read_stack) -> Scan:
    if isinstance(stack, Scan):
        if spacing_um is not None:
            stack = Scan(stack.data, spacing_um, stack.source, "user", dict(stack.meta))
        return stack
    if isinstance(stack, (str, Path)):
        return read_stack(stack, spacing_um=spacing_um)
    array = np.asarray(stack)
    if array.ndim != 3:
        raise InputError(f"the array has {array.ndim} dimensions; a stack needs 3 (z, y, x)",
                         "pass a 3-D array")
    if spacing_um is None:
        raise InputError("spacing_um is missing for an array input; ctpore never assumes one",
                         "pass spacing_um=(dz, dy, dx) in µm")
    return Scan(array, spacing_um, "<array>", "user", {"format": "array"})


def _use_chunked(shape, memory_limit_bytes, scheduler, *, structure: bool = True) -> bool:
    """True when a scheduler is given or the in-memory peak would exceed the budget."""
    if scheduler is not None:
        return True
    from .chunked.memory import in_memory_peak_bytes

    budget = memory_limit_bytes
    if budget is None:
        try:
            import psutil
        except ImportError:
            return False
        budget = 0.8 * psutil.virtual_memory().available
    return in_memory_peak_bytes(tuple(shape), structure=structure) > budget


def _check_contrast(grey, source):
    lo, hi = np.min(grey), np.max(grey)
    if lo == hi:
        raise InputError(f"{source}: every voxel has the grey value {lo}; no threshold exists",
                         "check that the file is the reconstructed stack and not an empty export")


def _columns(table: dict) -> dict:
    return {k: np.asarray(v).tolist() for k, v in table.items()}


def _partial_volume(seg, spacing_um, recipe) -> dict:
    """Threshold-free porosity from the mean grey value (linear mixing), with its estimates."""
    from .segment.partial_volume import partial_volume_porosity

    pv = partial_volume_porosity(seg.grey, seg.envelope, choice=seg.threshold,
                                 spacing_um=spacing_um,
                                 solid_is_bright=recipe.threshold.solid_is_bright)
    return _partial_volume_entries(pv)


def _partial_volume_entries(pv: dict) -> dict:
    """The summary entries of a ``partial_volume_porosity`` result (also the chunked path's)."""
    keys = ("porosity_partial_volume", "porosity_partial_volume_uncertainty", "gas_grey",
            "solid_grey", "gas_grey_spread", "solid_grey_spread", "gas_voxels_used",
            "solid_voxels_used", "gas_grey_source", "solid_grey_source")
    return {"partial_volume": {k: pv[k] for k in keys if k in pv},
            "porosity_partial_volume": pv["porosity_partial_volume"]}


def _structure_warnings(structure, spacing_um) -> list[str]:
    """Flag cell counts dominated by specks of a few voxels (noise counted as cells)."""
    table = structure.cell_table
    if len(table.volume_um3) == 0:
        return []
    small = float(np.prod(spacing_um)) * 27
    share = float(np.mean(np.asarray(table.volume_um3) < small))
    if share > 0.3:
        return [f"{share:.0%} of the cells are smaller than 27 voxels ({small:.4g} µm³): noise "
                "specks or fragments are being counted as cells; set "
                "structure.min_cell_volume_um3 (merges them into neighbours) or "
                "clean.min_pore_speck_um3"]
    return []


def _summary(scan, recipe, seg, measured, derived) -> dict:
    warnings = []
    if measured.get("touches_border"):  # key from measure.porosity
        warnings.append("the piece's envelope reaches the image border: the piece may be cut "
                        "by the field of view, and pores at the border count as open")
    if scan.meta.get("spacing_differs_from_metadata"):
        warnings.append(f"the voxel size given ({', '.join(f'{v:g}' for v in scan.spacing_um)} "
                        f"µm) differs from the file's metadata "
                        f"({scan.meta.get('metadata_spacing_um')}); the given one was used")
    warnings.extend(n for n in derived.get("notes", []) if n.startswith("inconsistent"))
    pv = measured.get("partial_volume", {})
    if pv.get("solid_voxels_used", 1000) < 100:
        warnings.append(f"porosity_partial_volume rests on {pv.get('solid_voxels_used')} voxels "
                        "of thick solid: walls are too thin to show the pure solid grey value, "
                        "so it is uncertain (see partial_volume.porosity_partial_volume_"
                        "uncertainty)")
    band = seg.band
    if band["porosity_high"] - band["porosity_low"] > 0.05:
        warnings.append("the porosity moves by more than 0.05 within the threshold band: "
                        "thin walls or low contrast; see docs/user-guide.md on thresholds")
    t = seg.threshold
    summary = dict(measured)
    summary.update({
        "input": scan.source,
        "spacing_um": list(scan.spacing_um),
        "spacing_source": scan.spacing_source,
        "shape_voxels": list(scan.shape),
        "threshold": {
            "method": t.method,
            "value": float(t.value),
            "delta": float(t.delta),
            "gas_peak": float(t.gas_peak),
            "solid_peak": float(t.solid_peak),
            "porosity_low": band["porosity_low"],
            "porosity_high": band["porosity_high"],
        },
        "envelope": {"method": recipe.envelope.method, "radius_um": recipe.envelope.radius_um},
        "derived": {k: v for k, v in derived.items() if k != "notes"},
        "derived_notes": list(derived.get("notes", [])),
        "warnings": warnings,
        "ctpore_version": __version__,
    })
    return summary
