"""`import ctpore` stays light: no display toolkit, no porespy, no cluster client at import."""

import subprocess
import sys

HEAVY = ("napari", "PyQt6", "PyQt5", "PySide6", "qtpy", "dask.distributed", "porespy", "numba")


def test_import_is_light_and_has_no_side_effects():
    code = (
        "import sys, logging, numpy as np\n"
        "before = np.geterr(); handlers = list(logging.getLogger().handlers)\n"
        "import ctpore\n"
        "assert np.geterr() == before, 'numpy error state changed at import'\n"
        "assert logging.getLogger().handlers == handlers, 'root logger changed at import'\n"
        f"heavy = [m for m in {HEAVY!r} if m in sys.modules]\n"
        "print(','.join(heavy))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"imported at `import ctpore`: {out.stdout.strip()}"


def test_public_api_is_pinned():
    import ctpore

    assert ctpore.__all__ == sorted([
        "AnalysisResult", "InputError", "Recipe", "Scan", "__version__", "analyze",
        "load_recipe", "porosity", "read_stack", "segment_stack", "write_ome_tiff",
    ])
    import ctpore.segment.pipeline  # importing subpackages must not shadow public names

    for name in ctpore.__all__:
        assert getattr(ctpore, name) is not None
    assert callable(ctpore.segment_stack) and callable(ctpore.porosity)
