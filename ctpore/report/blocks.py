"""Building blocks of the HTML report: formatted values, tables, figures, sections.

A section is a plain dict ``{"id", "title", "blocks"}``; each block is a dict with a ``kind``
(``text``, ``note``, ``list``, ``table``, ``figure``, ``pre``, ``subhead``) that the Jinja2
template renders. Values are formatted here, in Python, so that the template only lays them
out (and escapes them).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

from .svg_png import data_uri, figure_bytes, figure_style

__all__ = ["fmt", "unit_of", "section", "text", "note", "bullet_list", "table", "pre",
           "subhead", "FigureSet", "read_json", "read_csv_columns", "read_csv_rows"]

#: Units read from the end of a key name (longest suffix first).
_UNIT_SUFFIXES = (("_per_mm3", "1/mm³"), ("_per_mm", "1/mm"), ("_g_cm3", "g/cm³"),
                  ("_mm3", "mm³"), ("_mm2", "mm²"), ("_um3", "µm³"), ("_um", "µm"),
                  ("_mm", "mm"), ("_s", "s"))


def unit_of(key: str) -> str:
    """The unit a key's name carries (``wall_thickness_d50_um`` → ``µm``); "" when none."""
    if key.startswith("porosity") or key.endswith("_share") or key.endswith("_fraction"):
        return "fraction"
    for suffix, unit in _UNIT_SUFFIXES:
        if key.endswith(suffix):
            return unit
    if key.endswith("_count") or key.endswith("_voxels"):
        return "count"
    return ""


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def fmt(value, key: str = "") -> str:
    """A value as text: porosities with 4 decimals, other numbers with 4 significant digits.

    None and NaN (written as null in summary.json) read "n/a"; lists are joined with commas;
    booleans read yes / no.
    """
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, str):
        return value
    if isinstance(value, (list, tuple)):
        return ", ".join(fmt(v, key) for v in value)
    if isinstance(value, dict):
        return json.dumps(value, sort_keys=True, ensure_ascii=False)
    if isinstance(value, int):
        return str(value)
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(v):
        return "n/a"
    if unit_of(key) == "fraction" and abs(v) <= 10:
        return f"{v:.4f}"
    if v != 0 and (abs(v) >= 1e9 or abs(v) < 1e-3):
        return f"{v:.3e}"
    if abs(v) >= 1e4:
        return f"{v:.0f}"
    return f"{v:.4g}"


def section(sid: str, title: str, blocks: list) -> dict:
    return {"id": sid, "title": title, "blocks": [b for b in blocks if b]}


def text(s: str) -> dict:
    return {"kind": "text", "text": s}


def note(s: str) -> dict:
    return {"kind": "note", "text": s}


def bullet_list(items) -> dict | None:
    items = [str(i) for i in items if i]
    return {"kind": "list", "items": items} if items else None


def subhead(s: str, sid: str = "") -> dict:
    return {"kind": "subhead", "text": s, "id": sid}


def pre(s: str, caption: str = "") -> dict:
    return {"kind": "pre", "text": s, "caption": caption}


def table(header, rows, *, caption: str = "", numeric_from: int = 1) -> dict | None:
    """A table block; cells are strings, or (string, css class) pairs. None without rows."""
    rows = [list(r) for r in rows]
    if not rows:
        return None
    cells = []
    for r in rows:
        line = []
        for j, c in enumerate(r):
            t, cls = (c if isinstance(c, tuple) else (c, ""))
            if not cls and j >= numeric_from and _looks_numeric(t):
                cls = "num"
            line.append({"text": str(t), "cls": cls})
        cells.append(line)
    return {"kind": "table", "header": [str(h) for h in header], "rows": cells,
            "caption": caption}


def _looks_numeric(t) -> bool:
    s = str(t).replace("−", "-").replace("–", "").replace(" ", "").replace("±", "")
    if not s or s == "n/a":
        return False
    try:
        float(s.split("(")[0])
        return True
    except ValueError:
        return False


class FigureSet:
    """Figures of one report: files embedded as they are, and figures made for the report.

    Figures made here are kept as PNG and SVG bytes under ``report_<name>``; the report embeds
    the PNG, and :func:`ctpore.report.html.write_report` saves both beside the report.
    """

    def __init__(self):
        self.made: dict[str, tuple[bytes, bytes]] = {}
        self.embedded: set[Path] = set()  # files embedded so far (resolved paths)

    def make(self, name: str, build, *args, caption: str = "", alt: str = "", **kwargs):
        """Build a figure with ``build(*args, **kwargs)`` in the fixed style; a figure block, or
        None when ``build`` returns None."""
        with figure_style():
            fig = build(*args, **kwargs)
            if fig is None:
                return None
            png, svg = figure_bytes(fig)
        stem = f"report_{name}"
        self.made[stem] = (png, svg)
        return {"kind": "figure", "src": data_uri(png, "image/png"), "alt": alt or caption,
                "caption": caption, "files": f"figures/{stem}.png, figures/{stem}.svg"}

    def embed(self, path, *, caption: str = "", alt: str = "", shown_as: str = ""):
        """A figure block for an existing PNG (or, without one, SVG) file; None if absent."""
        path = Path(path)
        candidates = [path] if path.suffix else [path.with_suffix(".png"),
                                                 path.with_suffix(".svg")]
        for p in candidates:
            if p.is_file():
                self.embedded.add(p.resolve())
                mime = "image/svg+xml" if p.suffix.lower() == ".svg" else "image/png"
                return {"kind": "figure", "src": data_uri(p.read_bytes(), mime),
                        "alt": alt or caption or p.name, "caption": caption,
                        "files": shown_as or p.name}
        return None


def read_json(path) -> dict | None:
    """A JSON file as a dict, or None when it is missing or unreadable."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def read_csv_rows(path) -> list[dict]:
    """Rows of a CSV file as dicts of strings ([] when missing)."""
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            return list(csv.DictReader(fh))
    except OSError:
        return []


def read_csv_columns(path) -> dict:
    """Numeric columns of a CSV file as lists of floats (blank cells NaN); {} when missing."""
    rows = read_csv_rows(path)
    if not rows:
        return {}
    out = {}
    for key in rows[0]:
        col = []
        for r in rows:
            try:
                col.append(float(r[key]) if r[key] not in ("", None) else math.nan)
            except ValueError:
                col = None
                break
        if col is not None:
            out[key] = col
    return out
