"""The demo's invented model output: read back through ctpore's own readers, deterministic,
consistent with the scenario's scale and with itself (fields against the curve), and a
porosity front that moves inward over time."""

from __future__ import annotations

import hashlib
import json
import math

import numpy as np
import pytest

from ctpore.compare.fields import read_model_field
from ctpore.compare.timeseries import (field_at_time, field_mean_porosity, interpolate_curve,
                                       read_model_curve, read_time_model)
from ctpore.demo_model import (MODEL_TIMES_S, NOMINAL_LENGTH_UM, body_semi_length_um,
                               model_mean_porosity, model_progress, rz_field,
                               write_demo_model)
from ctpore.demo_scenario import expansion_progress, make_piece
from ctpore.errors import InputError


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    out = tmp_path_factory.mktemp("model")
    return out, write_demo_model(out)


def _digest(folder):
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def test_files_read_back_through_the_model_readers(written):
    out, paths = written
    desc = json.loads((out / "model.json").read_text())
    assert desc["length_units"] == {"rz_fields.csv": "mm", "grid_<t>s.npz": "m"}
    for setting, p in paths.items():
        series = read_time_model(p["rz"], length_unit="mm").fields
        assert series.time_s.tolist() == list(MODEL_TIMES_S)
        for t in MODEL_TIMES_S:
            f = read_model_field(p["rz"], length_unit="mm", time_s=t)
            assert f.axisymmetric and f.n_points == 28 * 8 and f.time_s == t
            assert set(f.extra) == {"moisture_wb", "temperature_c"}
            # z runs from the first tip: the outermost node sits at a·(1 + s_max),
            # s_max = 1 − 1/28 (cell-centred nodes), a in µm: mm × 1000 (unit conversion)
            a = body_semi_length_um(model_progress(setting, t))
            assert f.points_um[:, 1].max() == pytest.approx(a * (2 - 1 / 28), rel=1e-12)
            assert f.points_um[:, 0].min() >= 0.0
        # the 3-D grids, listed with their times, in metres declared in the files
        grids = read_time_model(p["grid_list"]).fields
        assert grids.time_s.tolist() == list(MODEL_TIMES_S)
        g = grids.field(len(MODEL_TIMES_S) - 1)
        assert g.length_unit == "m" and not g.axisymmetric
        step = np.diff(np.unique(g.points_um[:, 2]))
        assert step == pytest.approx(np.full(step.size, 50.0))  # 5e-5 m = 50 µm
        # the body's long axis lies along the grid's x: its extent is 2a (± a step)
        a = body_semi_length_um(model_progress(setting, MODEL_TIMES_S[-1]))
        assert np.ptp(g.points_um[:, 2]) == pytest.approx(2 * a, abs=100.0)
        curve = read_model_curve(p["curve"])
        assert curve.time_s[0] == 0.0 and curve.time_s[-1] == MODEL_TIMES_S[-1]


def test_rewriting_gives_identical_bytes(written, tmp_path):
    out, _ = written
    write_demo_model(tmp_path / "again")
    assert _digest(tmp_path / "again") == _digest(out)


def test_front_moves_inward_and_porosity_rises(written):
    out, paths = written
    for setting in paths:
        fronts = []
        for t in MODEL_TIMES_S[1:]:
            f = rz_field(setting, t)
            # on the mid-plane row (the nodes nearest z = a), porosity against the radius:
            # the front is where it passes midway between its centre and outer values
            z = f["z_um"]
            row = np.isclose(z, z[np.argmin(np.abs(z - np.median(z)))])
            r, p = f["r_um"][row], f["porosity"][row]
            order = np.argsort(r)
            r, p = r[order], p[order]
            mid = 0.5 * (p[0] + p[-2])  # the last node is in the skin
            k = int(np.argmax(p >= mid))
            # linear interpolation between the nodes either side of the crossing
            x = r[0] if k == 0 else np.interp(mid, p[k - 1:k + 1], r[k - 1:k + 1])
            fronts.append(x / r[-1])
        assert all(b <= a + 1e-9 for a, b in zip(fronts, fronts[1:])), fronts
        assert fronts[0] > fronts[-1] + 0.3
        curve = read_model_curve(paths[setting]["curve"])
        assert np.all(np.diff(curve.porosity) >= 0)
        assert 0.3 < curve.porosity.min() and curve.porosity.max() < 0.9


def test_scale_is_that_of_the_scenario_but_not_its_truth():
    piece = make_piece(setting="gentle", time_s=12.0, seed=4103)
    truth = piece.truth
    model_length = 2 * body_semi_length_um(model_progress("gentle", 12.0))
    # the modeller's nominal grain against this piece (fitted to its field of view): within
    # 10 % (common practice, no source)
    assert model_length == pytest.approx(truth["body_length_um"], rel=0.10)
    # the model's mean porosity is near the true gas porosity but not equal to it
    m = model_mean_porosity("gentle", 12.0)
    assert 0.002 < abs(m - truth["porosity_gas"]) < 0.05
    # a slower model: its progress at t is the scenario's at 0.9·t
    assert model_progress("gentle", 12.0) < expansion_progress("gentle", 12.0)
    assert NOMINAL_LENGTH_UM * 0.8 < model_length < NOMINAL_LENGTH_UM


def test_fields_agree_with_the_curve(written):
    _, paths = written
    p = paths["intense"]
    curve = read_model_curve(p["curve"])
    rz = read_time_model(p["rz"], length_unit="mm").fields
    grids = read_time_model(p["grid_list"]).fields
    at = interpolate_curve(curve, rz.time_s)
    for i, t in enumerate(rz.time_s):
        # ring-volume mean of the coarse mapped mesh (28 × 8 nodes) against the curve's exact
        # ring integral: midpoint-rule error of a few thousandths (derived numerically)
        assert field_mean_porosity(rz.field(i)) == pytest.approx(at["porosity"][i], abs=0.005)
        # the 3-D grid (elliptic section, 50 µm voxels) carries the same law: 0.03
        assert field_mean_porosity(grids.field(i)) == pytest.approx(at["porosity"][i],
                                                                    abs=0.03)
    # the mapped mesh keeps its nodes, so fields interpolate node by node between times
    f, note = field_at_time(rz, 4.5)
    assert note["interpolation"] == "positions and values node by node"
    # the 3-D grid's domain grows with the body: no point-by-point interpolation
    with pytest.raises(InputError, match="cannot be interpolated"):
        field_at_time(grids, 4.5)
    assert field_at_time(grids, 4.5, mode="nearest")[1]["model_times_s"] == [3.0]


def test_unknown_setting_is_refused(tmp_path):
    with pytest.raises(InputError, match="setting 'medium'"):
        write_demo_model(tmp_path, settings=["medium"])
    assert math.isfinite(model_mean_porosity("gentle", 0.0))
