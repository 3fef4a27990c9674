"""One self-contained HTML report of a result, batch or comparison folder.

The page holds everything it shows: figures are embedded as base64 ``data:`` URIs, styles are
inline, there is no script and no external address (a Content-Security-Policy in the page
forbids loading anything else). It is rendered with Jinja2 with autoescaping on, from
``templates/report.html.j2``. Sections appear only when the folder holds their data, and the
same folder always gives the same bytes: no clock is read, files and sub-folders are taken in
sorted order, and figures made for the report are drawn in a fixed style with fixed SVG ids
(:mod:`ctpore.report.svg_png`).

Kinds of folder, by what they hold:

* result (``ctpore analyze``): ``summary.json``;
* batch (``ctpore batch``): ``ctpore-batch.json`` or ``pieces.csv``;
* comparison (``ctpore compare``, a ``compare_<name>`` folder): ``comparison.json``;
* comparison over time (``ctpore compare MANIFEST.csv MODEL``): ``comparison_timeseries.json``.
"""

from __future__ import annotations

import json
from pathlib import Path

from ..errors import InputError

__all__ = ["render_report", "write_report", "folder_kind", "REPORT_NAME"]

#: File name of the report inside the folder.
REPORT_NAME = "report.html"

_KIND_TITLES = {"result": "analysis result", "batch": "batch of pieces",
                "compare": "comparison with a simulated field",
                "timeseries": "comparison with a model over time"}


def folder_kind(folder) -> str:
    """``"result"``, ``"batch"`` or ``"compare"``, from the files the folder holds.

    Raises
    ------
    InputError
        When ``folder`` is not a folder, or holds none of the files that mark a ctpore result.
    """
    from ..batch.runner import MARKER_NAME

    folder = Path(folder)
    fix = ("give a folder written by `ctpore analyze` (holding summary.json), `ctpore batch` "
           "(pieces.csv) or `ctpore compare` (compare_<name>/comparison.json, or the --out "
           "folder of a comparison over time)")
    if not folder.is_dir():
        raise InputError(f"{folder} is not a folder", fix)
    if (folder / "summary.json").is_file():
        return "result"
    if (folder / MARKER_NAME).is_file() or (folder / "pieces.csv").is_file():
        return "batch"
    if (folder / "comparison.json").is_file():
        return "compare"
    if (folder / "comparison_timeseries.json").is_file():
        return "timeseries"
    raise InputError(f"{folder} is not a ctpore result, batch or comparison folder: it holds "
                     "no summary.json, pieces.csv, comparison.json or "
                     "comparison_timeseries.json", fix)


def _read_summary(folder: Path) -> dict:
    path = folder / "summary.json"
    try:
        summary = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as err:
        raise InputError(f"{path} cannot be read as JSON ({err})",
                         "re-run `ctpore analyze` to re-make the result folder") from None
    if not isinstance(summary, dict):
        raise InputError(f"{path} does not hold a summary table",
                         "re-run `ctpore analyze` to re-make the result folder")
    return summary


def _result_sections(folder: Path, figures) -> tuple[list, dict]:
    from . import more_sections as ms
    from . import result_sections as rs

    s = _read_summary(folder)
    compares = sorted(p for p in folder.glob("compare_*") if (p / "comparison.json").is_file())
    sections = [
        rs.warnings_section(folder, s), rs.summary_section(folder, s),
        rs.threshold_section(folder, s, figures), rs.partial_volume_section(folder, s, figures),
        rs.uncertainty_section(folder, s), rs.slices_section(folder, figures),
        rs.thickness_section(folder, s, figures), rs.structure_section(folder, s),
        ms.profiles_section(folder, s, figures), ms.cupping_section(folder, s, figures),
        ms.rev_section(folder, figures), ms.fields_section(folder, figures),
        ms.comparison_section(compares, figures),
        ms.other_figures_section(folder, figures),  # after every section that embeds figures
        ms.recipe_section(folder / "recipe.toml"),
        ms.provenance_section(folder / "provenance.json"),
    ]
    thr = s.get("threshold") or {}
    from .blocks import fmt

    headline = [("gas porosity", fmt(s.get("porosity_gas"), "porosity")),
                ("band", f"{fmt(thr.get('porosity_low'), 'porosity')}–"
                         f"{fmt(thr.get('porosity_high'), 'porosity')}"),
                ("open", fmt(s.get("porosity_open"), "porosity")),
                ("closed", fmt(s.get("porosity_closed"), "porosity"))]
    if "porosity_partial_volume" in s:
        headline.append(("partial volume", fmt(s.get("porosity_partial_volume"), "porosity")))
    if "envelope_volume_mm3" in s:
        headline.append(("envelope", f"{fmt(s.get('envelope_volume_mm3'))} mm³"))
    return sections, {"headline": headline, "input": s.get("input", "")}


def _batch_sections(folder: Path, figures) -> tuple[list, dict]:
    from . import more_sections as ms
    from .batch_sections import batch_sections, first_piece_folder
    from .blocks import read_csv_rows, read_json

    sections = batch_sections(folder, figures)
    piece = first_piece_folder(folder, read_csv_rows(folder / "pieces.csv"))
    if piece is not None:
        try:
            rel = piece.relative_to(folder).as_posix()
        except ValueError:  # the pieces' folders lie elsewhere
            rel = str(piece)
        sections.append(ms.recipe_section(
            piece / "recipe.toml", caption=f"The recipe of the first piece ({rel}/recipe.toml). "
            "All pieces share it; only the [sample] facts come from each manifest row."))
        sections.append(ms.provenance_section(
            piece / "provenance.json", caption=f"As recorded for the first piece ({rel})."))
    headline = []
    verdicts = read_json(folder / "verdicts.json") or {}
    for batch, n in (verdicts.get("batches") or {}).items():
        headline.append((f"batch {batch}", f"{n} pieces"))
    counts = {}
    for per_measure in (verdicts.get("verdicts") or {}).values():
        for v in per_measure.values():
            counts[v.get("verdict", "")] = counts.get(v.get("verdict", ""), 0) + 1
    headline += [(k, str(n)) for k, n in sorted(counts.items())]
    return sections, {"headline": headline, "input": ""}


def _compare_sections(folder: Path, figures) -> tuple[list, dict]:
    from . import more_sections as ms
    from .blocks import section, text

    parent = folder.parent
    blocks = ms.comparison_blocks(folder, figures, own_folder=True)
    if (parent / "summary.json").is_file():
        s = _read_summary(parent)
        from .blocks import fmt

        blocks.insert(0, text(f"Scan: the result folder {parent.name} (gas porosity "
                              f"{fmt(s.get('porosity_gas'), 'porosity')}, input "
                              f"{fmt(s.get('input'))})."))
    sections = [section("comparison", "Comparison with a simulated field", blocks),
                ms.recipe_section(parent / "recipe.toml",
                                  caption="The recipe of the scanned result."),
                ms.provenance_section(parent / "provenance.json",
                                      caption="As recorded for the scanned result.")]
    return sections, {"headline": [], "input": ""}


def _timeseries_sections(folder: Path, figures) -> tuple[list, dict]:
    from .blocks import fmt, read_json
    from .timeseries_sections import timeseries_sections

    curve = (read_json(folder / "comparison_timeseries.json") or {}).get("curve_metrics") or {}
    headline = [(label, fmt(curve.get(k))) for k, label in
                (("n_times", "scan times"), ("rmse", "RMSE"), ("bias", "bias"))
                if k in curve]
    return timeseries_sections(folder, figures), {"headline": headline, "input": ""}


def _build(folder, *, name: str | None = None) -> tuple[str, dict]:
    """The HTML text and the figures made for it (``report_<name>`` → (PNG, SVG) bytes)."""
    import jinja2

    from .. import __version__
    from .blocks import FigureSet
    from .more_sections import cautions_section

    folder = Path(folder)
    kind = folder_kind(folder)
    figures = FigureSet()
    build = {"result": _result_sections, "batch": _batch_sections,
             "compare": _compare_sections, "timeseries": _timeseries_sections}[kind]
    sections, facts = build(folder, figures)
    sections = [s for s in sections if s] + [cautions_section()]
    env = jinja2.Environment(loader=jinja2.PackageLoader("ctpore.report", "templates"),
                             autoescape=True, trim_blocks=True, lstrip_blocks=True,
                             keep_trailing_newline=True, undefined=jinja2.StrictUndefined)
    html = env.get_template("report.html.j2").render(
        name=name or folder.resolve().name, kind=kind, kind_title=_KIND_TITLES[kind],
        version=__version__, sections=sections, headline=facts["headline"],
        input=facts["input"])
    return html, figures.made


def render_report(folder, *, name: str | None = None) -> str:
    """The HTML report of a result, batch or comparison folder, as text.

    Parameters
    ----------
    folder : str or Path
        Written by ``ctpore analyze`` (summary.json), ``ctpore batch`` (pieces.csv) or
        ``ctpore compare`` (comparison.json).
    name : str, optional
        Name shown in the title; the folder's name by default (give it when rendering a
        temporary folder that is renamed afterwards).

    Returns
    -------
    str
        A self-contained HTML page; the same folder gives the same text.

    Raises
    ------
    InputError
        When the folder is not a ctpore result, batch or comparison folder.
    """
    return _build(folder, name=name)[0]


def write_report(folder, *, out=None, force: bool = False, name: str | None = None) -> Path:
    """Write the report of ``folder`` to ``out`` (default ``folder/report.html``).

    The figures made for the report are saved beside it as ``figures/report_*.png`` and
    ``.svg``; the page is written under a temporary name and renamed when complete.

    Parameters
    ----------
    folder : str or Path
        A ctpore result, batch or comparison folder.
    out : str or Path, optional
        The HTML file to write.
    force : bool
        Replace an existing report.
    name : str, optional
        Name shown in the title (see :func:`render_report`).

    Returns
    -------
    Path
        The report file.

    Raises
    ------
    InputError
        Not a ctpore folder; ``out`` exists and ``force`` is false; ``out`` is a folder.
    """
    from .svg_png import write_bytes_atomic

    folder = Path(folder)
    folder_kind(folder)
    out = Path(out) if out is not None else folder / REPORT_NAME
    if out.is_dir():
        raise InputError(f"report destination {out} is a folder",
                         f"give a file name, e.g. --out {out / REPORT_NAME}")
    if out.exists() and not force:
        raise InputError(f"report {out} already exists", "add --force to replace it")
    html, made = _build(folder, name=name)
    for stem, (png, svg) in sorted(made.items()):
        write_bytes_atomic(out.parent / "figures" / f"{stem}.png", png)
        write_bytes_atomic(out.parent / "figures" / f"{stem}.svg", svg)
    return write_bytes_atomic(out, html.encode("utf-8"))
