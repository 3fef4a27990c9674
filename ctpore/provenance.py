"""Provenance: what made a result, so it can be re-made exactly."""

from __future__ import annotations

import hashlib
import platform
import sys
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

__all__ = ["provenance_record", "sha256_of_input"]

_PACKAGES = ("numpy", "scipy", "scikit-image", "tifffile", "edt", "matplotlib", "porespy")


def sha256_of_input(path: str | Path, files: list[str] | None = None) -> str:
    """SHA-256 of a stack file, or of a slice folder: each slice file's name and bytes, in
    reading order (``files``, as the reader used them; every visible file when None)."""
    path = Path(path)
    h = hashlib.sha256()
    if path.is_file():
        files = [path]
    elif files is not None:
        files = [path / f for f in files]
    else:
        files = sorted(p for p in path.iterdir() if p.is_file() and not p.name.startswith("."))
    for f in files:
        if path.is_dir():
            h.update(f.name.encode() + b"\0")
        with open(f, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    return h.hexdigest()


def provenance_record(*, source: str, argv: list[str] | None, spacing_source: str,
                      timings_s: dict | None = None, files: list[str] | None = None) -> dict:
    """Versions, input hash, command line and UTC time of a run."""
    from . import __version__

    versions = {}
    for name in _PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    record = {
        "ctpore_version": __version__,
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "packages": versions,
        "input": source,
        "input_sha256": sha256_of_input(source, files) if source and Path(source).exists() else None,
        "spacing_source": spacing_source,
        "command_line": argv,
        "utc_time": datetime.now(timezone.utc).isoformat(timespec="seconds"),
    }
    if timings_s:
        record["step_seconds"] = {k: round(v, 3) for k, v in timings_s.items()}
    return record
