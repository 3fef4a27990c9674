"""OME-Zarr: conversion from TIFF, validity against the NGFF spec, voxel size, pyramid levels,
streaming memory, atomic writes, and reading OME-Zarr written by the reference library.

Sources of the checks:
- OME-Zarr (NGFF) specification 0.5, https://ngff.openmicroscopy.org/0.5/ (``multiscales``,
  ``axes`` with type/unit, ``coordinateTransformations`` scale then translation). Validity is
  judged by ome-zarr-models (the spec's pydantic models, https://github.com/ome-zarr-models),
  not by ctpore's own code.
- Downsampled levels: scikit-image's ``measure.block_reduce`` with ``np.mean`` as the
  reference 2 × 2 × 2 block mean.
- Reading: files written by the ``ome-zarr`` package's own ``write_image`` (NGFF 0.4 on zarr
  format 2; 0.5 with t and c axes and millimetre units), and ``ome_zarr.reader`` reading ours.
- Voxel positions: ctpore's convention (voxel centre at index * spacing) [derived: the centre
  of a 2**k block of level-0 voxels lies (2**k - 1) / 2 voxels from its first voxel].
"""

from __future__ import annotations

import shutil
import tracemalloc
import warnings

import numpy as np
import pytest
import tifffile

from ctpore.errors import InputError
from ctpore.io.ome_tiff import write_ome_tiff
from ctpore.io.ome_zarr import (
    convert_to_ome_zarr,
    is_ome_zarr,
    pyramid_shapes,
    read_ome_zarr,
    write_ome_zarr,
)

zarr = pytest.importorskip("zarr")
pytest.importorskip("ome_zarr")

SPACING = (3.0, 1.5, 1.5)  # anisotropic (dz, dy, dx) µm
SHAPE = (40, 52, 60)  # odd halves (13, 15) exercise the dropped last row/column


def _volume(dtype, shape=SHAPE, seed=0):
    """A smooth field plus noise, so block means are not trivially equal."""
    rng = np.random.default_rng(seed)
    z, y, x = np.meshgrid(*(np.linspace(0, 3, n) for n in shape), indexing="ij")
    field = np.sin(z) * np.cos(y) + 0.5 * np.sin(2 * x)
    dtype = np.dtype(dtype)
    if dtype.kind == "f":
        return (100.0 * field + rng.normal(0, 5, shape)).astype(dtype)
    info = np.iinfo(dtype)
    mid, half = (int(info.max) + int(info.min)) / 2, (int(info.max) - int(info.min)) / 4
    return np.clip(mid + half * field / 1.5 + rng.normal(0, half / 20, shape),
                   info.min, info.max).astype(dtype)


def _ome_writer():
    with warnings.catch_warnings():  # ome-zarr warns about its own deprecated default
        warnings.simplefilter("ignore", DeprecationWarning)
        from ome_zarr import writer
        from ome_zarr.format import FormatV04, FormatV05
    return writer, FormatV04, FormatV05


@pytest.fixture(scope="module")
def converted(tmp_path_factory):
    """An OME-TIFF with anisotropic voxels converted to OME-Zarr with a 4-level pyramid."""
    root = tmp_path_factory.mktemp("omezarr")
    a = _volume("uint16")
    write_ome_tiff(root / "piece.ome.tif", a, SPACING)
    out = convert_to_ome_zarr(root / "piece.ome.tif", root / "piece.ome.zarr",
                              chunks=(16, 16, 16), min_side=8)
    return a, out


def test_written_group_validates_against_the_ngff_0_5_models(converted, tmp_path):
    # OME-Zarr 0.5 spec, validated by ome-zarr-models (https://github.com/ome-zarr-models)
    from ome_zarr_models.v05.image import Image
    from pydantic import ValidationError

    _, out = converted
    image = Image.from_zarr(zarr.open_group(str(out), mode="r"))
    ms = image.attributes.ome.multiscales[0]
    assert [(a.name, a.type, a.unit) for a in ms.axes] == [
        ("z", "space", "micrometer"), ("y", "space", "micrometer"), ("x", "space", "micrometer")]
    assert [d.path for d in ms.datasets] == ["s0", "s1", "s2", "s3"]
    for k, d in enumerate(ms.datasets):
        scale = d.coordinateTransformations[0]
        assert scale.type == "scale"
        assert list(scale.scale) == pytest.approx([s * 2**k for s in SPACING])
        if k:  # centre of the first 2**k block of level-0 voxels [derived]
            offset = np.mean(np.arange(2**k))
            assert list(d.coordinateTransformations[1].translation) == pytest.approx(
                [s * offset for s in SPACING])
    for k in range(4):  # zarr arrays carry dimension names matching the axes (NGFF 0.5)
        assert zarr.open_array(str(out / f"s{k}"), mode="r").metadata.dimension_names == (
            "z", "y", "x")

    # the validator does reject a broken copy: a scale with two values for three axes
    broken = tmp_path / "broken.ome.zarr"
    shutil.copytree(out, broken)
    g = zarr.open_group(str(broken), mode="r+")
    ome = dict(g.attrs["ome"])
    ome["multiscales"][0]["datasets"][0]["coordinateTransformations"][0]["scale"] = [3.0, 1.5]
    g.attrs["ome"] = ome
    with pytest.raises(ValidationError):
        Image.from_zarr(zarr.open_group(str(broken), mode="r"))


@pytest.mark.parametrize("dtype", ["uint16", "int16", "float32"])
def test_levels_are_block_means_of_the_level_above(dtype, tmp_path):
    # reference: skimage.measure.block_reduce(..., np.mean) on the previous stored level
    from skimage.measure import block_reduce

    a = _volume(dtype, seed=3)
    out = write_ome_zarr(a, tmp_path / "v.ome.zarr", spacing_um=SPACING, chunks=(8, 16, 16),
                         min_side=8, memory_mb=0.05)
    shapes = pyramid_shapes(SHAPE, min_side=8)
    assert shapes == [(40, 52, 60), (20, 26, 30), (10, 13, 15), (5, 6, 7)]
    scan0 = read_ome_zarr(out)
    assert scan0.dtype == np.dtype(dtype) and scan0.spacing_um == SPACING
    assert scan0.spacing_source == "ome" and scan0.meta["n_levels"] == 4
    np.testing.assert_array_equal(scan0.load(), a)  # level 0: the original values and type
    previous = a
    for k in range(1, 4):
        scan = read_ome_zarr(out, level=k)
        got = scan.load()
        assert got.shape == shapes[k] and got.dtype == np.dtype(dtype)
        assert scan.spacing_um == pytest.approx(tuple(s * 2**k for s in SPACING))
        nz, ny, nx = (2 * s for s in shapes[k])
        ref = block_reduce(previous[:nz, :ny, :nx].astype(np.float64), (2, 2, 2), np.mean)
        if np.dtype(dtype).kind in "iu":
            ref = np.rint(ref)
        np.testing.assert_array_equal(got, ref.astype(dtype))
        previous = got
    assert read_ome_zarr(out, level="s3").shape == read_ome_zarr(out, level=-1).shape == (5, 6, 7)


def test_convert_keeps_voxel_size_and_values(converted):
    a, out = converted
    scan = read_ome_zarr(out)
    assert scan.spacing_um == SPACING and scan.meta["format"] == "ome-zarr"
    assert isinstance(scan.data, zarr.Array)  # lazy until loaded
    np.testing.assert_array_equal(scan.data[7], a[7])
    np.testing.assert_array_equal(scan.load(), a)
    prov = dict(zarr.open_group(str(out), mode="r").attrs)["ctpore"]
    assert prov["source_format"] == "ome-tiff" and prov["spacing_source"] == "ome"


def test_the_reference_reader_reads_what_convert_wrote(converted):
    # ome_zarr.reader (the ome-zarr package) as an independent reader of our output
    from ome_zarr.io import parse_url
    from ome_zarr.reader import Reader

    a, out = converted
    node = list(Reader(parse_url(str(out)))())[0]
    assert len(node.data) == 4
    np.testing.assert_array_equal(np.asarray(node.data[0]), a)
    transforms = node.metadata["coordinateTransformations"]
    assert transforms[2][0]["scale"] == pytest.approx([s * 4 for s in SPACING])


def test_reads_ome_zarr_written_by_the_reference_writer(tmp_path):
    writer, FormatV04, FormatV05 = _ome_writer()
    a = _volume("uint16", shape=(8, 10, 12))
    # NGFF 0.4 on zarr format 2, micrometres, with a z-halving level
    g = zarr.open_group(str(tmp_path / "v04.zarr"), mode="w", zarr_format=2)
    writer.write_image(a, g, fmt=FormatV04(), axes="zyx", scale={"z": 3.0, "y": 1.5, "x": 1.5},
                       axes_units={k: "micrometer" for k in "zyx"},
                       scale_factors=[{"z": 2, "y": 2, "x": 2}],
                       storage_options={"chunks": (4, 5, 6)})
    scan = read_ome_zarr(tmp_path / "v04.zarr")
    assert scan.spacing_um == SPACING and scan.meta["ngff_version"] == "0.4"
    np.testing.assert_array_equal(scan.load(), a)
    assert read_ome_zarr(tmp_path / "v04.zarr", level=1).spacing_um == (6.0, 3.0, 3.0)
    # NGFF 0.5 with length-1 t and c axes, in millimetres
    g = zarr.open_group(str(tmp_path / "v05.zarr"), mode="w", zarr_format=3)
    writer.write_image(a[None, None], g, fmt=FormatV05(), axes="tczyx",
                       scale={"t": 1.0, "c": 1.0, "z": 0.003, "y": 0.0015, "x": 0.0015},
                       axes_units={k: "millimeter" for k in "zyx"}, scale_factors=[],
                       storage_options={"chunks": (1, 1, 4, 5, 6)})
    scan = read_ome_zarr(tmp_path / "v05.zarr")
    assert scan.shape == a.shape and scan.spacing_um == pytest.approx(SPACING)
    np.testing.assert_array_equal(scan.data[2:4, 1, ::2], a[2:4, 1, ::2])
    np.testing.assert_array_equal(scan.load(), a)
    # no unit on the axes: the voxel size is never assumed
    g = zarr.open_group(str(tmp_path / "nounit.zarr"), mode="w", zarr_format=3)
    writer.write_image(a, g, fmt=FormatV05(), axes="zyx", scale_factors=[])
    with pytest.raises(InputError, match=r"nounit\.zarr.*voxel size.*--spacing"):
        read_ome_zarr(tmp_path / "nounit.zarr")
    scan = read_ome_zarr(tmp_path / "nounit.zarr", spacing_um="3,1.5,1.5")
    assert scan.spacing_um == SPACING and scan.spacing_source == "user"


def test_convert_of_a_slice_folder_streams(tmp_path):
    """256³ uint16 (32 MiB) from 256 slice files: the traced peak stays below a third of it."""
    import ome_zarr.format  # noqa: F401  (imports are not part of the measurement)
    from ctpore.io.ome_zarr import _ome_zarr_writer
    from ctpore.io.stack_readers import read_stack

    _ome_zarr_writer()
    n = 256
    folder = tmp_path / "slices"
    folder.mkdir()
    rng = np.random.default_rng(7)
    for z in range(n):
        tifffile.imwrite(folder / f"slice_{z}.tif",
                         rng.integers(0, 60000, (n, n), dtype=np.uint16))
    volume_bytes = n**3 * 2

    # control: tracemalloc sees the slices read from the folder (half the volume here)
    lazy = read_stack(folder, spacing_um=SPACING).data
    tracemalloc.start()
    try:
        lazy[: n // 2]
        _, half_peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert half_peak >= volume_bytes / 2

    tracemalloc.start()
    try:
        out = convert_to_ome_zarr(folder, tmp_path / "s.ome.zarr", spacing_um=SPACING,
                                  chunks=(16, 64, 64), memory_mb=2)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < volume_bytes / 3, f"peak {peak / 2**20:.1f} MiB"
    scan = read_ome_zarr(out)
    assert scan.meta["level_shapes"] == [(256,) * 3, (128,) * 3, (64,) * 3, (32,) * 3]
    for z in (0, 101, 255):
        np.testing.assert_array_equal(scan.data[z], tifffile.imread(folder / f"slice_{z}.tif"))


def test_refuses_to_overwrite_and_replaces_with_force(converted, tmp_path):
    a, src = converted
    out = tmp_path / "x.ome.zarr"
    write_ome_zarr(a[:8], out, spacing_um=SPACING, max_levels=1)
    before = sorted(p.relative_to(out) for p in out.rglob("*"))
    with pytest.raises(InputError, match=r"x\.ome\.zarr already exists.*--force"):
        write_ome_zarr(a, out, spacing_um=SPACING)
    assert sorted(p.relative_to(out) for p in out.rglob("*")) == before
    assert read_ome_zarr(out).shape == (8, 52, 60)
    write_ome_zarr(a, out, spacing_um=(2, 1, 1), min_side=8, max_levels=2, force=True)
    scan = read_ome_zarr(out)
    assert scan.shape == SHAPE and scan.spacing_um == (2.0, 1.0, 1.0)
    assert scan.meta["n_levels"] == 2
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.ome.zarr"]  # no temporary left


def test_a_failed_write_leaves_nothing(tmp_path):
    a = _volume("uint16", shape=(12, 16, 16))
    folder = tmp_path / "slices"
    folder.mkdir()
    for z, plane in enumerate(a):
        tifffile.imwrite(folder / f"s_{z}.tif", plane)
    from ctpore.io.stack_readers import read_stack

    scan = read_stack(folder, spacing_um=SPACING)
    (folder / "s_9.tif").unlink()  # disappears after the folder was listed
    with pytest.raises(InputError, match=r"slices 8-11 of the stack failed.*s_9\.tif"):
        write_ome_zarr(scan.data, tmp_path / "o.ome.zarr", spacing_um=SPACING,
                       chunks=(4, 16, 16), memory_mb=0.001)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["slices"]


def test_bad_input_names_the_file_and_the_fix(tmp_path):
    a = _volume("uint16", shape=(6, 10, 12))
    tifffile.imwrite(tmp_path / "plain.tif", a)  # no voxel size stored
    with pytest.raises(InputError, match=r"plain\.tif.*voxel size.*--spacing"):
        convert_to_ome_zarr(tmp_path / "plain.tif", tmp_path / "p.ome.zarr")
    assert not (tmp_path / "p.ome.zarr").exists()
    with pytest.raises(InputError, match=r"does not end in \.zarr.*p\.tif\.ome\.zarr"):
        convert_to_ome_zarr(tmp_path / "plain.tif", tmp_path / "p.tif", spacing_um=2)
    with pytest.raises(InputError, match=r"voxel type int32.*uint16"):
        write_ome_zarr(a.astype(np.int32), tmp_path / "i.ome.zarr", spacing_um=2)
    with pytest.raises(InputError, match=r"chunks.*64,128,128"):
        write_ome_zarr(a, tmp_path / "c.ome.zarr", spacing_um=2, chunks="a,b")
    out = write_ome_zarr(a, tmp_path / "ok.ome.zarr", spacing_um=2, max_levels=1)
    with pytest.raises(InputError, match=r"level 3 is not in the pyramid"):
        read_ome_zarr(out, level=3)
    zarr.open_group(str(tmp_path / "plain.zarr"), mode="w", zarr_format=3)
    with pytest.raises(InputError, match=r"plain\.zarr.*not an OME-Zarr image.*ctpore convert"):
        read_ome_zarr(tmp_path / "plain.zarr")
    assert is_ome_zarr(out) and is_ome_zarr(tmp_path / "plain.zarr")
    assert not is_ome_zarr(tmp_path / "plain.tif") and not is_ome_zarr(tmp_path)


def test_user_spacing_overrides_the_file_and_scales_with_the_level(converted):
    _, out = converted
    scan = read_ome_zarr(out, spacing_um=(6.0, 3.0, 3.0))
    assert scan.spacing_source == "user" and scan.meta["metadata_spacing_um"] == SPACING
    assert scan.meta["spacing_differs_from_metadata"]
    assert read_ome_zarr(out, spacing_um=(6.0, 3.0, 3.0), level=2).spacing_um == (24.0, 12.0,
                                                                                   12.0)


def test_analyze_on_the_zarr_scan_matches_the_tiff(tmp_path):
    from ctpore.analysis import analyze
    from ctpore.demo_scenario import make_piece
    from ctpore.recipe import Recipe

    piece = make_piece(setting="gentle", time_s=8.0, seed=11, shape=(40, 48, 48))
    write_ome_tiff(tmp_path / "p.ome.tif", piece.grey, piece.spacing_um)
    out = convert_to_ome_zarr(tmp_path / "p.ome.tif", tmp_path / "p.ome.zarr", chunks=16)
    recipe = Recipe().replace("structure", enabled=False).replace("profiles", enabled=False)
    from_tiff = analyze(tmp_path / "p.ome.tif", recipe=recipe, out=tmp_path / "r1", quiet=True)
    from_zarr = analyze(read_ome_zarr(out), recipe=recipe, out=tmp_path / "r2", quiet=True)
    for key in ("porosity_gas", "porosity_open", "porosity_closed", "envelope_volume_mm3"):
        assert from_zarr.summary[key] == from_tiff.summary[key]
    assert from_zarr.summary["spacing_um"] == list(piece.spacing_um)


def test_command_line_convert(converted, tmp_path, capsys):
    import argparse

    from ctpore.io.convert_command import add_convert_parser, run_convert

    a, _ = converted
    tifffile.imwrite(tmp_path / "plain.tif", a)
    parser = argparse.ArgumentParser(prog="ctpore")
    add_convert_parser(parser.add_subparsers(dest="command"))
    args = parser.parse_args(["convert", str(tmp_path / "plain.tif"), str(tmp_path / "o.ome.zarr"),
                              "--spacing", "3,1.5,1.5", "--min-side", "16", "--chunks", "16",
                              "--quiet"])
    assert run_convert(args) == 0
    printed = capsys.readouterr().out
    assert "3 level(s)" in printed and "s2: 10 x 13 x 15 voxels, 12,6,6 µm" in printed
    np.testing.assert_array_equal(read_ome_zarr(tmp_path / "o.ome.zarr").load(), a)
    with pytest.raises(InputError, match="already exists"):
        run_convert(args)
