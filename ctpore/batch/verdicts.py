"""The batch report: per-batch statistics, equivalence verdicts against a reference, its files.

Verdict rules, per measure, for a batch against the reference batch (piece values only; α is
the level, 0.05 by default; Δ the measure's margin):

* ``"no margin set"`` — no Δ for the measure: the tests are reported, no verdict is given.
* ``"inconclusive (too few pieces)"`` — either batch has fewer than 3 pieces with a value, or
  neither rule below applies.
* ``"equivalent"`` — TOST with Welch t-tests: both one-sided p < α, i.e. the (1 − 2α) = 90 %
  confidence interval of the difference of means lies inside (−Δ, Δ) (Schuirmann 1987,
  J. Pharmacokinet. Biopharm. 15:657).
* ``"different"`` — Welch's two-sided t-test gives p < α AND the observed difference of means
  lies outside ±Δ (|difference| > Δ): the batches differ beyond chance, by more than the
  margin. (The stricter rule "the whole 90 % interval outside ±Δ" would need far more pieces
  than a quality team scans: with 8 pieces a batch and a true shift of 2Δ = 2 SD it calls the
  shift only about half the time.) When the means are truly equal, "different" happens at
  most α of the time, since it needs p < α.

The two verdicts cannot both hold: "equivalent" needs the 90 % interval, and so the observed
difference, inside ±Δ. For an inconclusive verdict the report gives the number of pieces per
batch that TOST would need for 80 % power at the observed pooled SD and difference (and at zero
difference); see :func:`ctpore.batch.stats.pieces_needed_tost`.
"""

from __future__ import annotations

import csv
import math
import os
from pathlib import Path

import numpy as np

from ..errors import InputError
from . import stats

__all__ = ["DEFAULT_MEASURES", "MIN_PIECES", "VERDICTS", "compare_to_reference",
           "batch_report", "write_batch_outputs", "read_pieces_table", "SUMMARY_COLUMNS"]

#: Measures judged by default (keys of summary.json, units in the names).
DEFAULT_MEASURES = ("porosity_gas", "porosity_open", "porosity_closed", "pore_thickness_d50_um",
                    "wall_thickness_d50_um", "cell_density_per_mm3", "specific_surface_per_mm",
                    "degree_of_anisotropy")

#: Fewest pieces per batch for any verdict other than inconclusive (common practice, no source).
MIN_PIECES = 3

EQUIVALENT = "equivalent"
DIFFERENT = "different"
INCONCLUSIVE = "inconclusive (too few pieces)"
NO_MARGIN = "no margin set"
VERDICTS = (EQUIVALENT, DIFFERENT, INCONCLUSIVE, NO_MARGIN)

_RULES = {
    EQUIVALENT: "both one-sided Welch t-tests (TOST) p < alpha: the (1 - 2 alpha) confidence "
                "interval of the difference of means lies inside (-margin, margin)",
    DIFFERENT: "Welch two-sided p < alpha and |difference of means| > margin",
    INCONCLUSIVE: f"fewer than {MIN_PIECES} pieces in either batch, or neither rule holds; "
                  "pieces_needed: per batch, for 80 % power of TOST (normal approximation)",
    NO_MARGIN: "no margin given for the measure: tests only",
}

SUMMARY_COLUMNS = ["batch", "measure", "is_reference", "n", "mean", "sd", "cv", "ci95_low",
                   "ci95_high", "median", "min", "max", "margin", "difference", "ci_low",
                   "ci_high", "p_tost", "p_welch", "p_mannwhitney", "verdict", "pieces_needed"]

_OK_STATUS = ("ok", "skipped-existing")


def compare_to_reference(values, reference_values, *, margin=None, alpha: float = 0.05,
                         power: float = 0.8) -> dict:
    """Tests and verdict for one measure of one batch against the reference batch.

    Parameters
    ----------
    values, reference_values : array-like
        One value per piece (NaN left out).
    margin : float or None
        Equivalence margin Δ in the measure's units; None gives the verdict "no margin set".
    alpha : float
        Level (each TOST one-sided test, and the Welch and Mann–Whitney tests).
    power : float
        Power for ``pieces_needed``.

    Returns
    -------
    dict
        ``n_ref``, ``n``, ``mean_ref``, ``mean``, ``difference`` (batch − reference),
        ``ci_low``, ``ci_high``, ``ci_level`` (1 − 2α; the interval is NaN without a margin
        only if a group has < 2 values), ``margin``, ``p_tost``, ``p_welch``, ``df_welch``,
        ``p_mannwhitney``, ``sd_pooled``, ``verdict`` (see the module docstring),
        ``pieces_needed`` (at the observed difference; inf when it is beyond the margin),
        ``pieces_needed_zero_difference``.
    """
    a, b = stats._values(values), stats._values(reference_values)
    welch = stats.welch_test(a, b)
    mw = stats.mann_whitney(a, b)
    has_margin = margin is not None and math.isfinite(float(margin))
    tost = stats.tost_welch(a, b, margin=float(margin) if has_margin else 1.0, alpha=alpha)
    sd = stats.pooled_sd(a, b)
    d = tost["difference"]
    out = {
        "n_ref": int(b.size), "n": int(a.size),
        "mean_ref": tost["mean_ref"], "mean": tost["mean"], "difference": d,
        "ci_low": tost["ci_low"], "ci_high": tost["ci_high"], "ci_level": 1.0 - 2.0 * alpha,
        "margin": float(margin) if has_margin else math.nan,
        "p_tost": tost["p_tost"] if has_margin else math.nan,
        "p_welch": welch["p"], "df_welch": welch["df"], "p_mannwhitney": mw["p"],
        "sd_pooled": sd, "pieces_needed": math.nan, "pieces_needed_zero_difference": math.nan,
    }
    if not has_margin:
        out["verdict"] = NO_MARGIN
        return out
    out["pieces_needed"] = stats.pieces_needed_tost(
        sd, float(margin), difference=d if math.isfinite(d) else 0.0, alpha=alpha, power=power)
    out["pieces_needed_zero_difference"] = stats.pieces_needed_tost(
        sd, float(margin), difference=0.0, alpha=alpha, power=power)
    if a.size < MIN_PIECES or b.size < MIN_PIECES:
        out["verdict"] = INCONCLUSIVE
    elif tost["equivalent"]:
        out["verdict"] = EQUIVALENT
    elif welch["p"] < alpha and abs(d) > float(margin):
        out["verdict"] = DIFFERENT
    else:
        out["verdict"] = INCONCLUSIVE
    return out


def read_pieces_table(path) -> list[dict]:
    """Read a batch's pieces.csv (the file or its folder) into a list of row dicts (strings)."""
    path = Path(path)
    if path.is_dir():
        path = path / "pieces.csv"
    if not path.is_file():
        raise InputError(f"{path} does not exist", "run the batch first (ctpore batch ...)")
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _float(value) -> float:
    if value is None or value == "":
        return math.nan
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def batch_report(pieces_table, *, reference: str | None, margins: dict | None = None,
                 measures=DEFAULT_MEASURES, alpha: float = 0.05,
                 control_measure: str | None = None, pieces_dir=None,
                 power: float = 0.8) -> dict:
    """Piece-level statistics of every batch and verdicts against the reference batch.

    Parameters
    ----------
    pieces_table : list of dict, or path of pieces.csv (or of the batch folder)
        One row per piece with ``sample_id``, ``batch``, optionally ``status`` (rows other than
        "ok"/"skipped-existing" are left out) and the measures as columns.
    reference : str or None
        Name of the reference batch; None (or "") takes the first batch of the table.
    margins : dict of str to float, optional
        Equivalence margin Δ per measure, in the measure's units; a measure without one gets
        the tests but the verdict "no margin set".
    measures : sequence of str
        Columns to judge.
    alpha : float
        Level of the tests, in (0, 0.5).
    control_measure : str, optional
        Measure of the individuals control chart; the first of ``measures`` by default.
    pieces_dir : str or Path, optional
        Folder of the pieces' result folders (``<pieces_dir>/<sample_id>/``); when given, the
        thickness distributions (thickness_distribution.csv) are summarised too.
    power : float
        Power for the pieces needed.

    Returns
    -------
    dict
        ``reference``, ``alpha``, ``measures``, ``margins``, ``batches`` (name to piece count,
        reference first), ``summary_rows`` (rows of batch_summary.csv), ``verdicts``
        (batch → measure → :func:`compare_to_reference`), ``across_batches`` (measure →
        ANOVA and Kruskal–Wallis), ``control_chart``, ``distributions`` (or None),
        ``pieces`` (the rows used), ``rules`` and ``notes``.

    Raises
    ------
    InputError
        Unknown reference batch or measure, a margin that is not > 0 or names no measure,
        alpha outside (0, 0.5) — all listed at once.
    """
    source = None
    if isinstance(pieces_table, (str, Path)):
        source = Path(pieces_table)
        if pieces_dir is None:
            base = source if source.is_dir() else source.parent
            pieces_dir = base / "pieces"
        pieces_table = read_pieces_table(pieces_table)
    all_rows = [dict(r) for r in pieces_table]
    rows = [r for r in all_rows if r.get("status", "ok") in _OK_STATUS]
    measures = list(measures)
    margins = dict(margins or {})
    columns = set().union(*(r.keys() for r in all_rows)) if all_rows else set()
    control_measure = control_measure or (measures[0] if measures else None)
    notes = []
    if not reference and rows:
        reference = rows[0]["batch"]
        notes.append(f"no reference batch named: the first batch, {reference!r}, is used")
    _check_arguments(rows, columns, reference=reference, measures=measures, margins=margins,
                     alpha=alpha, control_measure=control_measure, source=source)

    batches = [reference] + [b for b in dict.fromkeys(r["batch"] for r in rows)
                             if b != reference]
    by_batch = {b: [r for r in rows if r["batch"] == b] for b in batches}
    n_left_out = len(all_rows) - len(rows)
    if n_left_out:
        notes.append(f"{n_left_out} piece(s) failed and are left out (see failures.json)")

    def values(batch, measure):
        return np.array([_float(r.get(measure)) for r in by_batch[batch]])

    summary_rows, verdicts, across = [], {b: {} for b in batches[1:]}, {}
    for measure in measures:
        if not any(math.isfinite(_float(r.get(measure))) for r in rows):
            notes.append(f"{measure}: no piece has a value (is the structure analysis "
                         "disabled in the recipe?)")
        ref_values = values(reference, measure)
        for batch in batches:
            desc = stats.describe(values(batch, measure))
            row = {"batch": batch, "measure": measure, "is_reference": batch == reference,
                   "n": desc["n"], "mean": desc["mean"], "sd": desc["sd"], "cv": desc["cv"],
                   "ci95_low": desc["ci_low"], "ci95_high": desc["ci_high"],
                   "median": desc["median"], "min": desc["min"], "max": desc["max"],
                   "margin": margins.get(measure, math.nan)}
            if batch != reference:
                cmp = compare_to_reference(values(batch, measure), ref_values,
                                           margin=margins.get(measure), alpha=alpha,
                                           power=power)
                verdicts[batch][measure] = cmp
                row.update({k: cmp[k] for k in ("difference", "ci_low", "ci_high", "p_tost",
                                                "p_welch", "p_mannwhitney", "verdict",
                                                "pieces_needed")})
            summary_rows.append(row)
        across[measure] = stats.across_batches({b: values(b, measure) for b in batches})

    chart = _control_chart(rows, reference, control_measure)
    distributions = _distributions(rows, batches, reference, pieces_dir) if pieces_dir else None
    if pieces_dir and distributions is None:
        notes.append("no thickness distributions found (structure analysis disabled?)")
    return {
        "reference": reference, "alpha": alpha, "power": power, "measures": measures,
        "margins": margins, "batches": {b: len(by_batch[b]) for b in batches},
        "summary_rows": summary_rows, "verdicts": verdicts, "across_batches": across,
        "control_chart": chart, "distributions": distributions, "pieces": rows,
        "rules": dict(_RULES, min_pieces=MIN_PIECES), "notes": notes,
    }


def _check_arguments(rows, columns, *, reference, measures, margins, alpha, control_measure,
                     source):
    where = f"pieces table {source}" if source else "pieces table"
    problems = []
    batches = list(dict.fromkeys(r.get("batch") for r in rows))
    if not rows:
        problems.append(f"the {where} holds no successfully analysed piece")
    elif reference not in batches:
        problems.append(f"reference batch {reference!r} is not among the batches {batches}")
    if not measures:
        problems.append("no measures are named")
    unknown = [m for m in measures if m not in columns]
    if unknown and rows:
        known = sorted(c for c in columns if c not in ("sample_id", "batch", "status"))
        problems.append(f"measure(s) {unknown} are not columns of the {where}; "
                        f"its columns are {known}")
    for name, value in margins.items():
        if name not in measures:
            problems.append(f"a margin is given for {name!r}, which is not among the measures "
                            f"{measures}")
        elif not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            problems.append(f"the margin of {name!r} must be a number > 0; got {value!r}")
    if not (isinstance(alpha, (int, float)) and 0 < alpha < 0.5):
        problems.append(f"alpha must be in (0, 0.5); got {alpha!r}")
    if control_measure is not None and rows and control_measure not in columns:
        problems.append(f"control measure {control_measure!r} is not a column of the {where}")
    if problems:
        raise InputError("batch report: " + "; ".join(problems),
                         "set batch.reference to one of the batches, batch.measures and "
                         "batch.margins to measure names of pieces.csv, margins > 0 in the "
                         "measure's units, 0 < alpha < 0.5")


def _control_chart(rows, reference, measure) -> dict:
    if measure is None:
        return {}
    ref = [_float(r.get(measure)) for r in rows if r["batch"] == reference]
    vals = [_float(r.get(measure)) for r in rows]
    chart = stats.individuals_chart(ref, vals)
    chart["measure"] = measure
    chart["kind"] = "individuals (I) chart, limits from the reference batch"
    chart["points"] = [{"sample_id": r["sample_id"], "batch": r["batch"], "value": v,
                        "outside": o}
                       for r, v, o in zip(rows, vals, chart.pop("outside"))]
    return chart


def _distributions(rows, batches, reference, pieces_dir):
    pieces_dir = Path(pieces_dir)
    tables = {b: [] for b in batches}
    for r in rows:
        path = pieces_dir / r["sample_id"] / "thickness_distribution.csv"
        if path.is_file():
            tables[r["batch"]].append(stats.read_thickness_table(path))
    if not any(tables.values()):
        return None
    out = {}
    for phase in ("pore", "wall"):
        quants = {b: [stats.thickness_quantiles(t, phase=phase, q=(0.1, 0.5, 0.9))
                      for t in tables[b]] for b in batches}
        out[phase] = {
            "envelopes": stats.batch_envelopes(tables, phase=phase),
            "piece_quantiles": quants,
            "shift_vs_reference": {b: stats.quantile_shift(quants[b], quants[reference])
                                   for b in batches if b != reference},
        }
    return out


# ----------------------------------------------------------------------------------------------
# files


def write_batch_outputs(out_dir, report: dict) -> list[Path]:
    """Write batch_summary.csv, verdicts.json and the figures of a :func:`batch_report`.

    Files: ``batch_summary.csv`` (one row per batch and measure), ``verdicts.json`` (verdicts,
    tests across batches, control chart, distribution shifts, rules, notes) and, in
    ``figures/``, ``batch_measures.png``, ``batch_control_chart.png`` and, when thickness
    distributions exist, ``batch_thickness_envelopes.png``. Each file is written under a
    temporary name and renamed when complete.

    Returns
    -------
    list of Path
    """
    from ..io.result_folder import write_csv_rows, write_json
    from ..report.batch_plots import save_batch_figures

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = []

    tmp = out / ".batch_summary.csv.partial"
    write_csv_rows(tmp, SUMMARY_COLUMNS,
                   [[row.get(c, "") for c in SUMMARY_COLUMNS] for row in report["summary_rows"]])
    os.replace(tmp, out / "batch_summary.csv")
    paths.append(out / "batch_summary.csv")

    data = {k: report[k] for k in ("reference", "alpha", "power", "measures", "margins",
                                   "batches", "verdicts", "across_batches", "control_chart",
                                   "rules", "notes")}
    if report.get("distributions"):
        data["thickness_distributions"] = {
            phase: {"shift_vs_reference": d["shift_vs_reference"],
                    "envelopes": d["envelopes"]}
            for phase, d in report["distributions"].items()}
    tmp = out / ".verdicts.json.partial"
    write_json(tmp, data)
    os.replace(tmp, out / "verdicts.json")
    paths.append(out / "verdicts.json")
    paths.extend(save_batch_figures(report, out / "figures"))
    return paths
