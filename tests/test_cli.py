"""Command line: exit status, one-line reasons naming the file and the fix, nothing written on
failure, nothing overwritten without --force."""

import json
import subprocess
import sys

import numpy as np
import pytest
import tifffile

from ctpore.cli import main


def _ball_stack(n=40, r=14, seed=0):
    """A porous ball: bright solid with dark spherical cells, on a dark background."""
    rng = np.random.default_rng(seed)
    z, y, x = np.mgrid[:n, :n, :n] - n / 2 + 0.5
    body = z**2 + y**2 + x**2 <= r**2
    cells = np.zeros_like(body)
    for c in rng.uniform(-r / 2, r / 2, size=(6, 3)):
        cells |= (z - c[0]) ** 2 + (y - c[1]) ** 2 + (x - c[2]) ** 2 <= 9
    grey = np.where(body & ~cells, 30000, 6000).astype(np.float32)
    grey += rng.normal(0, 500, grey.shape)
    return np.clip(grey, 0, 65535).astype(np.uint16)


def _write_ome(path, array, spacing=(12.0, 10.0, 10.0)):
    tifffile.imwrite(path, array, ome=True, metadata={
        "axes": "ZYX", "PhysicalSizeZ": spacing[0], "PhysicalSizeY": spacing[1],
        "PhysicalSizeX": spacing[2], "PhysicalSizeZUnit": "µm", "PhysicalSizeYUnit": "µm",
        "PhysicalSizeXUnit": "µm"})


def _run(args, capsys):
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def test_analyze_writes_a_complete_result(tmp_path, capsys):
    stack = tmp_path / "piece.ome.tif"
    _write_ome(stack, _ball_stack())
    out = tmp_path / "res"
    code, stdout, err = _run(["analyze", stack, "--out", out, "--quiet",
                              "--recipe", _recipe(tmp_path)], capsys)
    assert code == 0, err
    for name in ("summary.json", "measurements.csv", "phases.ome.tif", "recipe.toml",
                 "provenance.json", "figures/threshold_histogram.png", "figures/slices.png"):
        assert (out / name).is_file(), name
    summary = json.loads((out / "summary.json").read_text())
    assert summary["spacing_um"] == [12.0, 10.0, 10.0]
    assert 0 < summary["porosity_gas"] < 1
    prov = json.loads((out / "provenance.json").read_text())
    assert len(prov["input_sha256"]) == 64 and prov["command_line"][0] == "ctpore"
    # The same input and recipe give identical numbers.
    code, _, _ = _run(["analyze", stack, "--out", tmp_path / "res2", "--quiet",
                       "--recipe", out / "recipe.toml"], capsys)
    assert code == 0
    assert (tmp_path / "res2" / "summary.json").read_text() == (out / "summary.json").read_text()


def _recipe(tmp_path):
    p = tmp_path / "recipe.toml"
    p.write_text("[envelope]\nradius_um = 60\n")
    return p


def test_existing_result_needs_force(tmp_path, capsys):
    stack = tmp_path / "piece.ome.tif"
    _write_ome(stack, _ball_stack())
    out = tmp_path / "res"
    out.mkdir()
    (out / "keep.txt").write_text("earlier result")
    code, _, err = _run(["analyze", stack, "--out", out, "--quiet"], capsys)
    assert code == 2 and "already exists" in err and "--force" in err
    assert (out / "keep.txt").read_text() == "earlier result"
    code, _, err = _run(["analyze", stack, "--out", out, "--quiet", "--force"], capsys)
    assert code == 0, err
    assert not (out / "keep.txt").exists() and (out / "summary.json").exists()


def _bad_inputs(tmp_path):
    """(name, path, extra args, words the message must hold)."""
    cases = []
    rgb = tmp_path / "rgb.tif"
    tifffile.imwrite(rgb, np.zeros((4, 16, 16, 3), np.uint8), photometric="rgb")
    cases.append(("rgb", rgb, ["--spacing", "10"], ["rgb.tif"]))
    flat = tmp_path / "flat.tif"
    tifffile.imwrite(flat, np.zeros((16, 16), np.uint16))
    cases.append(("2-D", flat, ["--spacing", "10"], ["flat.tif"]))
    folder = tmp_path / "mixed"
    folder.mkdir()
    tifffile.imwrite(folder / "slice_1.tif", np.zeros((16, 16), np.uint16))
    tifffile.imwrite(folder / "slice_2.tif", np.zeros((16, 17), np.uint16))
    cases.append(("mixed shapes", folder, ["--spacing", "10"], ["slice_2.tif"]))
    trunc = tmp_path / "trunc.tif"
    tifffile.imwrite(trunc, _ball_stack())
    data = trunc.read_bytes()
    trunc.write_bytes(data[: len(data) // 2])
    cases.append(("truncated", trunc, ["--spacing", "10"], ["trunc.tif"]))
    const = tmp_path / "const.tif"
    tifffile.imwrite(const, np.full((8, 16, 16), 1000, np.uint16))
    cases.append(("constant", const, ["--spacing", "10"], ["const.tif"]))
    nan = tmp_path / "nan.tif"
    arr = _ball_stack().astype(np.float32)
    arr[3, 4, 5] = np.nan
    tifffile.imwrite(nan, arr)
    cases.append(("NaN", nan, ["--spacing", "10"], ["nan.tif"]))
    plain = tmp_path / "plain.tif"
    tifffile.imwrite(plain, _ball_stack())
    cases.append(("no spacing", plain, [], ["plain.tif", "--spacing"]))
    bad_recipe = tmp_path / "bad.toml"
    bad_recipe.write_text("[envelope]\nradius = 50\n")
    cases.append(("unknown recipe key", plain, ["--spacing", "10", "--recipe", bad_recipe],
                  ["bad.toml", "radius_um"]))
    cases.append(("missing file", tmp_path / "nothere.tif", ["--spacing", "10"],
                  ["nothere.tif"]))
    return cases


def test_every_bad_input_exits_2_with_one_line_and_writes_nothing(tmp_path, capsys):
    for name, path, extra, words in _bad_inputs(tmp_path):
        out = tmp_path / f"out_{name.replace(' ', '_')}"
        code, stdout, err = _run(["analyze", path, "--out", out, "--quiet", *extra], capsys)
        assert code == 2, (name, err)
        lines = [ln for ln in err.splitlines() if ln.startswith("ctpore: error:")]
        assert len(lines) == 1, (name, err)
        for w in words:
            assert w in lines[0], (name, w, lines[0])
        assert "Fix:" in lines[0], (name, lines[0])
        assert not out.exists(), name
        assert not list(tmp_path.glob(f".{out.name}.partial-*")), name


def test_usage_error_exits_2(capsys):
    with pytest.raises(SystemExit) as e:
        main(["analyze"])
    assert e.value.code == 2


def test_console_entry_point_runs():
    out = subprocess.run([sys.executable, "-m", "ctpore", "--version"], capture_output=True,
                         text=True, check=True)
    assert out.stdout.startswith("ctpore ")


def test_convert_to_ome_zarr_then_analyze_it_gives_the_tiff_numbers(tmp_path, capsys):
    pytest.importorskip("ome_zarr")
    stack = tmp_path / "piece.ome.tif"
    _write_ome(stack, _ball_stack(), spacing=(12.0, 10.0, 10.0))
    zarr_path = tmp_path / "piece.ome.zarr"
    code, _, err = _run(["convert", stack, zarr_path, "--quiet"], capsys)
    assert code == 0, err
    code, _, err = _run(["convert", stack, zarr_path, "--quiet"], capsys)
    assert code == 2 and "--force" in err  # never overwritten without --force
    code, out_zarr, err = _run(["analyze", zarr_path, "--out", tmp_path / "rz", "--json",
                                "--quiet"], capsys)
    assert code == 0, err
    code, out_tif, err = _run(["analyze", stack, "--out", tmp_path / "rt", "--json", "--quiet"],
                              capsys)
    assert code == 0, err
    a, b = json.loads(out_zarr), json.loads(out_tif)
    for key in ("porosity_gas", "porosity_open", "porosity_closed", "envelope_volume_mm3"):
        assert a[key] == b[key]
    assert a["spacing_um"] == b["spacing_um"] == [12.0, 10.0, 10.0]
