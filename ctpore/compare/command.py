"""``ctpore compare``: a simulated porosity field against the scanned piece, once or over time.

Single form, ``ctpore compare RESULT FIELD``: the scan is coarse-grained with the chosen kernel
(:func:`ctpore.continuum.coarse.coarsen`) at the model's points after alignment; the point
metrics and the shape metrics of :mod:`ctpore.compare.metrics` are written to
``RESULT/compare_<field name>/``: ``comparison.json``, ``difference.csv`` and the figures of
:mod:`ctpore.report.compare_plots` (``maps.png``, ``parity.png``, ``difference.png``,
``profiles.png``).

Time-series form, ``ctpore compare MANIFEST.csv MODEL``: chosen when the first argument is a
``.csv`` file (a result folder is a folder); see :mod:`ctpore.compare.time_command`.

The model's domain on the scan grid (for the shape metrics) is the set of voxel centres within
``0.5·√d·h`` of a model point (``h`` the median nearest-neighbour distance of the model's
points, d = 3, or 2 for (r, z) models, which are revolved about the scan's long axis): for a
regular grid this is the union of the grid's cells, for a mesh its nodes' neighbourhoods.
"""

from __future__ import annotations

import math
import sys
import warnings
from pathlib import Path

import numpy as np

from ..errors import InputError
from .fields import UNIT_CHOICES, ModelField, read_model_field

__all__ = ["add_compare_parser", "run_compare", "compare_field", "model_domain_mask",
           "is_time_series", "rev_for", "kernel_for", "transform_for", "comparison_report",
           "write_comparison"]

_COMPARISON_KEYS = ("rmse", "mae", "bias", "pearson_r", "coverage", "share_within_band",
                    "n_points")


def add_compare_parser(subparsers):
    """Add the ``compare`` sub-command to an argparse sub-parser collection."""
    c = subparsers.add_parser(
        "compare", help="compare a simulated porosity field with the scanned piece of a result "
        "folder, or a model's porosity over time with scans at known puffing times",
        description="Single form: ctpore compare RESULT FIELD writes RESULT/compare_<field>/. "
        "Time-series form, chosen when the first argument is a .csv file: ctpore compare "
        "MANIFEST.csv MODEL, where the manifest has the columns time_s,result (puffing time in "
        "s, result folder relative to the manifest) and MODEL is a curve CSV (time_s,porosity: "
        "mean over the piece), a point table with a time_s column, or a field list CSV "
        "(time_s,field). Model values are interpolated linearly in time between the two "
        "bracketing model times (and marked so in the outputs); scan times outside the "
        "model's time range are refused, never extrapolated. Output: "
        "compare_over_time_<model>/ beside the manifest, or --out.")
    c.add_argument("result", metavar="RESULT|MANIFEST", help="result folder of `ctpore "
                   "analyze`, or a time-series manifest .csv (columns time_s,result)")
    c.add_argument("field", metavar="FIELD|MODEL", help="model field: .csv point table (x,y,z "
                   "or r,z + porosity), .npz grid, .ome.tif, .vti or .vtu; with a manifest: a "
                   "curve time_s,porosity, a point table with time_s, or a list time_s,field")
    c.add_argument("--length-unit", choices=UNIT_CHOICES, help="unit of the field's lengths "
                   "(required unless the file declares it)")
    c.add_argument("--kernel", choices=("box", "ball", "gaussian"),
                   help="kernel shape for the scan (default: the recipe's coarsen.kernel)")
    c.add_argument("--width", metavar="W", default="auto", help="kernel width with unit, e.g. "
                   "400um, or 'auto' for the REV recommendation (default)")
    c.add_argument("--align", choices=("principal", "none"), default="principal",
                   help="principal: centroids and principal axes (default); none: the field is "
                   "already in the scan frame, or use --rotation/--translation-um/--scale")
    c.add_argument("--rotation", metavar="R", help="with --align none: 9 numbers, row by row, "
                   "acting on (z, y, x)")
    c.add_argument("--translation-um", metavar="T", help="with --align none: z,y,x in µm")
    c.add_argument("--scale", type=float, default=1.0, help="with --align none: scale factor")
    c.add_argument("--z-origin", choices=("first_tip", "centroid"), default="first_tip",
                   help="(r, z) models: where z = 0 lies on the scan's long axis")
    c.add_argument("--time", type=float, metavar="S", help="single form: time (s) to compare "
                   "when the table holds several")
    c.add_argument("--curve", metavar="CSV", help="time-series form: the model's curve "
                   "time_s,porosity (mean over the piece) when MODEL gives fields; without it "
                   "the curve is the mean of the fields")
    c.add_argument("--field-time", choices=("interpolate", "nearest"), default="interpolate",
                   help="time-series form: fields at a scan time between two model times are "
                   "interpolated linearly point by point (default; needs the same points at "
                   "both times) or taken from the nearest model time")
    c.add_argument("--out", metavar="DIR", help="time-series form: output folder (default "
                   "compare_over_time_<model name>/ beside the manifest)")
    c.add_argument("--force", action="store_true", help="replace an existing compare folder")
    c.add_argument("--quiet", action="store_true", help="no progress lines")
    return c


def is_time_series(args) -> bool:
    """True when the first argument is a manifest (a .csv file), not a result folder."""
    p = Path(args.result)
    return p.suffix.lower() == ".csv" and not p.is_dir()


def rev_for(result, recipe, *, quiet: bool = False) -> dict:
    """The REV figures of a result: from its rev/rev.json, else computed now (not saved).

    Returns ``{"A3_um3", "source", "widths": {"box", "gaussian", "ball"}}``.
    """
    import json

    path = result.path / "rev" / "rev.json"
    if path.is_file():
        data = json.loads(path.read_text(encoding="utf-8"))
        source = f"read from {path}"
    else:
        from ..continuum.rev import rev_study

        if not quiet:
            print(f"{result.path}: no rev/ study yet; running it (write it with `ctpore rev`)",
                  file=sys.stderr)
        s = rev_study(result.phases, spacing_um=result.spacing_um, section=recipe.rev)
        data = {"integral_range_um3": s.integral_range_um3,
                "recommended_width_um": s.recommended_width_um,
                "recommended_gaussian_sigma_um": s.recommended_gaussian_sigma_um,
                "recommended_ball_diameter_um": s.recommended_ball_diameter_um}
        source = "computed for this run"
    return {"A3_um3": data["integral_range_um3"], "source": source,
            "widths": {"box": data["recommended_width_um"],
                       "gaussian": data["recommended_gaussian_sigma_um"],
                       "ball": data["recommended_ball_diameter_um"]}}


def kernel_for(result, args, *, quiet: bool = False) -> dict:
    """Kernel of a comparison from ``--kernel``/``--width`` and the result's recipe and REV.

    The REV study is always taken (from ``rev/rev.json`` or run now): its integral range
    gives the scan's sampling uncertainty, and with ``--width auto`` the width.

    Returns ``{"kernel", "shape", "width_um", "width_source", "rev"}``.
    """
    from ..continuum.kernels import Kernel
    from ..result_commands import parse_length_um

    recipe = result.recipe
    shape = args.kernel or recipe.coarsen.kernel
    width_text = (args.width or "auto").strip().lower()
    rev = rev_for(result, recipe, quiet=quiet)
    if width_text == "auto":
        width, width_source = float(rev["widths"][shape]), "REV study"
    else:
        width, width_source = parse_length_um(args.width), "command line"
    kernel = Kernel(shape, width, truncate_sigma=recipe.coarsen.truncate_sigma)
    return {"kernel": kernel, "shape": shape, "width_um": width, "width_source": width_source,
            "rev": rev}


def transform_for(args):
    """The explicit transform of ``--align none`` (None for principal alignment)."""
    from .align import explicit_transform

    if args.align != "none":
        return None
    return explicit_transform(
        rotation=None if args.rotation is None else _numbers(args.rotation, 9, "--rotation"),
        translation_um=None if args.translation_um is None
        else _numbers(args.translation_um, 3, "--translation-um"), scale=args.scale)


def _numbers(text, n, name):
    try:
        values = [float(v) for v in str(text).replace(";", ",").replace(" ", ",").split(",") if v]
    except ValueError:
        raise InputError(f"{name} {text!r} is not a list of numbers", f"give {n} numbers") \
            from None
    if len(values) != n:
        raise InputError(f"{name} needs {n} numbers; got {len(values)}", f"give {n} numbers")
    return values


def _scan_sampler(phases, spacing, kernel, min_coverage):
    """Normalised average of the scan at arbitrary points, from one convolution."""
    from scipy import ndimage

    from ..continuum.coarse import coarsen

    full = coarsen(phases, spacing_um=spacing, kernel=kernel, min_coverage=0.0)
    den = full.coverage
    num = np.nan_to_num(full.porosity) * den

    def sampler(points_um):
        idx = (np.asarray(points_um, float) / np.asarray(spacing)).T
        n = ndimage.map_coordinates(num, idx, order=1, mode="grid-constant", cval=0.0,
                                    prefilter=False)
        d = ndimage.map_coordinates(den, idx, order=1, mode="grid-constant", cval=0.0,
                                    prefilter=False)
        with np.errstate(invalid="ignore", divide="ignore"):
            p = np.clip(n / d, 0.0, 1.0)
        p[~(d > 0) | (d < min_coverage)] = np.nan
        return p

    return sampler


def model_domain_mask(model: ModelField, transform, frame, *, shape, spacing_um,
                      z_origin="first_tip") -> np.ndarray:
    """Boolean mask of scan voxels inside the aligned model's domain (see module notes)."""
    from scipy.spatial import cKDTree

    from ..piece_frame import to_frame

    spacing = np.asarray(spacing_um, float)
    pts = model.points_um
    if model.axisymmetric:
        a0 = float(frame.extents_um[0, 0]) if z_origin == "first_tip" else 0.0
        pts = np.column_stack([pts[:, 0], pts[:, 1] + a0])  # (r, a)
    else:
        pts = transform.apply(pts)
    tree = cKDTree(pts)
    sample = pts[:: max(1, len(pts) // 5000)]
    nn = tree.query(sample, k=2)[0][:, 1]
    h = float(np.median(nn[nn > 0])) if (nn > 0).any() else float(spacing.min())
    reach = 0.5 * math.sqrt(pts.shape[1]) * h * (1 + 1e-9)
    mask = np.zeros(shape, bool)
    # only the model's bounding box (plus its reach) is searched; for (r, z) models the box of
    # the cylinder r <= max r + reach between the end discs (axis e: half-width R·sqrt(1 - e_k²))
    if model.axisymmetric:
        e = np.asarray(frame.axes[0], float)
        c = np.asarray(frame.centroid_um, float)
        ends = c + np.outer([pts[:, 1].min() - reach, pts[:, 1].max() + reach], e)
        half = (pts[:, 0].max() + reach) * np.sqrt(np.clip(1.0 - e * e, 0.0, None))
        p_lo, p_hi = ends.min(axis=0) - half, ends.max(axis=0) + half
    else:
        p_lo, p_hi = pts.min(axis=0) - reach, pts.max(axis=0) + reach
    lo = np.floor(p_lo / spacing).astype(int)
    hi = np.ceil(p_hi / spacing).astype(int) + 1
    box = [(max(0, a), min(n, b)) for a, b, n in zip(lo, hi, shape)]
    if any(a >= b for a, b in box):
        return mask
    coords = [np.arange(a, b) * s for (a, b), s in zip(box, spacing)]
    yy, xx = np.meshgrid(coords[1], coords[2], indexing="ij")
    for k, z in enumerate(range(*box[0])):
        p = np.stack([np.full(yy.shape, coords[0][k]), yy, xx], axis=-1).reshape(-1, 3)
        if model.axisymmetric:
            a, r, _ = to_frame(frame, p)
            p = np.column_stack([r, a])
        d = tree.query(p, k=1, distance_upper_bound=reach)[0]
        mask[z, box[1][0]:box[1][1], box[2][0]:box[2][1]] = np.isfinite(d).reshape(yy.shape)
    return mask


def compare_field(phases, model: ModelField, *, spacing_um, kernel, min_coverage: float = 0.5,
                  A3_um3: float | None = None, align: str = "principal", transform=None,
                  z_origin: str = "first_tip", n_azimuths: int = 16,
                  shape_metrics: bool = True) -> dict:
    """Compare a model porosity field with a labelled scan.

    Parameters
    ----------
    phases : ndarray of int (nz, ny, nx)
        Scan labels: 0 exterior, 1 pore, 2 solid.
    model : ModelField
        The simulated field (:func:`ctpore.compare.fields.read_model_field`).
    spacing_um : float or sequence of 3 floats
        Scan voxel size in µm.
    kernel : ctpore.continuum.kernels.Kernel
        Kernel the scan is averaged with.
    min_coverage : float
        Scan values whose kernel holds less piece volume than this are not valid.
    A3_um3 : float, optional
        Integral range of the scan's porosity; gives the sampling uncertainty ``sigma``.
    align : {"principal", "none"}
        Principal-axes alignment, or ``transform`` (identity when None). Ignored for (r, z)
        models, which are placed on the scan's long axis (:func:`ring_points`).
    transform : Transform, optional
        Explicit transform for ``align="none"``.
    z_origin : {"first_tip", "centroid"}
        (r, z) models: where z = 0 lies on the long axis.
    n_azimuths : int
        (r, z) models: points per ring of the azimuthal average.
    shape_metrics : bool
        Also compute Dice, volume ratio and surface distances of the model's domain against the
        scan envelope.

    Returns
    -------
    dict
        ``metrics`` (:func:`~ctpore.compare.metrics.point_metrics`), ``shape`` (or None),
        ``transform`` (Transform), ``alignment`` (notes), ``points_scan_um`` (n, 3) or rings'
        axis points, ``model``, ``scan``, ``sigma`` (n,), ``axial_um`` (n,) position along the
        long axis from the first tip.

    Raises
    ------
    InputError
        On bad inputs, or when no model point falls on the piece (no overlap).
    """
    from ..continuum.coarse import coarsen
    from ..piece_frame import piece_frame, to_frame
    from ..spacing import as_spacing_um
    from . import align as al
    from .metrics import point_metrics
    from .metrics import shape_metrics as shape_fn

    spacing = as_spacing_um(spacing_um)
    phases = np.asarray(phases)
    frame = piece_frame(phases != 0, spacing_um=spacing)
    notes = {}
    if model.axisymmetric:
        rings = al.ring_points(model.points_um, frame, n_azimuths=n_azimuths, z_origin=z_origin)
        flat = rings.reshape(-1, 3)
        f = coarsen(phases, spacing_um=spacing, kernel=kernel, min_coverage=min_coverage,
                    grid=flat, A3_um3=A3_um3)
        por = f.porosity.reshape(rings.shape[:2]).astype(np.float64)
        with warnings.catch_warnings():  # rings wholly off the piece: all-NaN means
            warnings.simplefilter("ignore", RuntimeWarning)
            scan = np.nanmean(por, axis=1)
            sigma = None
            if f.sigma is not None:
                # the ring mean's SD, taking the ring's values as fully correlated (an upper
                # bound: common practice, no source)
                sigma = np.nanmean(f.sigma.reshape(rings.shape[:2]).astype(float), axis=1)
        transform = al.Transform(rotation=np.asarray(frame.axes).T.copy(),
                                 translation_um=np.asarray(frame.centroid_um, float),
                                 method="axisymmetric")
        points = rings[:, 0, :]
        a0 = float(frame.extents_um[0, 0]) if z_origin == "first_tip" else 0.0
        notes = {"z_origin": z_origin, "n_azimuths": n_azimuths,
                 "axis_first_tip_um": float(frame.extents_um[0, 0])}
        axial = model.points_um[:, 1] + a0 - float(frame.extents_um[0, 0])
    else:
        if align == "principal":
            sampler = _scan_sampler(phases, spacing, kernel, min_coverage)
            transform, notes = al.principal_transform(model.points_um, frame,
                                                      porosity=model.porosity, sampler=sampler)
        elif align == "none":
            transform = transform if transform is not None else al.explicit_transform()
        else:
            raise InputError(f"align {align!r} is not 'principal' or 'none'",
                             "choose principal or none")
        points = transform.apply(model.points_um)
        f = coarsen(phases, spacing_um=spacing, kernel=kernel, min_coverage=min_coverage,
                    grid=points, A3_um3=A3_um3)
        scan = f.porosity.astype(np.float64)
        sigma = None if f.sigma is None else f.sigma.astype(np.float64)
        axial = to_frame(frame, points)[0] - float(frame.extents_um[0, 0])
    metrics = point_metrics(model.porosity, scan, sigma=sigma)
    shape = None
    if shape_metrics:
        mask = model_domain_mask(model, transform, frame, shape=phases.shape, spacing_um=spacing,
                                 z_origin=z_origin)
        shape = shape_fn(mask, phases != 0, spacing_um=spacing)
    return {"metrics": metrics, "shape": shape, "transform": transform, "alignment": notes,
            "points_scan_um": points, "model": np.asarray(model.porosity, float), "scan": scan,
            "sigma": sigma, "axial_um": axial, "frame": frame}


def _field_name(path: Path) -> str:
    name = path.name
    for suffix in (".ome.tiff", ".ome.tif", ".csv", ".npz", ".vti", ".vtu"):
        if name.lower().endswith(suffix):
            return name[: -len(suffix)]
    return path.stem


def run_compare(args) -> int:
    """Run ``ctpore compare``; returns the exit status (0). Raises InputError on bad input.

    A first argument that is a ``.csv`` file selects the time-series form
    (:func:`ctpore.compare.time_command.run_compare_over_time`).
    """
    from ..io.result_folder import check_destination, result_folder
    from ..io.result_reader import open_result

    if is_time_series(args):
        from .time_command import run_compare_over_time

        return run_compare_over_time(args)
    for flag, value in (("--curve", getattr(args, "curve", None)),
                        ("--out", getattr(args, "out", None))):
        if value is not None:
            raise InputError(f"{flag} belongs to the time-series form (a manifest .csv as the "
                             f"first argument); {args.result} is a result folder",
                             f"drop {flag}, or give a manifest with columns time_s,result")
    quiet = getattr(args, "quiet", False)
    result = open_result(args.result)
    recipe = result.recipe
    field_path = Path(args.field)
    model = read_model_field(field_path, length_unit=args.length_unit, time_s=args.time)
    target = result.path / f"compare_{_field_name(field_path)}"
    check_destination(target, force=args.force)
    k = kernel_for(result, args, quiet=quiet)
    rev = k["rev"]
    out = compare_field(result.phases, model, spacing_um=result.spacing_um, kernel=k["kernel"],
                        min_coverage=recipe.coarsen.min_coverage,
                        A3_um3=rev["A3_um3"], align=args.align,
                        transform=transform_for(args), z_origin=args.z_origin)
    report = comparison_report(out, model, k, min_coverage=recipe.coarsen.min_coverage,
                               field_source=str(field_path))
    with result_folder(target, force=args.force) as tmp:
        write_comparison(tmp, out, model, report, result.phases, spacing_um=result.spacing_um,
                         kernel=k["kernel"], min_coverage=recipe.coarsen.min_coverage)
        from ..report.html import write_report

        write_report(tmp, name=target.name)
    # the result's own report is a view of its folder: re-made so it shows this comparison
    write_report(result.path, force=True)
    m = out["metrics"]
    if not quiet:
        print(f"{result.path}: {field_path.name}: RMSE {m['rmse']:.4f}, bias {m['bias']:+.4f}, "
              f"r {m['pearson_r']:.3f}, coverage {m['coverage']:.3f} ({k['kernel'].name}) -> "
              f"{target}")
    if m["coverage"] < 0.5:
        print(f"{result.path}: warning: only {m['coverage']:.0%} of the model's points fall on "
              "the piece; check --length-unit and the alignment", file=sys.stderr)
    return 0


def comparison_report(out, model, k, *, min_coverage, field_source) -> dict:
    """The comparison.json content of one comparison (stable keys, units in names)."""
    rev = k["rev"]
    report = {key: out["metrics"][key] for key in _COMPARISON_KEYS}
    report.update({
        "n_valid": out["metrics"]["n_valid"], "kernel": k["kernel"].name,
        "kernel_shape": k["shape"], "width_um": k["width_um"],
        "width_source": k["width_source"],
        "integral_range_um3": None if rev is None else rev["A3_um3"],
        "integral_range_source": None if rev is None else rev["source"],
        "band": "|model - scan| <= 2 sigma (scan sampling uncertainty from A3)",
        "transform": out["transform"].to_dict(), "alignment": out["alignment"],
        "field_source": field_source, "length_unit": model.length_unit,
        "axisymmetric": model.axisymmetric, "time_s": model.time_s,
        "shape": out["shape"], "min_coverage": min_coverage,
        "difference": "model - scan",
        "figures": ["maps.png", "parity.png", "difference.png", "profiles.png"]})
    return report


def write_comparison(folder, out, model, report, phases, *, spacing_um, kernel,
                     min_coverage) -> None:
    """Write comparison.json, difference.csv and the figures of one comparison."""
    from ..io.result_folder import write_json
    from ..report.compare_plots import save_comparison_figures

    folder = Path(folder)
    write_json(folder / "comparison.json", report)
    _write_difference(folder / "difference.csv", model, out)
    save_comparison_figures(folder, out, model, phases, spacing_um=spacing_um, kernel=kernel,
                            min_coverage=min_coverage)


def _write_difference(path, model, out):
    import csv

    from ..io.result_folder import _csv_cell

    pts = out["points_scan_um"]
    cols = ["z_um", "y_um", "x_um"]
    if model.axisymmetric:
        cols = ["r_um", "z_model_um"] + [f"axis_{c}" for c in cols]
        pts = np.column_stack([model.points_um, pts])
    sigma = out["sigma"] if out["sigma"] is not None else np.full(len(out["model"]), np.nan)
    table = np.column_stack([pts, out["model"], out["scan"], sigma, out["model"] - out["scan"]])
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(cols + ["model_porosity", "scan_porosity", "sigma", "difference"])
        for row in table.tolist():
            w.writerow([_csv_cell(v) for v in row])
