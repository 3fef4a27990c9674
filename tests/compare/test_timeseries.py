"""Scans at known puffing times against a model over time: linear interpolation in time (hand
numbers and numpy.interp), a known time shift, no extrapolation, bad manifests refused, fields
interpolated point by point, ring-volume weights, and the command end to end.

The scan's standard uncertainty combines the sampling variance p(1 − p)·A3/V (Kanit et al.
2003, doi:10.1016/S0020-7683(03)00143-4) with the threshold band read as a rectangular
distribution, half-width/√3 (GUM, JCGM 100:2008, §4.3.7), in quadrature (GUM §5.1.2).
"""

import argparse
import csv
import json
import math

import numpy as np
import pytest

from ctpore.compare.command import add_compare_parser, run_compare
from ctpore.compare.fields import ModelField
from ctpore.compare.timeseries import (field_at_time, field_mean_porosity, interpolate_curve,
                                       point_weights, read_manifest, read_model_curve,
                                       read_time_model, scan_uncertainty, time_weights)
from ctpore.errors import InputError

H = 10.0  # µm voxel of the test phantoms
A3 = H ** 3  # integral range of independent voxels: one voxel volume (Lantuéjoul 1991, from
# memory; REFERENCES.md "Representative volume")


def _write_csv(path, header, rows):
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)
    return path


def _phantom(p, seed, shape=(36, 28, 24), semi=(15, 11, 9)):
    """Ellipsoidal piece whose voxels are pore independently with probability p."""
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in shape], indexing="ij"), axis=-1)
    centre = np.array([(n - 1) / 2 for n in shape])
    env = (((idx - centre) / semi) ** 2).sum(axis=-1) <= 1.0
    pore = np.random.default_rng(seed).random(shape) < p
    return np.where(env, np.where(pore, 1, 2), 0).astype(np.uint8)


def _result(path, *, porosity, phases=None, envelope_mm3=0.1, low=None, high=None):
    """A minimal result folder: phases, summary.json, recipe.toml and rev/rev.json."""
    from ctpore.io.ome_tiff import write_ome_tiff
    from ctpore.recipe import Recipe

    path.mkdir(parents=True)
    phases = _phantom(0.5, 1, shape=(12, 12, 12), semi=(5, 5, 5)) if phases is None else phases
    write_ome_tiff(path / "phases.ome.tif", phases, H)
    summary = {"porosity_gas": porosity, "envelope_volume_mm3": envelope_mm3,
               "threshold": {"porosity_low": porosity - 0.03 if low is None else low,
                             "porosity_high": porosity + 0.03 if high is None else high}}
    (path / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    (path / "recipe.toml").write_text(Recipe().to_toml(), encoding="utf-8")
    (path / "rev").mkdir()
    (path / "rev" / "rev.json").write_text(json.dumps({
        "integral_range_um3": 1e6, "recommended_width_um": 90.0,
        "recommended_gaussian_sigma_um": 25.0, "recommended_ball_diameter_um": 110.0}))
    return path


def _args(argv):
    parser = argparse.ArgumentParser()
    add_compare_parser(parser.add_subparsers(dest="command"))
    return parser.parse_args(["compare", *argv])


# --- interpolation in time --------------------------------------------------------------------

def test_time_weights_by_hand():
    # 4 s between model times 3 and 6: weight of the later one (4 − 3)/(6 − 3) = 1/3
    assert time_weights([0.0, 3.0, 6.0], 4.0) == (1, 2, pytest.approx(1 / 3), "interpolated")
    assert time_weights([0.0, 3.0, 6.0], 3.0) == (1, 1, 0.0, "exact")
    assert time_weights([0.0, 3.0, 6.0], 6.0 + 1e-12)[3] == "exact"  # within TIME_RTOL


def test_interpolation_is_exact_on_a_linear_curve(tmp_path):
    # φ(t) = 0.40 + 0.02·t at 0, 5, 10 s; hand values at 2.5, 5, 7.5, 10 s
    path = _write_csv(tmp_path / "curve.csv", ["time_s", "porosity"],
                      [[10, 0.60], [0, 0.40], [5, 0.50]])  # unsorted on purpose
    curve = read_model_curve(path)
    assert curve.time_s.tolist() == [0.0, 5.0, 10.0]
    at = interpolate_curve(curve, [2.5, 5.0, 7.5, 10.0])
    assert at["porosity"] == pytest.approx([0.45, 0.50, 0.55, 0.60], abs=1e-15)
    assert at["how"].tolist() == ["interpolated", "exact", "interpolated", "exact"]
    assert at["time_before_s"].tolist() == [0.0, 5.0, 5.0, 10.0]
    assert at["time_after_s"].tolist() == [5.0, 5.0, 10.0, 10.0]
    # reference: numpy.interp (piecewise linear) on an uneven curve
    t = np.array([0.0, 1.0, 4.0, 9.0])
    p = np.array([0.3, 0.35, 0.5, 0.62])
    _write_csv(tmp_path / "uneven.csv", ["time_s", "porosity"], np.column_stack([t, p]))
    q = np.linspace(0.0, 9.0, 19)
    got = interpolate_curve(read_model_curve(tmp_path / "uneven.csv"), q)["porosity"]
    assert got == pytest.approx(np.interp(q, t, p), abs=1e-15)


def test_extrapolation_is_refused():
    from ctpore.compare.timeseries import ModelCurve

    curve = ModelCurve(time_s=np.array([0.0, 9.0]), porosity=np.array([0.4, 0.6]),
                       source="curve.csv")
    for t in (-0.5, 9.5):
        with pytest.raises(InputError, match=r"outside the model's time range 0–9 s.*"
                                             r"does not extrapolate"):
            interpolate_curve(curve, [3.0, t])


def test_scan_uncertainty_by_hand():
    # p = 0.5, A3 = 1e6 µm³, V = 0.1 mm³: σ_s² = 0.25·1e6/1e8 = 0.0025 (Kanit 2003);
    # band 0.47–0.53: a = 0.03, σ_t = 0.03/√3 (GUM §4.3.7); u = √(0.0025 + 0.0003)
    u = scan_uncertainty(0.5, envelope_volume_mm3=0.1, A3_um3=1e6, porosity_low=0.47,
                         porosity_high=0.53)
    assert u["sigma_sampling"] == pytest.approx(0.05)
    assert u["sigma_segmentation"] == pytest.approx(0.03 / math.sqrt(3))
    assert u["uncertainty"] == pytest.approx(math.sqrt(0.0028))
    assert math.isnan(scan_uncertainty(0.5, envelope_volume_mm3=0.1)["uncertainty"])


# --- the command with a curve -----------------------------------------------------------------

E = np.array([0.01, -0.01, 0.005, -0.005])  # scan offsets from the curve, mean 0
TIMES = np.array([2.0, 4.0, 6.0, 8.0])


def _curve_case(tmp_path):
    for t, e in zip(TIMES, E):
        _result(tmp_path / "scans" / f"t{t:g}", porosity=0.40 + 0.02 * t + e)
    manifest = _write_csv(tmp_path / "scans" / "manifest.csv", ["time_s", "result"],
                          [[t, f"t{t:g}"] for t in TIMES])
    return manifest


def _curve(path, shift_s=0.0):
    t = np.array([0.0, 3.0, 6.0, 9.0])
    return _write_csv(path, ["time_s", "porosity"],
                      np.column_stack([t, 0.40 + 0.02 * (t - shift_s)]))


def test_a_known_time_shift_raises_rmse_by_the_expected_amount(tmp_path, capsys):
    manifest = _curve_case(tmp_path)
    assert run_compare(_args([str(manifest), str(_curve(tmp_path / "model.csv")),
                              "--quiet"])) == 0
    out = tmp_path / "scans" / "compare_over_time_model"
    rep = json.loads((out / "comparison_timeseries.json").read_text())
    c0 = rep["curve_metrics"]
    # linear curve: interpolation is exact, model − scan = −e; RMSE = √mean(e²), bias = 0
    assert c0["rmse"] == pytest.approx(math.sqrt(np.mean(E ** 2)), rel=1e-12)
    assert c0["bias"] == pytest.approx(0.0, abs=1e-15)
    assert [r["model_value"] for r in rep["times"]] == ["interpolated", "interpolated",
                                                        "exact", "interpolated"]
    assert c0["n_interpolated"] == 3 and rep["n_times"] == 4
    assert rep["times"][1]["model_time_before_s"] == 3.0
    assert rep["times"][1]["model_time_after_s"] == 6.0
    assert rep["extrapolation"].startswith("refused")
    # u by hand at t = 2 s: p = 0.45, σ_s² = 0.45·0.55·1e6/1e8, σ_t = 0.03/√3
    u = math.sqrt(0.45 * 0.55 * 1e-2 + 0.03 ** 2 / 3)
    assert rep["times"][0]["scan_uncertainty"] == pytest.approx(u, rel=1e-9)
    assert c0["share_within_band"] == 1.0  # every |e| ≤ 0.01 < 2u ≈ 0.1

    # the model run 1.5 s late: model − scan = −0.02·1.5 − e at every time, so bias moves by
    # −0.03 and RMSE² = mean(e²) + 0.03² (mean e = 0; variance decomposition)
    with pytest.raises(InputError, match="already exists"):
        run_compare(_args([str(manifest), str(_curve(tmp_path / "model.csv", 1.5)),
                           "--quiet"]))
    assert run_compare(_args([str(manifest), str(tmp_path / "model.csv"), "--force",
                              "--quiet"])) == 0
    c1 = json.loads((out / "comparison_timeseries.json").read_text())["curve_metrics"]
    assert c1["bias"] == pytest.approx(-0.03, abs=1e-12)
    assert c1["rmse"] == pytest.approx(math.hypot(c0["rmse"], 0.03), rel=1e-9)

    with open(out / "comparison_timeseries.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert [float(r["time_s"]) for r in rows] == TIMES.tolist()
    assert rows[2]["model_value"] == "exact" and rows[0]["field_rmse"] == ""
    assert (out / "timeseries.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert rep["manifest"] == "../manifest.csv"  # relative to the output folder
    assert capsys.readouterr().err == ""


def test_scan_time_outside_the_model_is_refused_before_any_output(tmp_path):
    manifest = _curve_case(tmp_path)
    t = np.array([0.0, 3.0, 6.0])  # the scan at 8 s lies beyond the model's 6 s
    model = _write_csv(tmp_path / "short.csv", ["time_s", "porosity"],
                       np.column_stack([t, 0.4 + 0.02 * t]))
    with pytest.raises(InputError, match=r"scan time 8 s lies outside .* 0–6 s"):
        run_compare(_args([str(manifest), str(model), "--quiet"]))
    assert not (tmp_path / "scans" / "compare_over_time_short").exists()
    assert not any(p.name.startswith(".compare") for p in (tmp_path / "scans").iterdir())


@pytest.mark.parametrize("rows, match, fix", [
    ([["time", "result"], ["4", "t4"]], r"column\(s\) \['time_s'\] missing",
     "time_s,result"),
    ([["time_s", "result"], ["4", "t4"], ["6", "nowhere"]],
     r"line 3: result folder 'nowhere' does not exist", "relative to the manifest"),
    ([["time_s", "result"], ["4", "t4"], ["4.0", "t6"]],
     r"time_s 4 appears twice \(lines 2 and 3\)", "one scan per time"),
    ([["time_s", "result"], ["nan", "t4"]], r"line 2: time_s is nan, not a finite number",
     "finite time_s"),
    ([["time_s", "result"], ["", "t4"]], r"line 2: time_s is empty", "in seconds"),
    ([["time_s", "result"], ["4", ""]], r"line 2: the result column is empty",
     "result folder"),
])
def test_bad_manifests_name_the_file_and_the_fix(tmp_path, rows, match, fix):
    for name in ("t4", "t6"):
        (tmp_path / name).mkdir()
    path = _write_csv(tmp_path / "bad.csv", rows[0], rows[1:])
    with pytest.raises(InputError, match=match) as err:
        read_manifest(path)
    assert str(path) in str(err.value) and fix in err.value.fix


def test_bad_curve_and_model_files(tmp_path):
    dup = _write_csv(tmp_path / "dup.csv", ["time_s", "porosity"], [[1, 0.4], [1, 0.5]])
    with pytest.raises(InputError, match="dup.csv: time_s 1 appears twice"):
        read_model_curve(dup)
    pct = _write_csv(tmp_path / "pct.csv", ["time_s", "porosity"], [[1, 45.0]])
    with pytest.raises(InputError, match="not a fraction in"):
        read_model_curve(pct)
    other = _write_csv(tmp_path / "other.csv", ["time_s", "value"], [[1, 0.4]])
    with pytest.raises(InputError, match="none of the time-series forms"):
        read_time_model(other)
    with pytest.raises(InputError, match="single field file has no time axis"):
        read_time_model(tmp_path / "field.npz")


# --- fields at times --------------------------------------------------------------------------

def _table(path, times, por_at, pts_at=None, unit_scale=1.0):
    """A 3-D point table with a time_s column (x, y, z in mm when unit_scale = 1e-3)."""
    rows = []
    for t in times:
        pts = pts_at(t)
        for (z, y, x), p in zip(pts, por_at(t, pts)):
            rows.append([x * unit_scale, y * unit_scale, z * unit_scale, p, t])
    return _write_csv(path, ["x", "y", "z", "porosity", "time_s"], rows)


GRID = np.stack(np.meshgrid(np.arange(3.0), np.arange(2.0), np.arange(2.0), indexing="ij"),
                axis=-1).reshape(-1, 3) * 100.0


def test_fields_are_interpolated_point_by_point(tmp_path):
    def por(t, pts):
        return 0.2 + 0.001 * pts[:, 0] + 0.03 * t

    path = _table(tmp_path / "fields.csv", [0.0, 10.0], por, lambda t: GRID)
    series = read_time_model(path, length_unit="um").fields
    assert series.kind == "point table" and series.time_s.tolist() == [0.0, 10.0]
    f, note = field_at_time(series, 4.0)
    # linear in time: 0.6·φ(0) + 0.4·φ(10) = φ(4) for a field linear in t
    assert f.porosity == pytest.approx(por(4.0, GRID), abs=1e-14)
    assert note["how"] == "interpolated" and note["weights"] == pytest.approx([0.6, 0.4])
    assert note["interpolation"] == "values on identical points" and f.time_s == 4.0
    f10, note10 = field_at_time(series, 10.0)
    assert note10["how"] == "exact" and f10.porosity == pytest.approx(por(10.0, GRID))
    # nearest: 4 s -> 0 s, 6 s -> 10 s, a tie at 5 s -> the earlier
    for t, expected in ((4.0, 0.0), (6.0, 10.0), (5.0, 0.0)):
        g, n = field_at_time(series, t, mode="nearest")
        assert n["how"] == "nearest" and n["model_times_s"] == [expected]
        assert g.time_s == expected
    with pytest.raises(InputError, match="outside the model's time range"):
        field_at_time(series, 12.0)


def test_a_moving_mesh_is_interpolated_node_by_node(tmp_path):
    grow = {0.0: 1.0, 10.0: 1.5}  # the mesh stretches by 50 % between 0 and 10 s
    files = []
    for t, g in grow.items():
        files.append(_table(tmp_path / f"f{t:g}.csv", [t], lambda t, p: np.full(len(p), 0.5),
                            lambda t, g=g: GRID * g))
    listing = _write_csv(tmp_path / "list.csv", ["time_s", "field"],
                         [[t, f.name] for t, f in zip(grow, files)])
    series = read_time_model(listing, length_unit="um").fields
    assert series.kind == "field list"
    f, note = field_at_time(series, 2.0)
    assert note["interpolation"] == "positions and values node by node"
    assert f.points_um == pytest.approx(GRID * 1.1)  # 0.8·1.0 + 0.2·1.5
    # a field with other points cannot be interpolated, but the nearest time can be used
    _table(tmp_path / "f10.csv", [10.0], lambda t, p: np.full(len(p), 0.5),
           lambda t: GRID[:-1])
    series = read_time_model(listing, length_unit="um").fields
    with pytest.raises(InputError, match="hold 12 and 11 points") as err:
        field_at_time(series, 2.0)
    assert "--field-time nearest" in err.value.fix
    assert field_at_time(series, 2.0, mode="nearest")[1]["model_times_s"] == [0.0]
    # a listed file that is missing
    bad = _write_csv(tmp_path / "bad_list.csv", ["time_s", "field"], [[0, "gone.npz"]])
    with pytest.raises(InputError, match=r"line 2: field file 'gone.npz' does not exist"):
        read_time_model(bad)


def test_ring_volume_weights_on_regular_grids():
    # Pappus–Guldinus: a ring of cross-section A at radius r has volume 2π·r·A. Cell-centred
    # radii r = (k + ½)h own [kh, (k+1)h]: ∫r dr ∝ (k + ½), i.e. ∝ r. A node on the axis owns
    # [0, h/2]: ∫r dr = h²/8 against h² for the node at r = h (ratio 1/8).
    for r_nodes, first_ratio in (((np.arange(6) + 0.5) * 10.0, 1 / 3),
                                 (np.arange(6) * 10.0, 1 / 8)):
        rr, zz = np.meshgrid(r_nodes, np.arange(9) * 7.0, indexing="ij")
        f = ModelField(points_um=np.column_stack([rr.ravel(), zz.ravel()]),
                       porosity=0.1 + 0.001 * rr.ravel(), axisymmetric=True)
        w = point_weights(f).reshape(rr.shape)
        assert w[0, 4] / w[1, 4] == pytest.approx(first_ratio)
        assert w[2:, 4] / w[1, 4] == pytest.approx(r_nodes[2:] / r_nodes[1])
        assert np.ptp(w[3]) == pytest.approx(0.0, abs=1e-15)  # all z alike
        # the mean is Σ w·φ; on a 3-D field every point counts alike
        assert field_mean_porosity(f) == pytest.approx(float(np.sum(w.ravel() * f.porosity)))
    g = ModelField(points_um=GRID, porosity=np.linspace(0.2, 0.4, len(GRID)),
                   axisymmetric=False)
    assert field_mean_porosity(g) == pytest.approx(0.3)


def test_time_series_with_fields_end_to_end(tmp_path):
    """Scans at 2 and 6 s of uniform pieces (p = 0.3 + 0.05·t) against model fields at 0, 4 and
    8 s on the scan's own points: interpolated to 0.4 and 0.6, the field bias is within the
    sampling noise, and each time gets its comparison folder."""
    shape = (36, 28, 24)
    for t in (2.0, 6.0):
        ph = _phantom(0.3 + 0.05 * t, int(t), shape)
        env = ph != 0
        p = float(np.mean(ph[env] == 1))
        _result(tmp_path / f"r{t:g}", porosity=p, phases=ph,
                envelope_mm3=env.sum() * H ** 3 / 1e9)
        (tmp_path / f"r{t:g}" / "rev" / "rev.json").write_text(json.dumps({
            "integral_range_um3": A3, "recommended_width_um": 90.0,
            "recommended_gaussian_sigma_um": 25.0, "recommended_ball_diameter_um": 110.0}))
    manifest = _write_csv(tmp_path / "m.csv", ["time_s", "result"], [[2, "r2"], [6, "r6"]])
    idx = np.stack(np.meshgrid(*[np.arange(4, n - 4, 3) for n in shape], indexing="ij"),
                   axis=-1).reshape(-1, 3)
    centre = np.array([(n - 1) / 2 for n in shape])
    pts = idx[((((idx - centre) / (15, 11, 9)) ** 2).sum(axis=1) <= 0.6)] * H
    model = _table(tmp_path / "fields.csv", [0.0, 4.0, 8.0],
                   lambda t, p: np.full(len(p), 0.3 + 0.05 * t), lambda t: pts,
                   unit_scale=1e-3)
    assert run_compare(_args([str(manifest), str(model), "--length-unit", "mm", "--kernel",
                              "box", "--width", "90um", "--align", "none", "--quiet"])) == 0
    out = tmp_path / "compare_over_time_fields"
    rep = json.loads((out / "comparison_timeseries.json").read_text())
    assert rep["model_form"] == "point table" and rep["curve_from_fields"] is True
    assert rep["field_times_s"] == [0.0, 4.0, 8.0]
    for row, t0, t1 in zip(rep["times"], (0.0, 4.0), (4.0, 8.0)):
        f = row["field"]
        assert f["how"] == "interpolated" and f["model_times_s"] == [t0, t1]
        assert f["weights"] == pytest.approx([0.5, 0.5])
        # box of 729 voxels: σ = √(p(1 − p)/729) ≈ 0.018 (Kanit 2003); the mean over ~100
        # overlapping boxes is off by less than 2σ (common practice, no source)
        assert abs(f["bias"]) < 0.04
        assert f["share_within_band"] > 0.8
        sub = out / f["folder"]
        for name in ("comparison.json", "difference.csv", "maps.png", "profiles.png"):
            assert (sub / name).is_file()
        assert json.loads((sub / "comparison.json").read_text())["model_time"]["how"] \
            == "interpolated"
    # the curve made from the fields is 0.3 + 0.05·t, so the mean porosity differs from the
    # scan's by its sampling error only
    assert rep["curve_porosity"] == pytest.approx([0.3, 0.5, 0.7])
    assert abs(rep["curve_metrics"]["bias"]) < 0.03
    assert rep["field_metrics"]["n_times"] == 2
