"""Read a CT stack (multi-page TIFF, OME-TIFF, ImageJ TIFF or a folder of slices) lazily.

:func:`read_stack` returns a :class:`ctpore.scan.Scan` whose data are not read yet: an
``np.memmap`` for uncompressed contiguous files, else a :class:`LazyStack` that reads only the
slices asked for. The voxel size comes from the OME ``PhysicalSize*`` attributes, from the
ImageJ description (``spacing``, ``unit``) with the x/y resolution tags, or from the user; it
is never assumed.

References
----------
.. [1] OME schema 2016-06, ``Pixels/@PhysicalSizeX`` and ``UnitsLength`` (default µm),
   http://www.openmicroscopy.org/Schemas/OME/2016-06/ome.xsd
.. [2] ImageJ TIFF conventions (``spacing=``/``unit=`` in the ImageDescription, x/y voxel size
   as 1/resolution), as read by tifffile: ``TiffFile.imagej_metadata``,
   ``TiffPage.get_resolution``. https://github.com/cgohlke/tifffile
.. [3] TIFF 6.0 specification (1992), tags XResolution, YResolution, ResolutionUnit.
"""

from __future__ import annotations

import logging
import math
import os
import re
import warnings
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..scan import Scan
from ..spacing import as_spacing_um
from .ome_tiff import SUPPORTED_DTYPES, _tifffile_log, spacing_from_ome_xml

__all__ = ["read_stack", "check_finite", "LazyStack", "TiffPageStack", "SliceFileStack",
           "natural_sort_key"]

_SLICE_SUFFIXES = (".tif", ".tiff")

#: Micrometres per unit for ImageJ calibration units (lower case, after unescaping).
_IMAGEJ_UNITS_UM = {
    "micron": 1.0, "microns": 1.0, "um": 1.0, "µm": 1.0, "μm": 1.0, "u": 1.0,
    "micrometer": 1.0, "micrometre": 1.0, "micrometers": 1.0, "micrometres": 1.0,
    "nm": 1e-3, "nanometer": 1e-3, "nanometre": 1e-3,
    "mm": 1e3, "millimeter": 1e3, "millimetre": 1e3,
    "cm": 1e4, "centimeter": 1e4, "centimetre": 1e4,
    "m": 1e6, "meter": 1e6, "metre": 1e6,
    "inch": 25400.0, "inches": 25400.0, "in": 25400.0,
}

#: TIFF ResolutionUnit tag values (TIFF 6.0): 2 inch, 3 centimetre.
_TIFF_RESUNIT = {2: "inch", 3: "cm"}

_SPACING_FIX = ("pass the voxel size with --spacing (spacing_um=... in Python): one value in µm, "
                "or three as z,y,x, e.g. --spacing 12,10,10; ctpore never assumes a voxel size")


# ----------------------------------------------------------------------------------------------
# Lazy arrays
# ----------------------------------------------------------------------------------------------

class LazyStack:
    """A (z, y, x) stack read on demand, one z slice at a time.

    Indexing reads only the z slices it needs and returns a numpy array; ``np.asarray`` or
    ``stack[...]`` reads everything. Supported keys: integers and slices on every axis, and a
    1-D integer or boolean array on z. The object holds only paths and shapes, so it pickles.

    Attributes
    ----------
    shape : tuple of 3 ints
    dtype : numpy.dtype
        Native byte order.
    planes_read : int
        How many z slices have been read so far (for diagnostics and tests).
    """

    def __init__(self, shape, dtype, source: str):
        self.shape = tuple(int(s) for s in shape)
        self.dtype = np.dtype(dtype).newbyteorder("=")
        self.source = str(source)
        self.planes_read = 0

    ndim = property(lambda self: len(self.shape))
    size = property(lambda self: math.prod(self.shape))
    nbytes = property(lambda self: self.size * self.dtype.itemsize)

    def __len__(self):
        return self.shape[0]

    def __repr__(self):
        return (f"{type(self).__name__}(shape={self.shape}, dtype={self.dtype}, "
                f"source={self.source!r})")

    def __array__(self, dtype=None, copy=None):
        out = self[...]
        return out if dtype is None else out.astype(dtype, copy=False)

    def __getitem__(self, key):
        zkey, ykey, xkey = _split_key(key, self.shape)
        nz, ny, nx = self.shape
        if isinstance(zkey, (int, np.integer)):
            zidx = [_check_int(zkey, nz, 0)]
        elif isinstance(zkey, slice):
            zidx = list(range(*zkey.indices(nz)))
        else:
            arr = np.asarray(zkey)
            if arr.dtype == bool:
                if arr.shape != (nz,):
                    raise IndexError(f"boolean z index has shape {arr.shape}, expected ({nz},)")
                arr = np.flatnonzero(arr)
            if arr.ndim != 1 or not np.issubdtype(arr.dtype, np.integer):
                raise IndexError("z index must be an int, a slice or a 1-D integer/boolean array")
            zidx = [_check_int(i, nz, 0) for i in arr.tolist()]
        yshape = _axis_len(ykey, ny, 1)
        xshape = _axis_len(xkey, nx, 2)
        out = np.empty((len(zidx), *yshape, *xshape), dtype=self.dtype)
        if zidx:
            self._read_into(out, zidx, (ykey, xkey))
            self.planes_read += len(zidx)
        return out[0] if isinstance(zkey, (int, np.integer)) else out

    def _read_into(self, out, zidx, yxkey):  # pragma: no cover - abstract
        raise NotImplementedError

    def _plane_check(self, plane, where):
        plane = np.asarray(plane)
        if plane.size != self.shape[1] * self.shape[2]:
            raise InputError(f"{where}: a slice has shape {plane.shape}, expected {self.shape[1:]}"
                             " (the file changed since it was opened?)",
                             "read the stack again")
        return plane.reshape(self.shape[1:])


class TiffPageStack(LazyStack):
    """Lazy stack over the pages of one TIFF file (series 0, one page per z slice)."""

    def __init__(self, path, shape, dtype):
        super().__init__(shape, dtype, path)
        self.path = str(path)

    def _read_into(self, out, zidx, yxkey):
        import tifffile

        with _tifffile_log() as records, tifffile.TiffFile(self.path) as tf:
            for j, z in enumerate(zidx):
                plane = tf.asarray(key=z, series=0, maxworkers=1)
                out[j] = self._plane_check(plane, self.path)[yxkey]
        _raise_on_log_errors(records, self.path)


class SliceFileStack(LazyStack):
    """Lazy stack over a list of 2-D TIFF files, one per z slice."""

    def __init__(self, paths, shape, dtype, source):
        super().__init__(shape, dtype, source)
        self.paths = [str(p) for p in paths]

    def _read_into(self, out, zidx, yxkey):
        import tifffile

        for j, z in enumerate(zidx):
            with _tifffile_log() as records, tifffile.TiffFile(self.paths[z]) as tf:
                plane = tf.series[0].asarray(maxworkers=1)
            _raise_on_log_errors(records, self.paths[z])
            out[j] = self._plane_check(plane, self.paths[z])[yxkey]


def _split_key(key, shape):
    key = key if isinstance(key, tuple) else (key,)
    if sum(k is Ellipsis for k in key) > 1:
        raise IndexError("an index can only have a single ellipsis ('...')")
    if any(k is Ellipsis for k in key):
        i = next(i for i, k in enumerate(key) if k is Ellipsis)
        fill = (slice(None),) * (len(shape) - len(key) + 1)
        key = key[:i] + fill + key[i + 1:]
    if len(key) > len(shape):
        raise IndexError(f"too many indices for a {len(shape)}-D stack: {len(key)}")
    key = key + (slice(None),) * (len(shape) - len(key))
    for k in key[1:]:
        if not isinstance(k, (int, np.integer, slice)):
            raise IndexError("y and x indices of a lazy stack must be ints or slices; "
                             "load the stack (np.asarray) for fancy indexing")
    return key


def _check_int(i, n, axis):
    i = int(i)
    if not -n <= i < n:
        raise IndexError(f"index {i} is out of bounds for axis {axis} with size {n}")
    return i % n


def _axis_len(k, n, axis):
    if isinstance(k, slice):
        return (len(range(*k.indices(n))),)
    _check_int(k, n, axis)
    return ()


# ----------------------------------------------------------------------------------------------
# Helpers: messages from tifffile, units, natural sort
# ----------------------------------------------------------------------------------------------

@contextmanager
def _quiet_open(path):
    """Open a TIFF with tifffile's log and warnings captured.

    Yields ``(TiffFile, log_records, caught_warnings)``. Exceptions raised by tifffile inside
    the block become ``InputError`` naming the file. ``warnings.catch_warnings`` is
    process-wide, so open files from one thread; lazy reads only capture the log.
    """
    import tifffile

    with warnings.catch_warnings(record=True) as caught, _tifffile_log() as records:
        warnings.simplefilter("always")
        try:
            tf = tifffile.TiffFile(path)
        except Exception as exc:  # tifffile raises several exception types on bad input
            raise InputError(f"{path} cannot be read as a TIFF ({type(exc).__name__}: {exc})",
                             "check that it is a TIFF stack and not damaged; export it again"
                             ) from None
        try:
            yield tf, records, caught
        except InputError:
            raise
        except Exception as exc:  # tifffile fails in many ways on damaged files
            raise InputError(f"{path} looks damaged or truncated ({type(exc).__name__}: {exc})",
                             "copy or export the file again (was the transfer complete?)"
                             ) from None
        finally:
            tf.close()


def _is_fatal(record) -> bool:
    """An error tifffile logged while parsing, except for damage confined to a private tag.

    Tags numbered 32768 and above are private (TIFF 6.0, section 2); scanners write vendor
    tags there, and a broken one does not affect the pixels or the voxel size.
    """
    if record.levelno < logging.ERROR:
        return False
    code = re.search(r"TiffTag (\d+)|tag #(\d+)", record.getMessage())
    return not (code and int(code.group(1) or code.group(2)) >= 32768)


def _raise_on_log_errors(records, path):
    errors = [r.getMessage() for r in records if _is_fatal(r)]
    if errors:
        raise InputError(f"{path} looks damaged or truncated: {errors[0]}",
                         "copy or export the file again (was the transfer complete?)")


def _notes(records, caught):
    return [r.getMessage() for r in records] + [str(w.message) for w in caught]


def natural_sort_key(name: str):
    """Sort key that orders embedded numbers by value: ``slice_2`` before ``slice_10``.

    Examples
    --------
    >>> sorted(["s_10.tif", "s_2.tif", "s_1.tif"], key=natural_sort_key)
    ['s_1.tif', 's_2.tif', 's_10.tif']
    """
    parts = re.split(r"(\d+)", name)
    return [int(p) if i % 2 else p.lower() for i, p in enumerate(parts)], name


def _imagej_unit_um(unit):
    if unit is None:
        return None
    text = str(unit).strip()
    text = re.sub(r"\\u([0-9a-fA-F]{4})", lambda m: chr(int(m.group(1), 16)), text)
    return _IMAGEJ_UNITS_UM.get(text.lower(), _IMAGEJ_UNITS_UM.get(text))


def _convert(value, factor):
    """value * factor, rounded to 12 significant digits when a unit was converted."""
    out = float(value) * factor
    return out if factor == 1.0 else float(f"{out:.12g}")


def _imagej_spacing(ij: dict, page) -> tuple[list, list[str]]:
    """(dz, dy, dx) in µm from ImageJ metadata and the first page's resolution tags."""
    notes = []
    unit = ij.get("unit")
    if unit is None:
        unit = _TIFF_RESUNIT.get(int(page.resolutionunit))
    factor = _imagej_unit_um(unit)
    if factor is None:
        notes.append(f"ImageJ unit {unit!r} is not a length" if unit is not None
                     else "ImageJ metadata has no unit (uncalibrated)")
        return [None, None, None], notes
    yfactor = _imagej_unit_um(ij.get("yunit", unit)) or factor
    zfactor = _imagej_unit_um(ij.get("zunit", unit)) or factor
    xres, yres = page.get_resolution()
    dx = _convert(1.0 / float(xres), factor) if xres and float(xres) > 0 else None
    dy = _convert(1.0 / float(yres), yfactor) if yres and float(yres) > 0 else None
    dz = None
    try:
        if float(ij.get("spacing", 0)) > 0:
            dz = _convert(ij["spacing"], zfactor)
    except (TypeError, ValueError):
        pass
    if dz is None:
        notes.append("ImageJ metadata has no 'spacing' (z voxel size)")
    return [dz, dy, dx], notes


def _metadata_spacing(tf) -> tuple[list, str | None, list[str]]:
    """Voxel size from OME metadata, else ImageJ metadata: (values, source, notes)."""
    notes: list[str] = []
    values: list = [None, None, None]
    source = None
    if tf.is_ome and tf.ome_metadata:
        ome, n = spacing_from_ome_xml(tf.ome_metadata)
        values, notes, source = list(ome), notes + n, "ome"
    if None in values and tf.is_imagej and tf.imagej_metadata is not None:
        ij, n = _imagej_spacing(tf.imagej_metadata, tf.pages.first)
        notes += n
        if source is None or sum(v is not None for v in ij) > sum(v is not None for v in values):
            values, source = ij, "imagej"
    if source is None:
        notes.append("no OME or ImageJ metadata; plain TIFF resolution tags are not trusted")
    return values, source, notes


def _resolve_spacing(path, values, source, notes, spacing_um, meta):
    if spacing_um is not None:
        spacing = as_spacing_um(spacing_um)
        if any(v is not None for v in values):
            meta["metadata_spacing_um"] = tuple(values)
            if None not in values and not np.allclose(values, spacing, rtol=1e-3):
                meta["spacing_differs_from_metadata"] = True
        return spacing, "user"
    if None in values:
        found = ", ".join(notes) if notes else "no voxel size found"
        raise InputError(f"{path}: the voxel size is not in the file ({found})", _SPACING_FIX)
    return as_spacing_um(values, name=f"voxel size stored in {path}"), source


def _check_dtype(dtype, path):
    dtype = np.dtype(dtype)
    if dtype.newbyteorder("=") not in SUPPORTED_DTYPES:
        kind = {"b": "binary (1-bit)", "c": "complex"}.get(dtype.kind, f"{dtype}")
        raise InputError(f"{path}: voxel type {kind} ({dtype}) is not supported",
                         "convert the stack to 16-bit integers or 32-bit float "
                         "(uint8, uint16, int16, float32 or float64) and export again")


def _check_extent(shape, path):
    if len(shape) != 3 or min(shape) < 2:
        raise InputError(f"{path}: the stack has shape (z, y, x) = {tuple(shape)}; "
                         "at least 2 voxels are needed along every axis",
                         "give a 3-D stack with several slices")


def _data_end(series, page_list) -> tuple[int, int]:
    """Largest byte offset the series' pixel data reach, and the file size it must fit in."""
    end = 0
    size = 0
    if series.dataoffset is not None:
        end = int(series.dataoffset) + int(series.nbytes)
    for page in page_list:
        if page is None:
            continue
        size = max(size, int(page.parent.filehandle.size))
        for off, count in zip(page.dataoffsets, page.databytecounts):
            end = max(end, int(off) + int(count))
    return end, size


# ----------------------------------------------------------------------------------------------
# TIFF files
# ----------------------------------------------------------------------------------------------

def _inspect_tiff(path, tf, records):
    """Check the layout of series 0; return (nz, ny, nx), dtype, axes, series, pages."""
    all_series = tf.series  # parses the file structure; damage shows up in tifffile's log
    _raise_on_log_errors(records, path)
    if not all_series:
        raise InputError(f"{path} holds no image (empty or damaged TIFF)",
                         "check that it is a CT stack; export it again")
    series = tf.series[0]
    axes, shape = series.axes, tuple(int(s) for s in series.shape)
    keyframe = series.keyframe
    if int(keyframe.samplesperpixel) > 1 or ("S" in axes and shape[axes.index("S")] > 1):
        raise InputError(f"{path} is an RGB/colour image ({int(keyframe.samplesperpixel)} "
                         "samples per pixel), not a grey-value stack",
                         "export one channel or a greyscale stack (e.g. 16-bit grey)")
    if "C" in axes and shape[axes.index("C")] > 1:
        raise InputError(f"{path} has {shape[axes.index('C')]} channels; ctpore needs one "
                         "grey-value channel", "export a single channel as a greyscale stack")
    pages = list(series.pages)
    _raise_on_log_errors(records, path)
    if not axes.endswith("YX"):
        raise InputError(f"{path}: unexpected image axes {axes!r} with shape {shape}",
                         "export a plain greyscale z-stack (one page per slice)")
    extra = [(a, n) for a, n in zip(axes[:-2], shape[:-2]) if n > 1]
    ny, nx = shape[-2:]
    if not extra:
        raise InputError(f"{path} is a single 2-D image ({ny} x {nx}), not a 3-D stack",
                         "give the folder holding all the slice files, or a multi-page stack")
    if len(extra) > 1:
        desc = ", ".join(f"{a}={n}" for a, n in extra)
        raise InputError(f"{path} holds more than three dimensions ({desc})",
                         "export a single 3-D stack (one time point, one channel)")
    nz = extra[0][1]
    _check_dtype(series.dtype, path)
    return (nz, ny, nx), np.dtype(series.dtype), axes, series, pages


def _read_tiff(path: Path, spacing_um):
    import tifffile

    with _quiet_open(path) as (tf, records, caught):
        (nz, ny, nx), dtype, axes, series, pages = _inspect_tiff(path, tf, records)
        end, size = _data_end(series, pages)
        size = size or os.path.getsize(path)
        if end > size or any(p is None for p in pages):
            raise InputError(f"{path} is truncated: the image data need {end} bytes but the "
                             f"file has {size}", "copy or export the file again")
        _check_extent((nz, ny, nx), path)
        values, source, spacing_notes = _metadata_spacing(tf)
        fmt = "ome-tiff" if tf.is_ome else "imagej-tiff" if tf.is_imagej else "tiff"
        contiguous = (series.dataoffset is not None
                      and int(series.keyframe.compression) == 1)
        page_ok = len(pages) == nz and all(int(np.prod(p.shape)) == ny * nx for p in pages[:1])
        n_series = len(tf.series)
        bigtiff = bool(tf.is_bigtiff)
        notes = _notes(records, caught)
    _raise_on_log_errors(records, path)
    meta = {"format": fmt, "dtype": str(dtype.newbyteorder("=")), "shape": (nz, ny, nx),
            "n_files": 1, "axes": axes, "bigtiff": bigtiff, "n_series": n_series}
    spacing, spacing_source = _resolve_spacing(path, values, source, spacing_notes,
                                               spacing_um, meta)
    data = None
    if contiguous:
        with warnings.catch_warnings(record=True), _tifffile_log():
            warnings.simplefilter("always")
            try:
                data = tifffile.memmap(path, series=0, mode="r").reshape(nz, ny, nx)
                meta["lazy"] = "memmap"
            except Exception:  # not memory-mappable after all: fall back to page reads
                data = None
        if data is not None and not data.dtype.isnative:
            data = None  # big-endian file: read pages so that values come back in native order
    if data is None:
        if not page_ok:
            raise InputError(f"{path}: pages do not map one-to-one onto z slices "
                             f"({len(pages)} pages for {nz} slices)",
                             "export the stack as a plain multi-page TIFF, one page per slice")
        data = TiffPageStack(path, (nz, ny, nx), dtype)
        meta["lazy"] = "tiff-pages"
    if notes:
        meta["reader_notes"] = notes
    return Scan(data=data, spacing_um=spacing, source=str(path),
                spacing_source=spacing_source, meta=meta)


# ----------------------------------------------------------------------------------------------
# Folders of slices
# ----------------------------------------------------------------------------------------------

def _read_folder(folder: Path, spacing_um):
    entries = [p for p in folder.iterdir() if not p.name.startswith(".") and p.is_file()]
    files = sorted((p for p in entries if p.suffix.lower() in _SLICE_SUFFIXES),
                   key=lambda p: natural_sort_key(p.name))
    if not files:
        others = sorted({p.suffix.lower() or "(no suffix)" for p in entries})
        found = f"found only {', '.join(others)} files" if others else "it is empty"
        raise InputError(f"folder {folder} holds no slice files (.tif/.tiff); {found}",
                         "export the slices as 16-bit or 32-bit float TIFF files, or give the "
                         "stack file itself")
    expected = None
    values, source, spacing_notes = [None, None, None], None, []
    notes: list[str] = []
    for i, f in enumerate(files):
        with _quiet_open(f) as (tf, records, caught):
            series = tf.series[0] if tf.series else None
            pages = list(series.pages) if series is not None else []
            _raise_on_log_errors(records, f)
            if series is None:
                raise InputError(f"{f} holds no image (empty or damaged TIFF)",
                                 "remove it from the folder or export it again")
            axes, shape = series.axes, tuple(int(s) for s in series.shape)
            spp = int(series.keyframe.samplesperpixel)
            if spp > 1 or ("C" in axes and shape[axes.index("C")] > 1):
                raise InputError(f"{f} is an RGB/colour or multi-channel image, not a grey slice",
                                 "export the slices as one channel, greyscale")
            plane = tuple(n for a, n in zip(axes, shape) if n > 1 or a in "YX")
            if len(plane) != 2:
                hint = (f"; give {f} itself instead of the folder"
                        if len(files) == 1 else "")
                raise InputError(f"{f} in folder {folder} is not a single 2-D slice "
                                 f"(shape {shape}, axes {axes}){hint}",
                                 "the folder must hold one 2-D TIFF per slice" + hint)
            dtype = np.dtype(series.dtype)
            _check_dtype(dtype, f)
            _raise_on_log_errors(records, f)
            end, size = _data_end(series, pages)
            if end > (size or os.path.getsize(f)):
                raise InputError(f"{f} is truncated: the image data need {end} bytes but the "
                                 f"file has {size}", "copy or export the slice again")
            if expected is None:
                expected = (plane, dtype, f)
                values, source, spacing_notes = _metadata_spacing(tf)
            elif plane != expected[0]:
                raise InputError(f"folder {folder}: slice {f.name} has shape {plane} but the "
                                 f"first slice {expected[2].name} has {expected[0]}",
                                 "all slices must have the same size; remove or re-export "
                                 f"{f.name}")
            elif dtype != expected[1]:
                raise InputError(f"folder {folder}: slice {f.name} has dtype {dtype} but the "
                                 f"first slice {expected[2].name} has {expected[1]}",
                                 f"all slices must have the same type; re-export {f.name}")
            notes += _notes(records, caught)
    (ny, nx), dtype = expected[0], expected[1]
    shape = (len(files), ny, nx)
    _check_extent(shape, folder)
    meta = {"format": "slice-folder", "dtype": str(dtype.newbyteorder("=")), "shape": shape,
            "n_files": len(files), "files": [f.name for f in files], "lazy": "slice-files"}
    if notes:
        meta["reader_notes"] = notes
    spacing, spacing_source = _resolve_spacing(folder, values, source, spacing_notes,
                                               spacing_um, meta)
    data = SliceFileStack(files, shape, dtype, folder)
    return Scan(data=data, spacing_um=spacing, source=str(folder),
                spacing_source=spacing_source, meta=meta)


# ----------------------------------------------------------------------------------------------
# Public functions
# ----------------------------------------------------------------------------------------------

def read_stack(path, *, spacing_um=None) -> Scan:
    """Open a CT stack lazily, with its voxel size in µm.

    Parameters
    ----------
    path : str or Path
        A multi-page TIFF (classic or BigTIFF), an OME-TIFF, an ImageJ TIFF (hyperstacks with
        one channel and one time point), or a folder of 2-D ``.tif``/``.tiff`` slices, taken in
        natural order (``slice_2`` before ``slice_10``; hidden and non-TIFF files ignored).
    spacing_um : float or sequence of 3 floats, optional
        Voxel size (dz, dy, dx) in µm. Overrides the file's metadata; what the file said is
        kept in ``meta["metadata_spacing_um"]`` (``None`` for axes it did not give).

    Returns
    -------
    Scan
        ``data`` has axes (z, y, x) and is an ``np.memmap`` (uncompressed contiguous TIFF) or
        a :class:`LazyStack` (compressed or scattered pages, slice folders); ``Scan.load()``
        reads it. ``spacing_source`` is ``"ome"``, ``"imagej"`` or ``"user"``. ``meta`` holds
        ``format`` (``"ome-tiff"``, ``"imagej-tiff"``, ``"tiff"``, ``"slice-folder"``),
        ``dtype``, ``shape``, ``n_files``, ``lazy`` (``"memmap"``, ``"tiff-pages"``,
        ``"slice-files"``) and reader notes.

    Raises
    ------
    InputError
        Naming the file, for: a missing path; a file that is not a readable TIFF; a damaged or
        truncated file; an RGB or multi-channel image; a single 2-D image; more than three
        dimensions; an unsupported voxel type (binary, complex, 32/64-bit integers); fewer than
        2 voxels along an axis; a folder without slices or with slices of differing shape or
        type; no voxel size in the file and none given.

    Notes
    -----
    Voxel size sources, in order: OME ``PhysicalSizeZ/Y/X`` with their units (default µm,
    OME schema 2016-06); ImageJ ``spacing`` (z) and ``unit``, with x/y = 1 / resolution
    (pixels per unit) of the first page; the TIFF ResolutionUnit (inch/cm) stands in for a
    missing ImageJ unit. Resolution tags of a plain TIFF are not used: defaults such as
    72 dpi say nothing about the voxel size.

    Examples
    --------
    >>> import numpy as np, tempfile, os, tifffile
    >>> p = os.path.join(tempfile.mkdtemp(), "s.tif")
    >>> tifffile.imwrite(p, np.zeros((3, 4, 5), np.uint16), imagej=True, resolution=(0.1, 0.1),
    ...                  metadata={"spacing": 12.0, "unit": "micron", "axes": "ZYX"})
    >>> scan = read_stack(p)
    >>> scan.shape, scan.spacing_um, scan.spacing_source
    ((3, 4, 5), (12.0, 10.0, 10.0), 'imagej')
    """
    path = Path(path).expanduser()
    if not path.exists():
        raise InputError(f"{path} does not exist", "check the path and spelling")
    from .ome_zarr import is_ome_zarr, read_ome_zarr

    if is_ome_zarr(path):
        return read_ome_zarr(path, spacing_um=spacing_um)
    if path.is_dir():
        return _read_folder(path, spacing_um)
    return _read_tiff(path, spacing_um)


def check_finite(array, source) -> None:
    """Raise InputError if the grey values contain NaN or infinity.

    Reads lazy arrays a block of z slices at a time (about 64 MB), so memory stays small.

    Parameters
    ----------
    array : array-like, shape (nz, ...)
        Grey values; integer types pass at once.
    source : str
        File or folder the values came from, named in the message.

    Raises
    ------
    InputError
        With the number of non-finite voxels and the first z slice holding one.
    """
    dtype = np.dtype(array.dtype)
    if dtype.kind in "biu":
        return
    if not hasattr(array, "shape"):
        array = np.asarray(array)
    shape = tuple(int(s) for s in array.shape)
    if len(shape) == 0:
        bad_total = int(not np.isfinite(np.asarray(array)))
        first = 0
    else:
        per_slice = max(1, math.prod(shape[1:]) * dtype.itemsize)
        step = max(1, (64 << 20) // per_slice)
        bad_total, first = 0, None
        for z0 in range(0, shape[0], step):
            block = np.asarray(array[z0:z0 + step])
            bad = ~np.isfinite(block)
            n = int(np.count_nonzero(bad))
            if n:
                if first is None:
                    first = z0 + int(np.argmax(bad.reshape(bad.shape[0], -1).any(axis=1)))
                bad_total += n
    if bad_total:
        raise InputError(f"{source}: {bad_total} voxel(s) are NaN or infinite (first in slice "
                         f"z={first}); the analysis needs finite grey values",
                         "replace the NaNs and infinities, e.g. with the background (air) grey "
                         "value, and export the stack again")
