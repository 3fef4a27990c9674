"""The segmentation chain: denoise → threshold → clean → envelope → phases.

Each step is a plain function of its own module; this module only chains them in the order the
recipe gives and records what was chosen, including the threshold-sensitivity band.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..progress import no_step
from ..recipe import Recipe
from ..spacing import as_spacing_um
from .clean import clean_solid
from .denoise import denoise
from .envelope import envelope as make_envelope
from .phases import make_phases
from .threshold import ThresholdChoice, solid_mask, threshold_value

__all__ = ["Segmentation", "segment", "sensitivity_band", "solid_at"]


@dataclass
class Segmentation:
    """What the segmentation chain produced.

    Attributes
    ----------
    phases : uint8 array (z, y, x)
        0 exterior, 1 pore, 2 solid.
    envelope : bool array
        The piece's own volume (pore ∪ solid).
    threshold : ThresholdChoice
        Method, value, grey peaks and sensitivity step.
    band : dict
        ``porosity_low`` and ``porosity_high``: gas porosity with the threshold moved by ∓delta
        and ±delta, envelope held fixed.
    grey : float32 array
        The denoised grey values the threshold was applied to.
    """

    phases: np.ndarray
    envelope: np.ndarray
    threshold: ThresholdChoice
    band: dict
    grey: np.ndarray
    cupping: dict | None = None  # fitted trend and profiles before/after, when corrected


def segment(volume, *, spacing_um, recipe: Recipe | None = None, progress=None) -> Segmentation:
    """Segment a grey stack into exterior, pore and solid with the recipe's methods.

    Parameters
    ----------
    volume : array (z, y, x)
        Grey values; gas dark and solid bright unless ``threshold.solid_is_bright`` is false.
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) in µm.
    recipe : Recipe, optional
        Parameters; the default recipe when omitted.
    progress : ctpore.progress.Progress, optional
        Step reporter.
    """
    recipe = recipe or Recipe()
    spacing = as_spacing_um(spacing_um)
    step = progress.step if progress is not None else no_step

    with step(f"denoise ({recipe.denoise.method})"):
        # Without denoising the raw values go straight to the threshold, so integer stacks
        # keep their exact one-bin-per-grey-value histogram and no float copy is made.
        volume = np.asarray(volume)
        if recipe.denoise.method == "none":
            grey = volume
        else:
            grey = denoise(volume, spacing_um=spacing, section=recipe.denoise)
        if recipe.corrections.rings:
            from .rings import reduce_rings

            grey = reduce_rings(grey)
    with step(f"threshold ({recipe.threshold.method})"):
        choice = threshold_value(grey, section=recipe.threshold)
        solid = solid_at(grey, choice.value, spacing, recipe, choice)
    with step(f"envelope ({recipe.envelope.method})"):
        env = make_envelope(solid, spacing_um=spacing, section=recipe.envelope)
    cupping = None
    if recipe.corrections.cupping:
        from .cupping import correct_cupping

        with step("cupping correction and re-threshold"):
            cupping = correct_cupping(grey, env, solid, spacing_um=spacing,
                                      degree=recipe.corrections.cupping_degree)
            grey = cupping.pop("grey")
            choice = threshold_value(grey, section=recipe.threshold)
            solid = solid_at(grey, choice.value, spacing, recipe, choice)
            env = make_envelope(solid, spacing_um=spacing, section=recipe.envelope)
    phases = make_phases(solid, env)
    with step("threshold sensitivity band"):
        band = sensitivity_band(grey, env, choice, spacing_um=spacing, recipe=recipe)
    return Segmentation(phases=phases, envelope=env, threshold=choice, band=band, grey=grey,
                        cupping=cupping)


def sensitivity_band(grey, envelope, choice: ThresholdChoice, *, spacing_um, recipe: Recipe) -> dict:
    """Gas porosity with the threshold moved by ±delta, cleaning redone, envelope held fixed.

    The threshold is the main source of disagreement between laboratories; the band shows how
    much the porosity depends on it. Holding the envelope fixed isolates the threshold's effect
    on the pore/solid split inside the same piece volume.
    """
    env_count = int(np.count_nonzero(envelope))
    values = {}
    for sign in (-1.0, 1.0):
        t = choice.value + sign * choice.delta
        solid = solid_at(grey, t, spacing_um, recipe, choice) & envelope
        values[sign] = (env_count - int(np.count_nonzero(solid))) / env_count
    low, high = sorted(values.values())
    return {"porosity_low": float(low), "porosity_high": float(high),
            "value_low": float(choice.value - choice.delta),
            "value_high": float(choice.value + choice.delta)}


def solid_at(grey, value, spacing, recipe, choice):
    """Solid at threshold ``value`` with the recipe's thin-wall method, then cleaned."""
    c = recipe.corrections
    bright = recipe.threshold.solid_is_bright
    if c.thin_walls == "none":
        solid = solid_mask(grey, value, solid_is_bright=bright)
    else:
        from .thin_walls import hysteresis_solid, local_threshold_solid

        sign = 1.0 if bright else -1.0
        low = choice.gas_peak + sign * c.hysteresis_low_fraction * abs(
            choice.solid_peak - choice.gas_peak)
        if c.thin_walls == "hysteresis":
            solid = hysteresis_solid(grey, low=low, high=value, solid_is_bright=bright)
        else:
            window = c.local_window_um or 5 * min(spacing)
            solid = local_threshold_solid(grey, window_um=window, spacing_um=spacing,
                                          floor=low, ceiling=value, solid_is_bright=bright)
    return clean_solid(solid, spacing_um=spacing, section=recipe.clean)

