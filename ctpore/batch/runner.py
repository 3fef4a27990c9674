"""Run one recipe over every piece of a manifest, in worker processes, resumably.

Layout of a batch folder::

    OUT/ctpore-batch.json      marker: this folder is a ctpore batch (resume is allowed)
    OUT/pieces/<sample_id>/    one analyze() result folder per piece
    OUT/pieces.csv             one row per piece: status, measures, manifest metadata
    OUT/failures.json          the pieces that failed and why

Each piece's result folder is written whole or not at all by :func:`ctpore.analyze` (temporary
folder, renamed when complete), so a run that is killed leaves finished pieces and nothing
half-written. A rerun skips a piece whose folder holds a readable summary.json made from the
same stack path and voxel size with the same parameters (recipe.toml compared section by
section, the ``[batch]`` section aside); other pieces are (re)computed.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import sys
import time
import tomllib
import traceback
from concurrent.futures import Future, ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__
from ..errors import InputError
from ..recipe import Recipe, load_recipe

__all__ = ["BatchRun", "PieceOutcome", "run_batch", "MARKER_NAME", "PIECE_COLUMNS"]

MARKER_NAME = "ctpore-batch.json"

#: Measure columns of pieces.csv, in order (summary.json keys); derived quantities follow.
PIECE_COLUMNS = (
    "porosity_gas", "porosity_open", "porosity_closed", "envelope_volume_mm3",
    "solid_volume_mm3", "pore_volume_mm3", "open_pore_volume_mm3", "closed_pore_volume_mm3",
    "closed_pore_count", "pore_thickness_mean_um", "pore_thickness_d50_um",
    "wall_thickness_mean_um", "wall_thickness_d50_um", "cell_count", "cell_density_per_mm3",
    "cell_diameter_mean_um", "specific_surface_per_mm", "euler_characteristic",
    "connectivity_density_per_mm3", "degree_of_anisotropy", "threshold_value",
)
_MANIFEST_COLUMNS = ("stack_path", "spacing_um", "mass_mg", "moisture", "moisture_basis",
                     "time_s")


@dataclass
class PieceOutcome:
    """What happened to one piece: status "ok", "failed" or "skipped-existing"."""

    sample_id: str
    batch: str
    status: str
    folder: Path
    error: str = ""
    detail: str = ""
    seconds: float = math.nan
    summary: dict | None = None


@dataclass
class BatchRun:
    """The outcome of :func:`run_batch`.

    Attributes
    ----------
    out_dir : Path
    pieces : list of PieceOutcome
        In manifest order.
    table : list of dict
        The rows of pieces.csv (values as numbers, NaN when missing).
    columns : list of str
        The columns of pieces.csv.
    failures : list of dict
        The entries of failures.json.
    """

    out_dir: Path
    pieces: list = field(default_factory=list)
    table: list = field(default_factory=list)
    columns: list = field(default_factory=list)
    failures: list = field(default_factory=list)

    @property
    def pieces_dir(self) -> Path:
        return self.out_dir / "pieces"

    def count(self, status: str) -> int:
        return sum(p.status == status for p in self.pieces)


def run_batch(manifest_rows, *, recipe, out_dir, workers: int = 2, force: bool = False,
              quiet: bool = False, scheduler=None) -> BatchRun:
    """Analyse every piece of a manifest with one recipe; write pieces.csv and failures.json.

    Parameters
    ----------
    manifest_rows : sequence of ManifestRow
        From :func:`ctpore.batch.manifest.read_manifest`.
    recipe : Recipe, path of a TOML recipe, or None
        Parameters of every analysis; each piece's mass and moisture from the manifest replace
        the ``[sample]`` keys ``mass_mg``, ``moisture`` and ``moisture_basis``.
    out_dir : str or Path
        The batch folder. It may exist when it is a ctpore batch (resume) or empty; a folder
        holding other files is refused unless ``force``.
    workers : int
        Worker processes (``spawn`` start method: safe beside threads, same on every OS).
    force : bool
        Recompute every piece, and use a non-empty folder that is not a ctpore batch (its other
        files are left alone).
    quiet : bool
        No progress lines on standard error (one per finished piece otherwise).
    scheduler : concurrent.futures.Executor, optional
        Run the pieces on this executor instead of a new process pool (it is not shut down);
        e.g. a ``ProcessPoolExecutor`` shared between runs. Its ``submit`` must return
        ``concurrent.futures.Future`` objects.

    Returns
    -------
    BatchRun

    Raises
    ------
    InputError
        Before any work: no pieces, duplicate sample ids, a manifest fact the recipe rejects
        (all pieces listed at once), a bad ``workers`` or a refused ``out_dir``. A piece that
        fails during its analysis does not raise: it is listed in failures.json.
    """
    rows = list(manifest_rows)
    if not rows:
        raise InputError("the manifest lists no pieces", "add one row per scanned piece")
    if not isinstance(recipe, Recipe):
        recipe = load_recipe(recipe)
    if scheduler is None and (not isinstance(workers, int) or workers < 1):
        raise InputError(f"workers must be an integer ≥ 1; got {workers!r}",
                         "use --workers 2 (one per core)")
    _check_unique(rows)
    recipes = _piece_recipes(rows, recipe)
    out = _prepare_out_dir(out_dir, force=force)
    pieces_dir = out / "pieces"
    pieces_dir.mkdir(exist_ok=True)
    _remove_partials(pieces_dir)

    outcomes: list[PieceOutcome | None] = [None] * len(rows)
    todo = []
    for i, (row, rcp) in enumerate(zip(rows, recipes)):
        folder = pieces_dir / row.sample_id
        summary = None if force else _finished_summary(folder, rcp, row)
        if summary is not None:
            outcomes[i] = PieceOutcome(row.sample_id, row.batch, "skipped-existing", folder,
                                       summary=summary)
        else:
            todo.append(i)

    report = _Reporter(len(rows), quiet=quiet)
    for i, o in enumerate(outcomes):
        if o is not None:
            report.line(o, rows[i])
    if todo:
        _execute(rows, recipes, todo, outcomes, pieces_dir, workers=workers,
                 scheduler=scheduler, report=report)

    run = BatchRun(out_dir=out, pieces=list(outcomes))
    run.columns, run.table = _pieces_table(rows, run.pieces, out)
    run.failures = [{"sample_id": o.sample_id, "batch": o.batch,
                     "stack_path": str(rows[i].stack_path), "error": o.error,
                     **({"detail": o.detail} if o.detail else {})}
                    for i, o in enumerate(run.pieces) if o.status == "failed"]
    _write_outputs(run)
    if not quiet:
        print(f"ctpore batch: {run.count('ok')} analysed, {run.count('skipped-existing')} "
              f"already done, {run.count('failed')} failed; table {out / 'pieces.csv'}",
              file=sys.stderr, flush=True)
    return run


# ----------------------------------------------------------------------------------------------
# checks before any work


def _check_unique(rows):
    seen = {}
    dupes = []
    for row in rows:
        key = row.sample_id.casefold()
        if key in seen:
            dupes.append(row.sample_id)
        seen[key] = row
    if dupes:
        raise InputError(f"duplicate sample id(s) {dupes} (compared without case)",
                         "give every piece a unique sample_id")


def _piece_recipes(rows, recipe: Recipe) -> list[Recipe]:
    out, problems = [], []
    for row in rows:
        changes = row.sample_changes()
        try:
            out.append(recipe.replace("sample", **changes) if changes else recipe)
        except InputError as err:
            where = f"line {row.line} " if row.line else ""
            problems.append(f"  {where}(sample {row.sample_id!r}): {err.what}"
                            + (f". Fix: {err.fix}" if err.fix else ""))
    if problems:
        raise InputError(f"{len(problems)} piece(s) have sample facts the recipe rejects; "
                         "nothing was run:\n" + "\n".join(problems),
                         "correct the manifest, or add the missing keys to the recipe's "
                         "[sample] section (e.g. solid_density_g_cm3 = 1.5 for moisture)")
    return out


def _prepare_out_dir(out_dir, *, force: bool) -> Path:
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError(f"batch output {out} exists and is a file",
                         "choose another --out folder")
    marker = out / MARKER_NAME
    if out.is_dir() and not marker.is_file():
        foreign = sorted(p.name for p in out.iterdir())
        if foreign and not force:
            shown = ", ".join(foreign[:5]) + (" ..." if len(foreign) > 5 else "")
            raise InputError(f"{out} is not empty and is not a ctpore batch folder (no "
                             f"{MARKER_NAME}); it holds {shown}",
                             "choose another --out folder, or add --force to write the batch "
                             "into it (its other files are left alone)")
    out.mkdir(parents=True, exist_ok=True)
    if not marker.is_file():
        _write_text(marker, json.dumps({"kind": "ctpore batch", "ctpore_version": __version__,
                                        "layout": "pieces/<sample_id>/ result folders, "
                                                  "pieces.csv, failures.json"},
                                       indent=2) + "\n")
    return out


def _remove_partials(pieces_dir: Path):
    """Remove the temporary folders a killed run left (analyze names them .<id>.partial-*)."""
    for p in pieces_dir.iterdir():
        if p.name.startswith(".") and (".partial-" in p.name or ".old-" in p.name) \
                and p.is_dir():
            shutil.rmtree(p, ignore_errors=True)


def _finished_summary(folder: Path, recipe: Recipe, row) -> dict | None:
    """The piece's summary when its result folder is complete and was made from the same stack
    (path), voxel size (when the manifest gives one) and recipe; else None."""
    try:
        summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
        used = tomllib.loads((folder / "recipe.toml").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(summary, dict) or "porosity_gas" not in summary:
        return None
    if summary.get("input") != str(row.stack_path):
        return None
    if row.spacing_um is not None and not _same(list(summary.get("spacing_um") or []),
                                                list(row.spacing_um)):
        return None
    wanted = recipe.to_dict()
    for section, values in wanted.items():
        if section == "batch":  # batch-level settings do not change a piece
            continue
        if not _same(used.get(section), values):
            return None
    return summary


def _same(a, b) -> bool:
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k]) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b))
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return True
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) \
            and not isinstance(a, bool) and not isinstance(b, bool):
        return float(a) == float(b)
    return a == b


# ----------------------------------------------------------------------------------------------
# the work


def _analyze_piece(stack_path, spacing_um, recipe, folder, force):
    """Worker: analyse one piece into its result folder; never raises."""
    start = time.perf_counter()
    try:
        from ..analysis import analyze

        analyze(stack_path, spacing_um=spacing_um, recipe=recipe, out=folder, force=force,
                quiet=True)
        return {"status": "ok", "seconds": time.perf_counter() - start}
    except InputError as err:
        return {"status": "failed", "error": str(err), "seconds": time.perf_counter() - start}
    except Exception as err:  # any failure of one piece must not stop the batch
        return {"status": "failed", "error": f"{type(err).__name__}: {err}",
                "detail": traceback.format_exc(), "seconds": time.perf_counter() - start}


def _execute(rows, recipes, todo, outcomes, pieces_dir, *, workers, scheduler, report):
    own = scheduler is None
    if own:
        import multiprocessing

        executor = ProcessPoolExecutor(max_workers=min(workers, len(todo)),
                                       mp_context=multiprocessing.get_context("spawn"))
    else:
        executor = scheduler
    try:
        futures = {}
        for i in todo:
            row = rows[i]
            folder = pieces_dir / row.sample_id
            # a folder that is there but incomplete or made otherwise is replaced
            replace = folder.exists()
            fut = executor.submit(_analyze_piece, str(row.stack_path), row.spacing_um,
                                  recipes[i], str(folder), replace)
            futures[fut] = i
        for fut in as_completed(futures):
            i = futures[fut]
            row = rows[i]
            folder = pieces_dir / row.sample_id
            res = _result_of(fut)
            outcome = PieceOutcome(row.sample_id, row.batch, res["status"], folder,
                                   error=res.get("error", ""), detail=res.get("detail", ""),
                                   seconds=res.get("seconds", math.nan))
            if outcome.status == "ok":
                outcome.summary = _read_summary(folder)
                if outcome.summary is None:
                    outcome.status = "failed"
                    outcome.error = f"{folder / 'summary.json'} is missing after the analysis"
            outcomes[i] = outcome
            report.line(outcome, row)
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)


def _result_of(fut: Future) -> dict:
    try:
        return fut.result()
    except Exception as err:  # the worker process died (e.g. out of memory) or pickling failed
        return {"status": "failed",
                "error": f"the worker process ended abruptly or could not start "
                         f"({type(err).__name__}: {err}); if it ran out of memory, rerun with "
                         "fewer --workers (finished pieces are kept)"}


def _read_summary(folder: Path) -> dict | None:
    try:
        return json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


class _Reporter:
    """One report per finished piece: a bar on a terminal, a line per piece in a log."""

    def __init__(self, total, *, quiet):
        from ..progress import Progress

        self.progress = Progress(total, quiet=quiet, label="ctpore batch")

    def line(self, outcome: PieceOutcome, row):
        head = f"{outcome.sample_id} ({outcome.batch})"
        if outcome.status == "ok":
            phi = (outcome.summary or {}).get("porosity_gas")
            phi_text = f", porosity_gas {phi:.4f}" if isinstance(phi, (int, float)) else ""
            msg = f"ok{phi_text}, {outcome.seconds:.1f} s"
        elif outcome.status == "skipped-existing":
            msg = "skipped, result exists"
        else:
            msg = f"FAILED: {outcome.error.splitlines()[0] if outcome.error else ''}"
        self.progress.advance(f"{head}: {msg}")
        if outcome.status not in ("ok", "skipped-existing") and self.progress.bar:
            print(f"ctpore batch: {head}: {msg}", file=sys.stderr, flush=True)


# ----------------------------------------------------------------------------------------------
# outputs


def _measures_of(summary: dict | None) -> dict:
    if not summary:
        return {}
    out = {k: summary.get(k) for k in PIECE_COLUMNS if k in summary}
    threshold = summary.get("threshold")
    if isinstance(threshold, dict):
        out["threshold_value"] = threshold.get("value")
    derived = summary.get("derived")
    if isinstance(derived, dict):
        for k, v in derived.items():
            if isinstance(v, (int, float)) and not isinstance(v, bool):
                out[k] = v
    return {k: (math.nan if v is None else v) for k, v in out.items()}


def _pieces_table(rows, outcomes, out: Path):
    derived_keys = []
    for o in outcomes:
        for k in _measures_of(o.summary):
            if k not in PIECE_COLUMNS and k not in derived_keys:
                derived_keys.append(k)
    measure_cols = list(PIECE_COLUMNS) + sorted(derived_keys)
    meta_keys = []
    for row in rows:
        for k in row.metadata:
            if k not in meta_keys:
                meta_keys.append(k)
    taken = {"sample_id", "batch", "status", "result_folder", "error", "warnings",
             *measure_cols, *_MANIFEST_COLUMNS}
    meta_cols = [(k, f"meta_{k}" if k in taken else k) for k in meta_keys]
    columns = (["sample_id", "batch", "status", *measure_cols, "result_folder",
                *_MANIFEST_COLUMNS] + [c for _, c in meta_cols] + ["warnings", "error"])
    table = []
    for row, o in zip(rows, outcomes):
        measures = _measures_of(o.summary)
        entry = {"sample_id": row.sample_id, "batch": row.batch, "status": o.status}
        entry.update({k: measures.get(k, math.nan) for k in measure_cols})
        entry.update({
            "result_folder": os.path.relpath(o.folder, out) if o.status != "failed" else "",
            "stack_path": str(row.stack_path),
            "spacing_um": ",".join(f"{v:g}" for v in row.spacing_um) if row.spacing_um else "",
            "mass_mg": row.mass_mg, "moisture": row.moisture,
            "moisture_basis": row.moisture_basis if math.isfinite(row.moisture) else "",
            "time_s": row.time_s,
        })
        entry.update({col: row.metadata.get(k, "") for k, col in meta_cols})
        entry["warnings"] = " | ".join((o.summary or {}).get("warnings", []) or [])
        entry["error"] = o.error.replace("\n", " ") if o.error else ""
        table.append(entry)
    return columns, table


def _write_text(path: Path, text: str):
    tmp = path.with_name(f".{path.name}.partial")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def _write_outputs(run: BatchRun):
    from ..io.result_folder import write_csv_rows, write_json

    tmp = run.out_dir / ".pieces.csv.partial"
    write_csv_rows(tmp, run.columns, [[r[c] for c in run.columns] for r in run.table])
    os.replace(tmp, run.out_dir / "pieces.csv")
    tmp = run.out_dir / ".failures.json.partial"
    write_json(tmp, {"n_pieces": len(run.pieces), "n_failed": len(run.failures),
                     "failures": run.failures})
    os.replace(tmp, run.out_dir / "failures.json")
