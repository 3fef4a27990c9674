"""napari reader for ctpore result folders, and helpers to put a result into a viewer.

napari is imported only inside functions, so this module imports without a display.
"""

from __future__ import annotations

from pathlib import Path

from .layers import is_result_folder, result_layers

__all__ = ["napari_get_reader", "read_result", "apply_display", "add_result_layers",
           "show_notes", "scale_bar"]


def napari_get_reader(path):
    """The reader for ``path`` when it is a ctpore result folder, else None (npe2 reader hook).

    Parameters
    ----------
    path : str, Path or list of them
        What napari was asked to open; a single result folder is accepted.
    """
    if isinstance(path, (list, tuple)):
        if len(path) != 1:
            return None
        path = path[0]
    if not is_result_folder(path):
        return None
    return read_result


def read_result(path) -> list[tuple]:
    """Layer-data tuples of a result folder (see :func:`ctpore.viewer.layers.result_layers`).

    What could not be opened (e.g. a grey stack that moved) is shown as a napari notification.
    Colour bars, outlines and the scale bar are switched on as napari inserts the layers, in
    the viewer that is current when this runs.
    """
    if isinstance(path, (list, tuple)):
        path = path[0]
    layers, notes = result_layers(Path(path))
    show_notes(notes)
    _watch_current_viewer()
    return layers


def show_notes(notes) -> None:
    """Show each note as a napari warning notification."""
    if not notes:
        return
    from napari.utils.notifications import show_warning

    for note in notes:
        show_warning(f"ctpore: {note}")


def apply_display(layer) -> None:
    """Apply the display settings a ctpore layer carries in ``metadata["ctpore"]``.

    ``colorbar``: show the layer's colour bar; ``contour``: draw labels as outlines that many
    voxels wide (napari draws contours on the displayed 2-D slice).
    """
    hints = (getattr(layer, "metadata", None) or {}).get("ctpore") or {}
    if hints.get("colorbar") and hasattr(layer, "colorbar"):
        layer.colorbar.visible = True
    if hints.get("contour") and hasattr(layer, "contour"):
        layer.contour = int(hints["contour"])


def scale_bar(viewer):
    """The viewer's scale-bar overlay (``viewer.canvas.overlays`` from napari 0.9 on)."""
    overlays = getattr(getattr(viewer, "canvas", None), "overlays", None)
    if overlays is not None and "scale_bar" in overlays:
        return overlays["scale_bar"]
    return viewer.scale_bar  # napari < 0.9


def _on_inserted(event) -> None:
    apply_display(event.value)


def _watch_current_viewer() -> None:
    """Apply display settings to ctpore layers as they are inserted into the current viewer."""
    import napari

    viewer = napari.current_viewer()
    if viewer is None:
        return
    scale_bar(viewer).visible = True
    emitter = viewer.layers.events.inserted
    if _on_inserted not in emitter.callbacks:
        emitter.connect(_on_inserted)


def add_result_layers(viewer, result, *, stack=None) -> list[str]:
    """Add a result folder's layers to ``viewer``, with colour bars, outline and scale bar.

    Parameters
    ----------
    viewer : napari.Viewer
    result : str or Path
        Result folder of ``ctpore analyze``.
    stack : str or Path, optional
        The grey stack, when it is not where ``provenance.json`` says.

    Returns
    -------
    list of str
        Notes on what was left out (also what ``ctpore view`` prints).
    """
    layers, notes = result_layers(Path(result), stack=stack)
    for data, kwargs, kind in layers:
        layer = getattr(viewer, f"add_{kind}")(data, **kwargs)
        apply_display(layer)
    scale_bar(viewer).visible = True
    viewer.reset_view()
    return notes
