"""Readers for simulated porosity fields, with the length unit declared, never guessed.

Every reader returns a :class:`ModelField`: points in µm, (z, y, x) for 3-D fields or (r, z) for
axisymmetric ones, and the porosity at each point. Formats:

point table (``.csv``)
    Columns ``x, y, z`` (or ``r, z`` for an axisymmetric model) and ``porosity``; an optional
    ``time_s`` column (seconds) and any other numeric columns are carried along in ``extra``.
    Lengths are in ``length_unit`` (required).
regular grid (``.npz``)
    Array ``porosity`` (nz, ny, nx), ``origin`` (z, y, x) and ``spacing`` (dz, dy, dx) of the
    grid, optionally ``length_unit`` (a string, which must agree with the argument when both
    are given) and a boolean ``domain`` array marking the points inside the model (default all).
OME-TIFF (``.ome.tif``, ``.ome.tiff``)
    A float stack of porosity read with :func:`ctpore.read_stack`; the voxel size comes from
    PhysicalSize (µm), the grid origin is the centre of voxel (0, 0, 0).
VTK XML ImageData (``.vti``)
    Point data array ``porosity`` on the image grid (``Origin``, ``Spacing``, ``WholeExtent``);
    ascii or inline base64 ("binary") data without compression. Read with the standard library
    (meshio does not read ImageData).
VTK XML UnstructuredGrid (``.vtu``)
    Points and point data ``porosity``, read with meshio.

VTK files carry no length unit, so ``length_unit`` is required for them too. VTK orders
coordinates (x, y, z); they are turned into (z, y, x) here.

References
----------
VTK file formats (Kitware, "VTK File Formats", VTK User's Guide, 11th ed., ch. 19): XML
ImageData and UnstructuredGrid. OME data model 2016-06 (PhysicalSize in µm by default).
"""

from __future__ import annotations

import base64
import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["ModelField", "read_model_field", "LENGTH_UNITS_UM", "UNIT_CHOICES"]

#: Factor from each accepted length unit to µm.
LENGTH_UNITS_UM = {"m": 1e6, "mm": 1e3, "um": 1.0}
UNIT_CHOICES = tuple(LENGTH_UNITS_UM)


@dataclass(frozen=True, eq=False)
class ModelField:
    """A simulated porosity field at points, lengths in µm.

    Attributes
    ----------
    points_um : ndarray of float64, shape (n, 3) or (n, 2)
        (z, y, x) positions in µm in the model's own frame, or (r, z) for an axisymmetric model.
    porosity : ndarray of float64, shape (n,)
        Porosity (volume fraction of gas) at each point, in [0, 1].
    axisymmetric : bool
        True for (r, z) fields.
    extra : dict of str to ndarray
        Other per-point columns carried along (shape (n,) each).
    time_s : float or None
        Simulated time of the field, when the file gives one.
    source : str
        The file the field came from.
    length_unit : str
        The unit the file's lengths were in ("m", "mm" or "um").
    """

    points_um: np.ndarray
    porosity: np.ndarray
    axisymmetric: bool
    extra: dict = field(default_factory=dict)
    time_s: float | None = None
    source: str = ""
    length_unit: str = "um"

    @property
    def n_points(self) -> int:
        """Number of points."""
        return int(self.porosity.shape[0])


def read_model_field(path, *, length_unit: str | None = None,
                     time_s: float | None = None) -> ModelField:
    """Read a simulated porosity field from a file, lengths converted to µm.

    Parameters
    ----------
    path : str or Path
        A ``.csv`` point table, ``.npz`` grid, ``.ome.tif(f)``, ``.vti`` or ``.vtu`` file.
    length_unit : {"m", "mm", "um"}, optional
        Unit of the file's lengths. Required unless the file declares it (NPZ ``length_unit``;
        OME-TIFF always gives µm).
    time_s : float, optional
        For tables with several ``time_s`` values: the time to compare (must be present).

    Returns
    -------
    ModelField

    Raises
    ------
    InputError
        Naming the file, for: a missing or empty file; an unknown format or unit; a missing
        unit; missing columns or arrays (naming those found); NaN or infinite values; porosity
        outside [0, 1]; several times in a table and no ``time_s`` chosen.
    """
    path = Path(path)
    if length_unit is not None and length_unit not in LENGTH_UNITS_UM:
        raise InputError(f"length unit {length_unit!r} for {path} is not one of "
                         f"{list(UNIT_CHOICES)}", "give --length-unit m, mm or um")
    if not path.is_file():
        raise InputError(f"model field {path} does not exist", "check the path and spelling")
    if path.stat().st_size == 0:
        raise InputError(f"model field {path} is empty", "export the field again")
    name = path.name.lower()
    if name.endswith(".csv"):
        f = _read_csv(path, length_unit, time_s)
    elif name.endswith(".npz"):
        f = _read_npz(path, length_unit)
    elif name.endswith((".ome.tif", ".ome.tiff")):
        f = _read_ome(path, length_unit)
    elif name.endswith(".vti"):
        f = _read_vti(path, length_unit)
    elif name.endswith(".vtu"):
        f = _read_vtu(path, length_unit)
    else:
        raise InputError(f"model field {path}: unknown format (suffix {path.suffix!r})",
                         "give a .csv point table, .npz grid, .ome.tif, .vti or .vtu file")
    _check_values(f.points_um, f"{path}: coordinates", path)
    _check_values(f.porosity, f"{path}: porosity", path)
    if f.porosity.size == 0:
        raise InputError(f"model field {path} holds no points", "export the field again")
    if f.porosity.min() < 0 or f.porosity.max() > 1:
        raise InputError(f"{path}: porosity must lie in [0, 1]; found "
                         f"{f.porosity.min():g} to {f.porosity.max():g}",
                         "give porosity as a volume fraction (not per cent)")
    if f.axisymmetric and f.points_um[:, 0].min() < 0:
        raise InputError(f"{path}: the radius r must be >= 0", "give r as distance from the axis")
    return f


def _unit_factor(declared: str | None, given: str | None, path) -> tuple[float, str]:
    if declared is not None and given is not None and declared != given:
        raise InputError(f"{path} declares length_unit {declared!r} but {given!r} was given",
                         "drop --length-unit or make it agree with the file")
    unit = declared if declared is not None else given
    if unit is None:
        raise InputError(f"{path}: the length unit is not declared (ctpore never guesses it)",
                         "give --length-unit m, mm or um")
    if unit not in LENGTH_UNITS_UM:
        raise InputError(f"{path}: length unit {unit!r} is not one of {list(UNIT_CHOICES)}",
                         "give lengths in m, mm or um")
    return LENGTH_UNITS_UM[unit], unit


def _check_values(a, what, path):
    a = np.asarray(a)
    if not np.isfinite(a).all():
        bad = int(np.count_nonzero(~np.isfinite(a)))
        raise InputError(f"{what} holds {bad} NaN or infinite value(s)",
                         f"fill or drop those points in {Path(path).name} before comparing")


def _read_csv(path, length_unit, time_s) -> ModelField:
    with open(path, newline="", encoding="utf-8-sig") as fh:
        rows = list(csv.reader(fh))
    rows = [r for r in rows if any(c.strip() for c in r)]
    if not rows:
        raise InputError(f"model field {path} is empty", "export the field again")
    header = [h.strip().lower() for h in rows[0]]
    body = rows[1:]
    if not body:
        raise InputError(f"model field {path} has a header but no rows", "export the field again")
    if "porosity" not in header or not ({"x", "y", "z"} <= set(header)
                                        or {"r", "z"} <= set(header)):
        need = "porosity and x, y, z (or r, z for an axisymmetric model)"
        raise InputError(f"{path}: columns missing; need {need}; found {header}",
                         "rename the columns (lengths in --length-unit, porosity as a fraction)")
    try:
        data = np.array([[float(c) if c.strip() else math.nan for c in r] for r in body])
    except ValueError as err:
        raise InputError(f"{path}: a cell is not a number ({err})",
                         "keep only numeric columns, or fix the cell") from None
    if data.ndim != 2 or data.shape[1] != len(header):
        raise InputError(f"{path}: rows do not all have {len(header)} cells",
                         "fix the table so every row has one value per column")
    col = {h: data[:, i] for i, h in enumerate(header)}
    factor, unit = _unit_factor(None, length_unit, path)
    axisym = not {"x", "y"} <= set(header)
    keep = np.ones(len(body), bool)
    t = None
    if "time_s" in col:
        _check_values(col["time_s"], f"{path}: time_s", path)
        times = np.unique(col["time_s"])
        if time_s is None and times.size > 1:
            raise InputError(f"{path} holds {times.size} times ({times[:5].tolist()}...)",
                             "choose one with --time (seconds)")
        t = float(times[0]) if time_s is None else float(time_s)
        keep = np.isclose(col["time_s"], t, rtol=1e-9, atol=0.0)
        if not keep.any():
            raise InputError(f"{path} holds no rows at time_s = {t:g}",
                             f"choose one of {times[:10].tolist()}")
    if axisym:
        pts = np.stack([col["r"], col["z"]], axis=1)
    else:
        pts = np.stack([col["z"], col["y"], col["x"]], axis=1)
    used = {"x", "y", "z", "r", "porosity", "time_s"}
    extra = {h: v[keep] for h, v in col.items() if h not in used}
    return ModelField(points_um=pts[keep] * factor, porosity=col["porosity"][keep],
                      axisymmetric=axisym, extra=extra, time_s=t, source=str(path),
                      length_unit=unit)


def _grid_points(shape, origin, spacing) -> np.ndarray:
    axes = [o + np.arange(n) * s for o, s, n in zip(origin, spacing, shape)]
    return np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1).reshape(-1, 3)


def _read_npz(path, length_unit) -> ModelField:
    try:
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except (ValueError, OSError) as err:
        raise InputError(f"{path} is not a readable .npz file ({err})",
                         "save it with numpy.savez") from None
    missing = [k for k in ("porosity", "origin", "spacing") if k not in arrays]
    if missing:
        raise InputError(f"{path}: arrays missing: {missing}; found {sorted(arrays)}",
                         "save porosity (nz, ny, nx), origin (z, y, x) and spacing (dz, dy, dx)")
    por = np.asarray(arrays["porosity"], dtype=np.float64)
    if por.ndim != 3:
        raise InputError(f"{path}: porosity must be 3-D (nz, ny, nx); got shape {por.shape}",
                         "save the grid as a (z, y, x) array")
    origin = np.asarray(arrays["origin"], dtype=np.float64).reshape(-1)
    spacing = np.asarray(arrays["spacing"], dtype=np.float64).reshape(-1)
    if origin.size != 3 or spacing.size != 3 or not (spacing > 0).all():
        raise InputError(f"{path}: origin and spacing must be 3 numbers (z, y, x), spacing > 0",
                         "save origin and spacing as length-3 arrays")
    declared = str(arrays["length_unit"]) if "length_unit" in arrays else None
    factor, unit = _unit_factor(declared, length_unit, path)
    domain = np.ones(por.shape, bool)
    if "domain" in arrays:
        domain = np.asarray(arrays["domain"], dtype=bool)
        if domain.shape != por.shape:
            raise InputError(f"{path}: domain has shape {domain.shape}, porosity {por.shape}",
                             "save a boolean domain of the same shape")
    pts = _grid_points(por.shape, origin * factor, spacing * factor)[domain.reshape(-1)]
    return ModelField(points_um=pts, porosity=por[domain], axisymmetric=False,
                      source=str(path), length_unit=unit)


def _read_ome(path, length_unit) -> ModelField:
    from ..io.stack_readers import read_stack

    scan = read_stack(path)
    if scan.spacing_source != "ome":
        raise InputError(f"{path}: no OME PhysicalSize in the file",
                         "write the field as OME-TIFF with its voxel size")
    if length_unit not in (None, "um"):
        raise InputError(f"{path}: OME-TIFF sizes are in µm, but --length-unit "
                         f"{length_unit!r} was given", "drop --length-unit or give um")
    por = np.asarray(scan.load(), dtype=np.float64)
    pts = _grid_points(por.shape, (0.0, 0.0, 0.0), scan.spacing_um)
    return ModelField(points_um=pts, porosity=por.reshape(-1), axisymmetric=False,
                      source=str(path), length_unit="um")


_VTK_TYPES = {"Float32": "<f4", "Float64": "<f8", "Int8": "<i1", "UInt8": "<u1",
              "Int16": "<i2", "UInt16": "<u2", "Int32": "<i4", "UInt32": "<u4",
              "Int64": "<i8", "UInt64": "<u8"}


def _read_vti(path, length_unit) -> ModelField:
    import xml.etree.ElementTree as ET

    try:
        root = ET.parse(path).getroot()
    except ET.ParseError as err:
        raise InputError(f"{path} is not a readable VTK XML file ({err})",
                         "export it again as VTK XML ImageData") from None
    if root.get("type") != "ImageData" or root.find("ImageData") is None:
        raise InputError(f"{path} is not VTK XML ImageData (type {root.get('type')!r})",
                         "export the field as ImageData (.vti) or UnstructuredGrid (.vtu)")
    if root.get("compressor"):
        raise InputError(f"{path}: compressed VTK data is not supported",
                         "export without compression (ascii or binary)")
    if root.get("byte_order", "LittleEndian") != "LittleEndian":
        raise InputError(f"{path}: big-endian VTK data is not supported",
                         "export with byte_order LittleEndian")
    header = np.dtype("<u8" if root.get("header_type") == "UInt64" else "<u4")
    image = root.find("ImageData")
    ext = [int(v) for v in image.get("WholeExtent", "").split()]
    if len(ext) != 6:
        raise InputError(f"{path}: ImageData has no WholeExtent", "export the file again")
    origin_xyz = [float(v) for v in image.get("Origin", "0 0 0").split()]
    spacing_xyz = [float(v) for v in image.get("Spacing", "1 1 1").split()]
    arrays = {a.get("Name"): a for a in image.iter("DataArray")
              if a.get("Name") is not None}
    if "porosity" not in arrays:
        raise InputError(f"{path}: no point data array 'porosity'; found {sorted(arrays)}",
                         "name the porosity point data 'porosity'")
    a = arrays["porosity"]
    values = _vtk_values(a, header, path)
    nx, ny, nz = ext[1] - ext[0] + 1, ext[3] - ext[2] + 1, ext[5] - ext[4] + 1
    if values.size != nx * ny * nz:
        raise InputError(f"{path}: porosity has {values.size} values for {nx}x{ny}x{nz} points",
                         "export point data (not cell data) named 'porosity'")
    factor, unit = _unit_factor(None, length_unit, path)
    # x varies fastest in VTK: C order (z, y, x). Extent offsets shift the first point.
    origin = [(o + e * s) * factor for o, e, s in zip(origin_xyz[::-1], ext[4::-2],
                                                       spacing_xyz[::-1])]
    spacing = [s * factor for s in spacing_xyz[::-1]]
    pts = _grid_points((nz, ny, nx), origin, spacing)
    return ModelField(points_um=pts, porosity=values.astype(np.float64), axisymmetric=False,
                      source=str(path), length_unit=unit)


def _vtk_values(a, header, path) -> np.ndarray:
    fmt = a.get("format", "ascii")
    dtype = _VTK_TYPES.get(a.get("type"))
    if dtype is None:
        raise InputError(f"{path}: VTK data type {a.get('type')!r} is not supported",
                         "store porosity as Float32 or Float64")
    text = (a.text or "").strip()
    if fmt == "ascii":
        return np.array(text.split(), dtype=np.float64)
    if fmt == "binary":
        raw = base64.b64decode(text)
        n = int(np.frombuffer(raw[:header.itemsize], header)[0])
        return np.frombuffer(raw[header.itemsize:header.itemsize + n], dtype).astype(np.float64)
    raise InputError(f"{path}: VTK data format {fmt!r} is not supported",
                     "export with ascii or binary (inline) data, not appended")


def _read_vtu(path, length_unit) -> ModelField:
    try:
        import meshio
    except ImportError:
        raise InputError("reading .vtu needs the meshio package",
                         "pip install meshio") from None
    try:
        mesh = meshio.read(path, file_format="vtu")
    except Exception as err:  # meshio raises many types on malformed files
        raise InputError(f"{path} is not a readable .vtu file ({err})",
                         "export it again as VTK XML UnstructuredGrid") from None
    if "porosity" not in mesh.point_data:
        raise InputError(f"{path}: no point data 'porosity'; found {sorted(mesh.point_data)}",
                         "name the porosity point data 'porosity'")
    factor, unit = _unit_factor(None, length_unit, path)
    xyz = np.asarray(mesh.points, dtype=np.float64)
    if xyz.shape[1] == 2:
        xyz = np.column_stack([xyz, np.zeros(len(xyz))])
    extra = {k: np.asarray(v, np.float64) for k, v in mesh.point_data.items()
             if k != "porosity" and np.asarray(v).ndim == 1}
    return ModelField(points_um=xyz[:, ::-1] * factor,
                      porosity=np.asarray(mesh.point_data["porosity"], np.float64).reshape(-1),
                      axisymmetric=False, extra=extra, source=str(path), length_unit=unit)
