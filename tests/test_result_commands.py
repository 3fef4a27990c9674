"""`ctpore profiles|rev|coarsen RESULT`: work on a result folder, never re-segment, never
overwrite without --force, lengths always with a unit."""

import json

import numpy as np
import pytest

import ctpore
from ctpore.cli import main
from ctpore.errors import InputError
from ctpore.result_commands import parse_length_um


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    rng = np.random.default_rng(3)
    n = 48
    z, y, x = np.mgrid[:n, :n, :n] - n / 2 + 0.5
    body = (z / 21) ** 2 + (y / 17) ** 2 + (x / 15) ** 2 <= 1
    pores = np.zeros_like(body)
    for c in rng.uniform(-12, 12, size=(40, 3)) * (1, 0.7, 0.6):
        pores |= (z - c[0]) ** 2 + (y - c[1]) ** 2 + (x - c[2]) ** 2 <= 9
    grey = np.where(body & ~pores, 26000, 6000).astype(np.uint16)
    folder = tmp_path_factory.mktemp("res") / "piece"
    recipe = ctpore.Recipe().replace("structure", enabled=False).replace(
        "envelope", radius_um=40.0).replace("rev", windows=100, sizes=5)
    ctpore.analyze(grey, spacing_um=(12, 10, 10), recipe=recipe, out=folder)
    return folder


def test_rev_then_coarsen_auto_uses_the_rev_width(result, capsys):
    assert main(["rev", str(result), "--quiet"]) == 0
    rev = json.loads((result / "rev" / "rev.json").read_text())
    assert rev["integral_range_um3"] > 0
    assert main(["coarsen", str(result), "--kernel", "ball", "--width", "auto"]) == 0
    folders = list(result.glob("coarse_ball_*um"))
    assert len(folders) == 1
    meta = json.loads((folders[0] / "kernel.json").read_text())
    assert meta["width_um"] == pytest.approx(rev["recommended_ball_diameter_um"])
    assert meta["width_source"] == "REV study"
    back = ctpore.read_stack(folders[0] / "coarse_porosity.ome.tif")
    assert back.spacing_um == (12.0, 10.0, 10.0)


def test_coarsen_on_a_model_grid_and_no_silent_overwrite(result, capsys):
    args = ["coarsen", str(result), "--kernel", "box", "--width", "0.1mm",
            "--grid-spacing", "40", "--grid-origin", "20,20,20"]
    assert main(args) == 0
    folder = result / "coarse_box_100um_grid_40x40x40um"
    data = np.load(folder / "coarse_field.npz")
    np.testing.assert_allclose(data["spacing_um"], [40, 40, 40])
    np.testing.assert_allclose(data["origin_um"], [20, 20, 20])
    before = (folder / "coarse_field.npz").read_bytes()
    assert main(args) == 2
    assert "--force" in capsys.readouterr().err
    assert (folder / "coarse_field.npz").read_bytes() == before
    assert main(args + ["--force"]) == 0


def test_profiles_remade_from_the_folder(result, capsys):
    assert main(["profiles", str(result)]) == 2  # analyze wrote them already
    assert main(["profiles", str(result), "--force"]) == 0
    assert (result / "profiles" / "depth.csv").is_file()
    assert not (result / "profiles" / "profiles").exists()


@pytest.mark.parametrize("text, um", [("400um", 400.0), ("0.4mm", 400.0), ("400 µm", 400.0),
                                      ("0.0004m", 400.0)])
def test_lengths_carry_units(text, um):
    assert parse_length_um(text) == pytest.approx(um)


@pytest.mark.parametrize("text", ["400", "-3um", "abcum", "4 furlongs"])
def test_bare_or_bad_lengths_are_refused(text):
    with pytest.raises(InputError):
        parse_length_um(text)


def test_missing_result_folder(tmp_path, capsys):
    assert main(["rev", str(tmp_path / "nothing")]) == 2
    assert "does not exist" in capsys.readouterr().err
