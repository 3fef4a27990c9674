"""Result folders written whole or not at all.

A run writes into a hidden temporary folder beside the destination and renames it into place
only when every file is complete, so a failed run leaves nothing behind. An existing result is
replaced only with ``force=True``; the input stack is never written.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["check_destination", "result_folder", "write_json", "write_csv_rows"]


def check_destination(out: str | Path, *, force: bool, inputs: tuple[Path, ...] = ()) -> Path:
    """Check before any work that ``out`` may be written; return it as a Path.

    Raises
    ------
    InputError
        If ``out`` exists and ``force`` is false, if it is a file, or if it is (or contains) an
        input of the run.
    """
    out = Path(out)
    for src in inputs:
        src = Path(src).resolve()
        o = out.resolve()
        if o == src or o in src.parents:
            raise InputError(f"output folder {out} would overwrite the input {src}",
                             "choose another --out folder")
    if out.exists() and not out.is_dir():
        raise InputError(f"output {out} exists and is a file", "choose another --out folder")
    if out.exists() and not force:
        raise InputError(f"result folder {out} already exists",
                         "add --force to replace it (or, for analyze and batch, choose another "
                         "--out folder)")
    return out


@contextmanager
def result_folder(out: str | Path, *, force: bool):
    """Yield a temporary folder; on success it replaces ``out``, on error it is deleted."""
    out = Path(out)
    check_destination(out, force=force)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if out.exists():
        if not force:  # appeared while we worked
            shutil.rmtree(tmp, ignore_errors=True)
            raise InputError(f"result folder {out} appeared during the run",
                             "rerun with --force or another --out")
        old = out.with_name(f".{out.name}.old-{os.getpid()}")
        out.rename(old)
        tmp.rename(out)
        shutil.rmtree(old, ignore_errors=True)
    else:
        tmp.rename(out)


def _plain(value):
    """JSON-safe copy: numpy scalars to Python, NaN/inf to None, tuples to lists."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value.tolist()]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        v = float(value)
        return v if math.isfinite(v) else None
    return value


def write_json(path: Path, data: dict) -> None:
    """Write sorted, indented JSON; NaN becomes null so any JSON reader accepts the file."""
    Path(path).write_text(json.dumps(_plain(data), indent=2, sort_keys=True,
                                     ensure_ascii=False) + "\n", encoding="utf-8")


def write_csv_rows(path: Path, header: list[str], rows: list[list]) -> None:
    """Write a small CSV (comma-separated, repr-exact floats)."""
    import csv

    with open(path, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(header)
        for row in rows:
            writer.writerow([_csv_cell(v) for v in row])


def _csv_cell(v):
    v = _plain(v)
    if v is None:
        return ""
    if isinstance(v, list):
        return ",".join(str(x) for x in v)
    return v
