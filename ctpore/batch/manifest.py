"""Which pieces make up a batch run: a CSV manifest or a folder per batch, checked before any work.

A manifest is a CSV file with one row per scanned piece:

========================  =====================================================================
column                    meaning
========================  =====================================================================
``sample_id``             required; unique name of the piece (also its result folder's name)
``batch``                 required; the production batch the piece comes from
``stack_path``            required; stack file or slice folder, relative to the manifest's
                          folder or absolute
``spacing_um``            optional; voxel size in µm, one value or ``"dz,dy,dx"`` (empty: from
                          the file's metadata)
``mass_mg``               optional; mass of the scanned piece
``moisture_wb``           optional; water content as a wet-basis fraction (0.12 for 12 %)
``moisture_db``           optional; the same on a dry basis (give one of the two)
``time_s``                optional; e.g. a process time, kept with the piece
any other column          kept as free-form metadata of the piece
========================  =====================================================================

Or a folder with one sub-folder per batch, holding the pieces' stack files (``.tif``, ``.tiff``,
``.ome.tif``) or slice folders: ``DIR/<batch>/<piece>``; the piece's sample id is the file's
name without its suffixes (or the slice folder's name).

Every row is checked before anything runs, and all problems are reported at once in one
:class:`ctpore.errors.InputError` (line, sample id, what is wrong, how to fix it).
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["ManifestRow", "read_manifest", "REQUIRED_COLUMNS", "KNOWN_COLUMNS"]

REQUIRED_COLUMNS = ("sample_id", "batch", "stack_path")
KNOWN_COLUMNS = REQUIRED_COLUMNS + ("spacing_um", "mass_mg", "moisture_wb", "moisture_db",
                                    "time_s")

_STACK_SUFFIXES = (".tif", ".tiff")
_BAD_ID_CHARS = set('<>:"/\\|?*')
_MAX_ID_LEN = 128


@dataclass(frozen=True)
class ManifestRow:
    """One piece of a batch run.

    Attributes
    ----------
    sample_id : str
        Unique name of the piece; its result folder is ``pieces/<sample_id>``.
    batch : str
        Production batch.
    stack_path : Path
        Stack file or slice folder, absolute.
    spacing_um : tuple of 3 floats or None
        Voxel size (dz, dy, dx) in µm; None to take it from the file.
    mass_mg, moisture, time_s : float
        NaN when not given. ``moisture`` is a fraction on ``moisture_basis`` ("wet"/"dry").
    moisture_basis : str
    metadata : dict of str to str
        Free-form columns of the manifest row.
    line : int
        Line of the manifest file (0 for the folder layout).
    """

    sample_id: str
    batch: str
    stack_path: Path
    spacing_um: tuple[float, float, float] | None = None
    mass_mg: float = math.nan
    moisture: float = math.nan
    moisture_basis: str = "wet"
    time_s: float = math.nan
    metadata: dict = field(default_factory=dict)
    line: int = 0

    def sample_changes(self) -> dict:
        """Changes of the recipe's ``[sample]`` section for this piece (given facts only)."""
        changes = {}
        if math.isfinite(self.mass_mg):
            changes["mass_mg"] = float(self.mass_mg)
        if math.isfinite(self.moisture):
            changes["moisture"] = float(self.moisture)
            changes["moisture_basis"] = self.moisture_basis
        return changes


def read_manifest(path, *, spacing_um=None, batch_column: str = "batch") -> list[ManifestRow]:
    """Read and check a manifest CSV, or a folder with one sub-folder per batch.

    Parameters
    ----------
    path : str or Path
        A CSV file (columns in the module docstring) or a folder ``DIR/<batch>/<piece>``.
    spacing_um : float or 3 floats, optional
        Voxel size (dz, dy, dx) in µm for pieces whose row gives none (and for the folder
        layout); without it the voxel size comes from each stack's metadata.
    batch_column : str
        Name of the column holding the batch (e.g. ``"setting"`` for the demo's scenario.csv).

    Returns
    -------
    list of ManifestRow
        In the order of the file (folder layout: batches and pieces in name order).

    Raises
    ------
    InputError
        One error listing every problem: missing manifest, missing required columns, no rows,
        and per row a missing stack, a duplicate sample id, a bad voxel size, a non-numeric or
        out-of-range mass, moisture or time.
    """
    path = Path(path).expanduser()
    default_spacing = None
    if spacing_um is not None:
        default_spacing = as_spacing_um(spacing_um)
    if not path.exists():
        raise InputError(f"manifest {path} does not exist",
                         "give a CSV manifest or a folder with one sub-folder per batch")
    if path.is_dir():
        rows, problems, ids = _read_folder(path, default_spacing)
    else:
        rows, problems, ids = _read_csv(path, default_spacing, batch_column)
    problems.extend(_duplicates(ids))
    if problems:
        problems.sort(key=lambda p: p[0])
        lines = [f"  {_where(line, sid)}: {what}. Fix: {fix}" for line, sid, what, fix in problems]
        raise InputError(
            f"manifest {path} has {len(problems)} problem(s); nothing was run:\n"
            + "\n".join(lines),
            "correct the rows listed and run again")
    if not rows:
        raise InputError(f"manifest {path} lists no pieces",
                         "add one row per scanned piece (sample_id, batch, stack_path)"
                         if not path.is_dir() else
                         "put each batch's stack files or slice folders in DIR/<batch>/")
    return rows


def _where(line, sid):
    place = f"line {line}" if line else "folder"
    return f"{place} (sample {sid!r})" if sid else place


# ----------------------------------------------------------------------------------------------
# CSV manifests


def _read_csv(path: Path, default_spacing, batch_column):
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"manifest {path} is not UTF-8 text",
                         "save the manifest as a UTF-8 CSV file") from None
    reader = csv.reader(text.splitlines())
    header = None
    for header in reader:
        if any(cell.strip() for cell in header):
            break
    if header is None or not any(cell.strip() for cell in header):
        raise InputError(f"manifest {path} is empty",
                         "add a header line 'sample_id,batch,stack_path' and one row per piece")
    names = [cell.strip() for cell in header]
    lower = [n.lower() for n in names]
    dupes = sorted({n for n in names if n and names.count(n) > 1})
    if dupes:
        raise InputError(f"manifest {path} has the column(s) {dupes} more than once",
                         "keep one column of each name")
    batch_key = batch_column.strip().lower()
    required = ("sample_id", batch_key, "stack_path")
    missing = [c for c in required if c not in lower]
    if missing:
        raise InputError(
            f"manifest {path} lacks the required column(s) {missing}; its columns are {names}",
            f"add the column(s) {missing}: every row needs sample_id, {batch_column} (the "
            "production batch) and stack_path (relative to the manifest's folder)")
    index = {n: i for i, n in enumerate(lower)}
    free = [(i, names[i]) for i, n in enumerate(lower)
            if n and n not in KNOWN_COLUMNS and n != batch_key]

    rows, problems, ids = [], [], []
    for record in reader:
        line = reader.line_num
        if not any(cell.strip() for cell in record):
            continue  # blank line
        if len(record) > len(names):
            problems.append((line, record[0].strip() if record else "",
                             f"the row has {len(record)} fields but the header {len(names)}",
                             "quote values that contain commas, e.g. \"12,10,10\""))
            continue
        record = list(record) + [""] * (len(names) - len(record))
        sid = record[index["sample_id"]].strip()
        if sid:
            ids.append((line, sid, record[index[batch_key]].strip()))

        def get(col, _record=record):
            i = index.get(col)
            return _record[i].strip() if i is not None else ""

        row, row_problems = _check_row(
            line=line, sample_id=get("sample_id"), batch=get(batch_key),
            stack=get("stack_path"), spacing=get("spacing_um"), mass=get("mass_mg"),
            moisture_wb=get("moisture_wb"), moisture_db=get("moisture_db"), time=get("time_s"),
            base=path.parent.resolve(), default_spacing=default_spacing,
            batch_column=batch_column, metadata={name: record[i].strip() for i, name in free})
        problems.extend(row_problems)
        if row is not None:
            rows.append(row)
    return rows, problems, ids


def _check_row(*, line, sample_id, batch, stack, spacing, mass, moisture_wb, moisture_db, time,
               base, default_spacing, batch_column, metadata):
    problems = []

    def bad(what, fix):
        problems.append((line, sample_id, what, fix))

    id_problem = _id_problem(sample_id)
    if id_problem:
        bad(*id_problem)
    if not batch:
        bad(f"{batch_column} is empty", f"give the production batch of the piece in "
            f"the {batch_column} column")
    stack_path = None
    if not stack:
        bad("stack_path is empty", "give the stack file or slice folder of the piece")
    else:
        stack_path = Path(stack).expanduser()
        if not stack_path.is_absolute():
            stack_path = base / stack_path
        if not stack_path.exists():
            bad(f"stack {stack!r} does not exist (looked for {stack_path})",
                "correct stack_path; a relative path is read from the manifest's folder")
    voxel = default_spacing
    if spacing:
        try:
            voxel = as_spacing_um(spacing, name="spacing_um")
        except InputError as err:
            bad(err.what, "write one value in µm, or three as \"dz,dy,dx\" (quoted), e.g. "
                "\"12,10,10\"; leave it empty to use the file's metadata")
    mass_mg = _number(mass, "mass_mg", bad, positive=True, fix="give the piece's mass in mg")
    wb = _number(moisture_wb, "moisture_wb", bad, fix="a fraction, e.g. 0.12 for 12 %")
    db = _number(moisture_db, "moisture_db", bad, fix="a fraction, e.g. 0.136")
    moisture, basis = math.nan, "wet"
    if math.isfinite(wb) and math.isfinite(db):
        bad("both moisture_wb and moisture_db are given",
            "give the moisture on one basis only (wet or dry)")
    elif math.isfinite(wb):
        if not 0 <= wb < 1:
            bad(f"moisture_wb = {wb:g} is not a fraction in [0, 1)",
                "write 0.12 for 12 % (wet basis)")
        moisture = wb
    elif math.isfinite(db):
        if db < 0:
            bad(f"moisture_db = {db:g} is negative", "write 0.136 for 13.6 % (dry basis)")
        moisture, basis = db, "dry"
    time_s = _number(time, "time_s", bad, fix="give a number in s or leave it empty")
    if problems:
        return None, problems
    return ManifestRow(sample_id=sample_id, batch=batch, stack_path=stack_path,
                       spacing_um=voxel, mass_mg=mass_mg, moisture=moisture,
                       moisture_basis=basis, time_s=time_s, metadata=metadata,
                       line=line), []


def _number(text, name, bad, *, fix, positive=False) -> float:
    if not text:
        return math.nan
    try:
        value = float(text)
    except ValueError:
        bad(f"{name} = {text!r} is not a number", fix)
        return math.nan
    if not math.isfinite(value):
        bad(f"{name} = {text!r} is not finite", fix)
        return math.nan
    if positive and value <= 0:
        bad(f"{name} = {text!r} must be > 0", fix + ", or leave it empty")
        return math.nan
    return value


def _id_problem(sample_id):
    fix = ("use letters, digits, '-', '_' or '.'; the sample id names the piece's result folder")
    if not sample_id:
        return "sample_id is empty", "give every piece a unique sample_id"
    if sample_id in (".", "..") or sample_id.startswith("."):
        return f"sample_id {sample_id!r} starts with '.'", fix
    if _BAD_ID_CHARS & set(sample_id) or any(ord(c) < 32 for c in sample_id):
        return f"sample_id {sample_id!r} holds a character not allowed in a folder name", fix
    if len(sample_id) > _MAX_ID_LEN:
        return f"sample_id is longer than {_MAX_ID_LEN} characters", "shorten it"
    return None


def _duplicates(ids):
    """Duplicate sample ids among (line, sample_id, batch), compared without case.

    Case is ignored because the id names a result folder, and some file systems ignore it.
    """
    seen = {}
    problems = []
    for line, sid, batch in ids:
        key = sid.casefold()
        if key in seen:
            first_line, first_sid, first_batch = seen[key]
            problems.append((line, sid,
                             f"duplicate sample id: {first_sid!r} is already used "
                             f"({_where(first_line, '')}, batch {first_batch!r}); ids are "
                             "compared without case",
                             "give every piece a unique sample_id"))
        else:
            seen[key] = (line, sid, batch)
    return problems


# ----------------------------------------------------------------------------------------------
# folder layout


def _stem(path: Path) -> str:
    name = path.name
    while Path(name).suffix.lower() in _STACK_SUFFIXES + (".ome", ".zarr"):
        name = Path(name).stem
    return name


def _read_folder(folder: Path, default_spacing):
    rows, problems, ids = [], [], []
    batches = sorted(p for p in folder.iterdir() if p.is_dir() and not p.name.startswith("."))
    for batch_dir in batches:
        entries = sorted(p for p in batch_dir.iterdir() if not p.name.startswith("."))
        pieces = [p for p in entries
                  if p.is_dir() or (p.is_file() and p.suffix.lower() in _STACK_SUFFIXES)]
        if not pieces:
            problems.append((0, "", f"batch folder {batch_dir} holds no stack files "
                             "(.tif, .tiff) or slice folders",
                             "put the pieces' stacks in it, or remove the folder"))
            continue
        for piece in pieces:
            sid = _stem(piece) if piece.is_file() else piece.name
            id_problem = _id_problem(sid)
            if id_problem:
                problems.append((0, sid, f"{piece}: {id_problem[0]}", "rename the file"))
                continue
            ids.append((0, sid, batch_dir.name))
            rows.append(ManifestRow(sample_id=sid, batch=batch_dir.name,
                                    stack_path=piece.resolve(), spacing_um=default_spacing))
    return rows, problems, ids
