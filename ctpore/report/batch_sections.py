"""Report sections of a batch folder (``ctpore batch``): overview and figures, verdicts against
the reference batch, per-batch statistics, the pieces and the failures.

Read from the folder's ``verdicts.json``, ``batch_summary.csv``, ``pieces.csv``,
``failures.json`` and ``figures/*.png`` (see :mod:`ctpore.batch.verdicts` and
:mod:`ctpore.batch.runner`); each section appears only when its file exists.
"""

from __future__ import annotations

from pathlib import Path

from .blocks import (bullet_list, fmt, read_csv_rows, read_json, section, subhead, table, text)

__all__ = ["batch_sections", "first_piece_folder"]

_FIGURE_CAPTIONS = {
    "batch_measures": "Piece values of each measure per batch; line: reference mean, band: "
                      "reference mean ± margin; tick labels carry the verdicts.",
    "batch_control_chart": "Individuals (I) chart of the control measure, limits from the "
                           "reference batch.",
    "batch_thickness_envelopes": "Per-batch median and 10–90 % band of the pieces' cumulative "
                                 "thickness curves.",
}
_VERDICT_CLASS = {"equivalent": "v-equivalent", "different": "v-different",
                  "inconclusive (too few pieces)": "v-inconclusive",
                  "no margin set": "v-nomargin"}


def _number(s):
    """A CSV cell as a number when it is one (for formatting), else the text."""
    try:
        return int(s)
    except (TypeError, ValueError):
        pass
    try:
        return float(s)
    except (TypeError, ValueError):
        return s


def first_piece_folder(folder: Path, pieces: list[dict]) -> Path | None:
    """The result folder of the first piece that was analysed (for recipe and provenance)."""
    for row in pieces:
        if row.get("status") in ("ok", "skipped-existing"):
            rel = row.get("result_folder") or f"pieces/{row.get('sample_id', '')}"
            sub = folder / rel
            if (sub / "recipe.toml").is_file():
                return sub
    return None


def _overview(folder: Path, verdicts: dict | None, figures) -> dict:
    blocks = [text("The piece, not the pore, is the unit: every statistic below takes one value "
                   "per piece.")]
    if verdicts:
        margins = verdicts.get("margins") or {}
        blocks.append(table(["", "value"], [
            ["reference batch", fmt(verdicts.get("reference"))],
            ["level α", fmt(verdicts.get("alpha"))],
            ["power for pieces needed", fmt(verdicts.get("power"))],
            ["measures", fmt(verdicts.get("measures") or [])],
            ["margins", ", ".join(f"{k} ±{fmt(v)}" for k, v in sorted(margins.items()))
             or "none set"]], caption="settings"))
        counts = verdicts.get("batches") or {}
        blocks.append(table(["batch", "pieces"], [[b, fmt(n)] for b, n in counts.items()],
                            caption="pieces per batch (analysed)"))
        blocks.append(bullet_list(verdicts.get("notes") or []))
    fig_dir = folder / "figures"
    pngs = sorted(p for p in fig_dir.glob("*.png") if not p.name.startswith(("report_", ".")))\
        if fig_dir.is_dir() else []
    for p in pngs:
        blocks.append(figures.embed(p, caption=_FIGURE_CAPTIONS.get(p.stem, p.stem),
                                    shown_as=f"figures/{p.name}"))
    chart = (verdicts or {}).get("control_chart") or {}
    if chart:
        outside = [f"{p['sample_id']} ({p['batch']})" for p in chart.get("points", [])
                   if p.get("outside")]
        blocks.append(text(f"Control chart of {chart.get('measure', '')}: centre "
                           f"{fmt(chart.get('centre'))}, limits {fmt(chart.get('lcl'))} to "
                           f"{fmt(chart.get('ucl'))}; pieces outside the limits: "
                           f"{', '.join(outside) if outside else 'none'}."))
    return section("batch", "Batch overview", blocks)


def _verdicts(verdicts: dict) -> dict | None:
    rows = []
    level = None
    order = list(verdicts.get("measures") or [])
    for batch, per_measure in (verdicts.get("verdicts") or {}).items():
        ranked = sorted(per_measure, key=lambda m: (order.index(m) if m in order else len(order),
                                                    m))
        for measure in ranked:
            v = per_measure[measure]
            level = v.get("ci_level", level)
            verdict = v.get("verdict", "")
            rows.append([batch, measure, f"{fmt(v.get('n'))} / {fmt(v.get('n_ref'))}",
                         fmt(v.get("difference"), measure),
                         f"{fmt(v.get('ci_low'), measure)} to {fmt(v.get('ci_high'), measure)}",
                         fmt(v.get("margin"), measure), fmt(v.get("p_tost")),
                         fmt(v.get("p_welch")), (verdict, _VERDICT_CLASS.get(verdict, "")),
                         fmt(v.get("pieces_needed"))])
    if not rows:
        return None
    ci = f"{100 * level:.0f} % CI" if isinstance(level, (int, float)) else "CI"
    rules = verdicts.get("rules") or {}
    rule_items = [f"{k}: {v}" for k, v in rules.items() if isinstance(v, str)]
    across = verdicts.get("across_batches") or {}
    across_rows = [[m, fmt(a.get("k")), fmt(a.get("n_total")), fmt(a.get("anova_p")),
                    fmt(a.get("kruskal_p"))] for m, a in across.items()]
    return section("verdicts", "Verdicts against the reference batch", [
        text("Each batch against the reference, per measure: difference of means (batch − "
             "reference) with its confidence interval, equivalence by two one-sided Welch "
             "t-tests (TOST, Schuirmann 1987) within the margin, and Welch's two-sided test."),
        table(["batch", "measure", "pieces (batch / ref.)", "difference", ci, "margin",
               "p TOST", "p Welch", "verdict", "pieces needed"], rows, numeric_from=2),
        bullet_list(rule_items),
        subhead("Across all batches") if across_rows else None,
        table(["measure", "batches", "pieces", "p ANOVA", "p Kruskal–Wallis"], across_rows),
        _shifts(verdicts.get("thickness_distributions") or {}),
    ])


def _shifts(dist: dict):
    rows = []
    for phase, d in dist.items():
        for batch, per_q in (d.get("shift_vs_reference") or {}).items():
            for q, s in per_q.items():
                rows.append([phase, batch, q, fmt(s.get("median")), fmt(s.get("median_ref")),
                             fmt(s.get("shift_um")),
                             f"{fmt(s.get('ci_low'))} to {fmt(s.get('ci_high'))}"])
    return table(["phase", "batch", "quantile", "median (µm)", "reference (µm)",
                  "shift (µm)", "CI of the shift (µm)"], rows,
                 caption="shift of the pieces' thickness quantiles against the reference",
                 numeric_from=3)


def _statistics(rows: list[dict]) -> dict | None:
    if not rows:
        return None
    body = []
    for r in rows:
        m = r.get("measure", "")
        body.append([r.get("batch", ""), m, fmt(_number(r.get("n"))),
                     fmt(_number(r.get("mean")), m), fmt(_number(r.get("sd")), m),
                     fmt(_number(r.get("cv"))),
                     f"{fmt(_number(r.get('ci95_low')), m)} to "
                     f"{fmt(_number(r.get('ci95_high')), m)}",
                     fmt(_number(r.get("median")), m), fmt(_number(r.get("min")), m),
                     fmt(_number(r.get("max")), m)])
    return section("batch-statistics", "Statistics per batch", [
        table(["batch", "measure", "n", "mean", "SD", "CV", "95 % CI of the mean", "median",
               "min", "max"], body, numeric_from=2)])


def _pieces(pieces: list[dict], measures) -> dict | None:
    if not pieces:
        return None
    cols = [m for m in measures if m in pieces[0]]
    body, notes = [], []
    for r in pieces:
        status = r.get("status", "")
        warnings = [w for w in (r.get("warnings") or "").split(" | ") if w]
        notes += [f"{r.get('sample_id', '')}: {w}" for w in warnings]
        body.append([r.get("sample_id", ""), r.get("batch", ""),
                     (status, "v-different" if status == "failed" else "")]
                    + [fmt(_number(r.get(c)) if r.get(c) not in ("", None) else None, c)
                       for c in cols]
                    + [str(len(warnings))])
    return section("pieces", "Pieces", [
        text("One row per piece of the manifest, in its order (pieces.csv holds every "
             "column)."),
        table(["sample", "batch", "status"] + cols + ["warnings"], body, numeric_from=3),
        subhead("Warnings of the pieces") if notes else None,
        bullet_list(notes)])


def _failures(failures: dict | None) -> dict | None:
    items = (failures or {}).get("failures") or []
    if not items:
        return None
    return section("failures", "Failed pieces", [
        text("These pieces are left out of every statistic."),
        table(["sample", "batch", "stack", "error"],
              [[f.get("sample_id", ""), f.get("batch", ""), f.get("stack_path", ""),
                f.get("error", "")] for f in items], numeric_from=9)])


def batch_sections(folder: Path, figures) -> list[dict]:
    """Sections of a batch folder (only those whose files exist)."""
    verdicts = read_json(folder / "verdicts.json")
    pieces = read_csv_rows(folder / "pieces.csv")
    measures = list((verdicts or {}).get("measures") or [])
    if not measures and pieces:
        from ..batch.verdicts import DEFAULT_MEASURES

        measures = list(DEFAULT_MEASURES)
    out = [_overview(folder, verdicts, figures),
           _verdicts(verdicts) if verdicts else None,
           _statistics(read_csv_rows(folder / "batch_summary.csv")),
           _pieces(pieces, measures),
           _failures(read_json(folder / "failures.json"))]
    return [s for s in out if s]

