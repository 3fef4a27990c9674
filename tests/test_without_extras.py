"""The core works without the optional extras: analyze runs with napari, Qt and
dask.distributed absent (they are blocked from importing, as if not installed)."""

import json
import subprocess
import sys
import textwrap

BLOCKED = ("napari", "PyQt6", "PyQt5", "PySide6", "PySide2", "qtpy", "npe2", "magicgui",
           "distributed", "dask", "zarr", "ome_zarr", "pytestqt")


def test_analyze_runs_with_the_extras_not_installed(tmp_path):
    code = textwrap.dedent(f"""
        import importlib.abc, sys, json
        BLOCKED = {BLOCKED!r}

        class Block(importlib.abc.MetaPathFinder):
            def find_spec(self, name, path=None, target=None):
                if name.split(".")[0] in BLOCKED:
                    raise ModuleNotFoundError(f"No module named {{name!r}} (blocked)")
                return None

        sys.meta_path.insert(0, Block())
        import numpy as np
        import ctpore
        from ctpore.demo_scenario import make_piece

        piece = make_piece(setting="intense", time_s=6.0, seed=3, shape=(48, 64, 64))
        result = ctpore.analyze(piece.grey, spacing_um=piece.spacing_um,
                                out=sys.argv[1], quiet=True)
        heavy = sorted(m for m in sys.modules if m.split(".")[0] in BLOCKED)
        print(json.dumps({{"porosity_gas": result.summary["porosity_gas"], "heavy": heavy}}))
    """)
    out = subprocess.run([sys.executable, "-c", code, str(tmp_path / "res")],
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stderr[-2000:]
    report = json.loads(out.stdout.strip().splitlines()[-1])
    assert report["heavy"] == []
    assert 0.0 < report["porosity_gas"] < 1.0
    assert (tmp_path / "res" / "summary.json").is_file()
