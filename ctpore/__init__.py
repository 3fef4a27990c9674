"""ctpore: porosity and cell structure of puffed and expanded foods from X-ray micro-CT.

The public API is re-exported here; heavy pieces load on first use so that ``import ctpore``
stays fast and needs neither a display nor porespy, napari or dask.distributed.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_LAZY = {
    "analyze": "ctpore.analysis",
    "AnalysisResult": "ctpore.analysis",
    "read_stack": "ctpore.io.stack_readers",
    "write_ome_tiff": "ctpore.io.ome_tiff",
    "Recipe": "ctpore.recipe",
    "load_recipe": "ctpore.recipe",
    "Scan": "ctpore.scan",
    "InputError": "ctpore.errors",
    "segment_stack": "ctpore.segment.pipeline",
    "porosity": "ctpore.measure.porosity",
}

__all__ = sorted(["__version__", *_LAZY])


_ALIASES = {"segment_stack": "segment"}


def __getattr__(name):
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), _ALIASES.get(name, name))
        globals()[name] = value
        return value
    raise AttributeError(f"module 'ctpore' has no attribute {name!r}")


def __dir__():
    return __all__
