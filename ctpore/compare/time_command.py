"""``ctpore compare MANIFEST.csv MODEL``: scans at known puffing times against a model over time.

For every manifest row (``time_s,result``) the scan's mean gas porosity
(``summary.json: porosity_gas``) and its standard uncertainty
(:func:`ctpore.compare.timeseries.scan_uncertainty`: sampling from the REV study's integral
range, segmentation from the threshold band) are set against the model curve at that time,
linear between the two bracketing model times
(:func:`~ctpore.compare.timeseries.interpolate_curve`).
When the model gives fields, each scan is also compared point by point with the field at its
time (:func:`~ctpore.compare.command.compare_field`), the field interpolated linearly in time
point by point, or taken from the nearest model time with ``--field-time nearest``. Scan times
outside the model's time range are refused (no extrapolation), before any work is done.

Output folder (``--out``, default ``compare_over_time_<model name>/`` beside the manifest),
written whole or not at all, replaced only with ``--force``:

* ``comparison_timeseries.json`` — per time and over time (RMSE, MAE, bias = model − scan,
  Pearson r, share of times within ±2u), and, with fields, per-time and pooled field metrics;
  stable keys, units in the names, paths relative to the folder;
* ``comparison_timeseries.csv`` — one row per scan time;
* ``timeseries.png`` — the model curve, the scans with ±2u error bars, the model's values at
  the scan times (filled: a model time; open: interpolated) and the differences over time;
* ``time_<t>s/`` per scan time, with fields: ``comparison.json``, ``difference.csv`` and the
  figures of the single comparison.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import numpy as np

from ..errors import InputError

__all__ = ["run_compare_over_time", "scan_point", "TIMESERIES_COLUMNS"]

#: Columns of comparison_timeseries.csv.
TIMESERIES_COLUMNS = (
    "time_s", "result", "scan_porosity_gas", "scan_porosity_gas_low", "scan_porosity_gas_high",
    "scan_sigma_sampling", "scan_sigma_segmentation", "scan_uncertainty", "model_porosity",
    "model_value", "model_time_before_s", "model_time_after_s", "difference", "within_band",
    "field_how", "field_model_times_s", "field_rmse", "field_mae", "field_bias",
    "field_coverage", "field_share_within_band", "field_volume_ratio")
_BAND_K = 2.0
_CURVE_KEYS = ("rmse", "mae", "bias", "pearson_r", "share_within_band")


def scan_point(summary: dict, *, A3_um3: float | None) -> dict:
    """The scan side of one time: porosity, its band and standard uncertainty.

    The band is the threshold band of ``summary["threshold"]`` (porosity at threshold ∓
    delta), widened to the segmentation ensemble's range when the summary holds one.

    Raises
    ------
    InputError
        If the summary has no ``porosity_gas`` or ``envelope_volume_mm3``.
    """
    from .timeseries import scan_uncertainty

    missing = [k for k in ("porosity_gas", "envelope_volume_mm3") if k not in summary]
    if missing:
        raise InputError(f"summary.json lacks {missing}",
                         "re-run `ctpore analyze` to re-make the result folder")
    p = float(summary["porosity_gas"])
    t = summary.get("threshold") or {}
    low, high = t.get("porosity_low"), t.get("porosity_high")
    ens = summary.get("uncertainty") or {}
    if "porosity_gas_min" in ens and "porosity_gas_max" in ens:
        low = min(v for v in (low, ens["porosity_gas_min"], p) if v is not None)
        high = max(v for v in (high, ens["porosity_gas_max"], p) if v is not None)
    u = scan_uncertainty(p, envelope_volume_mm3=float(summary["envelope_volume_mm3"]),
                         A3_um3=A3_um3, porosity_low=low, porosity_high=high)
    return {"scan_porosity_gas": p, "scan_porosity_gas_low": low,
            "scan_porosity_gas_high": high, "scan_sigma_sampling": u["sigma_sampling"],
            "scan_sigma_segmentation": u["sigma_segmentation"],
            "scan_uncertainty": u["uncertainty"],
            "envelope_volume_mm3": float(summary["envelope_volume_mm3"]),
            "integral_range_um3": A3_um3}


def _rel(path, folder) -> str:
    try:
        return os.path.relpath(Path(path).resolve(), Path(folder).resolve())
    except ValueError:  # another drive
        return str(path)


def _folder_name(t: float) -> str:
    return f"time_{t:g}s"


def run_compare_over_time(args) -> int:
    """Run the time-series form of ``ctpore compare`` (see the module notes); returns 0.

    Raises
    ------
    InputError
        On a bad manifest or model (naming the file and the fix), a scan time outside the
        model's time range, or options of the single form.
    """
    from ..io.result_folder import check_destination, result_folder
    from .command import _field_name
    from .timeseries import (EXTRAPOLATION_RULE, curve_from_fields, interpolate_curve,
                             read_manifest, read_model_curve, read_time_model, time_weights)

    quiet = getattr(args, "quiet", False)
    manifest = Path(args.result)
    if args.time is not None:
        raise InputError("--time belongs to the single form; the time-series form takes the "
                         f"times from the manifest {manifest}", "drop --time")
    scans = read_manifest(manifest)
    model_path = Path(args.field)
    model = read_time_model(model_path, length_unit=args.length_unit)
    curve = model.curve
    if args.curve:
        if model.curve is not None:
            raise InputError(f"{model_path} is already a curve (time_s,porosity); --curve is "
                             "for a model given as fields", "drop --curve")
        curve = read_model_curve(args.curve)
    if curve is None:
        curve = curve_from_fields(model.fields)
    target = Path(args.out) if args.out else \
        manifest.parent / f"compare_over_time_{_field_name(model_path)}"
    check_destination(target, force=args.force)
    times = np.array([s.time_s for s in scans])
    at = interpolate_curve(curve, times)  # refuses extrapolation before any work
    if model.fields is not None:
        for t in times:
            time_weights(model.fields.time_s, t, what=f"model fields {model.fields.source}")

    with result_folder(target, force=args.force) as tmp:
        rows, per_time = _compare_times(scans, at, model, args, tmp, quiet)
        report = _report(rows, per_time, curve, model, args, manifest, model_path, target)
        report["extrapolation"] = EXTRAPOLATION_RULE
        _write(tmp, report, rows, curve)
        from ..report.html import write_report

        write_report(tmp, name=target.name)
    if not quiet:
        c = report["curve_metrics"]
        line = (f"{manifest}: {len(rows)} scan times against {model_path.name}: mean porosity "
                f"RMSE {c['rmse']:.4f}, bias {c['bias']:+.4f}")
        f = report["field_metrics"]
        if f is not None:
            line += f"; fields RMSE {f['rmse_pooled']:.4f}, bias {f['bias_pooled']:+.4f}"
        print(f"{line} -> {target}")
    return 0


def _compare_times(scans, at, model, args, tmp, quiet):
    from ..io.result_reader import open_result
    from .command import (comparison_report, compare_field, kernel_for, rev_for,
                          transform_for, write_comparison)
    from .timeseries import field_at_time

    rows, per_time = [], []
    transform = transform_for(args)
    for k, scan in enumerate(scans):
        result = open_result(scan.result)
        recipe = result.recipe
        kern = kernel_for(result, args, quiet=quiet) if model.fields is not None else None
        rev = kern["rev"] if kern is not None else rev_for(result, recipe, quiet=quiet)
        row = {"time_s": scan.time_s, "result": scan.given}
        row.update(scan_point(result.summary, A3_um3=rev["A3_um3"]))
        m = float(at["porosity"][k])
        d = m - row["scan_porosity_gas"]
        u = row["scan_uncertainty"]
        row.update({"model_porosity": m, "model_value": str(at["how"][k]),
                    "model_time_before_s": float(at["time_before_s"][k]),
                    "model_time_after_s": float(at["time_after_s"][k]), "difference": d,
                    "within_band": bool(abs(d) <= _BAND_K * u) if math.isfinite(u) else None,
                    "field": None})
        if model.fields is not None:
            field, note = field_at_time(model.fields, scan.time_s, mode=args.field_time)
            out = compare_field(result.phases, field, spacing_um=result.spacing_um,
                                kernel=kern["kernel"], min_coverage=recipe.coarsen.min_coverage,
                                A3_um3=rev["A3_um3"], align=args.align, transform=transform,
                                z_origin=args.z_origin)
            rep = comparison_report(out, field, kern, min_coverage=recipe.coarsen.min_coverage,
                                    field_source=note["how"] + ": " + ", ".join(
                                        _rel(s, tmp) for s in note["sources"]))
            rep.update({"time_s": scan.time_s, "model_time": note,
                        "result": scan.given})
            sub = tmp / _folder_name(scan.time_s)
            sub.mkdir()
            write_comparison(sub, out, field, rep, result.phases, spacing_um=result.spacing_um,
                             kernel=kern["kernel"], min_coverage=recipe.coarsen.min_coverage)
            met = out["metrics"]
            shape = out["shape"] or {}
            row["field"] = {"how": note["how"], "model_times_s": note["model_times_s"],
                            "weights": note["weights"], "interpolation": note["interpolation"],
                            "kernel": kern["kernel"].name, "width_um": kern["width_um"],
                            "folder": sub.name, "volume_ratio": shape.get("volume_ratio"),
                            "dice": shape.get("dice"),
                            **{key: met[key] for key in ("rmse", "mae", "bias", "pearson_r",
                                                         "coverage", "share_within_band",
                                                         "n_points", "n_valid")}}
            per_time.append(out)
        rows.append(row)
    return rows, per_time


def _pooled(rows) -> dict | None:
    fields = [r["field"] for r in rows if r["field"] is not None]
    if not fields:
        return None
    n = np.array([f["n_valid"] for f in fields], float)
    rmse = np.array([f["rmse"] for f in fields])
    bias = np.array([f["bias"] for f in fields])
    mae = np.array([f["mae"] for f in fields])
    share = np.array([np.nan if f["share_within_band"] is None else f["share_within_band"]
                      for f in fields], float)
    known = np.isfinite(share)
    return {"rmse_pooled": float(np.sqrt(np.sum(n * rmse ** 2) / n.sum())),
            "mae_pooled": float(np.sum(n * mae) / n.sum()),
            "bias_pooled": float(np.sum(n * bias) / n.sum()),
            "share_within_band_pooled": float(np.sum(n[known] * share[known]) / n[known].sum())
            if known.any() else None,
            "n_valid": int(n.sum()), "n_times": len(fields),
            "pooling": "over all compared points of all times (RMSE: root of the "
                       "n_valid-weighted mean square)"}


def _report(rows, per_time, curve, model, args, manifest, model_path, target) -> dict:
    from .metrics import point_metrics

    m = point_metrics([r["model_porosity"] for r in rows],
                      [r["scan_porosity_gas"] for r in rows],
                      sigma=[r["scan_uncertainty"] for r in rows], band_sigmas=_BAND_K)
    curve_metrics = {k: m[k] for k in _CURVE_KEYS}
    curve_metrics["n_times"] = len(rows)
    curve_metrics["n_interpolated"] = sum(r["model_value"] == "interpolated" for r in rows)
    fields = model.fields
    return {
        "form": "time series",
        "manifest": _rel(manifest, target),
        "model": _rel(model_path, target),
        "model_form": "curve" if fields is None else fields.kind,
        "curve_source": _rel(curve.source, target) if Path(curve.source).is_file()
        else curve.source,
        "curve_from_fields": bool(curve.from_fields),
        "curve_time_s": curve.time_s, "curve_porosity": curve.porosity,
        "model_time_range_s": [float(curve.time_s[0]), float(curve.time_s[-1])],
        "field_times_s": None if fields is None else fields.time_s,
        "field_time_mode": None if fields is None else args.field_time,
        "length_unit": args.length_unit,
        "interpolation": "linear in time between the two bracketing model times; a scan time "
                         "equal to a model time takes its value as it is (model_value "
                         "'exact'); fields point by point",
        "difference": "model - scan",
        "band": "|model - scan| <= 2 u; u = sqrt(sigma_sampling^2 + sigma_segmentation^2), "
                "sigma_sampling^2 = p(1-p) A3 / V_envelope, sigma_segmentation = half the "
                "threshold band / sqrt(3)",
        "curve_metrics": curve_metrics,
        "field_metrics": _pooled(rows),
        "times": rows,
        "n_times": len(rows),
    }


def _write(folder: Path, report: dict, rows, curve) -> None:
    from ..io.result_folder import write_csv_rows, write_json
    from ..report.compare_plots import save_png

    write_json(folder / "comparison_timeseries.json", report)
    table = []
    for r in rows:
        f = r["field"] or {}
        row = dict(r, field_how=f.get("how"),
                   field_model_times_s=";".join(f"{t:g}" for t in f.get("model_times_s", [])),
                   **{f"field_{k}": f.get(k) for k in ("rmse", "mae", "bias", "coverage",
                                                       "share_within_band", "volume_ratio")})
        table.append([row[c] for c in TIMESERIES_COLUMNS])
    write_csv_rows(folder / "comparison_timeseries.csv", list(TIMESERIES_COLUMNS), table)
    save_png(timeseries_figure(report), folder / "timeseries.png")


def timeseries_figure(report: dict):
    """Porosity over time (model curve, scans with ±2u, model at the scan times) and the
    differences over time (mean porosity; with fields, the field bias and RMSE)."""
    from matplotlib.figure import Figure

    rows = report["times"]
    fig = Figure(figsize=(7.0, 6.4), dpi=100)
    ax, ax_d = fig.subplots(2, 1, sharex=True, height_ratios=(3, 2))
    ct = np.asarray(report["curve_time_s"], float)
    cp = np.asarray(report["curve_porosity"], float)
    label = "model (mean of its fields)" if report["curve_from_fields"] else "model curve"
    ax.plot(ct, cp, "-", color="#D55E00", lw=1.5, label=label)
    ax.plot(ct, cp, ".", color="#D55E00", ms=4)
    t = np.array([r["time_s"] for r in rows])
    p = np.array([r["scan_porosity_gas"] for r in rows])
    u = np.array([np.nan if r["scan_uncertainty"] is None else r["scan_uncertainty"]
                  for r in rows], float)
    err = np.where(np.isfinite(u), _BAND_K * u, 0.0)
    ax.errorbar(t, p, yerr=err, fmt="o", color="#0072B2", ms=6, capsize=4,
                label="scan, mean gas porosity ±2u")
    mp = np.array([r["model_porosity"] for r in rows])
    exact = np.array([r["model_value"] == "exact" for r in rows])
    if exact.any():
        ax.plot(t[exact], mp[exact], "D", color="#D55E00", ms=7, label="model at scan time "
                "(a model time)")
    if (~exact).any():
        ax.plot(t[~exact], mp[~exact], "D", mfc="white", mec="#D55E00", mew=1.5, ms=7,
                label="model at scan time (interpolated)")
    ax.set_ylabel("gas porosity")
    ax.grid(True, linewidth=0.3)
    ax.legend(fontsize=7, loc="lower right")
    c = report["curve_metrics"]
    ax.set_title(f"mean porosity over time: RMSE {c['rmse']:.3f}, bias {c['bias']:+.3f} "
                 "(model − scan)", fontsize=9)
    d = mp - p
    ax_d.errorbar(t, d, yerr=err, fmt="o", color="#0072B2", capsize=4,
                  label="mean porosity, model − scan, ±2u")
    fields = [r["field"] for r in rows]
    if any(f is not None for f in fields):
        ft = np.array([r["time_s"] for r in rows if r["field"] is not None])
        ax_d.plot(ft, [f["bias"] for f in fields if f is not None], "s", color="#009E73",
                  label="field bias (model − scan)")
        ax_d.plot(ft, [f["rmse"] for f in fields if f is not None], "^", color="#CC79A7",
                  label="field RMSE")
    ax_d.axhline(0.0, color="k", lw=0.8)
    ax_d.set_xlabel("puffing time (s)")
    ax_d.set_ylabel("porosity difference")
    ax_d.grid(True, linewidth=0.3)
    ax_d.legend(fontsize=7, loc="best")
    fig.subplots_adjust(left=0.12, right=0.97, bottom=0.09, top=0.95, hspace=0.08)
    return fig
