"""Scans at known puffing times against a model's porosity over time: inputs and arithmetic.

A **manifest** CSV with the columns ``time_s,result`` lists the scans: one result folder of
``ctpore analyze`` per row (path relative to the manifest), at its puffing time in seconds.
The **model** gives porosity over time in one or both of two forms:

curve (``.csv`` with ``time_s, porosity`` and no coordinate columns)
    The model's mean porosity over the piece at each time.
fields at times
    A point table (``.csv`` with ``x, y, z`` or ``r, z``, ``porosity`` and a ``time_s`` column
    holding several times), or a field list (``.csv`` with ``time_s, field``: one field file
    per time, any format of :func:`ctpore.compare.fields.read_model_field`, paths relative to
    the list).

Interpolation in time is linear between the two bracketing model times; a scan time equal to a
model time (within 1e-9 relative) takes that time's values as they are ("exact"). Fields are
interpolated point by point, which needs the two fields to hold the same points: identical
positions (a fixed grid: only values are interpolated) or the same number of points in the same
order (a mesh that moves with the material: positions and values are interpolated node by
node). Otherwise the nearest model time is used only when asked for (``mode="nearest"``).

**No extrapolation**: a scan time outside the model's time range raises
:class:`~ctpore.errors.InputError` naming the time and the range. A model says nothing beyond
the times it was run for; holding its last value would be a guess.

When the model gives fields but no curve, the curve is the mean of each field over its domain
(:func:`field_mean_porosity`), linear between the field times.

References
----------
Linear interpolation between two samples: the two-point form of the line (any numerical
analysis text, e.g. Press et al., Numerical Recipes, 3rd ed., §3.1; from memory).
Pappus–Guldinus centroid theorem (a ring of cross-section A at radius r has volume 2π·r·A):
standard calculus.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from .fields import ModelField, read_model_field

__all__ = ["ScanTime", "ModelCurve", "FieldSeries", "TimeModel", "read_manifest",
           "read_model_curve", "read_time_model", "time_weights", "interpolate_curve",
           "field_at_time", "field_mean_porosity", "point_weights", "curve_from_fields",
           "scan_uncertainty", "EXTRAPOLATION_RULE", "TIME_RTOL"]

#: Two times are the same when they differ by at most this fraction (of max(1 s, |t|)).
TIME_RTOL = 1e-9
#: What happens outside the model's time range (written into the outputs).
EXTRAPOLATION_RULE = ("refused: every scan time must lie within the model's time range "
                      "(first to last model time); no value is extrapolated")
_COORDS = ({"x", "y", "z"}, {"r", "z"})


@dataclass(frozen=True)
class ScanTime:
    """One manifest row: a result folder scanned at a puffing time.

    Attributes
    ----------
    time_s : float
        Puffing time in s.
    result : Path
        The result folder (resolved against the manifest's folder).
    given : str
        The path as written in the manifest.
    row : int
        Line number in the manifest (the header is line 1).
    """

    time_s: float
    result: Path
    given: str
    row: int


@dataclass(frozen=True, eq=False)
class ModelCurve:
    """The model's mean porosity over the piece versus time (times strictly increasing).

    Attributes
    ----------
    time_s, porosity : ndarray (n,)
    source : str
        The file, or a note on how the curve was made.
    from_fields : bool
        True when the curve is the mean of the model's fields.
    """

    time_s: np.ndarray
    porosity: np.ndarray
    source: str
    from_fields: bool = False


@dataclass(eq=False)
class FieldSeries:
    """Model fields at several times, read lazily (one field per time, times increasing).

    Attributes
    ----------
    time_s : ndarray (m,)
    sources : list of str
        The file each time's field comes from.
    kind : str
        "point table" (one CSV with a time_s column) or "field list" (time_s,field CSV).
    source : str
        The table or list given.
    """

    time_s: np.ndarray
    sources: list
    kind: str
    source: str
    _load: object = None
    _cache: dict = field(default_factory=dict)

    def field(self, i: int) -> ModelField:
        """The field at ``time_s[i]`` (read once, then kept)."""
        if i not in self._cache:
            self._cache[i] = self._load(i)
        return self._cache[i]


@dataclass(frozen=True, eq=False)
class TimeModel:
    """What a time-series model file holds: a curve, fields at times, or both (via ``--curve``)."""

    curve: ModelCurve | None
    fields: FieldSeries | None
    source: str


# --- reading ----------------------------------------------------------------------------------

def _rows(path: Path, what: str):
    """Header (lower-case, stripped) and non-blank rows with their line numbers."""
    if not path.is_file():
        raise InputError(f"{what} {path} does not exist", "check the path and spelling")
    with open(path, newline="", encoding="utf-8-sig") as fh:
        raw = list(csv.reader(fh))
    numbered = [(k + 1, r) for k, r in enumerate(raw) if any(c.strip() for c in r)]
    if not numbered:
        raise InputError(f"{what} {path} is empty", "write a header row and one row per time")
    header = [h.strip().lower() for h in numbered[0][1]]
    body = numbered[1:]
    if not body:
        raise InputError(f"{what} {path} has a header but no rows", "add one row per time")
    return header, body


def _number(text, path, line, column):
    if not text.strip():
        raise InputError(f"{path}, line {line}: {column} is empty",
                         f"give every row a {column} in seconds")
    try:
        v = float(text)
    except ValueError:
        raise InputError(f"{path}, line {line}: {column} {text!r} is not a number",
                         f"write {column} as a number in seconds") from None
    if not math.isfinite(v):
        raise InputError(f"{path}, line {line}: {column} is {text.strip()}, not a finite "
                         "number", f"give every row a finite {column} in seconds")
    return v


def _no_duplicates(times, lines, path, fix):
    order = np.argsort(times, kind="stable")
    t = np.asarray(times, float)[order]
    for k in range(1, len(t)):
        if _same_time(t[k - 1], t[k]):
            a, b = lines[order[k - 1]], lines[order[k]]
            raise InputError(f"{path}: time_s {t[k]:g} appears twice (lines {a} and {b})", fix)
    return order


def _same_time(a, b) -> bool:
    return abs(a - b) <= TIME_RTOL * max(1.0, abs(a), abs(b))


def read_manifest(path) -> list[ScanTime]:
    """Read a time-series manifest: columns ``time_s`` and ``result``.

    Parameters
    ----------
    path : str or Path
        CSV file; ``result`` paths are relative to its folder (absolute paths are kept).

    Returns
    -------
    list of ScanTime
        Sorted by time.

    Raises
    ------
    InputError
        Naming the file (and line), for: a missing or empty file; a missing column; a time that
        is not a finite number (NaN, empty); a blank result; a result folder that does not
        exist; two rows at the same time.
    """
    path = Path(path)
    header, body = _rows(path, "manifest")
    missing = [c for c in ("time_s", "result") if c not in header]
    if missing:
        raise InputError(f"manifest {path}: column(s) {missing} missing; found {header}",
                         "write a header row 'time_s,result' (puffing time in s, result "
                         "folder of `ctpore analyze`)")
    it, ir = header.index("time_s"), header.index("result")
    scans = []
    for line, row in body:
        row = row + [""] * (len(header) - len(row))
        t = _number(row[it], path, line, "time_s")
        given = row[ir].strip()
        if not given:
            raise InputError(f"{path}, line {line}: the result column is empty",
                             "give the result folder of the scan at this time")
        folder = Path(given)
        folder = folder if folder.is_absolute() else path.parent / folder
        if not folder.is_dir():
            raise InputError(f"{path}, line {line}: result folder {given!r} does not exist "
                             f"(looked for {folder})",
                             "give the folder relative to the manifest, or run `ctpore "
                             "analyze` for this scan first")
        scans.append(ScanTime(time_s=t, result=folder, given=given, row=line))
    order = _no_duplicates([s.time_s for s in scans], [s.row for s in scans], path,
                           "keep one scan per time (average replicate pieces beforehand, or "
                           "compare them in separate manifests)")
    return [scans[k] for k in order]


def _curve_from_rows(path, header, body) -> ModelCurve:
    it, ip = header.index("time_s"), header.index("porosity")
    times, por, lines = [], [], []
    for line, row in body:
        row = row + [""] * (len(header) - len(row))
        times.append(_number(row[it], path, line, "time_s"))
        p = row[ip].strip()
        try:
            v = float(p)
        except ValueError:
            raise InputError(f"{path}, line {line}: porosity {p!r} is not a number",
                             "give porosity as a fraction in [0, 1]") from None
        if not (math.isfinite(v) and 0.0 <= v <= 1.0):
            raise InputError(f"{path}, line {line}: porosity {p or 'empty'} is not a fraction "
                             "in [0, 1]", "give porosity as a volume fraction (not per cent)")
        por.append(v)
        lines.append(line)
    order = _no_duplicates(times, lines, path, "give one porosity per time")
    return ModelCurve(time_s=np.asarray(times, float)[order],
                      porosity=np.asarray(por, float)[order], source=str(path))


def read_model_curve(path) -> ModelCurve:
    """Read a model curve: a CSV with columns ``time_s`` and ``porosity`` (mean over the piece).

    Raises
    ------
    InputError
        Naming the file and line: missing file or columns, a time or porosity that is not a
        finite number, porosity outside [0, 1], two rows at the same time.
    """
    path = Path(path)
    header, body = _rows(path, "model curve")
    missing = [c for c in ("time_s", "porosity") if c not in header]
    if missing:
        raise InputError(f"model curve {path}: column(s) {missing} missing; found {header}",
                         "write a header row 'time_s,porosity'")
    return _curve_from_rows(path, header, body)


def read_time_model(path, *, length_unit: str | None = None) -> TimeModel:
    """Read a model over time, telling its form from the CSV header.

    * ``time_s, porosity`` and no coordinates: a curve;
    * coordinates (``x, y, z`` or ``r, z``), ``porosity`` and ``time_s``: a point table of
      fields at its times (each read with :func:`read_model_field`);
    * ``time_s, field``: a field list, one field file per time (relative to the list).

    Parameters
    ----------
    path : str or Path
        The CSV file.
    length_unit : {"m", "mm", "um"}, optional
        Unit of the fields' lengths (as for :func:`read_model_field`).

    Raises
    ------
    InputError
        For a file that is not a CSV, a header of none of the three forms, or bad rows (naming
        the file, line and fix).
    """
    path = Path(path)
    if path.suffix.lower() != ".csv":
        raise InputError(f"model {path}: a single field file has no time axis",
                         "list the fields at their times in a CSV 'time_s,field', or give a "
                         "curve CSV 'time_s,porosity', or a point table with a time_s column")
    header, body = _rows(path, "model")
    cols = set(header)
    if "time_s" not in cols:
        raise InputError(f"model {path}: no time_s column; found {header}",
                         "add the simulated time in seconds as a column time_s")
    if "field" in cols:
        return TimeModel(curve=None, fields=_field_list(path, header, body, length_unit),
                         source=str(path))
    if "porosity" in cols and any(c <= cols for c in _COORDS):
        return TimeModel(curve=None, fields=_point_table(path, header, body, length_unit),
                         source=str(path))
    if "porosity" in cols:
        return TimeModel(curve=_curve_from_rows(path, header, body), fields=None,
                         source=str(path))
    raise InputError(f"model {path}: columns {header} are none of the time-series forms",
                     "give 'time_s,porosity' (a curve), a point table with x,y,z or r,z, "
                     "porosity and time_s, or 'time_s,field' (a list of field files)")


def _point_table(path, header, body, length_unit) -> FieldSeries:
    it = header.index("time_s")
    times = np.array([_number(r[it] if it < len(r) else "", path, line,
                              "time_s") for line, r in body])
    unique = np.unique(times)
    keep = [unique[0]]
    for t in unique[1:]:
        if not _same_time(keep[-1], t):
            keep.append(t)
    t_all = np.asarray(keep)

    def load(i):
        return read_model_field(path, length_unit=length_unit, time_s=float(t_all[i]))

    return FieldSeries(time_s=t_all, sources=[str(path)] * len(t_all), kind="point table",
                       source=str(path), _load=load)


def _field_list(path, header, body, length_unit) -> FieldSeries:
    it, i_f = header.index("time_s"), header.index("field")
    times, files, lines = [], [], []
    for line, row in body:
        row = row + [""] * (len(header) - len(row))
        times.append(_number(row[it], path, line, "time_s"))
        given = row[i_f].strip()
        f = Path(given)
        f = f if f.is_absolute() else path.parent / f
        if not given or not f.is_file():
            raise InputError(f"{path}, line {line}: field file {given!r} does not exist "
                             f"(looked for {f})", "give the field file relative to the list")
        files.append(f)
        lines.append(line)
    order = _no_duplicates(times, lines, path, "give one field per time")
    t_all = np.asarray(times, float)[order]
    f_all = [files[k] for k in order]

    def load(i):
        f = read_model_field(f_all[i], length_unit=length_unit)
        if f.time_s is not None and not _same_time(f.time_s, t_all[i]):
            raise InputError(f"{f_all[i]} holds time_s {f.time_s:g} but {path} lists it at "
                             f"{t_all[i]:g} s", "make the list and the file agree")
        return f

    return FieldSeries(time_s=t_all, sources=[str(f) for f in f_all], kind="field list",
                       source=str(path), _load=load)


# --- time interpolation -----------------------------------------------------------------------

def time_weights(times_s, t: float, *, what: str = "model") -> tuple[int, int, float, str]:
    """Bracketing indices and the weight of the later one for linear interpolation at ``t``.

    Parameters
    ----------
    times_s : array-like (n,)
        Strictly increasing model times.
    t : float
        The time wanted.
    what : str
        Names the model in the error message.

    Returns
    -------
    i0, i1 : int
        Indices of the model times before and after ``t`` (equal when ``t`` is a model time).
    w : float
        Weight of ``i1``: value = (1 − w)·v[i0] + w·v[i1].
    how : {"exact", "interpolated"}

    Raises
    ------
    InputError
        When ``t`` lies outside [times[0], times[-1]] (no extrapolation).

    Examples
    --------
    >>> time_weights([0.0, 3.0, 6.0], 4.0)
    (1, 2, 0.3333333333333333, 'interpolated')
    """
    ts = np.asarray(times_s, dtype=np.float64)
    t = float(t)
    k = int(np.argmin(np.abs(ts - t)))
    if _same_time(ts[k], t):
        return k, k, 0.0, "exact"
    if t < ts[0] or t > ts[-1]:
        raise InputError(f"{what}: the scan time {t:g} s lies outside the model's time range "
                         f"{ts[0]:g}–{ts[-1]:g} s, and ctpore does not extrapolate",
                         "run the model over every scan time, or drop that scan from the "
                         "manifest")
    i1 = int(np.searchsorted(ts, t))
    i0 = i1 - 1
    return i0, i1, float((t - ts[i0]) / (ts[i1] - ts[i0])), "interpolated"


def interpolate_curve(curve: ModelCurve, times_s) -> dict:
    """The model curve at the scan times, linear in time, with what was interpolated.

    Returns
    -------
    dict of ndarray (k,)
        ``porosity``, ``how`` ("exact" or "interpolated"), ``time_before_s``,
        ``time_after_s`` (the model times used; equal for exact values).

    Raises
    ------
    InputError
        When a time lies outside the curve's range.
    """
    out = {"porosity": [], "how": [], "time_before_s": [], "time_after_s": []}
    for t in np.asarray(times_s, float).reshape(-1):
        i0, i1, w, how = time_weights(curve.time_s, t, what=f"model curve {curve.source}")
        out["porosity"].append((1.0 - w) * curve.porosity[i0] + w * curve.porosity[i1])
        out["how"].append(how)
        out["time_before_s"].append(float(curve.time_s[i0]))
        out["time_after_s"].append(float(curve.time_s[i1]))
    return {k: np.asarray(v) for k, v in out.items()}


def field_at_time(series: FieldSeries, t: float, *, mode: str = "interpolate"
                  ) -> tuple[ModelField, dict]:
    """The model field at time ``t``: exact, linear between bracketing times, or nearest.

    Parameters
    ----------
    series : FieldSeries
    t : float
        The scan time, s.
    mode : {"interpolate", "nearest"}
        "interpolate": linear between the two bracketing fields, point by point (see module
        notes); "nearest": the field at the nearest model time (the earlier one on a tie).

    Returns
    -------
    ModelField, dict
        The field (its ``time_s`` the model time used, or ``t`` when interpolated) and a
        note: ``how`` ("exact", "interpolated" or "nearest"), ``model_times_s`` (the model
        times used), ``weights``, ``interpolation`` ("values on identical points",
        "positions and values node by node" or None), ``sources``.

    Raises
    ------
    InputError
        Outside the model's time range; for interpolation between fields that hold different
        points (naming both times and the fix).
    """
    if mode not in ("interpolate", "nearest"):
        raise InputError(f"field time mode {mode!r} is not 'interpolate' or 'nearest'",
                         "choose interpolate or nearest")
    i0, i1, w, how = time_weights(series.time_s, t, what=f"model fields {series.source}")
    ts = series.time_s
    if how == "exact" or mode == "nearest":
        k = i0 if how == "exact" or w <= 0.5 else i1
        f = series.field(k)
        note = {"how": how if how == "exact" else "nearest", "model_times_s": [float(ts[k])],
                "weights": [1.0], "interpolation": None, "sources": [series.sources[k]]}
        return _with_time(f, ts[k]), note
    f0, f1 = series.field(i0), series.field(i1)
    if f0.axisymmetric != f1.axisymmetric or f0.n_points != f1.n_points:
        raise InputError(f"model fields {series.source}: the fields at {ts[i0]:g} s and "
                         f"{ts[i1]:g} s hold {f0.n_points} and {f1.n_points} points, so they "
                         f"cannot be interpolated point by point to {t:g} s",
                         "write every time on one grid (or one moving mesh with the same "
                         "nodes in the same order), or use --field-time nearest")
    scale = float(np.ptp(f0.points_um)) or 1.0
    same = np.allclose(f0.points_um, f1.points_um, rtol=0.0, atol=1e-9 * scale)
    pts = f0.points_um if same else (1.0 - w) * f0.points_um + w * f1.points_um
    extra = {k: (1.0 - w) * f0.extra[k] + w * f1.extra[k] for k in f0.extra if k in f1.extra}
    source = f"{f0.source} @ {ts[i0]:g} s and {f1.source} @ {ts[i1]:g} s, linear in time"
    f = ModelField(points_um=pts, porosity=(1.0 - w) * f0.porosity + w * f1.porosity,
                   axisymmetric=f0.axisymmetric, extra=extra, time_s=float(t), source=source,
                   length_unit=f0.length_unit)
    note = {"how": "interpolated", "model_times_s": [float(ts[i0]), float(ts[i1])],
            "weights": [1.0 - w, w],
            "interpolation": "values on identical points" if same
            else "positions and values node by node",
            "sources": [series.sources[i0], series.sources[i1]]}
    return f, note


def _with_time(f: ModelField, t) -> ModelField:
    return ModelField(points_um=f.points_um, porosity=f.porosity, axisymmetric=f.axisymmetric,
                      extra=f.extra, time_s=float(t), source=f.source, length_unit=f.length_unit)


# --- means over the piece ---------------------------------------------------------------------

def point_weights(field_: ModelField, *, subdivide: int = 4) -> np.ndarray:
    """Volume each point stands for, up to a common factor.

    3-D fields: equal weights (exact for regular grids; for irregular meshes an approximation,
    as a mesh's node volumes are not in the file). (r, z) fields: the ring volume ``2π·r·A`` of
    each point's cell (Pappus–Guldinus). The cell A is found on a raster of the (r, z) plane
    (r ≥ 0): with the typical steps h_r and h_z of the points (the medians, over the points, of
    the smallest offset to a neighbour lying mainly along r, resp. z), each raster cell
    (``subdivide`` per step and axis) goes to its nearest point in the maximum norm of
    (r/h_r, z/h_z), within half a step. On a regular grid this is exactly the grid's own cells
    (weights ∝ r); on a mesh of varying spacing, cells larger than the typical step are cut to
    it (an approximation).

    Returns
    -------
    ndarray (n,)
        Weights summing to 1.
    """
    n = field_.n_points
    if not field_.axisymmetric or n < 2:
        return np.full(n, 1.0 / n)
    from scipy.spatial import cKDTree

    pts = np.asarray(field_.points_um, float)
    steps = _axis_steps(pts)
    unit = pts / steps
    tree = cKDTree(unit)
    lo = np.maximum(unit.min(axis=0) - 0.5, [0.0, -np.inf])
    hi = unit.max(axis=0) + 0.5
    axes = [lo[k] + (np.arange(int(math.ceil((hi[k] - lo[k]) * subdivide - 1e-9))) + 0.5)
            / subdivide for k in range(2)]
    rr, zz = np.meshgrid(*axes, indexing="ij")
    d, idx = tree.query(np.column_stack([rr.ravel(), zz.ravel()]), k=1, p=np.inf,
                        distance_upper_bound=0.5 * (1 + 1e-9))
    ok = np.isfinite(d)
    w = np.bincount(idx[ok], weights=rr.ravel()[ok], minlength=n)
    if w.sum() <= 0:
        return np.full(n, 1.0 / n)
    return w / w.sum()


def _axis_steps(pts: np.ndarray, k: int = 9) -> np.ndarray:
    """Typical step along each axis: per point, the smallest offset to one of its k nearest
    neighbours that lies mainly along that axis (|component| > 0.7 of the distance), then the
    median over the points."""
    from scipy.spatial import cKDTree

    k = min(k, len(pts))
    dist, idx = cKDTree(pts).query(pts, k=k)
    off = np.abs(pts[idx[:, 1:]] - pts[:, None, :])       # (n, k-1, 2)
    dist = dist[:, 1:, None]
    steps = []
    for axis in range(pts.shape[1]):
        along = np.where((off[..., axis:axis + 1] > 0.7 * dist) & (dist > 0),
                         off[..., axis:axis + 1], np.inf)[..., 0].min(axis=1)
        ok = np.isfinite(along)
        steps.append(float(np.median(along[ok])) if ok.any() else np.nan)
    steps = np.asarray(steps)
    fallback = float(np.median(dist[dist > 0])) if (dist > 0).any() else 1.0
    return np.where(np.isfinite(steps) & (steps > 0), steps, fallback)


def field_mean_porosity(field_: ModelField) -> float:
    """Mean porosity over the model's domain, weighted by :func:`point_weights`."""
    return float(np.sum(point_weights(field_) * field_.porosity))


def curve_from_fields(series: FieldSeries) -> ModelCurve:
    """The model curve made from its fields: :func:`field_mean_porosity` at every field time."""
    means = [field_mean_porosity(series.field(i)) for i in range(len(series.time_s))]
    return ModelCurve(time_s=np.asarray(series.time_s, float), porosity=np.asarray(means),
                      source=f"mean of the fields of {series.source} over their domain "
                             "(3-D: points equally weighted; r-z: ring volumes)",
                      from_fields=True)


# --- the scan side ----------------------------------------------------------------------------

def scan_uncertainty(porosity_gas: float, *, envelope_volume_mm3: float,
                     A3_um3: float | None = None, porosity_low: float | None = None,
                     porosity_high: float | None = None) -> dict:
    """Standard uncertainty of a piece's mean gas porosity, for comparing it with a model.

    Two parts, combined in quadrature (GUM, JCGM 100:2008, §5.1.2, uncorrelated inputs):

    * sampling: ``σ_s² = p(1 − p)·A3 / V`` for the piece's envelope volume V and the integral
      range A3 of its porosity (Kanit et al. 2003, doi:10.1016/S0020-7683(03)00143-4): how far
      another piece of the same process would read;
    * segmentation: the threshold band [low, high] (porosity at threshold ∓ delta) taken as a
      rectangular distribution of half-width a = (high − low)/2, standard uncertainty
      ``a/√3`` (GUM §4.3.7).

    Parameters
    ----------
    porosity_gas : float
        The piece's gas porosity.
    envelope_volume_mm3 : float
        Its envelope volume.
    A3_um3 : float, optional
        Integral range; without it the sampling part is NaN and left out.
    porosity_low, porosity_high : float, optional
        The threshold band; without it the segmentation part is left out.

    Returns
    -------
    dict
        ``sigma_sampling``, ``sigma_segmentation``, ``uncertainty`` (combined; NaN when both
        parts are missing).
    """
    p = float(porosity_gas)
    sig_s = float("nan")
    if A3_um3 is not None and envelope_volume_mm3 and envelope_volume_mm3 > 0:
        sig_s = math.sqrt(max(p * (1.0 - p), 0.0) * float(A3_um3)
                          / (float(envelope_volume_mm3) * 1e9))
    sig_t = float("nan")
    if porosity_low is not None and porosity_high is not None:
        sig_t = abs(float(porosity_high) - float(porosity_low)) / 2.0 / math.sqrt(3.0)
    parts = [v for v in (sig_s, sig_t) if math.isfinite(v)]
    u = math.sqrt(sum(v * v for v in parts)) if parts else float("nan")
    return {"sigma_sampling": sig_s, "sigma_segmentation": sig_t, "uncertainty": u}
