"""Partial-volume porosity from chunks, equal to ``partial_volume_porosity`` in ``analyze``.

:func:`ctpore.segment.partial_volume.partial_volume_porosity` with the pure-phase greys
estimated from deep voxels and the threshold of the threshold choice.

Three distance tests decide which voxels count, each exact with a halo of
``ceil(d / spacing) + 1`` voxels for its distance d (a voxel outside the extended block is
farther than d, so "distance ≤ d" and "distance ≥ d" come out as on the whole stack):

* the exterior shell: non-envelope voxels within ``shell_um`` of the envelope;
* deep gas: gas voxels (grey on the gas side of the threshold) in the envelope or shell at
  distance ≥ ``core_um`` from every solid voxel; deep solid: solid voxels of the envelope at
  distance ≥ ``core_um`` from every gas voxel.

The medians and median absolute deviations of the deep populations are exact order statistics
over the chunks (:mod:`ctpore.chunked.selection`); the sum of grey values over envelope and shell
is a sum in another order than numpy's (relative difference of order 1e-15).
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..segment.partial_volume import porosity_from_mixture, pure_grey_estimate
from ._blocks import open_array, read_halo
from .selection import chunked_median

__all__ = ["chunked_partial_volume"]


def chunked_partial_volume(ws, runner, grey: str, envelope: str, *, choice, spacing,
                           solid_is_bright: bool = True) -> dict:
    """The result dict of ``partial_volume_porosity(grey, envelope, choice=choice, ...)``."""
    h = max(spacing)
    shell_um, core_um = 4.0 * h, 3.0 * h
    threshold = float(choice.value)
    bright = bool(choice.details.get("solid_is_bright", solid_is_bright))
    halo = tuple(int(math.ceil(max(shell_um, core_um) / s)) + 1 for s in spacing)
    gas_pop = ws.create("pv_gas", bool)
    solid_pop = ws.create("pv_solid", bool)
    parts = runner.map(_pv_block, ws.blocks, grey, envelope, tuple(spacing), shell_um, core_um,
                       threshold, bright, halo, gas_pop, solid_pop)
    n_env = sum(p[0] for p in parts)
    n_region = sum(p[1] for p in parts)
    if n_env == 0:
        raise InputError("the envelope is empty", "segment the piece before measuring it")
    if not all(p[3] for p in parts):
        raise InputError("the grey values hold NaN or infinite values in the envelope",
                         "replace them or re-export the reconstruction")
    sum_grey = math.fsum(p[2] for p in parts)
    result = {}
    for phase, pop, peak in (("gas", gas_pop, choice.gas_peak),
                             ("solid", solid_pop, choice.solid_peak)):
        n = sum(p[4 if phase == "gas" else 5] for p in parts)

        def median_mad(pop=pop, n=n):
            est = chunked_median(runner, ws.blocks, _values, (grey, pop, None), n)
            return est, chunked_median(runner, ws.blocks, _values, (grey, pop, est), n)

        result[phase] = pure_grey_estimate(phase, n, median_mad, peak=peak, core_um=core_um)
    ws.remove("pv_gas")
    ws.remove("pv_solid")
    return porosity_from_mixture(result["gas"], result["solid"],
                                 lambda g_solid: n_region * g_solid - sum_grey,
                                 n_envelope=n_env, n_region=n_region, shell_um=shell_um)


def _distance(mask, spacing):
    """Distance of each True voxel to the nearest False one; +inf where none exists."""
    import edt

    if mask.all():
        return np.full(mask.shape, np.inf, dtype=np.float32)
    return edt.edt(np.ascontiguousarray(mask), anisotropy=spacing, black_border=False,
                   parallel=1)


def _pv_block(block, grey, envelope, spacing, shell_um, core_um, threshold, bright, halo,
              gas_pop, solid_pop):
    g, where = read_halo(open_array(grey), block, halo, fill=None)
    env, _ = read_halo(open_array(envelope), block, halo, fill=None)
    env = env.astype(bool)
    core = where.core
    if shell_um > 0:
        region = env | (_distance(~env, spacing) <= shell_um)
    else:
        region = env
    solid = (g > threshold) if bright else (g < threshold)
    d_gas = _distance(~solid, spacing)
    d_solid = _distance(solid, spacing)
    gas = (region & ~solid & (d_gas >= core_um))[core]
    sol = (env & solid & (d_solid >= core_um))[core]
    open_array(gas_pop, "r+")[block.slices] = gas
    open_array(solid_pop, "r+")[block.slices] = sol
    values = g[core][region[core]].astype(np.float64)
    return (int(np.count_nonzero(env[core])), int(values.size), float(np.sum(values)),
            bool(np.all(np.isfinite(values))), int(np.count_nonzero(gas)),
            int(np.count_nonzero(sol)))


def _values(block, grey, pop, centre):
    g = np.asarray(open_array(grey)[block.slices])
    mask = np.asarray(open_array(pop)[block.slices])
    v = g[mask].astype(np.float64)
    return v if centre is None else np.abs(v - centre)
