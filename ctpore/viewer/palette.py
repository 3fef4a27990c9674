"""Colours of the viewer: a phase palette and colour maps that stay legible with colour-blindness.

Phase labels and the envelope outline use three colours of the Okabe & Ito set, chosen so that
every pair stays far apart in CIELAB for normal vision and for simulated protanopia,
deuteranopia and tritanopia (tests/viewer/test_viewer_palette.py checks this). Continuous maps use
cividis (designed for colour-vision deficiency) and Paul Tol's schemes; the exterior and
points outside a phase are transparent, so the grey stack shows through.

Colour maps are returned as plain dicts ``{"name", "colors", "controls"}`` that napari turns into
a colour map, so this module needs neither napari nor Qt.

References
----------
.. [1] Okabe M. & Ito K. (2008). Color Universal Design (CUD): how to make figures and
   presentations that are friendly to colorblind people. J*Fly, https://jfly.uni-koeln.de/color/
   (the eight-colour set; reproduced in Wong B. (2011), Points of view: Color blindness,
   Nature Methods 8:441, https://doi.org/10.1038/nmeth.1618).
.. [2] Tol P. (2021). Colour Schemes. SRON technical note SRON/EPS/TN/09-002, issue 3.2
   (diverging "BuRd" and sequential "YlOrBr", the same values as ColorBrewer's RdBu and YlOrBr).
.. [3] Nuñez J. R., Anderton C. R. & Renslow R. S. (2018). Optimizing colormaps with
   consideration for color vision deficiency to enable accurate interpretation of scientific
   data. PLoS ONE 13(7):e0199239. https://doi.org/10.1371/journal.pone.0199239 (cividis).
"""

from __future__ import annotations

__all__ = [
    "OKABE_ITO", "PHASE_NAMES", "PHASE_COLOURS", "ENVELOPE_COLOUR", "TOL_BURD", "TOL_YLORBR",
    "hex_to_rgba", "phase_colormap", "outline_colormap", "sequential_colormap",
    "diverging_colormap",
]

#: The eight colours of Okabe & Ito (2008), as published (sRGB hex).
OKABE_ITO = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "bluish green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish purple": "#CC79A7",
}

#: Phase names of the labels 0, 1, 2 written by ``ctpore analyze``.
PHASE_NAMES = {0: "exterior", 1: "pore", 2: "solid"}

#: Label colours: exterior transparent, pore sky blue, solid vermillion (Okabe & Ito 2008).
PHASE_COLOURS = {0: None, 1: OKABE_ITO["sky blue"], 2: OKABE_ITO["vermillion"]}

#: Outline of the piece's envelope: yellow (Okabe & Ito 2008).
ENVELOPE_COLOUR = OKABE_ITO["yellow"]

#: Paul Tol's diverging BuRd scheme, blue (negative) to red (positive) through white.
TOL_BURD = ("#2166AC", "#4393C3", "#92C5DE", "#D1E5F0", "#F7F7F7", "#FDDBC7", "#F4A582",
            "#D6604D", "#B2182B")

#: Paul Tol's sequential YlOrBr scheme, light (low) to dark (high).
TOL_YLORBR = ("#FFFFE5", "#FFF7BC", "#FEE391", "#FEC44F", "#FB9A29", "#EC7014", "#CC4C02",
              "#993404", "#662506")

_TRANSPARENT = (0.0, 0.0, 0.0, 0.0)
# Normalised value below which a "transparent_zero" map is transparent: thickness maps are 0
# outside their phase and at least one voxel size (far above this) inside it.
_ZERO_EDGE = 1e-3


def hex_to_rgba(colour: str, alpha: float = 1.0) -> tuple[float, float, float, float]:
    """``"#RRGGBB"`` to an (r, g, b, a) tuple of floats in [0, 1].

    Examples
    --------
    >>> hex_to_rgba("#FF8000")
    (1.0, 0.5019607843137255, 0.0, 1.0)
    """
    text = str(colour).lstrip("#")
    if len(text) != 6:
        raise ValueError(f"colour {colour!r} is not of the form #RRGGBB")
    r, g, b = (int(text[i:i + 2], 16) / 255.0 for i in (0, 2, 4))
    return (r, g, b, float(alpha))


def phase_colormap() -> list[tuple[float, float, float, float]]:
    """Label colours for napari: entry k is the colour of label k (0 exterior: transparent).

    A list, which napari reads as a colour cycle whose entry 0 is the background; for the
    labels 0, 1, 2 it maps each label to its own entry (a dict would make napari build a direct
    mapping, which compiles a numba dictionary for several seconds on first use).
    """
    return [_TRANSPARENT if PHASE_COLOURS[k] is None else hex_to_rgba(PHASE_COLOURS[k])
            for k in sorted(PHASE_COLOURS)]


def outline_colormap() -> list[tuple[float, float, float, float]]:
    """Label colours for the envelope mask: 0 transparent, 1 :data:`ENVELOPE_COLOUR`."""
    return [_TRANSPARENT, hex_to_rgba(ENVELOPE_COLOUR)]


def _matplotlib_colours(name: str, n: int) -> list[tuple[float, float, float, float]]:
    from matplotlib import colormaps

    cmap = colormaps[name]
    return [tuple(float(c) for c in cmap(i / (n - 1))) for i in range(n)]


def sequential_colormap(name: str = "cividis", *, transparent_zero: bool = False,
                        n: int = 32) -> dict:
    """A sequential colour map as a napari colour-map dict.

    Parameters
    ----------
    name : {"cividis", "YlOrBr"}
        cividis (Nuñez et al. 2018) or Paul Tol's YlOrBr (Tol 2021).
    transparent_zero : bool
        Make the bottom of the range (normalised values below 0.001) transparent, for maps that
        are 0 outside their phase; use contrast limits starting at 0.
    n : int
        Number of colour stops sampled from cividis.

    Returns
    -------
    dict
        ``{"name": str, "colors": list of rgba, "controls": list of float}``, controls rising
        from 0 to 1.
    """
    if name == "cividis":
        colours = _matplotlib_colours("cividis", n)
    elif name == "YlOrBr":
        colours = [hex_to_rgba(c) for c in TOL_YLORBR]
    else:
        raise ValueError(f"sequential colour map {name!r} is not 'cividis' or 'YlOrBr'")
    controls = [i / (len(colours) - 1) for i in range(len(colours))]
    label = f"ctpore {name}"
    if transparent_zero:
        controls = [0.0] + [_ZERO_EDGE + (1.0 - _ZERO_EDGE) * c for c in controls]
        colours = [_TRANSPARENT] + colours
        label += " (0 transparent)"
    return {"name": label, "colors": [list(c) for c in colours], "controls": controls}


def diverging_colormap() -> dict:
    """Paul Tol's BuRd (Tol 2021) as a napari colour-map dict; use symmetric contrast limits."""
    colours = [hex_to_rgba(c) for c in TOL_BURD]
    controls = [i / (len(colours) - 1) for i in range(len(colours))]
    return {"name": "ctpore Tol BuRd", "colors": [list(c) for c in colours],
            "controls": controls}
