"""Deterministic figure files: the same figure gives the same PNG and SVG bytes on every run.

matplotlib is used through its object API with the Agg canvas (no pyplot state, no display).
Three things would otherwise change the bytes between runs or machines: the user's
``matplotlibrc`` (so figures are made and saved under matplotlib's default style), the date
and software tags written into the files (removed), and the random ids of SVG clip paths and
glyphs (a fixed ``svg.hashsalt``). Text in SVG files is drawn as paths, so it does not depend
on the fonts of the machine that opens the file.
"""

from __future__ import annotations

import base64
import io
import os
from contextlib import contextmanager
from pathlib import Path

__all__ = ["figure_style", "new_figure", "figure_bytes", "save_png_svg", "data_uri",
           "write_bytes_atomic"]

#: Salt of matplotlib's SVG ids; any fixed text gives reproducible files.
SVG_HASHSALT = "ctpore-report"

_RC = {"svg.hashsalt": SVG_HASHSALT, "svg.fonttype": "path", "figure.dpi": 100.0,
       "savefig.dpi": 100.0, "path.simplify": True}


@contextmanager
def figure_style():
    """Context in which figures are built and saved: matplotlib's default style, fixed SVG ids.

    Build *and* save a figure inside the same context: font sizes, line widths and colours are
    taken when the artists are created.
    """
    import matplotlib
    import matplotlib.style

    with matplotlib.style.context("default"), matplotlib.rc_context(_RC):
        yield


def new_figure(width_in: float, height_in: float):
    """A matplotlib Figure with the Agg canvas (call inside :func:`figure_style`)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=100)
    FigureCanvasAgg(fig)
    return fig


def figure_bytes(fig) -> tuple[bytes, bytes]:
    """The figure as PNG and SVG bytes, without date or software metadata.

    Returns
    -------
    (bytes, bytes)
        PNG and SVG (UTF-8) content.
    """
    with figure_style():
        png = io.BytesIO()
        fig.savefig(png, format="png", metadata={"Software": None})
        svg = io.BytesIO()
        fig.savefig(svg, format="svg", metadata={"Date": None, "Creator": None})
    return png.getvalue(), svg.getvalue()


def write_bytes_atomic(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` under a temporary name in the same folder, then rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
    try:
        tmp.write_bytes(data)
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def save_png_svg(fig, stem) -> list[Path]:
    """Save ``stem``.png and ``stem``.svg (each written whole or not at all).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    stem : str or Path
        Path without suffix, e.g. ``folder/figures/report_cupping``.

    Returns
    -------
    list of Path
        The PNG and the SVG file.
    """
    stem = Path(stem)
    png, svg = figure_bytes(fig)
    return [write_bytes_atomic(stem.with_name(stem.name + ".png"), png),
            write_bytes_atomic(stem.with_name(stem.name + ".svg"), svg)]


def data_uri(data: bytes, mime: str) -> str:
    """A ``data:`` URI (RFC 2397) holding ``data`` in base64, e.g. for an ``<img src>``."""
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"
