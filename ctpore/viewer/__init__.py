"""Viewing ctpore results in napari: layers, reader plugin, live segmentation widget, ``view``.

Nothing here imports napari or Qt at import time: :mod:`.layers` and :mod:`.palette` are pure,
and :mod:`.reader`, :mod:`.widget` and :mod:`.command` import napari, magicgui and Qt inside
their functions, so ``import ctpore.viewer`` works on a machine without a display.
"""

from __future__ import annotations

__all__: list[str] = []
