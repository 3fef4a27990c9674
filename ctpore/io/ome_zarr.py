"""OME-Zarr (NGFF): write a (z, y, x) stack as a multiscale pyramid, streaming; read it lazily.

:func:`convert_to_ome_zarr` reads a TIFF stack or slice folder lazily
(:func:`ctpore.io.stack_readers.read_stack`) and :func:`write_ome_zarr` writes it slab by slab,
so the whole volume is never in memory: level ``s0`` holds the original grey values in their
original type, level ``s(k+1)`` is the 2 × 2 × 2 block mean of level ``s(k)`` read back from
disk (all three axes halved; integer types rounded half to even; an odd last slice, row or
column is dropped). Every level carries its voxel size in micrometres as the NGFF ``scale``
transform and the position of its first voxel centre as a ``translation`` (voxel centre at
``index * spacing``, origin at the centre of voxel (0, 0, 0) of level ``s0``). The folder is
written under a hidden temporary name beside the destination and renamed when complete.

:func:`read_ome_zarr` opens one level as a :class:`ctpore.scan.Scan` backed by the zarr array
(nothing is read until sliced), for OME-Zarr 0.4 (zarr format 2) and 0.5 (zarr format 3).
:func:`is_ome_zarr` tells whether a path looks like one, for the reader dispatch.

References
----------
.. [1] Moore J. et al. (2021). OME-NGFF: a next-generation file format for expanding
   bioimaging data-access strategies. Nature Methods 18:1496-1498.
   https://doi.org/10.1038/s41592-021-01326-w
.. [2] OME-Zarr specification 0.5 (``multiscales``, ``axes``, ``coordinateTransformations``;
   units from UDUNITS-2), https://ngff.openmicroscopy.org/0.5/
.. [3] Zarr storage specification version 3, https://zarr-specs.readthedocs.io/
"""

from __future__ import annotations

import math
import os
import shutil
import uuid
from itertools import product
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..scan import Scan
from ..spacing import as_spacing_um
from .ome_tiff import SUPPORTED_DTYPES

__all__ = ["write_ome_zarr", "convert_to_ome_zarr", "read_ome_zarr", "is_ome_zarr",
           "pyramid_shapes", "downsample_mean2", "NGFF_LENGTH_UNITS_UM", "DEFAULT_CHUNKS"]

#: Micrometres per unit for the NGFF length units (UDUNITS-2 names, NGFF 0.5 "axes") that
#: occur for CT voxels, and a few spellings other writers use.
NGFF_LENGTH_UNITS_UM = {
    "angstrom": 1e-4, "picometer": 1e-6, "nanometer": 1e-3, "micrometer": 1.0,
    "millimeter": 1e3, "centimeter": 1e4, "decimeter": 1e5, "meter": 1e6,
    "inch": 25400.0, "foot": 304800.0,
    "micron": 1.0, "um": 1.0, "µm": 1.0, "μm": 1.0, "nm": 1e-3, "mm": 1e3,
}

#: Default zarr chunk shape (z, y, x): 2 MiB for 16-bit voxels; a chunked analysis reads
#: blocks of 128–256 voxels per side, which are whole multiples of it.
DEFAULT_CHUNKS = (64, 128, 128)

_DOWNSAMPLING = ("2x2x2 block mean of the previous level along z, y and x; integer types "
                 "rounded half to even; an odd last slice, row or column is dropped")


# ----------------------------------------------------------------------------------------------
# Pyramid arithmetic
# ----------------------------------------------------------------------------------------------

def pyramid_shapes(shape, *, min_side: int = 64, max_levels: int | None = None) -> list:
    """Shapes of the pyramid levels: halve every axis (floor) until the smallest side < min_side.

    Parameters
    ----------
    shape : tuple of 3 ints
        Shape (nz, ny, nx) of level 0.
    min_side : int
        A level whose smallest side is at least this gets a coarser level below it.
    max_levels : int, optional
        At most this many levels (level 0 included).

    Returns
    -------
    list of tuple
        Level 0 first.

    Examples
    --------
    >>> pyramid_shapes((256, 256, 256))
    [(256, 256, 256), (128, 128, 128), (64, 64, 64), (32, 32, 32)]
    >>> pyramid_shapes((40, 52, 60), min_side=8)
    [(40, 52, 60), (20, 26, 30), (10, 13, 15), (5, 6, 7)]
    """
    shapes = [tuple(int(s) for s in shape)]
    limit = math.inf if max_levels is None else int(max_levels)
    while (len(shapes) < limit and min(shapes[-1]) >= max(int(min_side), 2)):
        shapes.append(tuple(s // 2 for s in shapes[-1]))
    return shapes


def downsample_mean2(block: np.ndarray, *, dtype=None) -> np.ndarray:
    """2 × 2 × 2 block mean of a (z, y, x) block, in the block's type.

    The mean is taken in float64 (exact for sums of eight integers up to 2**50); integer
    types are rounded half to even, float types cast. An odd last slice, row or column is
    dropped. Memory: the float64 result (one eighth of the block's voxels) and the output.

    Parameters
    ----------
    block : ndarray, shape (nz, ny, nx)
    dtype : numpy dtype, optional
        Output type (default: the block's).

    Returns
    -------
    ndarray, shape (nz // 2, ny // 2, nx // 2)
    """
    block = np.asarray(block)
    dtype = np.dtype(block.dtype if dtype is None else dtype)
    out_shape = tuple(s // 2 for s in block.shape)
    acc = np.zeros(out_shape, dtype=np.float64)
    for dz, dy, dx in product((0, 1), repeat=3):
        view = block[dz:2 * out_shape[0]:2, dy:2 * out_shape[1]:2, dx:2 * out_shape[2]:2]
        np.add(acc, view, out=acc, casting="unsafe")
    acc *= 0.125
    if dtype.kind in "iu":
        np.rint(acc, out=acc)
    return acc.astype(dtype)


def _check_chunks(chunks, name="chunks") -> tuple[int, int, int]:
    if isinstance(chunks, str):
        parts = [p for p in chunks.replace(";", ",").replace(" ", ",").split(",") if p]
    elif isinstance(chunks, (int, np.integer)):
        parts = [chunks]
    else:
        parts = list(chunks)
    try:
        values = [int(p) for p in parts]
        if any(float(p) != int(p) for p in parts):
            raise ValueError
    except (TypeError, ValueError):
        raise InputError(f"{name} {chunks!r} is not one whole number or three (z,y,x)",
                         "give e.g. 64 or 64,128,128") from None
    if len(values) == 1:
        values = values * 3
    if len(values) != 3 or min(values) < 1:
        raise InputError(f"{name} needs one or three positive whole numbers (z, y, x); got "
                         f"{chunks!r}", "give e.g. 64 or 64,128,128")
    return (values[0], values[1], values[2])


def _block_shape(shape, chunks, bytes_per_voxel, budget_bytes):
    """Largest block (multiples of chunks, whole planes first) within the memory budget."""
    nz, ny, nx = shape
    cz, cy, cx = (min(c, s) for c, s in zip(chunks, shape))
    plane = ny * nx * bytes_per_voxel
    if cz * plane <= budget_bytes:
        return (min(nz, cz * max(1, int(budget_bytes // (cz * plane)))), ny, nx)
    row = cz * cy * nx * bytes_per_voxel
    if row <= budget_bytes:
        return (cz, min(ny, cy * max(1, int(budget_bytes // row))), nx)
    tile = cz * cy * cx * bytes_per_voxel
    return (cz, cy, min(nx, cx * max(1, int(budget_bytes // tile))))


def _blocks(shape, block):
    for z0 in range(0, shape[0], block[0]):
        for y0 in range(0, shape[1], block[1]):
            for x0 in range(0, shape[2], block[2]):
                yield (slice(z0, min(z0 + block[0], shape[0])),
                       slice(y0, min(y0 + block[1], shape[1])),
                       slice(x0, min(x0 + block[2], shape[2])))


# ----------------------------------------------------------------------------------------------
# Writing
# ----------------------------------------------------------------------------------------------

def write_ome_zarr(volume, out, *, spacing_um, chunks=DEFAULT_CHUNKS, min_side: int = 64,
                   max_levels: int | None = None, memory_mb: float = 256.0,
                   force: bool = False, name: str | None = None, provenance: dict | None = None,
                   quiet: bool = True) -> Path:
    """Write a (z, y, x) stack as a multiscale OME-Zarr 0.5 image, slab by slab, atomically.

    Parameters
    ----------
    volume : array-like, shape (nz, ny, nx)
        Grey values; any object sliceable along z that returns numpy arrays (``np.ndarray``,
        ``np.memmap``, :class:`ctpore.io.stack_readers.LazyStack`, a zarr array). Only a slab
        of z slices is read at a time. uint8, uint16, int16, float32 or float64, kept as
        they are.
    out : str or Path
        Destination folder; its name must end in ``.zarr`` (``piece.ome.zarr``).
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) of the stack in µm.
    chunks : int or 3 ints
        Zarr chunk shape (z, y, x) of every level (capped at the level's shape).
    min_side : int
        Coarser levels are added until the smallest side of the last one is below this.
    max_levels : int, optional
        At most this many levels (``1``: no pyramid).
    memory_mb : float
        Approximate peak memory (MiB), with two minimums: level 0 is read in slabs of whole
        slices at least one chunk deep (about ``2 * chunks[0] * ny * nx * itemsize`` bytes
        with the encoded copy); coarser levels are made one block of whole chunks at a time
        (about 24 times the bytes of one chunk).
    force : bool
        Replace an existing ``out``.
    name : str, optional
        Image name in the metadata (default: ``out``'s name without ``.ome.zarr``).
    provenance : dict, optional
        JSON-able facts stored under the group attribute ``"ctpore"`` (source file, ...).
    quiet : bool
        No progress lines on standard error.

    Returns
    -------
    Path
        ``out``.

    Raises
    ------
    InputError
        ``out`` exists (without ``force``), is not named ``*.zarr``, or cannot be written; the
        stack is not 3-D or not of a numeric type; bad ``chunks``, ``min_side``, ``max_levels``
        or ``memory_mb``.

    Notes
    -----
    Metadata follow OME-Zarr 0.5 [2]_ (written with the ``ome-zarr`` package): axes ``z, y, x``
    of type ``space`` and unit ``micrometer``; per level a ``scale`` (voxel size in µm,
    ``spacing_um * 2**k``) and a ``translation`` of ``spacing_um * (2**k - 1) / 2``, the
    centre of the first 2**k-block of level-0 voxels; the arrays carry ``dimension_names``.
    """
    from ..progress import Progress

    spacing = as_spacing_um(spacing_um)
    chunks = _check_chunks(chunks)
    out = Path(out).expanduser()
    shape = tuple(int(s) for s in getattr(volume, "shape", ()))
    dtype = np.dtype(getattr(volume, "dtype", np.float64))
    if len(shape) != 3 or min(shape) < 1:
        raise InputError(f"the stack for {out} has shape {shape}; a 3-D (z, y, x) stack is "
                         "needed", "give a 3-D stack with several slices")
    dtype = dtype.newbyteorder("=")
    if dtype not in SUPPORTED_DTYPES:
        raise InputError(f"the stack for {out} has voxel type {dtype}; ctpore writes and reads "
                         "uint8, uint16, int16, float32 and float64 grey values",
                         "convert it to uint16 or float32 first")
    if not (isinstance(min_side, (int, np.integer)) and min_side >= 2):
        raise InputError(f"min_side must be a whole number ≥ 2; got {min_side!r}",
                         "use e.g. 64")
    if max_levels is not None and not (isinstance(max_levels, (int, np.integer))
                                       and max_levels >= 1):
        raise InputError(f"the number of levels must be a whole number ≥ 1; got "
                         f"{max_levels!r}", "use e.g. --levels 4, or leave it out")
    if not (isinstance(memory_mb, (int, float)) and math.isfinite(memory_mb)
            and memory_mb > 0):
        raise InputError(f"memory_mb must be a positive number of MiB; got {memory_mb!r}",
                         "use e.g. 256")
    _check_destination(out, force=force)
    shapes = pyramid_shapes(shape, min_side=min_side, max_levels=max_levels)
    budget = float(memory_mb) * 2**20
    progress = Progress(len(shapes), quiet=quiet, label="ctpore convert")

    tmp = out.parent / f".{out.name}.partial-{uuid.uuid4().hex[:8]}"
    try:
        group = _create_group(tmp)
        arrays = []
        for k, lvl_shape in enumerate(shapes):
            arrays.append(group.create_array(
                f"s{k}", shape=lvl_shape, dtype=dtype,
                chunks=tuple(min(c, s) for c, s in zip(chunks, lvl_shape)),
                dimension_names=("z", "y", "x"), fill_value=0))
        with progress.step(f"s0 {shape} {dtype} from the stack"):
            _write_level0(volume, arrays[0], chunks, dtype, budget)
        for k in range(1, len(shapes)):
            with progress.step(f"s{k} {shapes[k]} (2x2x2 mean of s{k - 1})"):
                _write_coarser(arrays[k - 1], arrays[k], chunks, dtype, budget)
        _write_metadata(group, shapes, spacing,
                        name or _image_name(out), provenance or {})
        _move_into_place(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return out


def _check_destination(out: Path, *, force: bool):
    if not out.name.lower().endswith(".zarr"):
        raise InputError(f"output {out} does not end in .zarr",
                         f"name it e.g. {out.name}.ome.zarr, so that ctpore and other "
                         "OME-Zarr readers recognise it")
    if out.exists() or out.is_symlink():
        if not force:
            raise InputError(f"output {out} already exists",
                             "choose another name, or add --force (force=True) to replace it")
        if not out.is_dir():
            raise InputError(f"output {out} exists and is a file, not an OME-Zarr folder",
                             "remove it or choose another name")
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise InputError(f"cannot create the folder {out.parent} for {out.name} ({err})",
                         "choose an output place you can write to") from None
    if not os.access(out.parent, os.W_OK):
        raise InputError(f"cannot write into {out.parent}",
                         "choose an output place you can write to")


def _create_group(path: Path):
    import zarr

    return zarr.open_group(zarr.storage.LocalStore(str(path)), mode="w-", zarr_format=3)


def _write_level0(volume, array, chunks, dtype, budget):
    nz, ny, nx = array.shape
    cz = min(chunks[0], nz)
    plane = ny * nx * dtype.itemsize
    # a slab: whole slices, a whole number of chunks deep; the block read plus its encoding
    step = cz * max(1, int(budget // (2 * cz * plane)))
    for z0 in range(0, nz, step):
        z1 = min(nz, z0 + step)
        try:
            block = np.asarray(volume[z0:z1])
        except OSError as err:  # a slice file removed or unreadable since the stack was opened
            raise InputError(f"reading slices {z0}-{z1 - 1} of the stack failed "
                             f"({type(err).__name__}: {err})", "check that the stack's files "
                             "are all there and readable, then convert again") from None
        if block.shape != (z1 - z0, ny, nx):
            raise InputError(f"the stack returned a block of shape {block.shape} for slices "
                             f"{z0}-{z1 - 1}; expected {(z1 - z0, ny, nx)}",
                             "check that every slice has the same size")
        if block.dtype != dtype:
            block = block.astype(dtype)
        array[z0:z1] = block
        del block


def _write_coarser(src, dst, chunks, dtype, budget):
    # memory per output voxel: 8 input voxels (decoded chunks and the assembled block), a
    # float64 accumulator and the output
    per_voxel = 2 * 8 * dtype.itemsize + 8 + dtype.itemsize
    block = _block_shape(dst.shape, tuple(min(c, s) for c, s in zip(chunks, dst.shape)),
                         per_voxel, budget)
    for sl in _blocks(dst.shape, block):
        src_sl = tuple(slice(2 * s.start, 2 * s.stop) for s in sl)
        dst[sl] = downsample_mean2(src[src_sl], dtype=dtype)


def _ome_zarr_writer():
    """ome-zarr's writer module; its import warns about its own deprecated default (Scaler)."""
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DeprecationWarning)
        from ome_zarr import writer
        from ome_zarr.format import FormatV05
    return writer, FormatV05


def _write_metadata(group, shapes, spacing, name, provenance):
    from .. import __version__

    writer, FormatV05 = _ome_zarr_writer()

    datasets = []
    for k in range(len(shapes)):
        f = 2 ** k
        transforms = [{"type": "scale", "scale": [s * f for s in spacing]}]
        if k:
            transforms.append({"type": "translation",
                               "translation": [s * (f - 1) / 2 for s in spacing]})
        datasets.append({"path": f"s{k}", "coordinateTransformations": transforms})
    axes = [{"name": a, "type": "space", "unit": "micrometer"} for a in ("z", "y", "x")]
    writer.write_multiscales_metadata(group, datasets=datasets, fmt=FormatV05(), axes=axes,
                                      name=name,
                                      metadata={"description": _DOWNSAMPLING,
                                                "method": "ctpore.io.ome_zarr.downsample_mean2",
                                                "version": __version__})
    attrs = dict(group.attrs)
    ome = dict(attrs["ome"])
    ome["multiscales"] = [dict(ome["multiscales"][0], type="mean")]
    group.attrs.update({"ome": ome,
                        "ctpore": {"ctpore_version": __version__, "spacing_um": list(spacing),
                                   "downsampling": _DOWNSAMPLING, **provenance}})


def _image_name(out: Path) -> str:
    n = out.name
    for suffix in (".ome.zarr", ".zarr"):
        if n.lower().endswith(suffix):
            return n[: -len(suffix)] or n
    return n


def _move_into_place(tmp: Path, out: Path):
    if out.exists():
        old = out.with_name(f".{out.name}.old-{uuid.uuid4().hex[:8]}")
        out.rename(old)
        tmp.rename(out)
        shutil.rmtree(old, ignore_errors=True)
    else:
        tmp.rename(out)


def convert_to_ome_zarr(stack, out, *, spacing_um=None, chunks=DEFAULT_CHUNKS,
                        min_side: int = 64, max_levels: int | None = None,
                        memory_mb: float = 256.0, force: bool = False,
                        quiet: bool = True) -> Path:
    """Convert a TIFF stack or a folder of TIFF slices to a multiscale OME-Zarr, streaming.

    Parameters
    ----------
    stack : str or Path
        Anything :func:`ctpore.io.stack_readers.read_stack` opens (multi-page TIFF, BigTIFF,
        OME-TIFF, ImageJ TIFF, slice folder); it is read lazily, a slab at a time.
    out : str or Path
        Destination folder, e.g. ``piece.ome.zarr``.
    spacing_um : float or 3 floats, optional
        Voxel size (dz, dy, dx) in µm; required when the file does not store one (it is never
        guessed), and overrides the file's when given.
    chunks, min_side, max_levels, memory_mb, force, quiet
        As in :func:`write_ome_zarr`.

    Returns
    -------
    Path
        ``out``.

    Raises
    ------
    InputError
        From :func:`read_stack` (missing or unreadable stack, no voxel size) or
        :func:`write_ome_zarr` (existing output, bad options), naming the file and the fix.
    """
    from .stack_readers import read_stack

    out = Path(out).expanduser()
    _check_destination(out, force=force)  # fail before scanning a large folder
    scan = read_stack(stack, spacing_um=spacing_um)
    provenance = {"source": scan.source, "source_format": scan.meta.get("format", ""),
                  "spacing_source": scan.spacing_source,
                  "source_dtype": str(scan.dtype), "source_shape": list(scan.shape)}
    if "metadata_spacing_um" in scan.meta:
        provenance["metadata_spacing_um"] = [None if v is None else float(v)
                                             for v in scan.meta["metadata_spacing_um"]]
    return write_ome_zarr(scan.data, out, spacing_um=scan.spacing_um, chunks=chunks,
                          min_side=min_side, max_levels=max_levels, memory_mb=memory_mb,
                          force=force, provenance=provenance, quiet=quiet)


# ----------------------------------------------------------------------------------------------
# Reading
# ----------------------------------------------------------------------------------------------

def is_ome_zarr(path) -> bool:
    """Whether ``path`` looks like a zarr folder: a name ending in ``.zarr``, or a folder
    holding ``zarr.json`` (zarr format 3) or ``.zattrs``/``.zgroup`` (format 2)."""
    p = Path(path)
    if p.name.lower().endswith(".zarr"):
        return True
    return p.is_dir() and any((p / n).is_file() for n in ("zarr.json", ".zattrs", ".zgroup"))


class _Squeezed:
    """A lazy view of a zarr array with its length-1 non-space axes dropped."""

    def __init__(self, array, keep):
        self.array = array
        self.keep = tuple(keep)
        self.shape = tuple(int(array.shape[i]) for i in self.keep)
        self.dtype = np.dtype(array.dtype)
        self.ndim = len(self.shape)

    def __len__(self):
        return self.shape[0]

    def __getitem__(self, key):
        key = key if isinstance(key, tuple) else (key,)
        if any(k is Ellipsis for k in key):
            i = next(i for i, k in enumerate(key) if k is Ellipsis)
            key = key[:i] + (slice(None),) * (self.ndim - len(key) + 1) + key[i + 1:]
        key = key + (slice(None),) * (self.ndim - len(key))
        full, it = [], iter(key)
        for i in range(self.array.ndim):
            full.append(next(it) if i in self.keep else 0)
        return self.array[tuple(full)]

    def __array__(self, dtype=None, copy=None):
        out = np.asarray(self[...])
        return out if dtype is None else out.astype(dtype, copy=False)


def read_ome_zarr(path, *, spacing_um=None, level=0) -> Scan:
    """Open one level of an OME-Zarr image lazily, with its voxel size in µm.

    Parameters
    ----------
    path : str or Path
        An OME-Zarr image folder (NGFF 0.4 on zarr format 2, or 0.5 on format 3); a
        bioformats2raw container is opened at its image ``0``.
    spacing_um : float or 3 floats, optional
        Voxel size (dz, dy, dx) in µm of the full-resolution level; overrides the file's
        (what the file said is kept in ``meta["metadata_spacing_um"]``). A coarser level gets
        it times the file's scale ratio. Required when the axes carry no length unit.
    level : int or str
        Pyramid level: index into ``datasets`` (0 full resolution, -1 coarsest) or its path
        (``"s1"``).

    Returns
    -------
    Scan
        ``data`` is the zarr array of the level (a lazy view when the image has length-1 time or
        channel axes); ``spacing_source`` is ``"ome"`` or ``"user"``. ``meta`` holds ``format``
        (``"ome-zarr"``), ``ngff_version``, ``dtype``, ``shape``, ``level``, ``level_path``,
        ``n_levels``, ``level_shapes``, ``level_spacing_um`` and ``lazy`` (``"zarr"``).

    Raises
    ------
    InputError
        Naming the folder, for: a folder that is not a zarr group or holds no ``multiscales``
        metadata; a missing level; not three space axes, or a longer time/channel axis; an
        unsupported voxel type; no length unit or scale and no ``spacing_um``.
    """
    path = Path(path).expanduser()
    if not path.exists():
        raise InputError(f"{path} does not exist", "check the path and spelling")
    group, attrs, version = _open_image_group(path)
    ms = attrs["multiscales"][0]
    datasets = ms.get("datasets") or []
    if not datasets:
        raise InputError(f"{path}: the multiscales metadata list no datasets",
                         "write the OME-Zarr again (e.g. with `ctpore convert`)")
    paths = [str(d.get("path")) for d in datasets]
    index = _level_index(level, paths, path)
    axes = _axes(ms, group[paths[0]].ndim, path)
    space = [i for i, a in enumerate(axes) if a.get("type") == "space"
             or (a.get("type") is None and a.get("name") in ("z", "y", "x"))]
    if len(space) != 3:
        names = [a.get("name") for a in axes]
        raise InputError(f"{path}: the image has axes {names} with {len(space)} space axes; "
                         "ctpore needs a 3-D (z, y, x) volume", "give a 3-D CT volume")
    try:
        array = group[paths[index]]
    except KeyError:
        raise InputError(f"{path}: level {paths[index]!r} is listed but its array is missing",
                         "copy or write the OME-Zarr again (was the transfer complete?)"
                         ) from None
    extra = [(axes[i].get("name"), int(array.shape[i])) for i in range(array.ndim)
             if i not in space and array.shape[i] != 1]
    if extra:
        raise InputError(f"{path}: the image has more than one time point or channel "
                         f"({', '.join(f'{n}={s}' for n, s in extra)})",
                         "export a single 3-D volume (one time point, one channel)")
    dtype = np.dtype(array.dtype)
    if dtype.newbyteorder("=") not in SUPPORTED_DTYPES:
        raise InputError(f"{path}: voxel type {dtype} is not supported",
                         "convert the volume to uint8, uint16, int16, float32 or float64")
    shape = tuple(int(array.shape[i]) for i in space)
    if min(shape) < 2:
        raise InputError(f"{path}: level {paths[index]!r} has shape (z, y, x) = {shape}; at "
                         "least 2 voxels are needed along every axis",
                         "read a finer level (level=0)")

    units = [axes[i].get("unit") for i in space]
    factors = [None if u is None else NGFF_LENGTH_UNITS_UM.get(str(u).strip().lower())
               for u in units]
    scales = [_scale_of(d, ms, array.ndim, path) for d in datasets]
    meta_values = [None if f is None or scales[index] is None else
                   float(f"{scales[index][i] * f:.12g}") for i, f in zip(space, factors)]
    meta = {"format": "ome-zarr", "ngff_version": version, "dtype": str(dtype.newbyteorder("=")),
            "shape": shape, "n_files": 1, "level": index, "level_path": paths[index],
            "n_levels": len(paths), "level_shapes": [], "level_spacing_um": [],
            "lazy": "zarr", "axes": "".join(str(axes[i].get("name")) for i in space)}
    for p, sc in zip(paths, scales):
        arr_shape = tuple(int(group[p].shape[i]) for i in space) if p in group else None
        meta["level_shapes"].append(arr_shape)
        meta["level_spacing_um"].append(
            None if sc is None or None in factors
            else tuple(float(f"{sc[i] * f:.12g}") for i, f in zip(space, factors)))
    if spacing_um is not None:
        base = as_spacing_um(spacing_um)
        ratio = [1.0, 1.0, 1.0]
        if scales[0] is not None and scales[index] is not None:
            ratio = [scales[index][i] / scales[0][i] for i in space]
        spacing = tuple(b * r for b, r in zip(base, ratio))
        if any(v is not None for v in meta_values):
            meta["metadata_spacing_um"] = tuple(meta_values)
            if None not in meta_values and not np.allclose(meta_values, spacing, rtol=1e-3):
                meta["spacing_differs_from_metadata"] = True
        spacing_source = "user"
    else:
        if None in meta_values:
            why = ("no 'scale' transform" if scales[index] is None else
                   "the axes carry no unit" if all(u is None for u in units) else
                   f"axis units {units} are not all lengths ctpore knows")
            raise InputError(f"{path}: the voxel size is not in the file ({why})",
                             "pass the voxel size with --spacing (spacing_um=... in Python): "
                             "one value in µm, or three as z,y,x; ctpore never assumes one")
        spacing = as_spacing_um(meta_values, name=f"voxel size stored in {path}")
        spacing_source = "ome"
    data = array if array.ndim == 3 else _Squeezed(array, space)
    return Scan(data=data, spacing_um=spacing, source=str(path),
                spacing_source=spacing_source, meta=meta)


def _open_image_group(path: Path):
    import zarr

    try:
        group = zarr.open_group(str(path), mode="r")
    except Exception as exc:  # zarr raises several types for a folder that is not a group
        raise InputError(f"{path} cannot be opened as a zarr group ({type(exc).__name__}: "
                         f"{exc})", "give an OME-Zarr image folder (e.g. written by "
                         "`ctpore convert`)") from None
    attrs = dict(group.attrs)
    if "bioformats2raw.layout" in attrs or "bioformats2raw.layout" in attrs.get("ome", {}):
        try:
            group = group["0"]
        except KeyError:
            raise InputError(f"{path} is a bioformats2raw container without image '0'",
                             "give the image folder inside it") from None
        attrs = dict(group.attrs)
    ome = attrs.get("ome") if isinstance(attrs.get("ome"), dict) else attrs
    if not isinstance(ome.get("multiscales"), list) or not ome["multiscales"]:
        raise InputError(f"{path} is a zarr group but not an OME-Zarr image (no "
                         "'multiscales' metadata)", "give an OME-Zarr image folder, or "
                         "convert the stack with `ctpore convert STACK OUT.ome.zarr`")
    version = str(ome.get("version") or ome["multiscales"][0].get("version") or "")
    return group, ome, version


def _level_index(level, paths, path) -> int:
    if isinstance(level, str) and level in paths:
        return paths.index(level)
    if isinstance(level, (int, np.integer)) and not isinstance(level, bool) \
            and -len(paths) <= int(level) < len(paths):
        return int(level) % len(paths)
    raise InputError(f"{path}: level {level!r} is not in the pyramid (levels "
                     f"{list(range(len(paths)))}, paths {paths})",
                     "choose a level index (0 = full resolution) or one of the paths")


def _axes(ms, ndim, path) -> list[dict]:
    axes = ms.get("axes")
    if axes is None:  # NGFF 0.1/0.2: always 5-D t, c, z, y, x
        axes = ["t", "c", "z", "y", "x"][-ndim:]
    out = []
    for a in axes:
        if isinstance(a, str):
            out.append({"name": a, "type": {"t": "time", "c": "channel"}.get(a, "space")})
        elif isinstance(a, dict):
            out.append(a)
        else:
            raise InputError(f"{path}: cannot read the axes metadata {axes!r}",
                             "write the OME-Zarr again")
    if len(out) != ndim:
        raise InputError(f"{path}: {len(out)} axes in the metadata for {ndim}-D arrays",
                         "write the OME-Zarr again")
    return out


def _scale_of(dataset, ms, ndim, path):
    """Product of the dataset's and the multiscale's 'scale' transforms (None if absent)."""
    scale = None
    for transforms in (dataset.get("coordinateTransformations"),
                       ms.get("coordinateTransformations")):
        for t in transforms or []:
            if isinstance(t, dict) and t.get("type") == "scale" and "scale" in t:
                values = [float(v) for v in t["scale"]]
                if len(values) != ndim or not all(math.isfinite(v) and v > 0 for v in values):
                    raise InputError(f"{path}: bad 'scale' transform {t['scale']} for "
                                     f"{ndim}-D arrays", "write the OME-Zarr again")
                scale = values if scale is None else [a * b for a, b in zip(scale, values)]
    return scale

