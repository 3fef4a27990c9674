"""The viewer's colours against published colour-blind-safe sets and a dichromacy simulation."""

import itertools

import numpy as np
import pytest
from skimage.color import deltaE_ciede2000, rgb2lab

from ctpore.viewer import palette

# Okabe & Ito (2008), Color Universal Design, J*Fly; the same eight values are printed in
# Wong B. (2011), Nature Methods 8:441 (from memory).
PUBLISHED_OKABE_ITO = {"#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2",
                       "#D55E00", "#CC79A7"}

# Machado, Oliveira & Fernandes (2009), IEEE TVCG 15(6):1291, doi:10.1109/TVCG.2009.113:
# matrices simulating dichromacy (severity 1.0) on linear RGB (values from memory).
DICHROMACY = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}
# Two colours closer than ΔE2000 ≈ 10 are easily confused; 20 is comfortably apart (common
# practice, no source).
MIN_DELTA_E = 20.0


def _to_linear(c):  # sRGB transfer function, IEC 61966-2-1
    c = np.asarray(c, float)
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _to_srgb(c):
    c = np.clip(c, 0.0, 1.0)
    return np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)


def _seen(hex_colour, vision):
    rgb = np.array(palette.hex_to_rgba(hex_colour)[:3])
    if vision != "normal":
        rgb = _to_srgb(DICHROMACY[vision] @ _to_linear(rgb))
    return rgb2lab(rgb[None, None, :])


def _delta_e(a, b, vision):
    return float(deltaE_ciede2000(_seen(a, vision), _seen(b, vision))[0, 0])


def test_okabe_ito_set_is_the_published_one():
    assert set(palette.OKABE_ITO.values()) == PUBLISHED_OKABE_ITO


def test_phase_and_outline_colours_come_from_okabe_ito():
    used = [palette.PHASE_COLOURS[1], palette.PHASE_COLOURS[2], palette.ENVELOPE_COLOUR]
    assert set(used) <= PUBLISHED_OKABE_ITO
    assert len(set(used)) == 3
    assert palette.PHASE_COLOURS[0] is None  # exterior: transparent
    cmap = palette.phase_colormap()
    assert cmap[0][3] == 0.0 and cmap[1][3] == 1.0 and cmap[2][3] == 1.0
    assert palette.outline_colormap()[0][3] == 0.0


@pytest.mark.parametrize("vision", ["normal", *DICHROMACY])
def test_phase_colours_stay_apart_for_colour_blind_viewers(vision):
    used = [palette.PHASE_COLOURS[1], palette.PHASE_COLOURS[2], palette.ENVELOPE_COLOUR]
    for a, b in itertools.combinations(used, 2):
        assert _delta_e(a, b, vision) >= MIN_DELTA_E, (vision, a, b)


def test_dichromacy_simulation_confuses_red_and_green():
    # The check above can fail: a red/green pair collapses for deuteranopes (Machado 2009).
    assert _delta_e("#D00000", "#008800", "normal") > 50
    assert _delta_e("#D00000", "#008800", "deuteranopia") < 10


def _lightness(colours):
    rgb = np.array([c[:3] for c in colours], float)
    return rgb2lab(rgb[None, :, :])[0, :, 0]


def test_sequential_maps_are_ordered_in_lightness():
    # Sequential maps for ordered data rise (cividis: Nuñez et al. 2018, PLoS ONE 13:e0199239)
    # or fall (Tol 2021, YlOrBr) monotonically in CIELAB lightness.
    cividis = palette.sequential_colormap("cividis")
    assert np.all(np.diff(_lightness(cividis["colors"])) > 0)
    ylorbr = palette.sequential_colormap("YlOrBr")
    assert np.all(np.diff(_lightness(ylorbr["colors"])) < 0)


def test_cividis_matches_matplotlib():
    # matplotlib ships cividis (Nuñez et al. 2018): reference library.
    from matplotlib import colormaps

    ours = palette.sequential_colormap("cividis", n=11)
    for c, x in zip(ours["colors"], ours["controls"]):
        np.testing.assert_allclose(c, colormaps["cividis"](x), atol=1e-6)


def test_transparent_zero_only_hides_zero():
    m = palette.sequential_colormap("cividis", transparent_zero=True)
    assert m["colors"][0][3] == 0.0 and all(c[3] == 1.0 for c in m["colors"][1:])
    assert m["controls"][0] == 0.0 and m["controls"][-1] == 1.0
    assert np.all(np.diff(m["controls"]) > 0) and m["controls"][1] <= 1e-3


def test_diverging_map_is_symmetric_in_lightness():
    # Tol (2021) BuRd: light centre, both ends darker by about the same amount.
    m = palette.diverging_colormap()
    light = _lightness(m["colors"])
    mid = len(light) // 2
    assert light.argmax() == mid
    np.testing.assert_allclose(light[:mid], light[::-1][:mid], atol=6.0)
