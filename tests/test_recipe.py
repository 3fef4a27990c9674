"""Recipe files: defaults, round trip, and clear errors naming the bad key and the valid ones."""

import math
import tomllib

import pytest

from ctpore.errors import InputError
from ctpore.recipe import Recipe, load_recipe


def test_default_round_trips_through_toml():
    text = Recipe().to_toml()
    again = Recipe.from_dict(tomllib.loads(text))
    assert again.to_toml() == text


def test_partial_recipe_fills_defaults(tmp_path):
    p = tmp_path / "r.toml"
    p.write_text('[threshold]\nmethod = "li"\n[envelope]\nradius_um = 80\n')
    r = load_recipe(p)
    assert r.threshold.method == "li" and r.envelope.radius_um == 80.0
    assert r.denoise.method == "none" and math.isnan(r.threshold.value)


def test_unknown_key_lists_valid_keys(tmp_path):
    p = tmp_path / "r.toml"
    p.write_text("[threshold]\nmetod = 'otsu'\n")
    with pytest.raises(InputError) as e:
        load_recipe(p)
    msg = str(e.value)
    assert "metod" in msg and "'method'" in msg and str(p) in msg


def test_unknown_section_lists_valid_sections(tmp_path):
    p = tmp_path / "r.toml"
    p.write_text("[thresholds]\nmethod = 'otsu'\n")
    with pytest.raises(InputError, match="valid sections are"):
        load_recipe(p)


@pytest.mark.parametrize("text, word", [
    ("[threshold]\nmethod = 'magic'\n", "threshold.method"),
    ("[threshold]\nmethod = 'manual'\n", "threshold.value"),
    ("[envelope]\nradius_um = -3\n", "envelope.radius_um"),
    ("[envelope]\nradius_um = 'big'\n", "radius_um"),
    ("[denoise]\nmethod = 'median'\n", "denoise.radius_um"),
    ("[sample]\nmoisture = 0.12\n", "solid_density_g_cm3"),
    ("[sample]\nmoisture = 12\nsolid_density_g_cm3 = 1.5\n", "fraction"),
    ("[threshold]\nclasses = 3\nboundary = 3\n", "threshold.boundary"),
    ("this is not toml", "not valid TOML"),
])
def test_bad_values_are_named(tmp_path, text, word):
    p = tmp_path / "r.toml"
    p.write_text(text)
    with pytest.raises(InputError, match=word):
        load_recipe(p)


def test_missing_recipe_file(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        load_recipe(tmp_path / "nope.toml")
