"""Cell and wall structure of a segmented piece: every measure of the [structure] section.

This module only chains the measures, each of which lives in its own module with its source:
local thickness of pores (cell size) and walls (Hildebrand & Rüegsegger 1997), cells (SNOW-style
watershed, Gostick 2017), specific surface (marching cubes on the grey image, Lorensen & Cline
1987), Euler characteristic and connectivity density (Odgaard & Gundersen 1993), degree of
anisotropy by mean intercept length (Whitehouse 1974; Harrigan & Mann 1984) and chord lengths.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..progress import no_step
from ..recipe import StructureSection
from ..spacing import as_spacing_um
from .anisotropy import mil_anisotropy
from .cells import CellTable, cells
from .chords import chord_histogram, chord_lengths, chord_summary
from .local_thickness import local_thickness, thickness_histogram, thickness_statistics
from .surface import specific_surface
from .topology import connectivity_density

__all__ = ["StructureResult", "structure_measures"]


@dataclass
class StructureResult:
    """What :func:`structure_measures` found.

    summary : flat dict of scalar measures with units in the keys (goes into summary.json).
    pore_thickness, wall_thickness : float32 maps of local thickness in µm (0 elsewhere).
    thickness_table : columns of the volume-weighted thickness distributions (CSV).
    cell_table : per-cell table.
    chord_table : columns of the chord-length histograms (CSV).
    anisotropy : the full MIL result (directions, MIL per direction, fabric tensor).
    """

    summary: dict
    pore_thickness: np.ndarray
    wall_thickness: np.ndarray
    thickness_table: dict
    cell_table: CellTable
    chord_table: dict
    anisotropy: dict = field(default_factory=dict)


def structure_measures(phases, grey, *, threshold_value: float, spacing_um,
                       section: StructureSection | None = None, step=None) -> StructureResult:
    """Run the structure measures on phases (0 exterior, 1 pore, 2 solid) and the grey image.

    Parameters
    ----------
    phases : uint8 array (z, y, x)
        Phase labels from the segmentation.
    grey : array (z, y, x)
        The grey values the threshold was applied to (for the marching-cubes surface).
    threshold_value : float
        The grey-value threshold (iso-level of the surface).
    spacing_um : float or 3 floats
        Voxel size (dz, dy, dx) in µm.
    section : StructureSection
        The recipe's [structure] section.
    step : callable, optional
        ``step(name)`` context manager reporting progress.
    """
    section = section or StructureSection()
    spacing = as_spacing_um(spacing_um)
    step = step or no_step
    pore = phases == 1
    solid = phases == 2
    envelope = phases > 0
    summary: dict = {}

    with step("local thickness of pores and walls"):
        pore_t = local_thickness(pore, spacing)
        wall_t = local_thickness(solid, spacing)
        for name, tmap, mask in (("pore", pore_t, pore), ("wall", wall_t, solid)):
            stats = thickness_statistics(tmap, mask)
            for key in ("mean_um", "sd_um", "d10_um", "d50_um", "d90_um", "max_um"):
                summary[f"{name}_thickness_{key}"] = stats[key]
        bin_um = section.thickness_bin_um or min(spacing)
        thickness_table = _thickness_table(pore_t, pore, wall_t, solid, bin_um)

    with step("cells"):
        min_cell = section.min_cell_volume_um3 or 27 * float(np.prod(spacing))
        table = cells(phases, spacing_um=spacing, min_cell_volume_um3=min_cell)
        summary.update(table.summary)

    with step("specific surface, topology, anisotropy, chords"):
        surf = specific_surface(grey, spacing_um=spacing, level=threshold_value,
                                envelope=envelope, sigma_um=section.surface_sigma_um)
        summary["specific_surface_per_mm"] = surf["specific_surface_per_mm"]
        summary["interface_area_mm2"] = surf["interface_area_mm2"]
        topo = connectivity_density(solid, spacing_um=spacing, envelope=envelope)
        summary["euler_characteristic"] = topo["euler_characteristic"]
        summary["solid_components"] = topo["components"]
        summary["solid_cavities"] = topo["cavities"]
        summary["connectivity"] = topo["connectivity"]
        summary["connectivity_density_per_mm3"] = topo["connectivity_density_per_mm3"]
        aniso = mil_anisotropy(phases, spacing_um=spacing)
        summary["degree_of_anisotropy"] = aniso["degree_of_anisotropy"]
        summary["main_orientation_zyx"] = [float(v) for v in aniso["main_orientation_zyx"]]
        summary["mil_principal_um"] = [float(v) for v in aniso["mil_principal_um"]]
        chords = chord_lengths(phases, spacing_um=spacing)
        chord_stats = chord_summary(phases, spacing_um=spacing)
        summary.update(chord_stats)  # flat keys, e.g. pore_chord_z_mean_um
        chord_table = chord_histogram(chords, spacing_um=spacing,
                                      bin_width_um=section.chord_bin_um or None)

    return StructureResult(summary=summary, pore_thickness=pore_t, wall_thickness=wall_t,
                           thickness_table=thickness_table, cell_table=table,
                           chord_table=chord_table, anisotropy=aniso)


def _thickness_table(pore_t, pore, wall_t, solid, bin_um) -> dict:
    """Pore and wall thickness distributions on common bins (volume fraction per bin)."""
    hp = thickness_histogram(pore_t, pore, bin_width_um=bin_um)
    hw = thickness_histogram(wall_t, solid, bin_width_um=bin_um)
    n = max(len(hp["volume_fraction"]), len(hw["volume_fraction"]))
    lower = np.arange(n) * bin_um
    return {
        "bin_lower_um": lower,
        "bin_upper_um": lower + bin_um,
        "pore_volume_fraction": _pad(hp["volume_fraction"], n),
        "wall_volume_fraction": _pad(hw["volume_fraction"], n),
    }


def _pad(values, n):
    out = np.zeros(n)
    out[: len(values)] = values
    return out
