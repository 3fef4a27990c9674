"""``analyze_chunked``: the analysis of a stack larger than memory, chunk by chunk on disk.

The steps and their results are those of :func:`ctpore.analysis.analyze` (same recipe keys,
same summary names); each step is exact, not approximate (see the step modules). Intermediates
live in a temporary folder of chunked arrays (one .npy file per chunk) that is removed at the
end; at any time the process holds a few chunks with their halos per worker, plus
per-component tables of the labelling.

Not computed in chunked mode (the summary's warnings list them): the cell, surface, topology,
anisotropy and chord measures, and the segmentation-uncertainty ensemble. Refused with an
InputError naming the recipe key: threshold method "li" on float stacks (it needs every grey
value at once), envelope methods other than "closing", and the corrections (rings, cupping,
thin walls, uncertainty).
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from ..errors import InputError
from ..recipe import Recipe, load_recipe
from ..spacing import as_spacing_um

__all__ = ["analyze_chunked", "check_chunked_recipe"]

NOT_COMPUTED = ("cell measures", "specific surface",
                "connectivity (Euler characteristic)", "degree of anisotropy", "chord lengths")


def check_chunked_recipe(recipe: Recipe) -> None:
    """Raise an InputError naming the first recipe key the chunked path cannot honour."""
    from .histogram import STREAMING_METHODS

    c = recipe.corrections
    for key, on in (("rings", c.rings), ("cupping", c.cupping), ("uncertainty", c.uncertainty)):
        if on:
            raise InputError(f"corrections.{key} = true is not available in the chunked "
                             "(--memory) path", f"set corrections.{key} = false, or run in "
                             "memory (without --memory)")
    if c.thin_walls != "none":
        raise InputError(f"corrections.thin_walls = '{c.thin_walls}' is not available in the "
                         "chunked (--memory) path",
                         "set corrections.thin_walls = 'none', or run in memory")
    if recipe.threshold.method not in STREAMING_METHODS:
        raise InputError(
            f"threshold.method = '{recipe.threshold.method}' needs every grey value in memory "
            "at once, which the chunked (--memory) path does not do",
            f"use one of {list(STREAMING_METHODS)} in [threshold], or run in memory")
    if recipe.envelope.method != "closing":
        raise InputError(f"envelope.method = '{recipe.envelope.method}' is not available in the "
                         "chunked (--memory) path",
                         "use envelope.method = 'closing', or run in memory")


def analyze_chunked(stack, *, spacing_um=None, recipe=None, chunks=None,
                    memory_limit_bytes=None, scheduler=None, out=None, force: bool = False,
                    quiet: bool = True, argv=None, temp_dir=None):
    """Segment and measure a stack chunk by chunk, with results equal to ``analyze``'s.

    Parameters
    ----------
    stack : str, Path, Scan, numpy array or dask array (z, y, x)
        As for :func:`ctpore.analysis.analyze`; a dask array needs ``spacing_um``.
    spacing_um : float or 3 floats, optional
        Voxel size (dz, dy, dx) in µm.
    recipe : Recipe, path or None
        Parameters; defaults when None. See :func:`check_chunked_recipe` for what is refused.
    chunks : 3 ints, optional
        Chunk shape; default from :func:`ctpore.chunked.memory.choose_chunks`.
    memory_limit_bytes : int, optional
        Budget for the chunk choice and for the depth-profile halo cap. With a
        ``dask.distributed`` scheduler it is the budget of each worker, lowered to the
        workers' own memory limit when that is smaller, and the chunks are sized for a
        worker's thread count (:meth:`Runner.task_budget`).
    scheduler : None, str or dask.distributed.Client
        Where the tasks run (see :class:`ctpore.chunked._blocks.Runner`); threads by default.
    out : str or Path, optional
        Result folder (same layout as ``analyze``'s where computed).
    force, quiet, argv
        As for ``analyze``.
    temp_dir : path, optional
        Where the temporary folder of chunks goes (default: beside ``out``, else the system's
        temporary folder).

    Returns
    -------
    AnalysisResult
        ``phases`` is a read-only memory map of ``out/phases.ome.tif`` (None without ``out``);
        ``structure`` is None; ``profiles`` as ``analyze`` gives them.
    """
    from .. import analysis
    from ..io.stack_readers import read_stack
    from ..measure.derived import derived_quantities
    from ..progress import Progress
    from ._blocks import Runner
    from .clean import chunked_solid_at
    from .envelope import envelope_halo
    from .filters import chunked_denoise, denoise_halo
    from .histogram import chunked_histogram, chunked_threshold
    from .memory import PeakMemory, choose_chunks
    from .porosity import chunked_phases, chunked_porosity
    from .workspace import Workspace

    if not isinstance(recipe, Recipe):
        recipe = load_recipe(recipe)
    check_chunked_recipe(recipe)
    if out is not None:
        from ..io.result_folder import check_destination

        inputs = (Path(stack),) if isinstance(stack, (str, Path)) else ()
        check_destination(out, force=force, inputs=inputs)
    scan = _scan_of(stack, spacing_um, analysis, read_stack)
    spacing = scan.spacing_um
    halos = {"denoise": denoise_halo(recipe.denoise, spacing),
             "envelope_closing": envelope_halo(recipe.envelope, spacing)}
    runner = Runner(scheduler)
    try:
        workers, budget = runner.task_budget(memory_limit_bytes)
        if chunks is None:
            chunks = choose_chunks(scan.shape, scan.dtype, budget,
                                   halo=tuple(max(h) for h in zip(*halos.values())),
                                   workers=workers)
        chunks = _checked_chunks(chunks, scan.shape)
    except BaseException:
        runner.close()
        raise
    parent = temp_dir if temp_dir is not None else (Path(out).parent if out else None)
    progress = Progress(5 + (recipe.denoise.method != "none") + bool(recipe.structure.enabled)
                        + bool(recipe.profiles.enabled) + (out is not None), quiet=quiet)
    ws = Workspace(scan.shape, chunks, parent=parent)
    try:
        with PeakMemory() as memory:

            @contextmanager
            def step(name):
                with progress.step(name), memory.step(name):
                    yield

            with step("copy the stack into chunks"):
                source = _copy_in(ws, runner, scan.data)
            grey = source
            if recipe.denoise.method != "none":
                with step(f"denoise ({recipe.denoise.method}), chunked"):
                    grey = chunked_denoise(ws, runner, source, spacing=spacing,
                                           section=recipe.denoise)
            with step(f"threshold ({recipe.threshold.method}), streaming histogram"):
                grey_arr = ws.array(Path(grey).stem)
                choice = chunked_threshold(grey_arr, ws.blocks, section=recipe.threshold)
                histogram = chunked_histogram(grey_arr, ws.blocks)
                solid = chunked_solid_at(ws, runner, grey, choice.value, spacing=spacing,
                                         recipe=recipe)
            with step(f"envelope ({recipe.envelope.method}), chunked"):
                from .envelope import chunked_envelope

                env = chunked_envelope(ws, runner, solid, spacing=spacing,
                                       section=recipe.envelope)
                phases = chunked_phases(ws, runner, solid, env)
            with step("threshold sensitivity band"):
                band = _band(ws, runner, grey, env, choice, spacing, recipe)
            with step("porosity, open and closed (labels across chunks)"):
                measured, classes = chunked_porosity(ws, runner, phases, spacing_um=spacing)
                derived = derived_quantities(measured, recipe.sample)
                measured.update(_partial_volume(ws, runner, grey, env, choice, spacing, recipe))
            summary = analysis._summary(scan, recipe, SimpleNamespace(band=band,
                                                                      threshold=choice),
                                        measured, derived)
            thickness, thickness_table = None, None
            if recipe.structure.enabled:
                with step("local thickness of pores and walls, chunked"):
                    thickness, thickness_table, keys, lt_halos = _thickness(
                        ws, runner, phases, spacing, recipe.structure)
                    summary.update(keys)
                    halos.update(lt_halos)
            profiles = None
            if recipe.profiles.enabled:
                from .profiles import chunked_profiles

                with step("profiles: depth, radial, axial, r-z map"):
                    profiles = chunked_profiles(
                        ws, runner, classes, spacing=spacing, section=recipe.profiles,
                        max_depth_halo_um=_depth_cap(budget, chunks, spacing, workers))
                summary["piece_frame"] = profiles["frame"].to_dict()
                if profiles.get("depth") is None:
                    summary["warnings"].append(profiles["depth_note"])
            summary["warnings"].extend(_budget_warnings(halos, chunks, budget, workers))
            summary["warnings"].append(
                "chunked analysis: not computed here: " + ", ".join(NOT_COMPUTED)
                + "; run in memory (without --memory) for them")
        summary["chunked"] = {
            "chunk_shape_voxels": list(chunks),
            "halo_voxels": {k: list(v) for k, v in halos.items()},
            "peak_memory_bytes": int(memory.peak_bytes),
            "peak_memory_anonymous_bytes": int(memory.peak_anonymous_bytes),
            "peak_memory_bytes_by_step": {k: int(v) for k, v in memory.by_step.items()},
            "start_memory_bytes": int(memory.start_bytes),
            "memory_limit_bytes": memory_limit_bytes,
            "task_budget": {"concurrent_tasks_per_process": workers or _workers_here(),
                            "memory_bytes_per_process": budget},
            "scheduler": runner.name,
            "memory_measure": "resident set size of this process and its children, sampled "
                              "every 20 ms; 'anonymous' leaves out file-backed pages (the "
                              "page cache of memory-mapped input and work files)",
        }
        result = analysis.AnalysisResult(summary=summary, phases=None, scan=scan, recipe=recipe,
                                         timings_s=progress.timings_s, histogram=histogram,
                                         structure=None, profiles=profiles)
        if out is not None:
            from .writer import write_chunked_result

            with progress.step("write the result folder"):
                result.phases = ws.array("phases")
                maps = None
                if thickness is not None:
                    maps = {k: ws.array(Path(v).stem) for k, v in thickness.items()}
                result.out = write_chunked_result(result, out, force=force, argv=argv,
                                                  thickness=maps,
                                                  thickness_table=thickness_table)
            import tifffile

            result.phases = tifffile.memmap(Path(out) / "phases.ome.tif", mode="r")
        else:
            result.phases = None
        return result
    finally:
        ws.close()
        runner.close()


def _scan_of(stack, spacing_um, analysis, read_stack):
    from ..scan import Scan

    if hasattr(stack, "dask") and hasattr(stack, "chunks"):  # a dask array
        if stack.ndim != 3:
            raise InputError(f"the array has {stack.ndim} dimensions; a stack needs 3 (z, y, x)",
                             "pass a 3-D array")
        if spacing_um is None:
            raise InputError("spacing_um is missing for an array input; ctpore never assumes "
                             "one", "pass spacing_um=(dz, dy, dx) in µm")
        return Scan(stack, as_spacing_um(spacing_um), "<dask array>", "user",
                    {"format": "dask array"})
    return analysis._as_scan(stack, spacing_um, read_stack)


def _checked_chunks(chunks, shape):
    try:
        chunks = tuple(int(c) for c in chunks)
    except (TypeError, ValueError):
        chunks = ()
    if len(chunks) != 3 or min(chunks) < 1:
        raise InputError(f"chunks must be 3 positive whole numbers (z, y, x); got {chunks!r}",
                         "give e.g. chunks=(128, 128, 128), or leave it out")
    return tuple(min(c, n) for c, n in zip(chunks, shape))


def _copy_in(ws, runner, data) -> str:
    """Copy the stack into the workspace's chunk grid (dask arrays with the scheduler)."""
    path = ws.create("input", np.dtype(data.dtype))
    if hasattr(data, "dask"):
        import dask.array as da

        da.store(data.rechunk(ws.chunks), ws.array("input", "r+"), lock=False,
                 scheduler=runner.scheduler)
    else:
        target = ws.array("input", "r+")
        for block in ws.blocks:  # lazy stacks are read one chunk at a time
            target[block.slices] = np.asarray(data[block.slices])
    return path


def _band(ws, runner, grey, env, choice, spacing, recipe) -> dict:
    """``segment.pipeline.sensitivity_band`` across chunks."""
    from ._tables import count_blocks
    from .clean import chunked_solid_at

    env_count = int(count_blocks(ws, runner, _count_true, [env]))
    values = {}
    for sign, name in ((-1.0, "band_low"), (1.0, "band_high")):
        t = choice.value + sign * choice.delta
        solid = chunked_solid_at(ws, runner, grey, t, spacing=spacing, recipe=recipe, name=name)
        inside = int(count_blocks(ws, runner, _count_both, [solid, env]))
        values[sign] = (env_count - inside) / env_count
        for suffix in ("_raw", "_clean1", "_clean2", "_clean3"):
            ws.remove(name + suffix)
    low, high = sorted(values.values())
    return {"porosity_low": float(low), "porosity_high": float(high),
            "value_low": float(choice.value - choice.delta),
            "value_high": float(choice.value + choice.delta)}


def _partial_volume(ws, runner, grey, env, choice, spacing, recipe) -> dict:
    """``analysis._partial_volume`` across chunks (same keys)."""
    from ..analysis import _partial_volume_entries
    from .partial_volume import chunked_partial_volume

    pv = chunked_partial_volume(ws, runner, grey, env, choice=choice, spacing=spacing,
                                solid_is_bright=recipe.threshold.solid_is_bright)
    return _partial_volume_entries(pv)


def _count_true(x):
    return int(np.count_nonzero(x))


def _count_both(a, b):
    return int(np.count_nonzero(a.astype(bool) & b.astype(bool)))


def _pore(phases):
    return phases == 1


def _wall(phases):
    return phases == 2


def _thickness(ws, runner, phases, spacing, section):
    """Pore and wall thickness maps, summary keys and the distribution table."""
    from .thickness import (chunked_local_thickness, chunked_thickness_histogram,
                            chunked_thickness_statistics)

    maps, keys, halos, hists = {}, {}, {}, {}
    bin_um = section.thickness_bin_um or min(spacing)
    for name, fn in (("pore", _pore), ("wall", _wall)):
        path, _, halo = chunked_local_thickness(ws, runner, fn, [phases], spacing=spacing,
                                                name=f"{name}_thickness")
        maps[name] = path
        halos[f"{name}_thickness"] = halo
        stats = chunked_thickness_statistics(ws, runner, path, fn, [phases])
        for key in ("mean_um", "sd_um", "d10_um", "d50_um", "d90_um", "max_um"):
            keys[f"{name}_thickness_{key}"] = stats[key]
        hists[name] = chunked_thickness_histogram(ws, runner, path, fn, [phases],
                                                  bin_width_um=bin_um)
    n = max(len(hists["pore"]["volume_fraction"]), len(hists["wall"]["volume_fraction"]))
    lower = np.arange(n) * bin_um
    table = {"bin_lower_um": lower, "bin_upper_um": lower + bin_um,
             "pore_volume_fraction": _pad(hists["pore"]["volume_fraction"], n),
             "wall_volume_fraction": _pad(hists["wall"]["volume_fraction"], n)}
    return maps, table, keys, halos


def _pad(values, n):
    out = np.zeros(n)
    out[: len(values)] = values
    return out


def _workers_here() -> int:
    from .memory import _workers

    return _workers(None)


def _budget_warnings(halos, chunks, memory_limit_bytes, workers=None) -> list[str]:
    """Steps whose extended blocks may need more than the memory budget."""
    from .memory import BASELINE_BYTES, TASK_BYTES_PER_VOXEL, _workers

    if memory_limit_bytes is None:
        return []
    out = []
    for step, halo in halos.items():
        need = BASELINE_BYTES + _workers(workers) * TASK_BYTES_PER_VOXEL * math.prod(
            c + 2 * h for c, h in zip(chunks, halo))
        if need > memory_limit_bytes:
            out.append(f"the {step} step reads chunks with a halo of {list(halo)} voxels "
                       f"(exactness needs it): about {need / 1e9:.2f} GB, more than the "
                       f"memory budget of {memory_limit_bytes / 1e9:.2f} GB")
    return out


def _depth_cap(memory_limit_bytes, chunks, spacing, workers=None) -> float:
    """Largest halo (µm) a depth task may read within the budget (inf without a budget)."""
    from .memory import BASELINE_BYTES, TASK_BYTES_PER_VOXEL, _workers

    if memory_limit_bytes is None:
        return math.inf
    per_task = (memory_limit_bytes - BASELINE_BYTES) / _workers(workers)
    side = (max(per_task, 0) / TASK_BYTES_PER_VOXEL) ** (1 / 3)
    halo_voxels = max(0.0, (side - max(chunks)) / 2)
    return halo_voxels * min(spacing)

