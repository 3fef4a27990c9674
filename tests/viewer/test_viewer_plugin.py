"""The npe2 manifest: valid, importable, its reader picks result folders only; discovery."""

import subprocess
import sys
from pathlib import Path

import pytest

npe2 = pytest.importorskip("npe2")

MANIFEST = Path(__file__).parents[2] / "ctpore" / "viewer" / "napari.yaml"


def test_manifest_is_valid_and_its_python_names_import():
    # npe2's own schema validation (what `npe2 validate` runs) and --imports.
    mf = npe2.PluginManifest.from_file(MANIFEST)
    assert mf.name == "ctpore"
    mf.validate_imports()
    (reader,) = mf.contributions.readers
    assert reader.accepts_directories
    (widget,) = mf.contributions.widgets
    commands = {c.id: c.python_name for c in mf.contributions.commands}
    assert commands[reader.command] == "ctpore.viewer.reader:napari_get_reader"
    assert commands[widget.command] == "ctpore.viewer.widget:SegmentationWidget"


def test_reader_takes_result_folders_only(piece, tmp_path):
    from ctpore.viewer.reader import napari_get_reader, read_result

    assert napari_get_reader(str(piece.result)) is read_result
    assert napari_get_reader([str(piece.result)]) is read_result
    assert napari_get_reader(str(tmp_path)) is None  # an empty folder
    assert napari_get_reader(str(piece.stack)) is None  # a stack file
    assert napari_get_reader([str(piece.result), str(piece.result)]) is None


def test_npe2_finds_the_reader_for_a_result_folder(npe2pm, piece):
    with npe2pm.tmp_plugin(manifest=str(MANIFEST)):
        readers = [r.plugin_name for r in npe2pm.iter_compatible_readers([str(piece.result)])]
    assert "ctpore" in readers


def test_installed_package_registers_the_plugin():
    # Passes once pyproject.toml has the "napari.manifest" entry point and the package is
    # (re)installed: napari then lists ctpore among its plugins, and `npe2 validate ctpore`
    # (npe2's command line) accepts it.
    pm = npe2.PluginManager.instance()
    pm.discover()
    assert "ctpore" in pm._manifests, "ctpore's napari.manifest entry point is not installed"
    installed = npe2.PluginManifest.from_distribution("ctpore")
    assert installed.contributions == npe2.PluginManifest.from_file(MANIFEST).contributions
    out = subprocess.run([sys.executable, "-m", "npe2", "validate", "ctpore", "--imports"],
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stdout + out.stderr
