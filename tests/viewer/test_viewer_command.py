"""`ctpore view`: its parser, its message without napari, and a light `import ctpore.viewer`."""

import argparse
import os
import subprocess
import sys

import pytest

from ctpore.errors import InputError
from ctpore.viewer.command import add_view_parser, run_view

GUI_MODULES = ("napari", "PyQt6", "PyQt5", "PySide6", "PySide2", "qtpy", "magicgui", "vispy")


def _parse(argv):
    parser = argparse.ArgumentParser(prog="ctpore")
    add_view_parser(parser.add_subparsers(dest="command"))
    return parser.parse_args(argv)


def test_view_parser_options():
    args = _parse(["view", "res", "--stack", "s.ome.tif", "--no-widget"])
    assert (args.command, args.result, args.stack, args.no_widget) == (
        "view", "res", "s.ome.tif", True)
    args = _parse(["view", "res"])
    assert args.stack is None and args.no_widget is False


def test_view_without_napari_says_how_to_install_it(monkeypatch, tmp_path):
    monkeypatch.setitem(sys.modules, "napari", None)  # `import napari` now raises ImportError
    with pytest.raises(InputError) as err:
        run_view(_parse(["view", str(tmp_path)]))
    assert str(err.value) == "napari is not installed. Fix: pip install 'ctpore[viewer]'"


def test_cli_view_without_napari_exits_2(monkeypatch, capsys, tmp_path):
    # Needs `view` wired into ctpore/cli.py (add_view_parser / run_view).
    from ctpore.cli import main

    monkeypatch.setitem(sys.modules, "napari", None)
    assert main(["view", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "napari is not installed. Fix: pip install 'ctpore[viewer]'" in err


def test_view_of_a_missing_result_names_it(tmp_path):
    pytest.importorskip("napari")
    with pytest.raises(InputError, match="does not exist"):
        run_view(_parse(["view", str(tmp_path / "nothing")]))


def test_import_ctpore_viewer_needs_no_display():
    # With no display and no Qt platform, importing Qt aborts the process; the viewer package
    # must not import napari, Qt or magicgui until a function needs them.
    code = (
        "import sys\n"
        "import ctpore.viewer, ctpore.viewer.layers, ctpore.viewer.palette\n"
        "import ctpore.viewer.reader, ctpore.viewer.widget, ctpore.viewer.command\n"
        "from ctpore.viewer.widget import preview_stride, recipe_with\n"
        f"print(','.join(m for m in {GUI_MODULES!r} if m in sys.modules))\n"
    )
    env = {k: v for k, v in os.environ.items()
           if k not in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM")}
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         env=env, check=True)
    assert out.stdout.strip() == ""


def test_view_without_a_display_says_so_instead_of_aborting(monkeypatch, tmp_path):
    pytest.importorskip("napari")
    monkeypatch.setattr(sys, "platform", "linux")
    for name in ("DISPLAY", "WAYLAND_DISPLAY", "QT_QPA_PLATFORM"):
        monkeypatch.delenv(name, raising=False)
    with pytest.raises(InputError, match="no display"):
        run_view(_parse(["view", str(tmp_path)]))
