"""Piece-level statistics of batches: description, tests, equivalence (TOST), distributions, chart.

Every function takes one value per piece. Pooling pores (or voxels) of a few pieces would treat
them as independent replicates when the piece is the experimental unit, i.e. pseudo-replication
(Eisner 2021, J. Gen. Physiol.; from memory).

References
----------
.. [1] Welch, B. L. (1947). The generalization of "Student's" problem when several different
   population variances are involved. Biometrika 34, 28–35. doi:10.1093/biomet/34.1-2.28
.. [2] Satterthwaite, F. E. (1946). An approximate distribution of estimates of variance
   components. Biometrics Bulletin 2, 110–114. doi:10.2307/3002019
.. [3] Schuirmann, D. J. (1987). A comparison of the two one-sided tests procedure and the
   power approach for assessing the equivalence of average bioavailability.
   J. Pharmacokinet. Biopharm. 15, 657–680. doi:10.1007/BF01068419
.. [4] Chow, S.-C., Shao, J. & Wang, H. (2008). Sample Size Calculations in Clinical Research,
   2nd ed., Chapman & Hall/CRC, ch. 3 (two-sample parallel design, test for equivalence;
   from memory).
.. [5] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall,
   ch. 13 (percentile intervals; from memory).
.. [6] Montgomery, D. C. Introduction to Statistical Quality Control, chapter on control charts
   for individual measurements (d2 = 1.128 for moving ranges of two; from memory).
"""

from __future__ import annotations

import csv
import math

import numpy as np
from scipy import special as _sp
from scipy import stats as _st

__all__ = [
    "describe", "welch_test", "mann_whitney", "across_batches", "tost_welch",
    "pieces_needed_tost", "pooled_sd", "thickness_quantiles", "read_thickness_table",
    "cumulative_on_grid", "batch_envelopes", "quantile_shift", "individuals_chart",
    "D2_MOVING_RANGE",
]

#: Mean of the range of two independent standard normal values (d2 for n = 2), the factor
#: that turns the mean moving range into a standard deviation (Montgomery; from memory).
D2_MOVING_RANGE = 1.128


def _t_cdf(x, df) -> float:
    """Student t CDF (scipy.special.stdtr: the function behind scipy.stats.t, without its
    per-call overhead, which matters in simulations); df may be fractional or infinite."""
    return float(_sp.ndtr(x)) if math.isinf(df) else float(_sp.stdtr(df, x))


def _t_ppf(q, df) -> float:
    """Student t quantile (scipy.special.stdtrit)."""
    return float(_sp.ndtri(q)) if math.isinf(df) else float(_sp.stdtrit(df, q))


def _values(values) -> np.ndarray:
    """Finite values as a float array (missing measures, NaN, are left out)."""
    a = np.asarray(values, dtype=float).ravel()
    return a[np.isfinite(a)]


def describe(values, *, confidence: float = 0.95) -> dict:
    """n, mean, SD (ddof=1), CV, t-based confidence interval of the mean, median, min, max.

    Parameters
    ----------
    values : array-like
        One value per piece; NaN are left out.
    confidence : float
        Confidence of the interval of the mean, ``mean ± t_{(1+c)/2, n-1} · SD / √n``.

    Returns
    -------
    dict
        ``n``, ``mean``, ``sd``, ``cv`` (SD / |mean|), ``ci_low``, ``ci_high``, ``median``,
        ``min``, ``max``; NaN where undefined (SD and CI need n ≥ 2, CV a non-zero mean).
    """
    a = _values(values)
    n = a.size
    out = {"n": int(n), "mean": math.nan, "sd": math.nan, "cv": math.nan,
           "ci_low": math.nan, "ci_high": math.nan, "median": math.nan,
           "min": math.nan, "max": math.nan}
    if n == 0:
        return out
    mean = float(np.mean(a))
    out.update(mean=mean, median=float(np.median(a)), min=float(a.min()), max=float(a.max()))
    if n >= 2:
        sd = float(np.std(a, ddof=1))
        half = _t_ppf(0.5 + confidence / 2.0, n - 1) * sd / math.sqrt(n)
        out.update(sd=sd, ci_low=mean - half, ci_high=mean + half,
                   cv=sd / abs(mean) if mean != 0 else math.nan)
    return out


def _welch_parts(a, b):
    """Difference of means (a − b), its standard error and the Welch–Satterthwaite df."""
    va, vb = np.var(a, ddof=1) / a.size, np.var(b, ddof=1) / b.size
    se = math.sqrt(va + vb)
    df = (va + vb) ** 2 / (va**2 / (a.size - 1) + vb**2 / (b.size - 1)) if se > 0 else math.inf
    return float(np.mean(a) - np.mean(b)), se, float(df)


def welch_test(a, b) -> dict:
    """Welch's two-sided t-test of equal means without assuming equal variances [1]_, [2]_.

    Returns ``t``, ``df`` and ``p`` (``scipy.stats.ttest_ind(a, b, equal_var=False)``); NaN
    when a group has fewer than two values. Two groups without any spread give p = 1 for equal
    means and p = 0 otherwise.
    """
    a, b = _values(a), _values(b)
    if a.size < 2 or b.size < 2:
        return {"t": math.nan, "df": math.nan, "p": math.nan}
    diff, se, df = _welch_parts(a, b)
    if se == 0:
        return {"t": math.copysign(math.inf, diff) if diff else math.nan, "df": df,
                "p": 1.0 if diff == 0 else 0.0}
    # the statistic of scipy.stats.ttest_ind(a, b, equal_var=False), written out so that a
    # batch without spread (e.g. closed porosity 0 in every piece) raises no precision warning
    t = diff / se
    return {"t": t, "df": df, "p": 2.0 * _t_cdf(-abs(t), df)}


def mann_whitney(a, b) -> dict:
    """Mann–Whitney U test, two-sided (``scipy.stats.mannwhitneyu``); NaN for an empty group.

    ``u`` is the statistic of the first group. When every value of both groups is the same the
    test has nothing to rank: p = 1.
    """
    a, b = _values(a), _values(b)
    if a.size == 0 or b.size == 0:
        return {"u": math.nan, "p": math.nan}
    if np.ptp(np.concatenate([a, b])) == 0:
        return {"u": a.size * b.size / 2.0, "p": 1.0}
    res = _st.mannwhitneyu(a, b, alternative="two-sided")
    return {"u": float(res.statistic), "p": float(res.pvalue)}


def across_batches(groups) -> dict:
    """One-way ANOVA (``scipy.stats.f_oneway``) and Kruskal–Wallis (``scipy.stats.kruskal``).

    Parameters
    ----------
    groups : dict of str to array-like, or sequence of array-like
        Piece values per batch; batches with no value are left out.

    Returns
    -------
    dict
        ``k`` (batches used), ``n_total``, ``anova_f``, ``anova_p``, ``kruskal_h``,
        ``kruskal_p``. ANOVA needs two batches and more pieces than batches, and some spread
        within batches; Kruskal–Wallis needs two batches and not all values equal. Otherwise
        the numbers are NaN.
    """
    seq = list(groups.values()) if isinstance(groups, dict) else list(groups)
    arrays = [a for a in (_values(g) for g in seq) if a.size]
    n_total = int(sum(a.size for a in arrays))
    out = {"k": len(arrays), "n_total": n_total, "anova_f": math.nan, "anova_p": math.nan,
           "kruskal_h": math.nan, "kruskal_p": math.nan}
    if len(arrays) < 2:
        return out
    within = sum(float(np.sum((a - a.mean()) ** 2)) for a in arrays)
    if n_total > len(arrays) and within > 0:
        res = _st.f_oneway(*arrays)
        out.update(anova_f=float(res.statistic), anova_p=float(res.pvalue))
    if np.ptp(np.concatenate(arrays)) > 0:
        res = _st.kruskal(*arrays)
        out.update(kruskal_h=float(res.statistic), kruskal_p=float(res.pvalue))
    return out


def tost_welch(test, reference, *, margin: float, alpha: float = 0.05) -> dict:
    """Two one-sided Welch t-tests (TOST) of equivalence of means within ±margin [3]_.

    With d = mean(test) − mean(reference), SE = √(s₁²/n₁ + s₂²/n₂) and the Welch–Satterthwaite
    df ν [1]_, [2]_: H0⁻: d ≤ −Δ is tested with t⁻ = (d + Δ)/SE, p⁻ = P(T_ν ≥ t⁻); H0⁺: d ≥ Δ
    with t⁺ = (d − Δ)/SE, p⁺ = P(T_ν ≤ t⁺). ``p_tost = max(p⁻, p⁺)``; the means are
    equivalent at level α when p_tost < α, which is the same as the (1 − 2α) confidence
    interval ``d ± t_{1−α,ν}·SE`` (90 % for α = 0.05) lying inside (−Δ, Δ).

    Parameters
    ----------
    test, reference : array-like
        Piece values of the batch under test and of the reference batch (NaN left out).
    margin : float
        Equivalence margin Δ > 0, in the measure's units.
    alpha : float
        Level of each one-sided test.

    Returns
    -------
    dict
        ``n``, ``n_ref``, ``mean``, ``mean_ref``, ``difference``, ``se``, ``df``, ``t_lower``,
        ``t_upper``, ``p_lower``, ``p_upper``, ``p_tost``, ``ci_low``, ``ci_high`` (the
        (1 − 2α) interval of the difference), ``margin``, ``equivalent`` (bool). NaN and
        False when a group has fewer than two values.
    """
    if not (math.isfinite(margin) and margin > 0):
        raise ValueError(f"margin must be a finite number > 0; got {margin}")
    a, b = _values(test), _values(reference)
    out = {"n": int(a.size), "n_ref": int(b.size),
           "mean": float(a.mean()) if a.size else math.nan,
           "mean_ref": float(b.mean()) if b.size else math.nan,
           "difference": math.nan, "se": math.nan, "df": math.nan, "t_lower": math.nan,
           "t_upper": math.nan, "p_lower": math.nan, "p_upper": math.nan, "p_tost": math.nan,
           "ci_low": math.nan, "ci_high": math.nan, "margin": float(margin),
           "equivalent": False}
    if a.size < 2 or b.size < 2:
        if a.size and b.size:
            out["difference"] = out["mean"] - out["mean_ref"]
        return out
    d, se, df = _welch_parts(a, b)
    out.update(difference=d, se=se, df=df)
    if se == 0:
        inside = abs(d) < margin
        out.update(p_lower=0.0 if d > -margin else 1.0, p_upper=0.0 if d < margin else 1.0,
                   p_tost=0.0 if inside else 1.0, ci_low=d, ci_high=d, equivalent=inside)
        return out
    t_lo, t_up = (d + margin) / se, (d - margin) / se
    p_lo, p_up = _t_cdf(-t_lo, df), _t_cdf(t_up, df)
    half = _t_ppf(1.0 - alpha, df) * se
    p = max(p_lo, p_up)
    out.update(t_lower=t_lo, t_upper=t_up, p_lower=p_lo, p_upper=p_up, p_tost=p,
               ci_low=d - half, ci_high=d + half, equivalent=bool(p < alpha))
    return out


def pooled_sd(a, b) -> float:
    """Pooled standard deviation √(((n₁−1)s₁² + (n₂−1)s₂²)/(n₁+n₂−2)); NaN below 3 values."""
    a, b = _values(a), _values(b)
    dof = a.size + b.size - 2
    if dof < 1:
        return math.nan
    ss = (np.var(a, ddof=1) * (a.size - 1) if a.size > 1 else 0.0) + \
         (np.var(b, ddof=1) * (b.size - 1) if b.size > 1 else 0.0)
    return float(math.sqrt(ss / dof))


def pieces_needed_tost(sd: float, margin: float, *, difference: float = 0.0,
                       alpha: float = 0.05, power: float = 0.8) -> float:
    """Pieces per batch for TOST to show equivalence with the given power (normal approx.).

    Two batches of n pieces each, common SD σ, true difference δ, margin Δ [4]_::

        n = 2·(z_{1−α} + z_{1−β/2})²·σ²/Δ²          when δ = 0
        n = 2·(z_{1−α} + z_{1−β})²·σ²/(Δ − |δ|)²    when 0 < |δ| < Δ

    with β = 1 − power, rounded up. The normal approximation ignores the t distribution's
    heavier tails, so it is a little optimistic for small n. Returns ``inf`` when |δ| ≥ Δ (no
    number of pieces shows equivalence then) and NaN when σ is unknown.
    """
    if not (math.isfinite(sd) and math.isfinite(margin) and margin > 0):
        return math.nan
    if abs(difference) >= margin:
        return math.inf
    beta = 1.0 - power
    if difference == 0:
        z = _sp.ndtri(1 - alpha) + _sp.ndtri(1 - beta / 2)
    else:
        z = _sp.ndtri(1 - alpha) + _sp.ndtri(1 - beta)
    n = 2.0 * z**2 * sd**2 / (margin - abs(difference)) ** 2
    return float(max(2, math.ceil(n - 1e-9)))


# ----------------------------------------------------------------------------------------------
# thickness distributions


def read_thickness_table(path) -> dict:
    """Read a result folder's thickness_distribution.csv into float arrays by column."""
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    names = ("bin_lower_um", "bin_upper_um", "pore_volume_fraction", "wall_volume_fraction")
    return {n: np.array([float(r[n]) if r.get(n) not in (None, "") else 0.0 for r in rows])
            for n in names}


def _edges_and_cdf(table, phase):
    lower = np.asarray(table["bin_lower_um"], dtype=float)
    upper = np.asarray(table["bin_upper_um"], dtype=float)
    frac = np.clip(np.asarray(table[f"{phase}_volume_fraction"], dtype=float), 0, None)
    total = frac.sum()
    if lower.size == 0 or not total > 0:
        return None, None
    return np.concatenate([[lower[0]], upper]), np.concatenate([[0.0], np.cumsum(frac) / total])


def thickness_quantiles(table, *, phase: str = "pore", q=(0.1, 0.25, 0.5, 0.75, 0.9)) -> dict:
    """Volume-weighted quantiles of one piece's binned thickness distribution.

    The cumulative distribution is taken as linear within each bin (volume spread evenly over
    the bin), so the q-quantile lies in the first bin where the cumulative fraction reaches q,
    at ``lower + (q − F_before)/f_bin · width``.

    Parameters
    ----------
    table : dict
        Columns ``bin_lower_um``, ``bin_upper_um``, ``pore_volume_fraction``,
        ``wall_volume_fraction`` (see :func:`read_thickness_table`).
    phase : {"pore", "wall"}
    q : sequence of float in [0, 1]

    Returns
    -------
    dict
        ``{"d10_um": ..., "d50_um": ...}`` keyed by percent; NaN for an empty distribution.
    """
    edges, cdf = _edges_and_cdf(table, phase)
    out = {}
    for qq in q:
        key = f"d{round(100 * qq):02d}_um"
        if edges is None:
            out[key] = math.nan
            continue
        k = int(np.searchsorted(cdf[1:], qq - 1e-12, side="left"))
        k = min(k, len(edges) - 2)
        f_bin = cdf[k + 1] - cdf[k]
        within = (qq - cdf[k]) / f_bin if f_bin > 0 else 0.0
        out[key] = float(edges[k] + np.clip(within, 0, 1) * (edges[k + 1] - edges[k]))
    return out


def cumulative_on_grid(table, grid_um, *, phase: str = "pore") -> np.ndarray:
    """The piece's cumulative volume fraction below each thickness of ``grid_um`` (linear in bins).

    NaN everywhere for an empty distribution.
    """
    edges, cdf = _edges_and_cdf(table, phase)
    grid = np.asarray(grid_um, dtype=float)
    if edges is None:
        return np.full(grid.shape, np.nan)
    return np.interp(grid, edges, cdf, left=0.0, right=1.0)


def batch_envelopes(tables_by_batch: dict, *, phase: str = "pore", grid_um=None,
                    spread=(0.1, 0.9)) -> dict:
    """Median and 10–90 % spread of the per-piece cumulative thickness curves of each batch.

    Each piece's cumulative curve is evaluated on one common grid of thicknesses (by default the
    union of every piece's bin edges, so no piece is re-binned coarser), then the pointwise
    median and the ``spread`` quantiles over the batch's pieces are taken: the envelope shows
    how much pieces of a batch differ, which a pooled histogram would hide.

    Parameters
    ----------
    tables_by_batch : dict of str to list of dict
        Thickness tables (see :func:`read_thickness_table`) of the pieces of each batch.
    phase : {"pore", "wall"}
    grid_um : array-like, optional
        Common thickness grid in µm.
    spread : (float, float)
        Lower and upper pointwise quantiles of the band.

    Returns
    -------
    dict
        ``grid_um`` and ``batches``: per batch ``n`` (pieces with a distribution), ``median``,
        ``low``, ``high`` (lists on the grid).
    """
    if grid_um is None:
        edges = [e for tables in tables_by_batch.values() for t in tables
                 for e in (_edges_and_cdf(t, phase)[0],) if e is not None]
        grid = np.unique(np.concatenate(edges)) if edges else np.zeros(0)
    else:
        grid = np.asarray(grid_um, dtype=float)
    out = {"phase": phase, "grid_um": grid.tolist(), "spread": list(spread), "batches": {}}
    for batch, tables in tables_by_batch.items():
        curves = [c for c in (cumulative_on_grid(t, grid, phase=phase) for t in tables)
                  if grid.size and np.all(np.isfinite(c))]
        if not curves:
            out["batches"][batch] = {"n": 0, "median": [], "low": [], "high": []}
            continue
        stack = np.vstack(curves)
        out["batches"][batch] = {
            "n": len(curves),
            "median": np.median(stack, axis=0).tolist(),
            "low": np.quantile(stack, spread[0], axis=0).tolist(),
            "high": np.quantile(stack, spread[1], axis=0).tolist(),
        }
    return out


def quantile_shift(test_quantiles, reference_quantiles, *, n_boot: int = 2000,
                   confidence: float = 0.95, seed: int = 0) -> dict:
    """Difference of batch medians of per-piece thickness quantiles, with a bootstrap CI.

    The distance between two batches' thickness distributions is measured on piece-level
    summaries, so that the piece stays the unit: for each quantile (e.g. D10, D50, D90 of each
    piece) the batch median over pieces is taken, and the shift is the test batch's median
    minus the reference's, in µm. Its confidence interval is the percentile bootstrap [5]_ over
    pieces, resampling pieces with replacement within each batch (``n_boot`` times, fixed
    seed). Chosen over a distance between whole distributions (energy or Wasserstein) because
    it is in µm, compares directly with a margin on D50, and says where (fine or coarse end)
    two batches differ; the median resists one odd piece. With fewer than about five pieces a
    batch, percentile bootstrap intervals are too narrow: read them as rough.

    Parameters
    ----------
    test_quantiles, reference_quantiles : list of dict
        Per piece, as returned by :func:`thickness_quantiles` (same keys).
    n_boot : int
    confidence : float
    seed : int

    Returns
    -------
    dict
        Per quantile key: ``median``, ``median_ref``, ``shift_um``, ``ci_low``, ``ci_high``,
        ``n``, ``n_ref``.
    """
    keys = [k for k in (test_quantiles[0] if test_quantiles else
                        reference_quantiles[0] if reference_quantiles else {})]
    rng = np.random.default_rng(seed)
    out = {}
    for key in keys:
        a = _values([q[key] for q in test_quantiles])
        b = _values([q[key] for q in reference_quantiles])
        entry = {"n": int(a.size), "n_ref": int(b.size), "median": math.nan,
                 "median_ref": math.nan, "shift_um": math.nan, "ci_low": math.nan,
                 "ci_high": math.nan}
        if a.size and b.size:
            entry.update(median=float(np.median(a)), median_ref=float(np.median(b)))
            entry["shift_um"] = entry["median"] - entry["median_ref"]
            if a.size >= 2 and b.size >= 2:
                ia = rng.integers(0, a.size, size=(n_boot, a.size))
                ib = rng.integers(0, b.size, size=(n_boot, b.size))
                boots = np.median(a[ia], axis=1) - np.median(b[ib], axis=1)
                lo, hi = np.quantile(boots, [(1 - confidence) / 2, (1 + confidence) / 2])
                entry.update(ci_low=float(lo), ci_high=float(hi))
        out[key] = entry
    return out


# ----------------------------------------------------------------------------------------------
# control chart


def individuals_chart(reference_values, values=None) -> dict:
    """Individuals (I) control chart with limits from the reference batch [6]_.

    Centre line = mean of the reference pieces; σ̂ = MR̄/d2 with MR̄ the mean moving range of
    consecutive reference pieces (in the given order) and d2 = 1.128; limits = centre ± 3σ̂.
    This is an individuals chart (one piece per point), not an X̄ chart of subgroup means.

    Parameters
    ----------
    reference_values : array-like
        Reference pieces in production (or scan) order; NaN left out. Needs at least two.
    values : array-like, optional
        Pieces to judge against the limits (NaN allowed: never flagged).

    Returns
    -------
    dict
        ``centre``, ``mr_bar``, ``sigma``, ``lcl``, ``ucl``, ``n_ref`` and, with ``values``,
        ``outside`` (list of bool per value).
    """
    ref = _values(reference_values)
    out = {"n_ref": int(ref.size), "centre": math.nan, "mr_bar": math.nan,
           "sigma": math.nan, "lcl": math.nan, "ucl": math.nan}
    if ref.size >= 1:
        out["centre"] = float(ref.mean())
    if ref.size >= 2:
        mr_bar = float(np.mean(np.abs(np.diff(ref))))
        sigma = mr_bar / D2_MOVING_RANGE
        out.update(mr_bar=mr_bar, sigma=sigma, lcl=out["centre"] - 3 * sigma,
                   ucl=out["centre"] + 3 * sigma)
    if values is not None:
        v = np.asarray(values, dtype=float).ravel()
        with np.errstate(invalid="ignore"):
            outside = (v < out["lcl"]) | (v > out["ucl"])
        out["outside"] = [bool(x) for x in outside]
    return out
