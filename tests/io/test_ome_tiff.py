"""Writing OME-TIFF: round trip through read_stack, voxel size, determinism, BigTIFF.

Source for the metadata checked: OME data model, schema 2016-06
(http://www.openmicroscopy.org/Schemas/OME/2016-06/ome.xsd): ``Pixels`` carries
``DimensionOrder``, ``Type``, ``SizeX/Y/Z/C/T`` and ``PhysicalSizeX/Y/Z`` with
``PhysicalSize*Unit`` of type ``UnitsLength`` (micrometre written "µm", U+00B5; default µm).
Files are read back both with ctpore and directly with tifffile and the standard XML parser.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

import numpy as np
import pytest
import tifffile

from ctpore.errors import InputError
from ctpore.io import ome_tiff
from ctpore.io.ome_tiff import read_ome_spacing_um, spacing_from_ome_xml, write_ome_tiff
from ctpore.io.stack_readers import TiffPageStack, read_stack

SPACING = (12.0, 10.0, 8.0)
NS = "{http://www.openmicroscopy.org/Schemas/OME/2016-06}"


def _volume(dtype, shape=(5, 18, 22), seed=1):
    rng = np.random.default_rng(seed)
    dtype = np.dtype(dtype)
    if dtype.kind == "f":
        return rng.normal(0.0, 1000.0, shape).astype(dtype)
    info = np.iinfo(dtype)
    return rng.integers(info.min, info.max, shape, endpoint=True, dtype=dtype)


def _pixels(path):
    with tifffile.TiffFile(path) as tf:
        root = ET.fromstring(tf.ome_metadata)
    return root.find(f"{NS}Image"), root.find(f"{NS}Image/{NS}Pixels"), root


@pytest.mark.parametrize("dtype", ["uint8", "uint16", "int16", "float32", "float64"])
def test_round_trip_through_read_stack(tmp_path, dtype):
    a = _volume(dtype)
    path = write_ome_tiff(tmp_path / "vol.ome.tif", a, SPACING)
    scan = read_stack(path)
    assert scan.spacing_um == SPACING  # exact: floats are written with a round-trip repr
    assert scan.spacing_source == "ome"
    assert scan.meta["format"] == "ome-tiff"
    assert isinstance(scan.data, np.memmap)  # uncompressed, contiguous pages
    out = scan.load()
    assert out.dtype == np.dtype(dtype)
    np.testing.assert_array_equal(out, a)


@pytest.mark.parametrize("spacing", [(0.1 + 0.2, 10 / 3, 8.000000001), (1e-3, 2.5e4, 7.0)])
def test_awkward_spacing_survives_exactly(tmp_path, spacing):
    path = write_ome_tiff(tmp_path / "s.ome.tif", _volume("uint8"), spacing)
    assert read_ome_spacing_um(path) == spacing
    assert read_stack(path).spacing_um == spacing


def test_metadata_follows_the_ome_schema(tmp_path):
    a = _volume("uint16")
    path = write_ome_tiff(tmp_path / "vol.ome.tif", a, SPACING)
    image, pixels, root = _pixels(path)
    assert image.get("Name") == "vol"
    assert pixels.get("Type") == "uint16"
    assert (pixels.get("SizeZ"), pixels.get("SizeY"), pixels.get("SizeX")) == ("5", "18", "22")
    assert (pixels.get("SizeC"), pixels.get("SizeT")) == ("1", "1")
    for ax, value in zip("ZYX", SPACING):
        assert float(pixels.get(f"PhysicalSize{ax}")) == value
        assert pixels.get(f"PhysicalSize{ax}Unit") == "\u00b5m"
    assert root.get("UUID", "").startswith("urn:uuid:")
    with tifffile.TiffFile(path) as tf:
        pages = [tf.pages[i] for i in range(len(tf.pages))]  # full pages, before series parsing
        assert all(306 not in page.tags for page in pages)  # no DateTime tag (TIFF 6.0 tag 306)
        assert len(pages) == a.shape[0]
        assert tf.is_ome and not tf.is_bigtiff
        assert tf.series[0].axes == "ZYX"


def test_two_writes_are_byte_identical(tmp_path):
    a = _volume("float32")
    p1 = write_ome_tiff(tmp_path / "one.ome.tif", a, SPACING, name="sample")
    p2 = write_ome_tiff(tmp_path / "two.ome.tif", a.copy(), SPACING, name="sample")
    assert p1.read_bytes() == p2.read_bytes()
    # and the identifier follows the content: other data, other UUID
    b = a.copy()
    b[0, 0, 0] += 1
    p3 = write_ome_tiff(tmp_path / "three.ome.tif", b, SPACING, name="sample")
    assert _pixels(p3)[2].get("UUID") != _pixels(p1)[2].get("UUID")


def test_name_with_markup_characters(tmp_path):
    name = 'puffed rice <batch 3> & "control"'
    path = write_ome_tiff(tmp_path / "n.ome.tif", _volume("uint8"), SPACING, name=name)
    assert _pixels(path)[0].get("Name") == name


@pytest.mark.parametrize("compression", ["zlib", "lzma"])
def test_compressed_round_trip_is_lazy(tmp_path, compression):
    a = np.zeros((6, 40, 40), np.uint16)
    a[:, 10:30, 10:30] = 1000
    plain = write_ome_tiff(tmp_path / "plain.ome.tif", a, SPACING)
    packed = write_ome_tiff(tmp_path / "packed.ome.tif", a, SPACING, compression=compression)
    assert packed.stat().st_size < plain.stat().st_size / 4
    scan = read_stack(packed)
    assert isinstance(scan.data, TiffPageStack)
    assert scan.spacing_um == SPACING
    np.testing.assert_array_equal(scan.load(), a)


def test_unknown_compression_is_an_input_error(tmp_path):
    target = tmp_path / "bad.ome.tif"
    with pytest.raises(InputError, match="bad.ome.tif"):
        write_ome_tiff(target, _volume("uint8"), SPACING, compression="no-such-codec")
    assert list(tmp_path.iterdir()) == []  # neither the file nor a temporary part left behind


def test_bigtiff_on_request_and_automatic(tmp_path, monkeypatch):
    a = _volume("uint16")
    p = write_ome_tiff(tmp_path / "big.ome.tif", a, SPACING, bigtiff=True)
    with tifffile.TiffFile(p) as tf:
        assert tf.is_bigtiff and tf.is_ome
    scan = read_stack(p)
    assert scan.meta["bigtiff"] is True and scan.spacing_um == SPACING
    np.testing.assert_array_equal(scan.load(), a)
    # automatic switch: same code path as a > 2 GB stack, with the threshold lowered
    monkeypatch.setattr(ome_tiff, "_BIGTIFF_THRESHOLD_BYTES", a.nbytes - 1)
    p = write_ome_tiff(tmp_path / "auto.ome.tif", a, SPACING)
    with tifffile.TiffFile(p) as tf:
        assert tf.is_bigtiff
    monkeypatch.setattr(ome_tiff, "_BIGTIFF_THRESHOLD_BYTES", a.nbytes)
    p = write_ome_tiff(tmp_path / "classic.ome.tif", a, SPACING)
    with tifffile.TiffFile(p) as tf:
        assert not tf.is_bigtiff


def test_default_threshold_is_about_two_gigabytes():
    # Classic TIFF has 32-bit offsets; staying under 2 GiB keeps signed-offset readers safe
    # (common practice, no source).
    assert not ome_tiff._needs_bigtiff(1_900_000_000)
    assert ome_tiff._needs_bigtiff(2**31)


def test_writes_lazy_input_slice_by_slice(tmp_path):
    a = _volume("int16")
    src = write_ome_tiff(tmp_path / "src.ome.tif", a, SPACING, compression="zlib")
    lazy = read_stack(src).data
    assert isinstance(lazy, TiffPageStack)
    out = write_ome_tiff(tmp_path / "copy.ome.tif", lazy, SPACING)
    assert lazy.planes_read == a.shape[0] * 2  # once for the UUID hash, once for writing
    np.testing.assert_array_equal(read_stack(out).load(), a)
    # identical bytes whether the input was lazy or in memory
    again = write_ome_tiff(tmp_path / "mem.ome.tif", a, SPACING, name="copy")
    assert again.read_bytes() == out.read_bytes()


def test_big_endian_input_is_written_in_native_order(tmp_path):
    a = _volume("uint16")
    path = write_ome_tiff(tmp_path / "be.ome.tif", a.astype(">u2"), SPACING)
    np.testing.assert_array_equal(read_stack(path).load(), a)


@pytest.mark.parametrize("array", [np.zeros((4, 4), np.uint8), np.zeros((2, 3, 4, 4), np.uint8),
                                   np.zeros((2, 3, 4), bool), np.zeros((2, 3, 4), np.uint32),
                                   np.zeros((0, 3, 4), np.uint8)])
def test_bad_arrays_are_rejected(tmp_path, array):
    with pytest.raises(InputError, match="out.ome.tif"):
        write_ome_tiff(tmp_path / "out.ome.tif", array, SPACING)
    assert not (tmp_path / "out.ome.tif").exists()


def test_bad_spacing_and_missing_folder(tmp_path):
    with pytest.raises(InputError):
        write_ome_tiff(tmp_path / "s.ome.tif", _volume("uint8"), (1, -2, 3))
    with pytest.raises(InputError, match="no_such_dir"):
        write_ome_tiff(tmp_path / "no_such_dir" / "s.ome.tif", _volume("uint8"), SPACING)


# ---- reading the voxel size ------------------------------------------------------------------

def test_read_ome_spacing_um_converts_units(tmp_path):
    path = tmp_path / "nm.ome.tif"
    # OME UnitsLength: 8000 nm = 8 µm, 0.01 mm = 10 µm; PhysicalSizeZ without unit is µm
    tifffile.imwrite(path, _volume("uint8"), ome=True,
                     metadata={"axes": "ZYX", "PhysicalSizeX": 8000, "PhysicalSizeXUnit": "nm",
                               "PhysicalSizeY": 0.01, "PhysicalSizeYUnit": "mm",
                               "PhysicalSizeZ": 12})
    assert read_ome_spacing_um(path) == pytest.approx(SPACING, rel=1e-12)


def test_read_ome_spacing_um_none_without_ome(tmp_path):
    path = tmp_path / "plain.tif"
    tifffile.imwrite(path, _volume("uint8"))
    assert read_ome_spacing_um(path) is None
    with pytest.raises(InputError, match="missing.ome.tif"):
        read_ome_spacing_um(tmp_path / "missing.ome.tif")
    (tmp_path / "text.ome.tif").write_text("not a tiff")
    with pytest.raises(InputError, match="text.ome.tif"):
        read_ome_spacing_um(tmp_path / "text.ome.tif")


def test_spacing_from_ome_xml_units_and_problems():
    xml = ('<OME xmlns="http://www.openmicroscopy.org/Schemas/OME/2016-06"><Image ID="Image:0">'
           '<Pixels ID="Pixels:0" PhysicalSizeZ="1.2" PhysicalSizeZUnit="mm" '
           'PhysicalSizeY="1" PhysicalSizeYUnit="pixel" PhysicalSizeX="-3"/></Image></OME>')
    values, notes = spacing_from_ome_xml(xml)
    assert values == (1200.0, None, None)
    assert any("pixel" in n for n in notes) and any("PhysicalSizeX" in n for n in notes)
    values, notes = spacing_from_ome_xml("<not xml")
    assert values == (None, None, None) and notes
