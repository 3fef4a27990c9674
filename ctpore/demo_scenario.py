"""Synthetic puffed-grain CT scans with known truth, for the demo only.

Everything here is invented data: the "pilot line", its two settings and the pieces are made up
to give the demo something realistic-looking to analyse, with the right answer known. Nothing
here is a measurement and no value should be quoted as one.

The story: a pilot line puffs sorghum kernels at two heater settings, ``"gentle"`` and
``"intense"``, and pieces are taken out and scanned at several puffing times. Expansion follows
a first-order law in time, faster for the intense setting; as it proceeds the cells grow, the
walls and the dense outer skin thin, more cell walls rupture and the piece swells a little.

A piece is a tilted, slightly tapered prolate body (a miniature grain, scaled so that one scan
of about 128³ voxels runs in seconds) filled with a Voronoi foam: cell seeds are scattered in
the body with a hard-core distance, and a voxel is wall where the difference between its
distances to the nearest and second-nearest seed (or third, near cell edges) is below the
local wall thickness. Walls thicken toward the surface and a solid skin closes the body, except
over a ruptured cap at one tip where cells open to the outside; a fraction of the walls between
neighbouring cells is broken, and a few inner cells stay sealed. All geometry is in µm, so the
same seed gives the same physical body at any voxel size.

References
----------
.. [1] Robin, F. et al. (2010). J. Food Eng. 98, 19. Micro-CT of extruded wheat foams:
   porosity 0.52–0.91, the range the demo aims into.
.. [2] Okabe, A., Boots, B., Sugihara, K., & Chiu, S. N. (2000). Spatial Tessellations:
   Concepts and Applications of Voronoi Diagrams, 2nd ed. Wiley. (Voronoi foams.)
"""

from __future__ import annotations

import csv
import json
import math
import uuid
from dataclasses import dataclass
from pathlib import Path

import edt
import numpy as np
from scipy import ndimage
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from .errors import InputError
from .spacing import as_spacing_um

__all__ = ["DemoPiece", "SETTINGS", "SCENARIO", "BATCH_LOTS", "expansion_progress",
           "make_piece", "generate_scenario", "generate_batches"]

# Invented heater settings: time constant of expansion and a delay before expansion starts
# (expansion of a grain starts after a few seconds of heating and is over within ~15 s:
# common practice, no source).
SETTINGS = {
    "gentle": {"heater_power_w": 600.0, "delay_s": 1.5, "tau_s": 9.0},
    "intense": {"heater_power_w": 900.0, "delay_s": 0.5, "tau_s": 5.0},
}

# The demo's pieces: 2 settings × 3 puffing times, one piece each, and how each is written.
SCENARIO = [
    {"sample_id": "gentle_04s", "setting": "gentle", "time_s": 4.0, "seed": 4101,
     "format": "ome"},
    {"sample_id": "gentle_08s", "setting": "gentle", "time_s": 8.0, "seed": 4102,
     "format": "imagej"},
    {"sample_id": "gentle_12s", "setting": "gentle", "time_s": 12.0, "seed": 4103,
     "format": "ome"},
    {"sample_id": "intense_04s", "setting": "intense", "time_s": 4.0, "seed": 4201,
     "format": "slices"},
    {"sample_id": "intense_08s", "setting": "intense", "time_s": 8.0, "seed": 4202,
     "format": "ome"},
    {"sample_id": "intense_12s", "setting": "intense", "time_s": 12.0, "seed": 4203,
     "format": "ome"},
]

# The demo's quality-control story: three production lots of five pieces each. Lot A is the
# reference; lot B is made the same way (gentle, 10 s); lot C was deliberately run hotter and
# longer (intense, 12 s), so its pieces are more porous and its walls thinner.
BATCH_LOTS = [
    {"batch": "lot_A", "setting": "gentle", "time_s": 10.0, "seeds": (5101, 5102, 5103, 5104, 5105)},
    {"batch": "lot_B", "setting": "gentle", "time_s": 10.0, "seeds": (5201, 5202, 5203, 5204, 5205)},
    {"batch": "lot_C", "setting": "intense", "time_s": 12.0, "seeds": (5301, 5302, 5303, 5304, 5305)},
]

_SHAPE = (88, 128, 128)
_SPACING_UM = (12.0, 10.0, 10.0)
_AXES_RATIO = np.array([1.0, 0.62, 0.55])  # semi-axes (long, mid, short) relative to the long one
_TAPER = 0.22          # cross-section shrinks by this fraction toward the tips
_FIT_MARGIN_VOX = 12   # margin kept when the body is fitted to the field of view
_MIN_MARGIN_VOX = 10   # smallest margin accepted
_RUPTURE_CAP = 0.7     # the skin is missing beyond this fraction of the half-length at one tip
_WATER_DENSITY = 1.0   # g/cm³
_SOLID_DENSITY = 1.5   # g/cm³, cereal starch (Dengate, Baruch & Meredith 1978, Starch 30:80)


@dataclass(frozen=True)
class DemoPiece:
    """One synthetic scanned piece and its truth.

    Attributes
    ----------
    grey : ndarray of uint16, shape (nz, ny, nx)
        The simulated reconstruction: gas dark, solid bright, blurred and noisy.
    truth_phases : ndarray of uint8, shape (nz, ny, nx)
        0 exterior, 1 pore (gas inside the piece), 2 solid.
    truth_envelope : ndarray of bool, shape (nz, ny, nx)
        The piece's body (solid and pores).
    spacing_um : tuple of 3 floats
        Voxel size (dz, dy, dx) in µm.
    truth : dict
        Porosities (gas, open, closed), volumes in mm³, nominal cell diameter and wall and skin
        thicknesses in µm, and the setting, puffing time and seed the piece was made from.
    """

    grey: np.ndarray
    truth_phases: np.ndarray
    truth_envelope: np.ndarray
    spacing_um: tuple[float, float, float]
    truth: dict


def expansion_progress(setting: str, time_s: float) -> float:
    """Fraction of the expansion reached at a puffing time (invented first-order law).

    ``p = 1 - exp(-(t - delay) / tau)`` for ``t > delay``, else 0, with the setting's delay and
    time constant from :data:`SETTINGS`.
    """
    _check_setting(setting)
    time_s = _check_time(time_s)
    s = SETTINGS[setting]
    return float(1.0 - math.exp(-max(0.0, time_s - s["delay_s"]) / s["tau_s"]))


def _structure_params(p: float) -> dict:
    """Foam parameters (µm) as functions of expansion progress p in [0, 1] (invented)."""
    return {
        "mean_cell_diameter_um": 160.0 + 180.0 * p,
        "wall_thickness_core_um": 20.0 - 5.0 * p,
        "wall_thickness_surface_um": 36.0 - 10.0 * p,
        "wall_decay_um": 30.0,
        "skin_thickness_um": 30.0 - 16.0 * p,
        "broken_wall_fraction": 0.30 + 0.15 * p,
        "sealed_cell_fraction": 0.22 - 0.10 * p,
        "growth": 0.78 + 0.22 * p,  # linear size relative to the fully puffed piece
    }


def make_piece(*, setting: str, time_s: float, seed: int, shape=_SHAPE,
               spacing_um=_SPACING_UM, length_um: float | None = None,
               gas_grey: float = 6000.0, solid_grey: float = 26000.0,
               noise_sigma: float = 1200.0, blur_sigma_um: float = 8.0,
               cupping: float = 0.0) -> DemoPiece:
    """Make one synthetic puffed piece, its simulated CT grey values and its truth.

    Parameters
    ----------
    setting : {"gentle", "intense"}
        Heater setting (see :data:`SETTINGS`).
    time_s : float
        Puffing time in s after heating starts.
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives identical arrays.
    shape : tuple of 3 int
        Field of view in voxels (z, y, x).
    spacing_um : float or tuple of 3 floats
        Voxel size (dz, dy, dx) in µm.
    length_um : float, optional
        Long-axis length of the fully puffed piece in µm; the piece at ``time_s`` is a little
        shorter. By default the largest length that keeps 12 voxels of background on every
        side. Give it to make the same physical piece at different voxel sizes.
    gas_grey, solid_grey : float
        Grey values of gas and solid before blur and noise.
    noise_sigma : float
        Standard deviation of the additive Gaussian noise, in grey values.
    blur_sigma_um : float
        Standard deviation of the Gaussian blur (the scanner's point spread) in µm.
    cupping : float
        Beam-hardening cupping in [0, 1): the solid's contrast over gas drops by this fraction
        at the centre of the piece and by ``cupping * (1 - r²)`` at normalised radius r
        (0 at the surface). Default 0, no cupping.

    Returns
    -------
    DemoPiece

    Notes
    -----
    Core walls are 15–20 µm (nominal), about 2 voxels at the default spacing; at voxels much
    coarser than ~12 µm they fall below a voxel and the foam stops being segmentable. One
    piece at the default shape takes about 0.5 s on one core.

    Raises
    ------
    InputError
        On an unknown setting, a negative time, a too small field of view or a piece that
        does not fit it with 10 voxels of background on every side.
    """
    _check_setting(setting)
    time_s = _check_time(time_s)
    spacing = np.array(as_spacing_um(spacing_um), dtype=float)
    shape = _check_shape(shape)
    if not 0.0 <= float(cupping) < 1.0:
        raise InputError(f"cupping must be in [0, 1); got {cupping}", "use e.g. 0.1, or 0 for none")
    for name, val in (("noise_sigma", noise_sigma), ("blur_sigma_um", blur_sigma_um)):
        if not (math.isfinite(float(val)) and float(val) >= 0):
            raise InputError(f"{name} must be finite and >= 0; got {val}", "use 0 to switch it off")

    p = expansion_progress(setting, time_s)
    par = _structure_params(p)
    rng = np.random.default_rng(seed)

    # --- body: orientation and size (all in µm, centred on the field of view) ---------------
    angles = (rng.uniform(15.0, 30.0) * rng.choice([-1, 1]),    # yaw: long axis toward y
              rng.uniform(8.0, 14.0) * rng.choice([-1, 1]),     # pitch: long axis toward z
              rng.uniform(0.0, 180.0))                          # roll about the long axis
    rot = Rotation.from_euler("ZYX", angles, degrees=True)      # intrinsic; acts on (x, y, z)
    fov_um = np.array(shape) * spacing
    if length_um is None:
        length_full = _fit_length(rot, fov_um, spacing)
    else:
        length_full = float(length_um)
        if not (math.isfinite(length_full) and length_full > 0):
            raise InputError(f"length_um must be positive; got {length_um}",
                             "give the piece's long-axis length in µm, or None to fit the view")
    semi = 0.5 * length_full * par["growth"] * _AXES_RATIO      # (a, b, c) in µm

    coords_zyx = [((np.arange(n) + 0.5) * d - 0.5 * f) for n, d, f in zip(shape, spacing, fov_um)]
    local = _to_local(coords_zyx, rot)                          # (u, v, w), each (nz, ny, nx)
    form = _body_form(local, semi)
    body = form <= 1.0
    _check_margin(body, shape, length_um)

    # --- ruptured tip, wall hash salt, cell seeds ---------------------------------------------
    tip = float(rng.choice([-1.0, 1.0]))  # which end of the long axis is ruptured
    salt = np.uint64(rng.integers(1, 2**62))
    seeds = _cell_seeds(rng, semi, par["mean_cell_diameter_um"])
    sealed = _sealed_cells(rng, seeds, semi, par["sealed_cell_fraction"])

    # --- foam inside the body ------------------------------------------------------------
    depth = edt.edt(body, anisotropy=tuple(spacing), black_border=False, parallel=1)
    idx = np.flatnonzero(body)
    pts = np.stack([local[k].ravel()[idx] for k in range(3)], axis=1)
    d, i = _three_nearest(seeds, pts)
    dep = depth.ravel()[idx].astype(np.float64)
    in_cap = tip * pts[:, 0] > _RUPTURE_CAP * semi[0]
    t_core = par["wall_thickness_core_um"]
    wall_t = t_core + (par["wall_thickness_surface_um"] - t_core) * np.exp(
        -dep / par["wall_decay_um"])
    wall_t[in_cap] = t_core
    # A voxel is wall if it lies within the wall thickness of the face between its nearest
    # seed and the second or the third, and that face is not broken (the third matters near
    # cell edges, where the wall of a sealed cell would otherwise leak).
    solid_in = (dep <= par["skin_thickness_um"]) & ~in_cap
    for k in (1, 2):
        intact = ~((_pair_uniform(i[:, 0], i[:, k], salt) < par["broken_wall_fraction"])
                   & ~sealed[i[:, 0]] & ~sealed[i[:, k]])
        solid_in |= ((d[:, k] - d[:, 0]) < wall_t) & intact

    phases = np.zeros(shape, dtype=np.uint8)
    flat = phases.reshape(-1)
    flat[idx] = np.where(solid_in, 2, 1).astype(np.uint8)

    truth = _truth(phases, body, spacing)
    truth.update({
        "mean_cell_diameter_um": par["mean_cell_diameter_um"],  # nominal
        "wall_thickness_core_um": t_core,                        # nominal, before breaks
        "wall_thickness_surface_um": par["wall_thickness_surface_um"],
        "skin_thickness_um": par["skin_thickness_um"],
        "broken_wall_fraction": par["broken_wall_fraction"],
        "sealed_cell_fraction": par["sealed_cell_fraction"],
        "expansion_progress": p,
        "body_length_um": 2.0 * float(semi[0]),
        "n_cell_seeds_in_body": int(np.sum(_body_form(seeds.T, semi) <= 1.0)),
        "tilt_deg": [float(a) for a in angles],
        "setting": setting,
        "time_s": time_s,
        "seed": int(seed),
        "spacing_um": [float(s) for s in spacing],
    })

    grey = _simulate_grey(phases, form, spacing, rng, gas_grey=gas_grey, solid_grey=solid_grey,
                          noise_sigma=noise_sigma, blur_sigma_um=blur_sigma_um, cupping=cupping)
    return DemoPiece(grey=grey, truth_phases=phases, truth_envelope=body,
                     spacing_um=tuple(float(s) for s in spacing), truth=truth)


# ----------------------------------------------------------------------------------------------
# geometry helpers


def _to_local(coords_zyx, rot):
    """Body-frame coordinates (u, v, w) in µm of every voxel centre."""
    m = rot.as_matrix()  # local (u, v, w) -> world (x, y, z); local = m.T @ world
    z, y, x = coords_zyx
    world = {0: x[None, None, :], 1: y[None, :, None], 2: z[:, None, None]}
    return [m[0, k] * world[0] + m[1, k] * world[1] + m[2, k] * world[2] for k in range(3)]


def _body_form(local, semi):
    """Shape function: <= 1 inside the tapered prolate body; sqrt is a normalised radius."""
    u, v, w = local
    s = u / semi[0]
    taper = 1.0 - _TAPER * np.minimum(s * s, 1.0)
    return s * s + ((v / semi[1]) ** 2 + (w / semi[2]) ** 2) / (taper * taper)


def _fit_length(rot, fov_um, spacing):
    """Longest long axis (µm) whose ellipsoid bounding box keeps the fit margin."""
    m = rot.as_matrix()[::-1]            # rows z, y, x; columns u, v, w
    half_per_a = np.sqrt(((m * _AXES_RATIO[None, :]) ** 2).sum(axis=1))
    room = 0.5 * fov_um - _FIT_MARGIN_VOX * spacing
    if np.any(room <= 0):
        raise InputError(f"the field of view {tuple(fov_um)} µm is too small for a piece",
                         "use a shape of at least 40 voxels per axis")
    return float(2.0 * np.min(room / half_per_a))


def _check_margin(body, shape, length_um):
    zs, ys, xs = (np.flatnonzero(body.any(axis=a)) for a in ((1, 2), (0, 2), (0, 1)))
    if zs.size == 0:
        raise InputError("the piece has no voxels", "give a larger length_um or finer spacing")
    extents = (zs, ys, xs)
    margins = [e[0] for e in extents] + [n - 1 - e[-1] for n, e in zip(shape, extents)]
    if min(margins) < _MIN_MARGIN_VOX:
        raise InputError(
            f"the piece (length_um={length_um}) comes within {min(margins)} voxels of the edge "
            f"of the field of view {tuple(shape)}; at least {_MIN_MARGIN_VOX} are needed",
            "give a smaller length_um or a larger shape")


def _cell_seeds(rng, semi, diameter_um):
    """Hard-core random seeds; mean cell volume that of a ball of the given diameter.

    Seeds fill the body grown by half a cell diameter, so that cells at the surface are cut by
    it rather than stretched to it. Random sequential addition with a minimum distance of 0.6
    diameters (packing fraction of the hard cores 0.22, well below the jamming limit 0.38 of
    random sequential addition).

    A piece smaller than about one cell (a small field of view) can end with no seed inside
    the body itself, i.e. only slivers of outside cells and no cell of its own; then one seed
    is put at the body centre and the seeds within the hard-core distance of it are dropped,
    so the piece holds at least one cell. This draws no random numbers, and pieces that
    already have a seed inside are left as they were.
    """
    body_semi = np.asarray(semi, dtype=float)
    semi = body_semi + 0.5 * diameter_um
    s = np.linspace(-1.0, 1.0, 2001)
    taper = 1.0 - _TAPER * s * s
    volume = np.pi * semi[1] * semi[2] * semi[0] * np.trapezoid(taper**2 * (1 - s * s), s)
    n_target = max(2, int(round(volume / (np.pi / 6.0 * diameter_um**3))))
    r_min2 = (0.6 * diameter_um) ** 2
    seeds = np.empty((n_target, 3))
    n = 0
    for _ in range(200):
        cand = rng.uniform(-1.0, 1.0, size=(4 * n_target, 3)) * semi
        for c in cand[_body_form(cand.T, semi) <= 1.0]:
            if n == 0 or np.min(np.sum((seeds[:n] - c) ** 2, axis=1)) >= r_min2:
                seeds[n] = c
                n += 1
                if n == n_target:
                    return _with_inner_cell(seeds, body_semi, r_min2)
    return _with_inner_cell(seeds[:n], body_semi, r_min2)


def _with_inner_cell(seeds, body_semi, r_min2):
    """The seeds, or, when none lies in the body, a seed at its centre plus the seeds that keep
    the hard-core distance from it."""
    if seeds.shape[0] and np.any(_body_form(seeds.T, body_semi) <= 1.0):
        return seeds
    far = np.sum(seeds ** 2, axis=1) >= r_min2
    return np.concatenate([np.zeros((1, 3)), seeds[far]])


def _sealed_cells(rng, seeds, semi, fraction):
    """Cells whose walls never break: a fraction of the cells deep inside, at least two.

    Only cells whose seed lies in the inner part of the body (normalised radius < 0.6) are
    sealed, so they cannot touch the ruptured tip and stay closed.
    """
    order = rng.permutation(len(seeds))
    inner = order[_body_form(seeds[order].T, semi) < 0.36]
    k = min(len(inner), max(2, int(round(fraction * len(inner)))))
    sealed = np.zeros(len(seeds), dtype=bool)
    sealed[inner[:k]] = True
    return sealed


def _three_nearest(seeds, pts, chunk=131072):
    """Distances to and indices of the three nearest seeds of each point, shape (n, 3).

    With fewer than three seeds (a piece of one or two cells) the missing neighbours get
    distance inf, so no face is drawn to them, and the nearest seed's index, so that lookups
    by index stay valid (``cKDTree.query`` would give the out-of-range index ``len(seeds)``).
    """
    tree = cKDTree(seeds)
    n = pts.shape[0]
    k = min(3, seeds.shape[0])
    d = np.full((n, 3), np.inf)
    i = np.empty((n, 3), dtype=np.int64)
    for start in range(0, n, chunk):
        dd, ii = tree.query(pts[start:start + chunk], k=k)
        d[start:start + chunk, :k] = np.reshape(dd, (-1, k))
        i[start:start + chunk, :k] = np.reshape(ii, (-1, k))
    i[:, k:] = i[:, :1]
    return d, i


def _pair_uniform(i1, i2, salt):
    """A uniform number in [0, 1) for each unordered seed pair (splitmix64 hash, symmetric)."""
    lo = np.minimum(i1, i2).astype(np.uint64)
    hi = np.maximum(i1, i2).astype(np.uint64)
    with np.errstate(over="ignore"):
        x = (lo << np.uint64(32)) ^ hi ^ salt
        x = x + np.uint64(0x9E3779B97F4A7C15)
        x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        x = x ^ (x >> np.uint64(31))
    return (x >> np.uint64(11)).astype(np.float64) / float(2**53)


def _truth(phases, body, spacing):
    """Porosities and volumes from the phase image; open = pores reaching the exterior.

    The pore space (with the exterior) is labelled with 6-connectivity; pore voxels in the
    exterior's component are open, the rest closed (the voxel analogue of ISO 4590 open-cell
    content).
    """
    labels, _ = ndimage.label(phases != 2)  # default structure: 6-connected in 3-D
    outside = np.unique(labels[phases == 0])
    pore = phases == 1
    open_pore = pore & np.isin(labels, outside[outside > 0])
    n_env = int(body.sum())
    n_pore = int(pore.sum())
    n_open = int(open_pore.sum())
    n_solid = int((phases == 2).sum())
    vox_mm3 = float(np.prod(spacing)) * 1e-9
    return {
        "porosity_gas": n_pore / n_env,
        "porosity_open": n_open / n_env,
        "porosity_closed": (n_pore - n_open) / n_env,
        "envelope_volume_mm3": n_env * vox_mm3,
        "solid_volume_mm3": n_solid * vox_mm3,
        "pore_volume_mm3": n_pore * vox_mm3,
    }


def _simulate_grey(phases, form, spacing, rng, *, gas_grey, solid_grey, noise_sigma,
                   blur_sigma_um, cupping):
    """Grey values: phase contrast (optionally cupped), Gaussian blur, Gaussian noise, uint16."""
    solid = phases == 2
    img = np.full(phases.shape, gas_grey, dtype=np.float32)
    if cupping > 0:
        weight = 1.0 - cupping * (1.0 - np.clip(form, 0.0, 1.0))
        img[solid] = gas_grey + (solid_grey - gas_grey) * weight[solid]
    else:
        img[solid] = solid_grey
    if blur_sigma_um > 0:
        img = ndimage.gaussian_filter(img, sigma=tuple(blur_sigma_um / spacing), mode="nearest")
    if noise_sigma > 0:
        img += np.float32(noise_sigma) * rng.standard_normal(img.shape, dtype=np.float32)
    return np.rint(np.clip(img, 0, 65535)).astype(np.uint16)


# ----------------------------------------------------------------------------------------------
# the scenario on disk


def generate_scenario(out_dir, *, shape=_SHAPE, spacing_um=_SPACING_UM,
                      formats: bool = True) -> list[dict]:
    """Write the demo's pieces, their truth and a ``scenario.csv`` manifest.

    Each piece goes to ``out_dir/<sample_id>/``: its grey stack and ``truth.json``. With
    ``formats=True`` most stacks are OME-TIFF (voxel size in the file), one is an ImageJ
    hyperstack (voxel size in the file) and one a folder of single-slice TIFFs without
    metadata (voxel size in the manifest); with ``formats=False`` all are OME-TIFF. The files
    carry no time stamps and a UUID derived from the sample, so a rerun gives identical bytes.

    The mass is that of the CT-visible solid (starch and the water it holds) at the piece's
    wet-basis moisture: ``m = V_solid (1 + X) / (1/ρs + X/ρw)`` with ``X = w / (1 - w)``,
    ρs = 1.5 g/cm³, ρw = 1.0 g/cm³ (so mass and CT volumes are consistent).

    Parameters
    ----------
    out_dir : str or Path
        Folder to write to (created if needed).
    shape : tuple of 3 int
        Field of view of every piece, voxels (z, y, x).
    spacing_um : float or tuple of 3 floats
        Voxel size (dz, dy, dx) in µm.
    formats : bool
        Mix file formats (True) or write OME-TIFF only.

    Returns
    -------
    list of dict
        The manifest rows (columns of ``scenario.csv``) with, in addition, ``truth_path``.
    """
    import tifffile

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    dz, dy, dx = as_spacing_um(spacing_um)
    rows = []
    for entry in SCENARIO:
        sid = entry["sample_id"]
        piece = make_piece(setting=entry["setting"], time_s=entry["time_s"], seed=entry["seed"],
                           shape=shape, spacing_um=(dz, dy, dx))
        fmt = entry["format"] if formats else "ome"
        folder = out / sid
        folder.mkdir(exist_ok=True)
        spacing_col = ""
        if fmt == "ome":
            rel = f"{sid}/{sid}.ome.tif"
            tifffile.imwrite(out / rel, piece.grey, ome=True, datetime=False, metadata={
                "axes": "ZYX", "Name": sid,
                "UUID": str(uuid.uuid5(uuid.NAMESPACE_URL, f"ctpore-demo/{sid}/{entry['seed']}")),
                "PhysicalSizeX": dx, "PhysicalSizeXUnit": "µm",
                "PhysicalSizeY": dy, "PhysicalSizeYUnit": "µm",
                "PhysicalSizeZ": dz, "PhysicalSizeZUnit": "µm"})
        elif fmt == "imagej":
            rel = f"{sid}/{sid}.tif"
            tifffile.imwrite(out / rel, piece.grey, imagej=True, datetime=False,
                             resolution=(1.0 / dx, 1.0 / dy),
                             metadata={"spacing": dz, "unit": "um", "axes": "ZYX"})
        elif fmt == "slices":
            rel = f"{sid}/slices"
            (out / rel).mkdir(exist_ok=True)
            width = max(4, len(str(piece.grey.shape[0] - 1)))
            for k, plane in enumerate(piece.grey):
                tifffile.imwrite(out / rel / f"slice_{k:0{width}d}.tif", plane, datetime=False,
                                 metadata=None)
            spacing_col = f"{dz:g},{dy:g},{dx:g}"
        else:  # pragma: no cover - SCENARIO is fixed
            raise ValueError(f"unknown format {fmt!r}")

        mrng = np.random.default_rng([entry["seed"], 7])
        moisture_wb = round(float(mrng.uniform(0.11, 0.13)), 4)
        x_db = moisture_wb / (1.0 - moisture_wb)
        mass_mg = (piece.truth["solid_volume_mm3"] * (1.0 + x_db)
                   / (1.0 / _SOLID_DENSITY + x_db / _WATER_DENSITY))
        row = {"sample_id": sid, "setting": entry["setting"], "time_s": entry["time_s"],
               "stack_path": rel, "spacing_um": spacing_col, "mass_mg": round(mass_mg, 5),
               "moisture_wb": moisture_wb}
        truth = dict(piece.truth, sample_id=sid, stack_path=rel, stack_format=fmt,
                     mass_mg=row["mass_mg"], moisture_wb=moisture_wb,
                     solid_density_g_cm3=_SOLID_DENSITY, water_density_g_cm3=_WATER_DENSITY)
        (folder / "truth.json").write_text(json.dumps(truth, indent=2, sort_keys=True) + "\n",
                                           encoding="utf-8")
        rows.append(dict(row, truth_path=f"{sid}/truth.json"))

    columns = ["sample_id", "setting", "time_s", "stack_path", "spacing_um", "mass_mg",
               "moisture_wb"]
    with open(out / "scenario.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=columns, lineterminator="\n",
                                extrasaction="ignore")
        writer.writeheader()
        writer.writerows(rows)
    return rows


def generate_batches(out_dir, *, shape=_SHAPE, spacing_um=_SPACING_UM) -> list[dict]:
    """Write the lots of :data:`BATCH_LOTS` as OME-TIFF stacks and a ``batches.csv`` manifest.

    Each piece goes to ``out_dir/<batch>/<sample_id>.ome.tif`` beside ``<sample_id>.truth.json``;
    the manifest has the columns sample_id, batch, stack_path, setting, time_s, seed. Same
    seeds, identical bytes.

    Returns
    -------
    list of dict
        The manifest rows.
    """
    import tifffile

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    dz, dy, dx = as_spacing_um(spacing_um)
    rows = []
    for lot in BATCH_LOTS:
        (out / lot["batch"]).mkdir(exist_ok=True)
        for k, seed in enumerate(lot["seeds"], start=1):
            sid = f"{lot['batch']}_{k:02d}"
            piece = make_piece(setting=lot["setting"], time_s=lot["time_s"], seed=seed,
                               shape=shape, spacing_um=(dz, dy, dx))
            rel = f"{lot['batch']}/{sid}.ome.tif"
            tifffile.imwrite(out / rel, piece.grey, ome=True, datetime=False, metadata={
                "axes": "ZYX", "Name": sid,
                "UUID": str(uuid.uuid5(uuid.NAMESPACE_URL, f"ctpore-demo/{sid}/{seed}")),
                "PhysicalSizeX": dx, "PhysicalSizeXUnit": "µm",
                "PhysicalSizeY": dy, "PhysicalSizeYUnit": "µm",
                "PhysicalSizeZ": dz, "PhysicalSizeZUnit": "µm"})
            (out / lot["batch"] / f"{sid}.truth.json").write_text(
                json.dumps(dict(piece.truth, sample_id=sid, batch=lot["batch"]), indent=2,
                           sort_keys=True) + "\n", encoding="utf-8")
            rows.append({"sample_id": sid, "batch": lot["batch"], "stack_path": rel,
                         "setting": lot["setting"], "time_s": lot["time_s"], "seed": seed})
    with open(out / "batches.csv", "w", newline="", encoding="utf-8") as fh:
        writer = csv.DictWriter(fh, fieldnames=list(rows[0]), lineterminator="\n")
        writer.writeheader()
        writer.writerows(rows)
    return rows


# ----------------------------------------------------------------------------------------------
# input checks


def _check_setting(setting):
    if setting not in SETTINGS:
        raise InputError(f"setting {setting!r} is not one of {sorted(SETTINGS)}",
                         "use 'gentle' or 'intense'")


def _check_time(time_s):
    try:
        t = float(time_s)
    except (TypeError, ValueError):
        raise InputError(f"time_s {time_s!r} is not a number",
                         "give the puffing time in s") from None
    if not (math.isfinite(t) and t >= 0):
        raise InputError(f"time_s must be finite and >= 0; got {time_s}", "e.g. 4, 8 or 12")
    return t


def _check_shape(shape):
    try:
        dims = tuple(int(n) for n in shape)
    except (TypeError, ValueError):
        raise InputError(f"shape {shape!r} is not three integers", "e.g. (88, 128, 128)") from None
    if len(dims) != 3 or min(dims) < 40:
        raise InputError(f"shape must be three sizes of at least 40 voxels; got {shape}",
                         "e.g. (88, 128, 128)")
    return dims
