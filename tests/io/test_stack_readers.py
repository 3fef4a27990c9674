"""Reading CT stacks: formats, voxel size from metadata, laziness and bad input.

Sources for the conventions checked here:
- OME data model, schema 2016-06 (http://www.openmicroscopy.org/Schemas/OME/2016-06/ome.xsd):
  ``Pixels/@PhysicalSizeX|Y|Z`` with ``PhysicalSize*Unit`` of type ``UnitsLength``, default "µm".
- ImageJ TIFF conventions as written and read by tifffile (https://github.com/cgohlke/tifffile):
  ``spacing=`` (z voxel size) and ``unit=`` in the ImageDescription; x/y voxel size is
  1 / XResolution, 1 / YResolution (pixels per unit).
- TIFF 6.0 specification (Adobe 1992): ResolutionUnit 2 = inch, 3 = centimetre.
The test files are written with tifffile itself, independently of ctpore's writer.
"""

from __future__ import annotations

import logging
import pickle

import numpy as np
import pytest
import tifffile

from ctpore.errors import InputError
from ctpore.io.stack_readers import (
    LazyStack,
    SliceFileStack,
    TiffPageStack,
    check_finite,
    natural_sort_key,
    read_stack,
)

SPACING = (12.0, 10.0, 8.0)  # (dz, dy, dx) µm; dy != dx so a swapped axis shows up
SHAPE = (6, 20, 24)


def _volume(dtype, shape=SHAPE, seed=0):
    rng = np.random.default_rng(seed)
    dtype = np.dtype(dtype)
    if dtype.kind == "f":
        return rng.normal(100.0, 20.0, shape).astype(dtype)
    info = np.iinfo(dtype)
    return rng.integers(info.min, info.max, shape, endpoint=True, dtype=dtype)


def _write_ome(path, a, spacing=SPACING, **kw):
    dz, dy, dx = spacing
    md = {"axes": "ZYX", "PhysicalSizeZ": dz, "PhysicalSizeY": dy, "PhysicalSizeX": dx,
          "PhysicalSizeZUnit": "µm", "PhysicalSizeYUnit": "µm", "PhysicalSizeXUnit": "µm"}
    tifffile.imwrite(path, a, ome=True, metadata=md, photometric="minisblack", **kw)


def _write_imagej(path, a, spacing=SPACING, unit="micron", **kw):
    dz, dy, dx = spacing
    tifffile.imwrite(path, a, imagej=True, resolution=(1 / dx, 1 / dy),
                     metadata={"spacing": dz, "unit": unit, "axes": "ZYX"}, **kw)


def _write_folder(folder, a, prefix="slice_"):
    folder.mkdir()
    for i, plane in enumerate(a, start=1):
        tifffile.imwrite(folder / f"{prefix}{i}.tif", plane)
    return folder


# Each maker writes `a` and returns (path, spacing to pass or None, expected format, source).
def _make_ome(tmp, a):
    _write_ome(tmp / "s.ome.tif", a)
    return tmp / "s.ome.tif", None, "ome-tiff", "ome"


def _make_imagej(tmp, a):
    _write_imagej(tmp / "s.tif", a)
    return tmp / "s.tif", None, "imagej-tiff", "imagej"


def _make_plain(tmp, a):
    tifffile.imwrite(tmp / "s.tif", a)
    return tmp / "s.tif", SPACING, "tiff", "user"


def _make_bigtiff(tmp, a):
    tifffile.imwrite(tmp / "s.tif", a, bigtiff=True)
    return tmp / "s.tif", SPACING, "tiff", "user"


def _make_zlib(tmp, a):
    tifffile.imwrite(tmp / "s.tif", a, compression="zlib")
    return tmp / "s.tif", SPACING, "tiff", "user"


def _make_ome_zlib(tmp, a):
    _write_ome(tmp / "s.ome.tif", a, compression="zlib")
    return tmp / "s.ome.tif", None, "ome-tiff", "ome"


def _make_folder(tmp, a):
    return _write_folder(tmp / "slices", a), SPACING, "slice-folder", "user"


MAKERS = {"ome": _make_ome, "imagej": _make_imagej, "plain": _make_plain,
          "bigtiff": _make_bigtiff, "zlib": _make_zlib, "ome-zlib": _make_ome_zlib,
          "folder": _make_folder}


@pytest.mark.parametrize("dtype", ["uint8", "uint16", "float32"])
@pytest.mark.parametrize("kind", sorted(MAKERS))
def test_round_trip_each_format(tmp_path, kind, dtype):
    a = _volume(dtype)
    path, spacing, fmt, source = MAKERS[kind](tmp_path, a)
    scan = read_stack(path, spacing_um=spacing)
    assert scan.shape == a.shape
    assert scan.dtype == a.dtype
    assert scan.spacing_um == pytest.approx(SPACING, rel=1e-9)
    assert scan.spacing_source == source
    assert scan.meta["format"] == fmt
    assert scan.meta["dtype"] == str(np.dtype(dtype))
    assert tuple(scan.meta["shape"]) == a.shape
    assert scan.meta["n_files"] == (a.shape[0] if kind == "folder" else 1)
    assert scan.source == str(path)
    np.testing.assert_array_equal(scan.load(), a)


@pytest.mark.parametrize("dtype", ["int16", "float64"])
@pytest.mark.parametrize("kind", ["ome", "plain", "zlib", "folder"])
def test_round_trip_other_dtypes(tmp_path, kind, dtype):
    a = _volume(dtype)
    path, spacing, _, _ = MAKERS[kind](tmp_path, a)
    scan = read_stack(path, spacing_um=spacing)
    np.testing.assert_array_equal(scan.load(), a)
    assert scan.dtype == np.dtype(dtype)


def test_bigtiff_is_recognised(tmp_path):
    a = _volume("uint16")
    path, *_ = _make_bigtiff(tmp_path, a)
    scan = read_stack(path, spacing_um=SPACING)
    assert scan.meta["bigtiff"] is True
    np.testing.assert_array_equal(scan.load(), a)


# ---- OME units (OME schema 2016-06, UnitsLength; a missing unit means µm) --------------------

@pytest.mark.parametrize("sizes, expected", [
    # (value, unit) for z, y, x; None unit = attribute left out (default µm per the OME schema)
    ({"Z": (12, None), "Y": (10, None), "X": (8, None)}, (12.0, 10.0, 8.0)),
    ({"Z": (0.012, "mm"), "Y": (10000, "nm"), "X": (8, "µm")}, (12.0, 10.0, 8.0)),
    ({"Z": (0.0012, "cm"), "Y": (1e-5, "m"), "X": (8000, "nm")}, (12.0, 10.0, 8.0)),
    ({"Z": (1.2, "mm"), "Y": (1, "mm"), "X": (0.5, "mm")}, (1200.0, 1000.0, 500.0)),
])
def test_ome_units_are_converted_to_um(tmp_path, sizes, expected):
    md = {"axes": "ZYX"}
    for ax, (value, unit) in sizes.items():
        md[f"PhysicalSize{ax}"] = value
        if unit is not None:
            md[f"PhysicalSize{ax}Unit"] = unit
    path = tmp_path / "u.ome.tif"
    tifffile.imwrite(path, _volume("uint8"), ome=True, metadata=md)
    scan = read_stack(path)
    assert scan.spacing_source == "ome"
    assert scan.spacing_um == pytest.approx(expected, rel=1e-12)


def test_ome_pixel_unit_is_not_a_length(tmp_path):
    # "pixel" is a UnitsLength value in the OME schema but not a physical length.
    path = tmp_path / "px.ome.tif"
    tifffile.imwrite(path, _volume("uint8"), ome=True,
                     metadata={"axes": "ZYX", "PhysicalSizeX": 1, "PhysicalSizeXUnit": "pixel",
                               "PhysicalSizeY": 1, "PhysicalSizeZ": 1})
    with pytest.raises(InputError, match="px.ome.tif") as info:
        read_stack(path)
    assert "pixel" in str(info.value) and "--spacing" in str(info.value)


def test_ome_without_z_size_needs_spacing(tmp_path):
    path = tmp_path / "noz.ome.tif"
    tifffile.imwrite(path, _volume("uint8"), ome=True,
                     metadata={"axes": "ZYX", "PhysicalSizeX": 8, "PhysicalSizeY": 10})
    with pytest.raises(InputError, match="noz.ome.tif") as info:
        read_stack(path)
    assert "PhysicalSizeZ" in str(info.value)
    scan = read_stack(path, spacing_um=(12, 10, 8))
    assert scan.meta["metadata_spacing_um"] == (None, 10.0, 8.0)


# ---- ImageJ calibration (ImageJ TIFF conventions as implemented by tifffile) -----------------

@pytest.mark.parametrize("unit, scale", [
    ("micron", 1.0), ("um", 1.0), ("\\u00B5m", 1.0),  # escaped micro sign, as ImageJ writes it
    ("mm", 1e-3), ("cm", 1e-4), ("nm", 1e3),
])
def test_imagej_units(tmp_path, unit, scale):
    # The file stores sizes in `unit`; ctpore must return (12, 10, 8) µm for every unit.
    path = tmp_path / "ij.tif"
    _write_imagej(path, _volume("uint16"), spacing=tuple(s * scale for s in SPACING), unit=unit)
    scan = read_stack(path)
    assert scan.spacing_source == "imagej"
    assert scan.spacing_um == pytest.approx(SPACING, rel=1e-9)


def test_imagej_resolution_unit_cm_without_unit_key(tmp_path):
    # Scanner TIFFs tag resolution in pixels per centimetre (TIFF 6.0 ResolutionUnit = 3); an
    # ImageJ description without 'unit' then means cm. 8 µm = 1250 px/cm, 10 µm = 1000 px/cm.
    path = tmp_path / "cm.tif"
    tifffile.imwrite(path, _volume("uint8"), imagej=True, resolution=(1250, 1000),
                     resolutionunit="CENTIMETER", metadata={"spacing": 0.0012, "axes": "ZYX"})
    scan = read_stack(path)
    assert scan.spacing_um == pytest.approx(SPACING, rel=1e-9)


def test_uncalibrated_imagej_needs_spacing(tmp_path):
    path = tmp_path / "uncal.tif"
    tifffile.imwrite(path, _volume("uint8"), imagej=True, metadata={"axes": "ZYX"})
    with pytest.raises(InputError, match="uncal.tif") as info:
        read_stack(path)
    assert "--spacing" in str(info.value)


def test_plain_tiff_resolution_tags_are_not_trusted(tmp_path):
    # 72 dpi is a common default of image software and says nothing about the voxel size
    # (common practice, no source).
    path = tmp_path / "dpi.tif"
    tifffile.imwrite(path, _volume("uint8"), resolution=(72, 72), resolutionunit="INCH",
                     metadata=None)
    with pytest.raises(InputError, match="dpi.tif") as info:
        read_stack(path)
    assert "--spacing" in str(info.value)
    assert "1 µm" not in str(info.value).split("Fix:")[0]


# ---- user override and missing spacing -------------------------------------------------------

def test_user_spacing_overrides_metadata(tmp_path):
    path = tmp_path / "ij.tif"
    _write_imagej(path, _volume("uint8"))
    scan = read_stack(path, spacing_um="5,4,3")
    assert scan.spacing_um == (5.0, 4.0, 3.0)
    assert scan.spacing_source == "user"
    assert scan.meta["metadata_spacing_um"] == pytest.approx(SPACING)
    assert scan.meta["spacing_differs_from_metadata"] is True


def test_user_spacing_single_value_is_isotropic(tmp_path):
    path = tmp_path / "p.tif"
    tifffile.imwrite(path, _volume("uint8"))
    scan = read_stack(path, spacing_um=7.5)
    assert scan.spacing_um == (7.5, 7.5, 7.5)
    assert "metadata_spacing_um" not in scan.meta


@pytest.mark.parametrize("kind", ["plain", "folder"])
def test_missing_spacing_raises_and_names_the_input(tmp_path, kind):
    path, *_ = MAKERS[kind](tmp_path, _volume("uint8"))
    with pytest.raises(InputError) as info:
        read_stack(path)
    msg = str(info.value)
    assert path.name in msg and "--spacing" in msg and "z,y,x" in msg


def test_bad_user_spacing_is_rejected(tmp_path):
    path = tmp_path / "p.tif"
    tifffile.imwrite(path, _volume("uint8"))
    with pytest.raises(InputError):
        read_stack(path, spacing_um=(1, 2))
    with pytest.raises(InputError):
        read_stack(path, spacing_um=(0, 1, 1))


# ---- slice folders ---------------------------------------------------------------------------

def test_natural_sort_of_slices(tmp_path):
    folder = tmp_path / "slices"
    folder.mkdir()
    for i in range(1, 13):
        tifffile.imwrite(folder / f"slice_{i}.tif", np.full((8, 9), i, np.uint8))
    tifffile.imwrite(folder / ".slice_0.tif", np.full((8, 9), 99, np.uint8))  # hidden: ignored
    (folder / "notes.txt").write_text("scan log")  # not an image: ignored
    (folder / "preview.png").write_bytes(b"\x89PNG\r\n\x1a\n")
    (folder / "sub").mkdir()
    scan = read_stack(folder, spacing_um=SPACING)
    np.testing.assert_array_equal(scan.load()[:, 0, 0], np.arange(1, 13))
    assert scan.meta["files"][:3] == ["slice_1.tif", "slice_2.tif", "slice_3.tif"]
    assert scan.meta["files"][-1] == "slice_12.tif"
    # plain string sorting would put slice_10 right after slice_1
    assert sorted(scan.meta["files"]) != scan.meta["files"]


def test_natural_sort_key():
    names = ["img10.tif", "img2.tif", "IMG1.tif", "img1b.tif", "img001.tif"]
    assert [n for n in sorted(names, key=natural_sort_key)][-2:] == ["img2.tif", "img10.tif"]


def test_folder_spacing_from_ome_slices(tmp_path):
    folder = tmp_path / "ome_slices"
    folder.mkdir()
    a = _volume("uint16", (4, 10, 12))
    for i, plane in enumerate(a):
        tifffile.imwrite(folder / f"s{i:03d}.ome.tif", plane, ome=True,
                         metadata={"axes": "YX", "PhysicalSizeX": 8, "PhysicalSizeY": 10,
                                   "PhysicalSizeZ": 12})
    scan = read_stack(folder)
    assert scan.spacing_source == "ome"
    assert scan.spacing_um == pytest.approx(SPACING)
    np.testing.assert_array_equal(scan.load(), a)


# ---- laziness --------------------------------------------------------------------------------

def test_uncompressed_file_is_memory_mapped(tmp_path):
    a = _volume("uint16", (64, 128, 128))
    path = tmp_path / "big.tif"
    tifffile.imwrite(path, a)
    scan = read_stack(path, spacing_um=SPACING)
    assert isinstance(scan.data, np.memmap)
    assert scan.meta["lazy"] == "memmap"
    np.testing.assert_array_equal(scan.data[5], a[5])
    out = scan.load()
    assert type(out) is np.ndarray
    np.testing.assert_array_equal(out, a)


def test_compressed_file_reads_only_needed_pages(tmp_path):
    a = _volume("uint16", (16, 32, 32))
    path = tmp_path / "z.tif"
    tifffile.imwrite(path, a, compression="zlib")
    scan = read_stack(path, spacing_um=SPACING)
    assert isinstance(scan.data, TiffPageStack)
    assert scan.data.planes_read == 0
    np.testing.assert_array_equal(scan.data[3], a[3])
    assert scan.data.planes_read == 1
    np.testing.assert_array_equal(scan.data[2:5, 1:7, ::3], a[2:5, 1:7, ::3])
    assert scan.data.planes_read == 4
    np.testing.assert_array_equal(scan.load(), a)
    assert scan.data is not None and isinstance(scan.data, np.ndarray)


def test_folder_reads_only_needed_files(tmp_path):
    a = _volume("float32", (10, 12, 14))
    scan = read_stack(_write_folder(tmp_path / "f", a), spacing_um=SPACING)
    assert isinstance(scan.data, SliceFileStack)
    np.testing.assert_array_equal(scan.data[-1], a[-1])
    assert scan.data.planes_read == 1
    np.testing.assert_array_equal(np.asarray(scan.data), a)


@pytest.mark.parametrize("key", [
    ..., 3, -1, slice(1, 5, 2), slice(None, None, -2), (slice(None), 2, slice(3, 9)),
    (Ellipsis, 4), (1, Ellipsis), [0, 2, 5], np.array([5, 0, 5]), (1, slice(None), -1),
    (slice(2, 2),), np.arange(6) % 2 == 0, (2, 3, 4),
])
def test_lazy_indexing_matches_numpy(tmp_path, key):
    # numpy's basic-indexing semantics are the reference
    a = _volume("int16")
    tifffile.imwrite(tmp_path / "z.tif", a, compression="zlib")
    data = read_stack(tmp_path / "z.tif", spacing_um=SPACING).data
    assert isinstance(data, LazyStack)
    got = data[key]
    np.testing.assert_array_equal(got, a[key])
    assert np.shape(got) == np.shape(a[key])


@pytest.mark.parametrize("key", [(0, 0, 0, 0), 6, -7, (0, 20), (..., ...), (0, [1, 2])])
def test_lazy_indexing_errors(tmp_path, key):
    tifffile.imwrite(tmp_path / "z.tif", _volume("uint8"), compression="zlib")
    data = read_stack(tmp_path / "z.tif", spacing_um=SPACING).data
    with pytest.raises(IndexError):
        data[key]


def test_lazy_stack_pickles(tmp_path):
    a = _volume("uint8")
    tifffile.imwrite(tmp_path / "z.tif", a, compression="zlib")
    data = read_stack(tmp_path / "z.tif", spacing_um=SPACING).data
    clone = pickle.loads(pickle.dumps(data))
    np.testing.assert_array_equal(clone[2], a[2])


def test_big_endian_file_gives_native_values(tmp_path):
    a = _volume("uint16")
    tifffile.imwrite(tmp_path / "be.tif", a, byteorder=">")
    scan = read_stack(tmp_path / "be.tif", spacing_um=SPACING)
    out = scan.load()
    assert out.dtype.isnative
    np.testing.assert_array_equal(out, a)


# ---- bad input: every error names the file ---------------------------------------------------

def test_missing_path(tmp_path):
    with pytest.raises(InputError, match="nothere.tif"):
        read_stack(tmp_path / "nothere.tif", spacing_um=SPACING)


def test_not_a_tiff(tmp_path):
    path = tmp_path / "scan.tif"
    path.write_text("this is not an image\n" * 10)
    with pytest.raises(InputError, match="scan.tif"):
        read_stack(path, spacing_um=SPACING)


def test_rgb_stack(tmp_path):
    path = tmp_path / "rgb.tif"
    tifffile.imwrite(path, np.zeros((4, 8, 8, 3), np.uint8), photometric="rgb")
    with pytest.raises(InputError, match="rgb.tif") as info:
        read_stack(path, spacing_um=SPACING)
    assert "channel" in str(info.value) or "grey" in str(info.value)


@pytest.mark.parametrize("kind", ["imagej", "ome"])
def test_multichannel_stack(tmp_path, kind):
    path = tmp_path / f"two_channels_{kind}.tif"
    a = np.zeros((4, 2, 8, 8), np.uint16)
    if kind == "imagej":
        tifffile.imwrite(path, a, imagej=True, metadata={"axes": "ZCYX"})
    else:
        tifffile.imwrite(path, a, ome=True, metadata={"axes": "ZCYX"})
    with pytest.raises(InputError, match=path.name) as info:
        read_stack(path, spacing_um=SPACING)
    assert "channel" in str(info.value)


def test_time_series_of_stacks_is_rejected(tmp_path):
    path = tmp_path / "tz.tif"
    tifffile.imwrite(path, np.zeros((2, 3, 8, 8), np.uint8), imagej=True,
                     metadata={"axes": "TZYX"})
    with pytest.raises(InputError, match="tz.tif"):
        read_stack(path, spacing_um=SPACING)


@pytest.mark.parametrize("shape", [(16, 16), (1, 16, 16)])
def test_single_2d_image(tmp_path, shape):
    path = tmp_path / "one_slice.tif"
    tifffile.imwrite(path, np.zeros(shape, np.uint8))
    with pytest.raises(InputError, match="one_slice.tif") as info:
        read_stack(path, spacing_um=SPACING)
    assert "folder" in str(info.value)


@pytest.mark.parametrize("shape", [(5, 1, 16), (5, 16, 1)])
def test_fewer_than_two_voxels_along_an_axis(tmp_path, shape):
    path = tmp_path / "thin.tif"
    tifffile.imwrite(path, np.zeros(shape, np.uint8))
    with pytest.raises(InputError, match="thin.tif"):
        read_stack(path, spacing_um=SPACING)


def test_folder_with_single_slice(tmp_path):
    folder = tmp_path / "just_one"
    folder.mkdir()
    tifffile.imwrite(folder / "s1.tif", np.zeros((8, 8), np.uint8))
    with pytest.raises(InputError, match="just_one"):
        read_stack(folder, spacing_um=SPACING)


@pytest.mark.parametrize("content", [[], ["a.png", "b.txt", ".hidden.tif"]])
def test_folder_without_slices(tmp_path, content):
    folder = tmp_path / "no_slices"
    folder.mkdir()
    for name in content:
        (folder / name).write_bytes(b"x")
    with pytest.raises(InputError, match="no_slices") as info:
        read_stack(folder, spacing_um=SPACING)
    assert ".tif" in str(info.value)


def test_folder_slices_differ_in_shape(tmp_path):
    folder = _write_folder(tmp_path / "mixed", np.zeros((3, 8, 9), np.uint8))
    tifffile.imwrite(folder / "slice_4.tif", np.zeros((8, 10), np.uint8))
    with pytest.raises(InputError, match="slice_4.tif") as info:
        read_stack(folder, spacing_um=SPACING)
    msg = str(info.value)
    assert "(8, 10)" in msg and "(8, 9)" in msg and "slice_1.tif" in msg


def test_folder_slices_differ_in_dtype(tmp_path):
    folder = _write_folder(tmp_path / "mixed", np.zeros((3, 8, 9), np.uint8))
    tifffile.imwrite(folder / "slice_10.tif", np.zeros((8, 9), np.uint16))
    with pytest.raises(InputError, match="slice_10.tif") as info:
        read_stack(folder, spacing_um=SPACING)
    assert "uint16" in str(info.value) and "uint8" in str(info.value)


def test_folder_holding_a_stack_file(tmp_path):
    folder = tmp_path / "one_stack"
    folder.mkdir()
    tifffile.imwrite(folder / "stack.tif", np.zeros((4, 8, 8), np.uint8), photometric="minisblack")
    with pytest.raises(InputError, match="stack.tif") as info:
        read_stack(folder, spacing_um=SPACING)
    assert "instead" in str(info.value)


def _plain(p, a):
    tifffile.imwrite(p, a)


def _zlib(p, a):
    tifffile.imwrite(p, a, compression="zlib")


def _ome(p, a):
    _write_ome(p, a)


def _imagej(p, a):
    _write_imagej(p, a)


def _big(p, a):
    tifffile.imwrite(p, a, bigtiff=True)


@pytest.mark.parametrize("writer", [_plain, _zlib, _ome, _imagej, _big])
@pytest.mark.parametrize("keep", [0.5, 0.97, "minus100"])
def test_truncated_file(tmp_path, writer, keep):
    path = tmp_path / "cut.tif"
    writer(path, _volume("uint16", (8, 32, 32)))
    raw = path.read_bytes()
    n = len(raw) - 100 if keep == "minus100" else int(len(raw) * keep)
    path.write_bytes(raw[:n])
    with pytest.raises(InputError, match="cut.tif"):
        read_stack(path, spacing_um=SPACING).load()


def test_truncated_slice_in_folder(tmp_path):
    folder = _write_folder(tmp_path / "f", _volume("uint16", (4, 32, 32)))
    raw = (folder / "slice_3.tif").read_bytes()
    (folder / "slice_3.tif").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(InputError, match="slice_3.tif"):
        read_stack(folder, spacing_um=SPACING)


def test_tifffile_log_does_not_leak(tmp_path, caplog):
    path = tmp_path / "cut.tif"
    _plain(path, _volume("uint16", (8, 32, 32)))
    raw = path.read_bytes()
    path.write_bytes(raw[: len(raw) // 2])
    caplog.set_level(logging.DEBUG, logger="tifffile")
    with pytest.raises(InputError):
        read_stack(path, spacing_um=SPACING)
    assert not [r for r in caplog.records if r.name.startswith("tifffile")]


@pytest.mark.parametrize("dtype", ["bool", "complex64", "uint32", "int32", "int64", "uint64"])
def test_unsupported_dtype(tmp_path, dtype):
    path = tmp_path / f"vol_{dtype}.tif"
    tifffile.imwrite(path, np.zeros((4, 8, 8), dtype), photometric="minisblack")
    with pytest.raises(InputError, match=path.name) as info:
        read_stack(path, spacing_um=SPACING)
    assert "16-bit" in str(info.value) and "float32" in str(info.value)


# ---- check_finite ----------------------------------------------------------------------------

@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_check_finite_rejects_non_finite(bad):
    a = np.ones((6, 5, 4), np.float32)
    a[3, 2, 1] = bad
    a[4, 0, 0] = bad
    with pytest.raises(InputError, match="scan_07.tif") as info:
        check_finite(a, "scan_07.tif")
    msg = str(info.value)
    assert "2 voxel" in msg and "z=3" in msg and "background" in msg


def test_check_finite_passes_finite_and_integer_data(tmp_path):
    check_finite(np.ones((3, 4, 5), np.float64), "ok.tif")
    check_finite(np.zeros((3, 4, 5), np.uint16), "ok.tif")


def test_check_finite_on_lazy_stack(tmp_path):
    a = _volume("float32", (8, 6, 5))
    a[7, 5, 4] = np.nan
    tifffile.imwrite(tmp_path / "nan.tif", a, compression="zlib")
    scan = read_stack(tmp_path / "nan.tif", spacing_um=SPACING)
    with pytest.raises(InputError, match="z=7"):
        check_finite(scan.data, scan.source)
