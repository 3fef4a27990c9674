"""Scan against simulation: a model made from the phantom's own ground truth agrees within the
sampling noise; known shifts, units, rotations and shapes give the expected numbers.

The phantom: an ellipsoidal piece whose voxels are pore independently with probability
p(z, y) = 0.45 + 0.3·(z − zc)/280 µm + 0.1·(y − yc)/160 µm (linear, so a symmetric kernel's
average equals p at its centre wherever the kernel lies inside the piece). For independent
voxels the integral range is one voxel volume, A3 = v (Lantuéjoul 1991, J. Microsc. 161:387,
from memory; REFERENCES.md "Representative volume"), so the scan's sampling uncertainty of a
box of N voxels is sqrt(p(1 − p)/N) (Kanit et al. 2003, doi:10.1016/S0020-7683(03)00143-4).
"""

import json

import numpy as np
import pytest
from scipy.spatial import cKDTree
from scipy.spatial.distance import dice as scipy_dice
from scipy.spatial.distance import directed_hausdorff
from scipy.spatial.transform import Rotation
from skimage.metrics import hausdorff_distance

from ctpore.compare.align import explicit_transform, principal_transform, rotation_angle_deg
from ctpore.compare.command import add_compare_parser, compare_field, run_compare
from ctpore.compare.fields import ModelField, read_model_field
from ctpore.compare.metrics import dice, point_metrics, surface_distances, surface_mask
from ctpore.continuum.kernels import Kernel
from ctpore.errors import InputError
from ctpore.piece_frame import piece_frame

H = 10.0  # µm voxel
SHAPE = (64, 40, 30)
SEMI = (28, 16, 11)  # voxels
CENTRE = tuple((n - 1) / 2 for n in SHAPE)
G_Z = 0.3 / 280.0  # porosity per µm along z
G_Y = 0.1 / 160.0
KERNEL = Kernel("box", 90.0)  # 9 voxels per axis


def truth(points_um):
    p = np.asarray(points_um, float)
    return 0.45 + G_Z * (p[..., 0] - CENTRE[0] * H) + G_Y * (p[..., 1] - CENTRE[1] * H)


def inside(points_vox):
    q = (np.asarray(points_vox, float) - CENTRE) / SEMI
    return (q ** 2).sum(axis=-1) <= 1.0


@pytest.fixture(scope="module")
def phantom():
    idx = np.stack(np.meshgrid(*[np.arange(n) for n in SHAPE], indexing="ij"), axis=-1)
    env = inside(idx)
    rng = np.random.default_rng(7)
    pore = rng.random(SHAPE) < truth(idx * H)
    return np.where(env, np.where(pore, 1, 2), 0).astype(np.uint8)


@pytest.fixture(scope="module")
def model_points():
    idx = np.stack(np.meshgrid(*[np.arange(1, n, 2) for n in SHAPE], indexing="ij"),
                   axis=-1).reshape(-1, 3)
    idx = idx[inside(idx)]
    return idx * H


def _model(points, porosity=None, unit="um"):
    por = truth(points) if porosity is None else porosity
    return ModelField(points_um=np.asarray(points, float), porosity=np.asarray(por, float),
                      axisymmetric=False, source="test", length_unit=unit)


@pytest.fixture(scope="module")
def baseline(phantom, model_points):
    return compare_field(phantom, _model(model_points), spacing_um=H, kernel=KERNEL,
                         A3_um3=H ** 3, align="none", shape_metrics=False)


def test_ground_truth_model_agrees_within_sampling_noise(baseline):
    m = baseline["metrics"]
    sigma_rms = float(np.sqrt(np.nanmean(baseline["sigma"] ** 2)))
    # box of 729 voxels at p ≈ 0.45: sqrt(p(1-p)/729) ≈ 0.018 (integral-range law, Kanit 2003)
    assert 0.012 < sigma_rms < 0.03
    # RMSE near the sampling noise: within 25 % of the RMS sigma (tolerance: common practice,
    # no source; small extra error from the kernel cut at the tips)
    assert m["rmse"] < 1.25 * sigma_rms
    assert abs(m["bias"]) < 0.3 * sigma_rms
    # a normal error lies within 2 SD with probability 0.954 (normal distribution table)
    assert m["share_within_band"] > 0.9
    # points within ~1 voxel of the surface have less than half a kernel inside the piece
    # (min_coverage 0.5); the outer layer of a 2-voxel grid is about a tenth of the points
    assert m["coverage"] > 0.85
    assert m["pearson_r"] > 0.9


def test_shifted_front_raises_rmse_by_the_gradient(phantom, model_points, baseline):
    delta = 100.0  # µm along z: the model's porosity front moved by delta
    shifted = truth(model_points - np.array([delta, 0, 0]))
    out = compare_field(phantom, _model(model_points, shifted), spacing_um=H, kernel=KERNEL,
                        align="none", shape_metrics=False)
    m0, m1 = baseline["metrics"], out["metrics"]
    # model − truth = −G_Z·delta everywhere (linear gradient): bias moves by exactly that
    expected_shift = -G_Z * delta
    assert m1["bias"] - m0["bias"] == pytest.approx(expected_shift, rel=0.02)
    # E[(e + c)²] = E[e²] + c² when the noise e has mean ~0 (variance decomposition)
    assert m1["rmse"] == pytest.approx(np.hypot(m0["rmse"], expected_shift), rel=0.05)


def test_model_in_metres_compares_like_microns(phantom, model_points, baseline, tmp_path):
    p = tmp_path / "model_m.csv"
    z, y, x = (model_points * 1e-6).T
    np.savetxt(p, np.column_stack([x, y, z, truth(model_points)]), delimiter=",",
               header="x,y,z,porosity", comments="", fmt="%.17g")
    f = read_model_field(p, length_unit="m")
    assert np.allclose(f.points_um, model_points, atol=1e-6)
    out = compare_field(phantom, f, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3, align="none",
                        shape_metrics=False)
    for k in ("rmse", "bias", "coverage", "share_within_band"):
        assert out["metrics"][k] == pytest.approx(baseline["metrics"][k], rel=1e-6, abs=1e-9)
    # the same numbers read as mm are a piece 1000 times too small: it falls outside
    with pytest.raises(InputError, match="does not overlap"):
        compare_field(phantom, read_model_field(p, length_unit="mm"), spacing_um=H,
                      kernel=KERNEL, align="none", shape_metrics=False)


def test_principal_axes_recover_a_rotation_and_translation(phantom, model_points):
    r0 = Rotation.from_euler("zyx", [35, -20, 50], degrees=True).as_matrix()
    t0 = np.array([120.0, -45.0, 300.0])
    model_pts = (model_points - t0) @ r0  # so that scan = r0 @ model + t0
    model = _model(model_pts, truth(model_points), unit="m")
    out = compare_field(phantom, model, spacing_um=H, kernel=KERNEL, align="principal",
                        shape_metrics=False)
    t = out["transform"]
    assert rotation_angle_deg(t.rotation @ r0.T) < 1.0  # within a degree
    c = model_pts.mean(axis=0)
    assert np.linalg.norm(t.apply(c[None])[0] - (r0 @ c + t0)) < H  # within a voxel
    assert out["metrics"]["rmse"] < 0.03
    assert out["alignment"]["chosen"] == int(np.argmin(out["alignment"]["rmse_candidates"]))


def test_axisymmetric_model_against_the_ring_average(phantom):
    frame = piece_frame(phantom, spacing_um=H)
    length = frame.length_um
    zz, rr = np.meshgrid(np.arange(40.0, length - 40.0, 20.0), np.arange(0.0, 90.0, 20.0),
                         indexing="ij")
    a = zz.reshape(-1) + frame.extents_um[0, 0]  # axial from the centroid
    # the ring average of the linear y term is 0: the model is the z part of the truth
    por = 0.45 + G_Z * a * np.sign(frame.axes[0][0])
    model = ModelField(points_um=np.column_stack([rr.reshape(-1), zz.reshape(-1)]),
                       porosity=por, axisymmetric=True, source="test")
    out = compare_field(phantom, model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3,
                        shape_metrics=False)
    m = out["metrics"]
    assert m["coverage"] > 0.9
    assert m["rmse"] < 0.03 and m["pearson_r"] > 0.9
    # the revolved domain (shape metrics) lies between two cylinders: the union of the grid's
    # cells (radius max r + h/2) and of the discs of radius h·√2/2 around the points
    # (cylinder volume π R² L, geometry); 3 % slack for the voxelisation
    s = compare_field(phantom, model, spacing_um=H, kernel=KERNEL, A3_um3=H ** 3)["shape"]
    h = 20.0
    span = zz.max() - zz.min()
    low = np.pi * (rr.max() + h / 2) ** 2 * (span + h) / 1e9
    high = np.pi * (rr.max() + h * np.sqrt(0.5)) ** 2 * (span + h * np.sqrt(2)) / 1e9
    assert 0.97 * low < s["model_volume_mm3"] < 1.03 * high
    # placed from the other end (the centroid), the same model is clearly worse
    out_c = compare_field(phantom, model, spacing_um=H, kernel=KERNEL, z_origin="centroid",
                          shape_metrics=False)
    assert out_c["metrics"]["rmse"] > 2 * m["rmse"] or out_c["metrics"]["coverage"] < 0.7


def test_point_metrics_by_hand():
    # hand computation: differences 0.1, -0.1, 0.2 (third scan NaN -> dropped, 3 of 4 valid)
    m = point_metrics([0.5, 0.3, 0.6, 0.4], [0.4, 0.4, 0.4, np.nan],
                      sigma=[0.05, 0.06, 0.05, 0.05])
    assert m["rmse"] == pytest.approx(np.sqrt((0.01 + 0.01 + 0.04) / 3))
    assert m["mae"] == pytest.approx(0.4 / 3)
    assert m["bias"] == pytest.approx(0.2 / 3)
    assert m["coverage"] == 0.75 and m["n_valid"] == 3
    assert m["share_within_band"] == pytest.approx(2 / 3)  # 0.2 > 2·0.05


# --- shape metrics ----------------------------------------------------------------------------

def _cubes():
    a = np.zeros((14, 14, 14), bool)
    b = np.zeros_like(a)
    a[2:10, 2:10, 2:10] = True
    b[2:10, 2:10, 4:12] = True
    return a, b


def test_dice_by_hand_and_scipy():
    a, b = _cubes()
    # hand count: overlap 8·8·6 = 384, |A| = |B| = 512 -> 768 / 1024
    assert dice(a, b) == pytest.approx(0.75)
    # scipy.spatial.distance.dice is the dissimilarity 1 − Dice
    assert dice(a, b) == pytest.approx(1 - scipy_dice(a.ravel(), b.ravel()))


def test_hausdorff_against_skimage_and_scipy():
    a, b = _cubes()
    ball = np.zeros((20, 20, 20), bool)
    z, y, x = np.mgrid[:20, :20, :20]
    ball[(z - 9) ** 2 + (y - 10) ** 2 + (x - 8) ** 2 <= 36] = True
    box = np.zeros_like(ball)
    box[5:14, 4:16, 6:13] = True
    for p, q in ((a, b), (ball, box)):
        d = surface_distances(p, q, spacing_um=1.0)
        # skimage.metrics.hausdorff_distance on the surface voxels (scikit-image reference)
        assert d["hausdorff_um"] == pytest.approx(
            hausdorff_distance(surface_mask(p), surface_mask(q)), rel=1e-6)
    spacing = (2.0, 1.0, 0.5)
    d = surface_distances(ball, box, spacing_um=spacing)
    pa = np.argwhere(surface_mask(ball)) * spacing
    pb = np.argwhere(surface_mask(box)) * spacing
    # scipy.spatial.distance.directed_hausdorff, anisotropic coordinates
    assert d["hausdorff_a_to_b_um"] == pytest.approx(directed_hausdorff(pa, pb)[0], rel=1e-6)
    assert d["hausdorff_b_to_a_um"] == pytest.approx(directed_hausdorff(pb, pa)[0], rel=1e-6)
    # mean surface distance by brute-force nearest neighbours (scipy cKDTree)
    da = cKDTree(pb).query(pa)[0]
    db = cKDTree(pa).query(pb)[0]
    assert d["mean_surface_distance_um"] == pytest.approx(
        (da.sum() + db.sum()) / (da.size + db.size), rel=1e-6)


def test_model_domain_matches_the_envelope(phantom, model_points):
    out = compare_field(phantom, _model(model_points), spacing_um=H, kernel=KERNEL,
                        align="none", shape_metrics=True)
    s = out["shape"]
    # model points every 2 voxels inside the same ellipsoid: the domain is the envelope up to
    # about one model step at the surface (common practice, no source)
    assert s["dice"] > 0.9
    assert 0.85 < s["volume_ratio"] < 1.2
    assert s["hausdorff_um"] <= 3 * H


# --- errors and the command -------------------------------------------------------------------

def test_explicit_transform_refuses_a_reflection():
    with pytest.raises(InputError, match="proper 3x3 rotation"):
        explicit_transform(rotation=np.diag([1.0, 1.0, -1.0]))


def test_principal_needs_a_3d_cloud(phantom):
    frame = piece_frame(phantom, spacing_um=H)
    flat = np.column_stack([np.zeros(50), np.arange(50.0), np.arange(50.0) ** 0.5])
    with pytest.raises(InputError, match="plane or on a line"):
        principal_transform(flat, frame)


def _result_folder(path, phases):
    from ctpore.io.ome_tiff import write_ome_tiff
    from ctpore.recipe import Recipe

    path.mkdir()
    write_ome_tiff(path / "phases.ome.tif", phases, H)
    (path / "summary.json").write_text("{}", encoding="utf-8")
    (path / "recipe.toml").write_text(Recipe().to_toml(), encoding="utf-8")
    (path / "rev").mkdir()
    # A3 of independent voxels = one voxel volume (Lantuéjoul 1991, from memory)
    (path / "rev" / "rev.json").write_text(json.dumps({
        "integral_range_um3": H ** 3, "recommended_width_um": 90.0,
        "recommended_gaussian_sigma_um": 25.0, "recommended_ball_diameter_um": 110.0}))
    return path


def _args(argv):
    import argparse

    parser = argparse.ArgumentParser()
    add_compare_parser(parser.add_subparsers(dest="command"))
    return parser.parse_args(argv)


def test_command_writes_the_comparison(phantom, model_points, baseline, tmp_path, capsys):
    folder = _result_folder(tmp_path / "piece", phantom)
    field = tmp_path / "sim.csv"
    z, y, x = (model_points / 1000).T
    np.savetxt(field, np.column_stack([x, y, z, truth(model_points), np.full(len(x), 12.5)]),
               delimiter=",", header="x,y,z,porosity,time_s", comments="", fmt="%.17g")
    args = _args(["compare", str(folder), str(field), "--length-unit", "mm", "--kernel", "box",
                  "--width", "auto", "--align", "none", "--quiet"])
    assert run_compare(args) == 0
    out = folder / "compare_sim"
    rep = json.loads((out / "comparison.json").read_text())
    for k in ("rmse", "mae", "bias", "pearson_r", "coverage", "share_within_band", "n_points",
              "kernel", "width_um", "transform", "field_source", "length_unit"):
        assert k in rep
    assert rep["width_um"] == 90.0 and rep["length_unit"] == "mm" and rep["time_s"] == 12.5
    assert rep["rmse"] == pytest.approx(baseline["metrics"]["rmse"], rel=1e-6)
    assert rep["shape"]["dice"] > 0.9
    rows = (out / "difference.csv").read_text().splitlines()
    assert rows[0].split(",")[-4:] == ["model_porosity", "scan_porosity", "sigma", "difference"]
    assert len(rows) == len(model_points) + 1
    assert (out / "parity.png").stat().st_size > 0 and (out / "difference.png").is_file()
    with pytest.raises(InputError, match="already exists"):
        run_compare(args)
    assert run_compare(_args(["compare", str(folder), str(field), "--length-unit", "mm",
                              "--width", "90um", "--align", "none", "--force",
                              "--quiet"])) == 0
