"""OME-TIFF: write a (z, y, x) stack with its voxel size, and read the voxel size back.

The voxel size is stored as the OME ``Pixels`` attributes ``PhysicalSizeZ/Y/X`` with their
``PhysicalSize*Unit`` (OME data model, schema 2016-06: the unit attribute is of type
``UnitsLength`` and defaults to ``µm`` when absent).

References
----------
.. [1] Goldberg I. G. et al. (2005). The Open Microscopy Environment (OME) Data Model and XML
   file: open tools for informatics and quantitative analysis in biological imaging.
   Genome Biology 6:R47. https://doi.org/10.1186/gb-2005-6-5-r47
.. [2] OME schema 2016-06, http://www.openmicroscopy.org/Schemas/OME/2016-06/ome.xsd
   (``Pixels/@PhysicalSizeX``, ``UnitsLength``).
"""

from __future__ import annotations

import hashlib
import logging
import math
import os
import uuid
import xml.etree.ElementTree as ET
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..spacing import as_spacing_um

__all__ = ["write_ome_tiff", "read_ome_spacing_um", "spacing_from_ome_xml", "OME_LENGTH_UNITS_UM"]

#: Micrometres per unit for the OME ``UnitsLength`` values ctpore accepts. "um" is not an OME
#: value but some writers use it. "pixel" and "reference frame" are OME units that are not
#: physical lengths; they are deliberately absent.
OME_LENGTH_UNITS_UM = {
    "m": 1e6,
    "dm": 1e5,
    "cm": 1e4,
    "mm": 1e3,
    "µm": 1.0,  # U+00B5 MICRO SIGN, the form the OME schema uses
    "μm": 1.0,  # U+03BC GREEK SMALL LETTER MU, a common look-alike
    "um": 1.0,
    "nm": 1e-3,
    "pm": 1e-6,
    "Å": 1e-4,
    "in": 25400.0,
}

#: dtypes ctpore reads and writes (grey values of reconstructed CT stacks).
SUPPORTED_DTYPES = tuple(np.dtype(t) for t in ("uint8", "uint16", "int16", "float32", "float64"))

#: Above this many bytes of pixel data the file is written as BigTIFF. Classic TIFF offsets are
#: 32-bit; some readers treat them as signed, so stay below 2 GiB with room for the directories.
_BIGTIFF_THRESHOLD_BYTES = 2**31 - 2**25

_AXES = ("Z", "Y", "X")


class _LogCollector(logging.Filter):
    """A logging filter that keeps every record it sees and lets none through."""

    def __init__(self):
        super().__init__()
        self.records: list[logging.LogRecord] = []

    def filter(self, record):  # noqa: A003 - logging API name
        self.records.append(record)
        return False


@contextmanager
def _tifffile_log():
    """Collect (and silence) what tifffile logs inside the block; yields the list of records.

    tifffile reports damaged files (bad page offsets, unreadable tags) through its logger
    instead of raising. The caller inspects the records and turns errors into ``InputError``.
    """
    collector = _LogCollector()
    log = logging.getLogger("tifffile")
    log.addFilter(collector)
    try:
        yield collector.records
    finally:
        log.removeFilter(collector)


_Spacing3 = tuple[float | None, float | None, float | None]


def spacing_from_ome_xml(xml: str) -> tuple[_Spacing3, list[str]]:
    """Voxel size (dz, dy, dx) in µm from the first ``Pixels`` element of an OME-XML document.

    Parameters
    ----------
    xml : str
        The OME-XML text (the ImageDescription of an OME-TIFF's first page).

    Returns
    -------
    spacing : tuple of 3 (float or None)
        Size along z, y, x in µm; ``None`` where the attribute is absent or unusable.
    notes : list of str
        Why an axis is ``None`` (missing attribute, unit that is not a length, bad value).

    Notes
    -----
    A missing ``PhysicalSize*Unit`` means µm, the default of the OME schema 2016-06.
    """
    try:
        root = ET.fromstring(xml.encode("utf-8") if isinstance(xml, str) else xml)
    except ET.ParseError as exc:
        return (None, None, None), [f"OME-XML cannot be parsed ({exc})"]
    pixels = next((el for el in root.iter() if el.tag.rsplit("}", 1)[-1] == "Pixels"), None)
    if pixels is None:
        return (None, None, None), ["OME-XML has no Pixels element"]
    values: list[float | None] = []
    notes: list[str] = []
    for ax in _AXES:
        raw = pixels.get(f"PhysicalSize{ax}")
        unit = pixels.get(f"PhysicalSize{ax}Unit", "µm")
        if raw is None:
            values.append(None)
            notes.append(f"OME PhysicalSize{ax} is missing")
            continue
        try:
            value = float(raw)
        except ValueError:
            value = math.nan
        if not (math.isfinite(value) and value > 0):
            values.append(None)
            notes.append(f"OME PhysicalSize{ax}={raw!r} is not a positive number")
            continue
        factor = OME_LENGTH_UNITS_UM.get(unit.strip())
        if factor is None:
            values.append(None)
            notes.append(f"OME PhysicalSize{ax}Unit={unit!r} is not a length ctpore can convert")
            continue
        # Round unit conversions to 12 significant digits (0.0012 cm -> 12 µm, not 11.999...).
        values.append(value if factor == 1.0 else float(f"{value * factor:.12g}"))
    return (values[0], values[1], values[2]), notes


def read_ome_spacing_um(path) -> tuple[float, float, float] | None:
    """Voxel size (dz, dy, dx) in µm stored in an OME-TIFF, or ``None`` if it holds none.

    Parameters
    ----------
    path : str or Path
        An OME-TIFF file.

    Returns
    -------
    tuple of 3 floats or None
        ``None`` when the file is not an OME-TIFF or lacks a usable size along any axis.

    Raises
    ------
    InputError
        If the file is missing or cannot be opened as a TIFF.
    """
    import tifffile

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path} does not exist or is not a file", "check the path")
    try:
        with _tifffile_log(), tifffile.TiffFile(path) as tf:
            xml = tf.ome_metadata if tf.is_ome else None
    except Exception as exc:  # tifffile raises several types for non-TIFF input
        raise InputError(f"{path} cannot be read as a TIFF ({exc})",
                         "check that it is an OME-TIFF file and not damaged") from None
    if not xml:
        return None
    spacing, _ = spacing_from_ome_xml(xml)
    if any(v is None for v in spacing):
        return None
    return (spacing[0], spacing[1], spacing[2])


def _needs_bigtiff(nbytes: int) -> bool:
    return nbytes > _BIGTIFF_THRESHOLD_BYTES


def _native(dtype: np.dtype) -> np.dtype:
    return dtype.newbyteorder("=")


def _slices(array, dtype):
    """Yield z slices as C-contiguous native-order arrays, reading lazy data slice by slice."""
    for z in range(int(array.shape[0])):
        yield np.ascontiguousarray(np.asarray(array[z]), dtype=dtype)


def _content_uuid(array, dtype, spacing, name) -> str:
    """A UUID derived from the pixel data and metadata, so equal input gives equal bytes."""
    h = hashlib.blake2b(digest_size=16)
    h.update(repr((tuple(int(s) for s in array.shape), dtype.str, spacing, name)).encode())
    for plane in _slices(array, dtype):
        h.update(memoryview(plane).cast("B"))
    return f"urn:uuid:{uuid.uuid5(uuid.NAMESPACE_URL, 'ctpore:' + h.hexdigest())}"


def _default_name(path: Path) -> str:
    name = path.name
    for suffix in (".ome.tiff", ".ome.tif", ".tiff", ".tif"):
        if name.lower().endswith(suffix):
            return name[: -len(suffix)]
    return path.stem


def write_ome_tiff(path, array, spacing_um, *, name: str | None = None,
                   compression: str | None = None, bigtiff: bool | None = None) -> Path:
    """Write a (z, y, x) grey-value stack as an OME-TIFF with its voxel size in µm.

    Parameters
    ----------
    path : str or Path
        Output file, conventionally ending in ``.ome.tif``. Written to a temporary file next to
        it and renamed at the end, so a failed write leaves no half file under this name.
    array : array-like, shape (nz, ny, nx)
        uint8, uint16, int16, float32 or float64. Lazy arrays (memory maps, the lazy stacks of
        :mod:`ctpore.io.stack_readers`) are written one slice at a time.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm, stored as OME ``PhysicalSizeZ/Y/X`` with unit ``µm``.
    name : str, optional
        OME ``Image/@Name``; defaults to the file name without its TIFF suffixes.
    compression : str, optional
        tifffile compression name, e.g. ``"zlib"`` or ``"lzma"`` (others need imagecodecs).
        ``None`` writes uncompressed, contiguous pages that can be memory-mapped on reading.
    bigtiff : bool, optional
        Force (True) or forbid (False) BigTIFF; by default BigTIFF is used when the pixel data
        exceed about 2 GB.

    Returns
    -------
    Path
        The path written.

    Raises
    ------
    InputError
        If the array is not 3-D, has an unsupported dtype, the spacing is invalid, the folder
        does not exist or the compression is not available.

    Notes
    -----
    The bytes are deterministic: no date or time is written, and the OME UUID is derived from
    the pixel data, spacing and name, so the same input gives a byte-identical file.

    References
    ----------
    OME schema 2016-06 (``Pixels``, ``PhysicalSize*``, ``UnitsLength``):
    http://www.openmicroscopy.org/Schemas/OME/2016-06/ome.xsd

    Examples
    --------
    >>> import numpy as np, tempfile, os
    >>> from ctpore.io.ome_tiff import write_ome_tiff, read_ome_spacing_um
    >>> d = tempfile.mkdtemp()
    >>> vol = np.zeros((2, 3, 4), np.uint8)
    >>> p = write_ome_tiff(os.path.join(d, "s.ome.tif"), vol, (12, 10, 10))
    >>> read_ome_spacing_um(p)
    (12.0, 10.0, 10.0)
    """
    import tifffile

    from .. import __version__

    path = Path(path)
    spacing = as_spacing_um(spacing_um)
    shape = tuple(int(s) for s in getattr(array, "shape", ()))
    if len(shape) != 3 or min(shape) < 1:
        raise InputError(f"cannot write {path.name}: the array has shape {shape}, not (z, y, x)",
                         "pass a 3-D array with at least one voxel along each axis")
    dtype = np.dtype(array.dtype)
    native = _native(dtype)
    if native not in SUPPORTED_DTYPES:
        raise InputError(f"cannot write {path.name}: dtype {dtype} is not supported",
                         "convert to uint8, uint16, int16, float32 or float64 first")
    if not path.parent.is_dir():
        raise InputError(f"cannot write {path}: folder {path.parent} does not exist",
                         "create the folder first or choose another output path")
    if name is None:
        name = _default_name(path)
    nbytes = math.prod(shape) * native.itemsize
    use_bigtiff = _needs_bigtiff(nbytes) if bigtiff is None else bool(bigtiff)
    metadata = {
        "axes": "ZYX",
        "Name": str(name),
        "Creator": f"ctpore {__version__}",
        "UUID": _content_uuid(array, native, spacing, str(name)),
    }
    for ax, value in zip(_AXES, spacing):
        metadata[f"PhysicalSize{ax}"] = value
        metadata[f"PhysicalSize{ax}Unit"] = "µm"
    if isinstance(array, np.ndarray) and not isinstance(array, np.memmap):
        data = np.ascontiguousarray(array, dtype=native)
        extra = {}
    else:
        data = _slices(array, native)
        extra = {"shape": shape, "dtype": native}
    tmp = path.with_name(f".{path.name}.part")
    try:
        tifffile.imwrite(
            tmp, data, **extra, ome=True, metadata=metadata, photometric="minisblack",
            bigtiff=use_bigtiff, compression=compression,
            # Pixels per cm for readers that only look at TIFF tags (ctpore reads the OME sizes).
            resolution=(1e4 / spacing[2], 1e4 / spacing[1]), resolutionunit="CENTIMETER",
        )
        os.replace(tmp, path)
    except (KeyError, ImportError, ValueError) as exc:
        tmp.unlink(missing_ok=True)
        if compression is None:
            raise
        raise InputError(f"cannot write {path.name} with compression {compression!r} ({exc})",
                         "use compression None, 'zlib' or 'lzma', or install imagecodecs") from None
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path
