"""Batch statistics against scipy.stats, hand-worked examples and exact error rates.

The piece is the experimental unit (REFERENCES.md: Eisner 2021, J. Gen. Physiol.; from memory):
every test here works on one value per piece.
"""

import csv
import json
import math

import numpy as np
import pytest
from scipy import stats as st

from ctpore.batch import stats
from ctpore.batch.verdicts import (DIFFERENT, EQUIVALENT, INCONCLUSIVE, NO_MARGIN,
                                   batch_report, compare_to_reference, write_batch_outputs)
from ctpore.errors import InputError


# ----------------------------------------------------------------------------------------------
# descriptive statistics


def test_mean_sd_cv_and_ci_hand_checked():
    # Worked by hand: values 2 4 4 4 5 5 7 9, mean 40/8 = 5; squared deviations
    # 9+1+1+1+0+0+4+16 = 32, SD (ddof=1) = √(32/7) = 2.13809; CV = 2.13809/5 = 0.427618.
    # 95 % CI: t_{0.975, 7} = 2.365 (Student t table, any statistics text; from memory),
    # half width 2.365 · 2.13809 / √8 = 1.7877 → [3.2123, 6.7877].
    d = stats.describe([2, 4, 4, 4, 5, 5, 7, 9])
    assert d["n"] == 8
    assert d["mean"] == pytest.approx(5.0)
    assert d["sd"] == pytest.approx(2.13809, abs=1e-5)
    assert d["cv"] == pytest.approx(0.427618, abs=1e-6)
    assert d["ci_low"] == pytest.approx(3.2123, abs=1e-3)
    assert d["ci_high"] == pytest.approx(6.7877, abs=1e-3)
    assert (d["median"], d["min"], d["max"]) == (4.5, 2.0, 9.0)


def test_describe_leaves_out_missing_values_and_needs_two_for_sd():
    d = stats.describe([3.0, math.nan])
    assert d["n"] == 1 and d["mean"] == 3.0 and math.isnan(d["sd"]) and math.isnan(d["ci_low"])


# ----------------------------------------------------------------------------------------------
# tests between and across batches: the same numbers as scipy.stats


def test_welch_and_mann_whitney_agree_with_scipy():
    rng = np.random.default_rng(3)
    a, b = rng.normal(10, 1, 7), rng.normal(11, 2.5, 5)
    w = stats.welch_test(a, b)
    ref = st.ttest_ind(a, b, equal_var=False)  # scipy.stats reference implementation
    assert w["t"] == pytest.approx(ref.statistic, rel=1e-12)
    assert w["p"] == pytest.approx(ref.pvalue, rel=1e-12)
    # Welch–Satterthwaite df (Welch 1947; Satterthwaite 1946), written out here
    va, vb = a.var(ddof=1) / 7, b.var(ddof=1) / 5
    assert w["df"] == pytest.approx((va + vb) ** 2 / (va**2 / 6 + vb**2 / 4), rel=1e-12)
    m = stats.mann_whitney(a, b)
    ref = st.mannwhitneyu(a, b, alternative="two-sided")
    assert m["u"] == ref.statistic and m["p"] == pytest.approx(ref.pvalue, rel=1e-12)


def test_anova_and_kruskal_agree_with_scipy():
    rng = np.random.default_rng(4)
    groups = {"A": rng.normal(0, 1, 6), "B": rng.normal(0.8, 1, 5), "C": rng.normal(0.2, 1, 4)}
    out = stats.across_batches(groups)
    f = st.f_oneway(*groups.values())  # scipy.stats reference implementation
    h = st.kruskal(*groups.values())
    assert out["k"] == 3 and out["n_total"] == 15
    assert out["anova_f"] == pytest.approx(f.statistic, rel=1e-12)
    assert out["anova_p"] == pytest.approx(f.pvalue, rel=1e-12)
    assert out["kruskal_h"] == pytest.approx(h.statistic, rel=1e-12)
    assert out["kruskal_p"] == pytest.approx(h.pvalue, rel=1e-12)
    # one batch only: nothing to compare
    assert math.isnan(stats.across_batches({"A": [1.0, 2.0]})["anova_p"])


# ----------------------------------------------------------------------------------------------
# TOST (Schuirmann 1987, J. Pharmacokinet. Biopharm. 15:657) worked by hand


REF = [10.0, 12.0, 11.0, 13.0, 9.0]
TEST = [11.0, 12.0, 13.0, 12.0, 12.0]


def test_tost_hand_worked_example():
    # Textbook-style example worked by hand (numbers made up here):
    # reference 10 12 11 13 9: mean 11, s² = (1+1+0+4+4)/4 = 2.5
    # test      11 12 13 12 12: mean 12, s² = (1+0+1+0+0)/4 = 0.5
    # d = 1; SE² = 2.5/5 + 0.5/5 = 0.6, SE = 0.774597
    # Welch–Satterthwaite ν = 0.6² / (0.5²/4 + 0.1²/4) = 0.36/0.065 = 5.53846
    # t table (from memory): t_.90 = 1.476 (5 df), 1.440 (6 df); t_.95 = 2.015, 1.943;
    #   t_.975 = 2.571, 2.447; t_.99 = 3.365, 3.143. ν lies between 5 and 6, so:
    # 90 % CI = 1 ± t_.95·0.7746: low in [1 − 1.561, 1 − 1.505], high in [2.505, 2.561].
    # Δ = 2: t⁺ = (1 − 2)/0.7746 = −1.291, |t⁺| < 1.440 → p⁺ > 0.10: not equivalent
    #   (the CI's upper end 2.5 passes +2).
    # Δ = 3: t⁺ = −2/0.7746 = −2.582 and 2.571 < 2.582 < 3.143 → 0.01 < p⁺ < 0.025;
    #   t⁻ = 4/0.7746 = 5.164 → p⁻ far smaller; p_TOST = p⁺ < 0.05: equivalent.
    r = stats.tost_welch(TEST, REF, margin=2.0)
    assert r["difference"] == pytest.approx(1.0)
    assert r["se"] == pytest.approx(0.774597, abs=1e-6)
    assert r["df"] == pytest.approx(5.53846, abs=1e-5)
    assert -0.561 <= r["ci_low"] <= -0.505 and 2.505 <= r["ci_high"] <= 2.561
    assert r["t_upper"] == pytest.approx(-1.291, abs=1e-3)
    assert r["p_tost"] > 0.10 and not r["equivalent"]
    r = stats.tost_welch(TEST, REF, margin=3.0)
    assert r["t_upper"] == pytest.approx(-2.582, abs=1e-3)
    assert r["t_lower"] == pytest.approx(5.164, abs=1e-3)
    assert 0.01 < r["p_tost"] < 0.025 and r["equivalent"]
    assert r["p_tost"] == r["p_upper"] > r["p_lower"]


def test_tost_p_value_and_interval_agree():
    # Schuirmann 1987: p_TOST < α exactly when the (1 − 2α) interval lies inside ±Δ
    rng = np.random.default_rng(11)
    for _ in range(200):
        a, b = rng.normal(0, 1, 6), rng.normal(rng.uniform(-1, 1), 1.5, 5)
        r = stats.tost_welch(a, b, margin=1.2)
        inside = -1.2 < r["ci_low"] and r["ci_high"] < 1.2
        assert (r["p_tost"] < 0.05) == inside == r["equivalent"]


def test_pieces_needed_formula_hand_checked():
    # Chow, Shao & Wang 2008, Sample Size Calculations in Clinical Research, ch. 3, test for
    # equivalence, two-sample parallel design (from memory):
    # δ = 0: n = 2(z_.95 + z_.90)²σ²/Δ² = 2(1.6449 + 1.2816)²/1 = 17.13 → 18 per batch
    # δ = 0.5: n = 2(z_.95 + z_.80)²σ²/(Δ − δ)² = 2(1.6449 + 0.8416)²/0.25 = 49.46 → 50
    assert stats.pieces_needed_tost(1.0, 1.0) == 18
    assert stats.pieces_needed_tost(1.0, 1.0, difference=0.5) == 50
    assert stats.pieces_needed_tost(2.0, 1.0) == math.ceil(4 * 17.13)
    assert stats.pieces_needed_tost(1.0, 1.0, difference=1.2) == math.inf
    # ... and at that many pieces the exact power of the Welch TOST (computed below) is close
    # to the 80 % asked for (the normal approximation is a little optimistic)
    assert 0.77 < _exact_rate("equivalent", n=18, shift=0.0, margin=1.0) < 0.85
    assert 0.77 < _exact_rate("equivalent", n=50, shift=0.5, margin=1.0) < 0.85


# ----------------------------------------------------------------------------------------------
# verdict rates by simulation against exact rates


def _exact_rate(kind, *, n, shift, margin, alpha=0.05, grid=300):
    """Exact probability of a verdict for two normal batches of n pieces (σ = 1).

    The difference of means d ~ N(shift, 2/n) is independent of the two sample variances,
    (n − 1)s²/σ² ~ χ²(n − 1) (Student 1908; any statistics text). Given the variances, the
    Welch SE and df are fixed, and each rule is an interval condition on d with a normal
    probability; the variances are integrated out on a grid of χ² quantile midpoints.
    Rules (module docstring of ctpore.batch.verdicts): "equivalent": |d| < Δ − t_{1−α,ν}·SE;
    "different": |d| > max(Δ, t_{1−α/2,ν}·SE).
    """
    u = (np.arange(grid) + 0.5) / grid
    s2 = st.chi2.ppf(u, n - 1) / (n - 1)
    v1, v2 = np.meshgrid(s2 / n, s2 / n, indexing="ij")
    se = np.sqrt(v1 + v2)
    nu = (v1 + v2) ** 2 / (v1**2 / (n - 1) + v2**2 / (n - 1))
    sd_d = math.sqrt(2.0 / n)
    if kind == "equivalent":
        h = margin - st.t.ppf(1 - alpha, nu) * se
        p = np.where(h > 0, st.norm.cdf((h - shift) / sd_d) - st.norm.cdf((-h - shift) / sd_d),
                     0.0)
    else:
        c = np.maximum(margin, st.t.ppf(1 - alpha / 2, nu) * se)
        p = st.norm.sf((c - shift) / sd_d) + st.norm.cdf((-c - shift) / sd_d)
    return float(p.mean())


def _simulated_verdicts(*, n, shift, margin, pairs, seed):
    rng = np.random.default_rng(seed)
    verdicts = []
    for _ in range(pairs):
        ref, test = rng.normal(0, 1, n), rng.normal(shift, 1, n)
        verdicts.append(compare_to_reference(test, ref, margin=margin)["verdict"])
    return verdicts


@pytest.mark.parametrize("shift, seed", [
    (0.0, 1),  # same distribution, margin 1 SD: exact rates equivalent 0.2265, different 0.0305
    (2.0, 2),  # shifted by twice the margin: exact rate of "different" 0.954 ("nearly always")
])
def test_verdict_rates_match_exact_rates(shift, seed):
    pairs = 400
    verdicts = _simulated_verdicts(n=8, shift=shift, margin=1.0, pairs=pairs, seed=seed)
    for kind in (EQUIVALENT, DIFFERENT):
        expected = _exact_rate(kind, n=8, shift=shift, margin=1.0)
        hits = verdicts.count(kind)
        lo, hi = st.binom.interval(0.99, pairs, expected)  # binomial 99 % band of the count
        assert lo <= hits <= hi, (kind, shift, hits / pairs, expected)
    if shift == 0.0:
        # "different" needs Welch p < α, so equal batches are called different at most α
        assert _exact_rate(DIFFERENT, n=8, shift=0.0, margin=1.0) <= 0.05
    else:
        assert _exact_rate(DIFFERENT, n=8, shift=2.0, margin=1.0) > 0.9
        assert verdicts.count(DIFFERENT) / pairs > 0.9


def test_two_pieces_are_inconclusive():
    # fewer than 3 pieces: always inconclusive (common practice, no source), even with a huge
    # shift or identical values
    ref = [1.0, 1.1, 0.9, 1.05, 0.95]
    assert compare_to_reference([5.0, 5.1], ref, margin=0.1)["verdict"] == INCONCLUSIVE
    assert compare_to_reference([1.0, 1.0], ref, margin=0.5)["verdict"] == INCONCLUSIVE
    assert compare_to_reference([1.0, 1.1, 0.9], ref, margin=None)["verdict"] == NO_MARGIN


# ----------------------------------------------------------------------------------------------
# control chart (Montgomery, Introduction to Statistical Quality Control; from memory)


def test_individuals_chart_hand_checked():
    # reference 10 12 11 13 9: centre 11; moving ranges 2 1 2 4, MR̄ = 2.25;
    # σ̂ = 2.25/1.128 = 1.99468; limits 11 ± 5.98404 → LCL 5.01596, UCL 16.98404
    chart = stats.individuals_chart(REF, [11.0, 17.1, 16.9, 4.9, math.nan])
    assert chart["centre"] == pytest.approx(11.0)
    assert chart["mr_bar"] == pytest.approx(2.25)
    assert chart["sigma"] == pytest.approx(1.99468, abs=1e-5)
    assert chart["ucl"] == pytest.approx(16.98404, abs=1e-5)
    assert chart["lcl"] == pytest.approx(5.01596, abs=1e-5)
    assert chart["outside"] == [False, True, False, True, False]


# ----------------------------------------------------------------------------------------------
# thickness distributions


def _table(fractions, width=10.0, wall=None):
    lower = np.arange(len(fractions)) * width
    return {"bin_lower_um": lower, "bin_upper_um": lower + width,
            "pore_volume_fraction": np.asarray(fractions, float),
            "wall_volume_fraction": np.asarray(wall if wall is not None else fractions, float)}


def test_quantiles_of_a_binned_distribution_hand_checked():
    # bins 0–10, 10–20, 20–30 µm holding 0.2, 0.5, 0.3 of the volume; linear within a bin:
    # D10 = 0 + 0.1/0.2·10 = 5; D50 = 10 + (0.5 − 0.2)/0.5·10 = 16; D90 = 20 + 0.2/0.3·10
    t = _table([0.2, 0.5, 0.3])
    q = stats.thickness_quantiles(t, q=(0.1, 0.5, 0.9))
    assert q == pytest.approx({"d10_um": 5.0, "d50_um": 16.0, "d90_um": 26.6667}, abs=1e-4)
    # cumulative at 15 µm: 0.2 + half of 0.5 = 0.45
    assert stats.cumulative_on_grid(t, [0, 15, 30, 40]) == pytest.approx([0, 0.45, 1, 1])
    # an empty distribution has no quantiles
    assert math.isnan(stats.thickness_quantiles(_table([0, 0]))["d50_um"])


def test_envelopes_and_quantile_shift():
    # three pieces whose volume sits wholly in bin 0, 1 or 2: pointwise the median curve is
    # the middle piece's, the 10–90 % band lies between the outer two
    pieces = [_table(np.eye(3)[k]) for k in range(3)]
    env = stats.batch_envelopes({"A": pieces}, grid_um=[5, 15, 25])
    a = env["batches"]["A"]
    assert a["n"] == 3
    assert a["median"] == pytest.approx(stats.cumulative_on_grid(pieces[1], [5, 15, 25]))
    assert np.all(np.array(a["low"]) <= a["median"]) and np.all(np.array(a["high"]) >= a["median"])
    # shift of batch medians of per-piece D50: a batch whose pieces are the reference's moved
    # by one bin (10 µm) is shifted by exactly 10 µm; the bootstrap CI holds 10
    ref = [stats.thickness_quantiles(_table(f)) for f in ([1, 1, 0, 0], [1, 2, 1, 0],
                                                           [0, 1, 1, 0], [2, 1, 0, 0])]
    moved = [stats.thickness_quantiles(_table(f)) for f in ([0, 1, 1, 0], [0, 1, 2, 1],
                                                             [0, 0, 1, 1], [0, 2, 1, 0])]
    shift = stats.quantile_shift(moved, ref, n_boot=500, seed=1)
    assert shift["d50_um"]["shift_um"] == pytest.approx(10.0)
    assert shift["d50_um"]["ci_low"] <= 10.0 <= shift["d50_um"]["ci_high"]
    same = stats.quantile_shift(ref, ref, n_boot=200)
    assert same["d50_um"]["shift_um"] == 0.0


# ----------------------------------------------------------------------------------------------
# the batch report


_R = [10.0, 10.5, 9.5, 10.2, 9.8, 10.1, 9.9, 10.0]


def _pieces():
    rows = []
    groups = {"R": _R, "E": [v + 0.05 for v in _R], "S": [v + 3.0 for v in _R],
              "T": [10.0, 11.0]}
    for batch, values in groups.items():
        for k, v in enumerate(values):
            rows.append({"sample_id": f"{batch}{k}", "batch": batch, "status": "ok",
                         "porosity_gas": v / 20.0, "cell_density_per_mm3": v * 100.0})
    rows.append({"sample_id": "X0", "batch": "E", "status": "failed", "porosity_gas": ""})
    return rows, groups


def test_batch_report_verdicts_and_tests(tmp_path):
    rows, groups = _pieces()
    report = batch_report(rows, reference="R", margins={"porosity_gas": 0.05},
                          measures=["porosity_gas", "cell_density_per_mm3"])
    v = report["verdicts"]
    assert list(report["batches"]) == ["R", "E", "S", "T"]
    assert report["batches"]["E"] == 8  # the failed piece is left out
    assert v["E"]["porosity_gas"]["verdict"] == EQUIVALENT
    assert v["S"]["porosity_gas"]["verdict"] == DIFFERENT
    assert v["T"]["porosity_gas"]["verdict"] == INCONCLUSIVE
    assert v["T"]["porosity_gas"]["pieces_needed"] >= 3
    assert v["E"]["cell_density_per_mm3"]["verdict"] == NO_MARGIN
    assert v["S"]["porosity_gas"]["difference"] == pytest.approx(3.0 / 20.0)
    # across batches: the numbers of scipy.stats on the same piece values
    f = st.f_oneway(*[np.array(g) / 20.0 for g in groups.values()])
    assert report["across_batches"]["porosity_gas"]["anova_p"] == pytest.approx(f.pvalue)
    # the control chart flags the shifted batch (+3 ≫ 3σ̂ of the reference)
    outside = {p["sample_id"]: p["outside"] for p in report["control_chart"]["points"]}
    assert all(outside[f"S{k}"] for k in range(8)) and not any(outside[f"R{k}"]
                                                                   for k in range(8))

    # no reference named: the first batch of the table
    assert batch_report(rows, reference=None, measures=["porosity_gas"])["reference"] == "R"

    paths = write_batch_outputs(tmp_path, report)
    names = {p.name for p in paths}
    assert {"batch_summary.csv", "verdicts.json", "batch_measures.png",
            "batch_control_chart.png"} <= names
    with open(tmp_path / "batch_summary.csv", newline="") as fh:
        summary = list(csv.DictReader(fh))
    assert len(summary) == 4 * 2
    row = next(r for r in summary if r["batch"] == "S" and r["measure"] == "porosity_gas")
    assert row["verdict"] == DIFFERENT and float(row["n"]) == 8
    data = json.loads((tmp_path / "verdicts.json").read_text())
    e = data["verdicts"]["E"]["porosity_gas"]
    for key in ("n_ref", "n", "mean_ref", "mean", "difference", "ci_low", "ci_high", "margin",
                "p_tost", "p_welch", "p_mannwhitney", "verdict", "pieces_needed"):
        assert key in e
    assert (tmp_path / "figures" / "batch_measures.png").read_bytes()[:4] == b"\x89PNG"


def test_batch_report_reads_thickness_distributions(tmp_path):
    from ctpore.io.result_folder import write_csv_rows

    rows = []
    for batch, offset in (("R", 0), ("B", 1)):
        for k in range(3):
            sid = f"{batch}{k}"
            fr = np.roll([3.0, 2.0 + k, 1.0, 0.0, 0.0], offset)
            t = _table(fr / fr.sum(), wall=[1, 0, 0, 0, 0])
            (tmp_path / sid).mkdir()
            write_csv_rows(tmp_path / sid / "thickness_distribution.csv", list(t),
                           [list(r) for r in zip(*t.values())])
            rows.append({"sample_id": sid, "batch": batch, "porosity_gas": 0.5 + 0.01 * k})
    report = batch_report(rows, reference="R", measures=["porosity_gas"], pieces_dir=tmp_path)
    pore = report["distributions"]["pore"]
    # every B piece is its R piece moved up by one 10 µm bin → the D50 medians differ by 10 µm
    assert pore["shift_vs_reference"]["B"]["d50_um"]["shift_um"] == pytest.approx(10.0)
    assert pore["envelopes"]["batches"]["B"]["n"] == 3
    paths = write_batch_outputs(tmp_path / "out", report)
    assert any(p.name == "batch_thickness_envelopes.png" for p in paths)


def test_batch_report_lists_every_bad_argument_at_once():
    rows, _ = _pieces()
    with pytest.raises(InputError) as err:
        batch_report(rows, reference="Q", measures=["porosity_gas", "porosity_typo"],
                     margins={"porosity_gas": -1.0, "wall_thickness_d50_um": 2.0}, alpha=0.7)
    msg = str(err.value)
    for part in ("'Q'", "porosity_typo", "must be a number > 0", "wall_thickness_d50_um",
                 "alpha"):
        assert part in msg
