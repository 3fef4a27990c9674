"""Report sections of a comparison over time (``ctpore compare MANIFEST.csv MODEL``): scans at
known puffing times against a model curve, and, with model fields, point by point per time.

Read from the folder's ``comparison_timeseries.json``, its figures (``timeseries.png`` and
any other PNG) and the ``comparison.json`` of each per-time sub-folder; see
:mod:`ctpore.compare.time_command`.
"""

from __future__ import annotations

from pathlib import Path

from .blocks import fmt, read_json, section, table, text
from .more_sections import comparison_blocks

__all__ = ["timeseries_sections"]

_CURVE_ROWS = (("n_times", "scan times"), ("n_interpolated", "model values interpolated in time"),
               ("rmse", "RMSE"), ("mae", "MAE"), ("bias", "bias (model − scan)"),
               ("pearson_r", "Pearson r"), ("share_within_band", "share of times within ±2u"))
_FIELD_ROWS = (("n_times", "times with fields"), ("n_valid", "compared points, all times"),
               ("rmse_pooled", "RMSE, pooled"), ("mae_pooled", "MAE, pooled"),
               ("bias_pooled", "bias (model − scan), pooled"),
               ("share_within_band_pooled", "share within the band, pooled"))


def _figures(folder: Path, figures) -> list:
    from .more_sections import _COMPARE_CAPTIONS

    return [figures.embed(p, caption=_COMPARE_CAPTIONS.get(p.stem, p.stem),
                          shown_as=p.name)
            for p in sorted(folder.glob("*.png")) if not p.name.startswith(".")]


def timeseries_sections(folder: Path, figures) -> list[dict]:
    """The over-time section and, with fields, the per-time comparisons."""
    rep = read_json(folder / "comparison_timeseries.json") or {}
    curve = rep.get("curve_metrics") or {}
    rows = []
    for t in rep.get("times") or []:
        rows.append([fmt(t.get("time_s")), fmt(t.get("result")),
                     fmt(t.get("scan_porosity_gas"), "porosity"),
                     f"{fmt(t.get('scan_porosity_gas_low'), 'porosity')}–"
                     f"{fmt(t.get('scan_porosity_gas_high'), 'porosity')}",
                     fmt(t.get("scan_uncertainty")), fmt(t.get("model_porosity"), "porosity"),
                     fmt(t.get("model_value")), fmt(t.get("difference"), "porosity"),
                     fmt(t.get("within_band"))])
    fields = rep.get("field_metrics") or {}
    blocks = [
        text(f"Model {fmt(rep.get('model'))} ({fmt(rep.get('model_form'))}) against the scans "
             f"of {fmt(rep.get('manifest'))}. Differences are model − scan; the band is "
             f"{fmt(rep.get('band'))}. Interpolation: {fmt(rep.get('interpolation'))}."),
        table(["", "value"], [[label, fmt(curve[k], k if k != "share_within_band"
                                         else "within_share")]
                              for k, label in _CURVE_ROWS if k in curve],
              caption="mean porosity over time"),
        table(["time (s)", "result", "scan porosity", "band", "u (1 SD)", "model",
               "model value", "difference", "within ±2u"], rows, numeric_from=2,
              caption="per scan time"),
        table(["", "value"], [[label, fmt(fields[k], k if "share" not in k else "within_share")]
                              for k, label in _FIELD_ROWS if k in fields],
              caption="fields, pooled over the times") if fields else None,
        *_figures(folder, figures),
    ]
    out = [section("comparison-over-time", "Comparison over time", blocks)]
    subs = []
    for p in folder.iterdir():
        c = read_json(p / "comparison.json") if p.is_dir() else None
        if c is not None:
            t = c.get("time_s")
            subs.append((t if isinstance(t, (int, float)) else float("inf"), p.name, p, t))
    per_time = []
    for _, name, sub, t in sorted(subs, key=lambda s: s[:2]):
        title = f"time {fmt(t)} s ({name})" if isinstance(t, (int, float)) else name
        per_time += comparison_blocks(sub, figures, heading=title)
    if per_time:
        out.append(section("comparison", "Field comparisons per time", per_time))
    return out
