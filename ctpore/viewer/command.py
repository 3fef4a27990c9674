"""``ctpore view RESULT``: open a result folder in napari with the segmentation widget docked."""

from __future__ import annotations

import os
import sys
from pathlib import Path

from ..errors import InputError

__all__ = ["add_view_parser", "run_view", "populate_viewer", "NAPARI_MISSING"]

#: What ``ctpore view`` says when napari cannot be imported.
NAPARI_MISSING = ("napari is not installed", "pip install 'ctpore[viewer]'")


def add_view_parser(subparsers):
    """Add the ``view`` sub-command to an argparse sub-parser collection."""
    v = subparsers.add_parser("view", help="open a result folder in napari: grey stack, phases, "
                              "thickness maps, coarse fields, scan - model differences, and a "
                              "widget to re-run the segmentation live")
    v.add_argument("result", help="result folder of `ctpore analyze`")
    v.add_argument("--stack", metavar="PATH", help="grey stack to show (default: the input "
                   "recorded in RESULT/provenance.json)")
    v.add_argument("--no-widget", action="store_true", help="do not dock the segmentation "
                   "widget")
    return v


def populate_viewer(viewer, result, *, stack=None, widget: bool = True) -> list[str]:
    """Put a result folder's layers (and optionally the segmentation widget) into ``viewer``.

    Returns the notes on what was left out (e.g. a grey stack that was not found).
    """
    from .reader import add_result_layers

    notes = add_result_layers(viewer, result, stack=stack)
    if widget:
        from .widget import SegmentationWidget

        viewer.window.add_dock_widget(SegmentationWidget(viewer), name="ctpore segmentation",
                                      area="right")
    return notes


def run_view(args) -> int:
    """Run ``ctpore view``; returns the exit status (0) once the window is closed.

    Raises
    ------
    InputError
        When napari is not installed ("napari is not installed. Fix: pip install
        'ctpore[viewer]'"), there is no display (Linux without DISPLAY: Qt would abort the
        process), or the result folder is missing or incomplete: the command line prints it
        and exits with status 2, as for every ctpore command.
    """
    from .layers import is_result_folder

    try:
        import napari
    except ImportError:
        raise InputError(*NAPARI_MISSING) from None
    if sys.platform.startswith("linux") and not any(
            os.environ.get(v) for v in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM")):
        raise InputError("there is no display to open the viewer on (DISPLAY is not set)",
                         "run `ctpore view` in a desktop session, over `ssh -X`, or under "
                         "xvfb-run")
    result = Path(args.result)
    if not is_result_folder(result):
        from ..io.result_reader import open_result

        open_result(result)  # raises the InputError naming what is missing
    viewer = napari.Viewer(title=f"ctpore: {result}")
    notes = populate_viewer(viewer, result, stack=getattr(args, "stack", None),
                            widget=not getattr(args, "no_widget", False))
    for note in notes:
        print(f"ctpore view: {note}", file=sys.stderr)
    napari.run()
    return 0
