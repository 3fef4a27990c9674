"""Invented simulation output for the demo scenario: a puffing model's porosity fields.

Everything here is invented, like the scenario itself (:mod:`ctpore.demo_scenario`): a
make-believe modeller's continuum model of the same pilot line, written in the forms in which
simulation codes hand out their fields, so that ``ctpore demo`` can show a scan-against-
simulation comparison. Nothing here is a measurement or a validated model.

The story: the modeller knows the line's two heater settings and their expansion law
(:func:`ctpore.demo_scenario.expansion_progress`), but the model runs a little slow (its
expansion progress at time t is the scenario's at ``TIME_SCALE·t``) and it describes a nominal
grain, not each scanned piece: an axisymmetric tapered prolate body of fixed full length
``NOMINAL_LENGTH_UM`` that grows with progress as the scenario's pieces do. Inside it, a smooth
porosity front runs inward from the surface: expanded material behind the front, denser
unexpanded material ahead of it, and a denser skin at the surface. Moisture and temperature are
carried along as extra columns.

Two outputs per setting:

* an (r, z) field on a **mapped mesh** that moves with the growing body (the same nodes at
  every time, node (i, j) at ``r = ξ_i·R(s_j)``, ``z = a·(1 + s_j)``; the usual way moving-
  boundary problems are put on a fixed computational grid — Landau 1950, Q. Appl. Math. 8:81,
  from memory), lengths in mm, one CSV with a ``time_s`` column;
* a 3-D field on a fixed regular grid (an elliptic cross-section, long axis along the grid's
  x), one NPZ per time with ``origin`` and ``spacing`` in metres and a boolean ``domain``, listed
  in a ``time_s,field`` CSV;

plus the model's own curve of mean porosity over the piece versus time (exact ring-volume
integration on a fine mapped mesh, see :func:`model_mean_porosity`).

All functions are deterministic; the files carry no time stamps (NPZ archives are written with a
fixed zip date), so a rerun gives identical bytes.
"""

from __future__ import annotations

import csv
import io
import json
import math
import zipfile
from pathlib import Path

import numpy as np

from .demo_scenario import SCENARIO, SETTINGS, expansion_progress
from .errors import InputError

__all__ = ["MODEL_TIMES_S", "CURVE_TIMES_S", "NOMINAL_LENGTH_UM", "TIME_SCALE",
           "model_progress", "body_semi_length_um", "model_porosity", "rz_field",
           "grid_field", "model_mean_porosity", "write_demo_model"]

#: Times (s) at which the model writes its fields.
MODEL_TIMES_S = (0.0, 3.0, 6.0, 9.0, 12.0, 15.0)
#: Times (s) of the model's mean-porosity curve.
CURVE_TIMES_S = tuple(1.5 * k for k in range(11))
#: The modeller's nominal full length of a fully puffed grain, µm (the scenario's pieces are
#: 1.09–1.14 mm long when fully puffed, each fitted to its field of view).
NOMINAL_LENGTH_UM = 1100.0
#: The model's expansion progress at time t is the scenario's at TIME_SCALE·t (a slow model).
TIME_SCALE = 0.9
#: Equivalent radius over semi-length (the scenario's cross-section is 0.62 × 0.55; the
#: axisymmetric model takes about their geometric mean).
RADIUS_RATIO = 0.58
#: Semi-axes of the 3-D model's cross-section over its semi-length.
SECTION_RATIOS = (0.62, 0.55)
#: The cross-section shrinks by this fraction toward the tips.
TAPER = 0.2
_GRID_STEP_UM = 50.0           # 3-D grid step
_RZ_NODES = (28, 8)            # mapped mesh nodes along s (axis) and ξ (radius)
_FINE_NODES = (400, 120)       # the curve's integration mesh
_ZIP_DATE = (1980, 1, 1, 0, 0, 0)


def model_progress(setting: str, time_s: float) -> float:
    """The model's expansion progress: the scenario's law at ``TIME_SCALE·time_s``."""
    return expansion_progress(setting, TIME_SCALE * float(time_s))


def body_semi_length_um(progress: float) -> float:
    """Semi-length a (µm) of the model body at an expansion progress in [0, 1]."""
    return 0.5 * NOMINAL_LENGTH_UM * (0.8 + 0.2 * float(progress))


def model_porosity(rho, depth_um, progress: float):
    """The model's porosity at normalised radius ``rho`` and depth below the surface.

    ``φ = φ_core + (φ_exp − φ_core)·S((ρ − ρ_f)/w)`` with a logistic S, the front at
    ``ρ_f = 1 − 1.05·p`` (the surface at p = 0, the centre near p = 0.95), ``w = 0.08``,
    ``φ_core = 0.50`` and ``φ_exp = 0.74 + 0.10·p``; times a skin factor
    ``1 − 0.35·exp(−depth / 30 µm)``. Invented numbers, chosen so that the mean over the
    body stays within about 0.03 of the scenario's true gas porosity but with another time
    course (it lags early and overshoots late).

    Parameters
    ----------
    rho : array-like
        Normalised radius (0 on the centre, 1 on the surface).
    depth_um : array-like
        Depth below the body's surface, µm.
    progress : float
        Expansion progress in [0, 1].
    """
    rho = np.asarray(rho, dtype=np.float64)
    depth = np.asarray(depth_um, dtype=np.float64)
    p = float(progress)
    s = _front(rho, p)
    phi = 0.50 + (0.74 + 0.10 * p - 0.50) * s
    return phi * (1.0 - 0.35 * np.exp(-np.maximum(depth, 0.0) / 30.0))


def _front(rho, p):
    return 1.0 / (1.0 + np.exp(-(rho - (1.0 - 1.05 * p)) / 0.08))


def _moisture_temperature(rho, p, time_s):
    """Carried columns: wet-basis moisture (dried behind the front) and temperature in °C."""
    moisture = 0.12 - 0.03 * _front(rho, p)
    temperature = 25.0 + 175.0 * (1.0 - math.exp(-time_s / 2.5)) * (0.85 + 0.15 * rho)
    return moisture, temperature


def _radius_um(s, a):
    """Equivalent radius R(s) of the axisymmetric body at axial coordinate s = u/a."""
    s = np.asarray(s, dtype=np.float64)
    return RADIUS_RATIO * a * (1.0 - TAPER * s * s) * np.sqrt(np.clip(1.0 - s * s, 0.0, None))


def _mapped_nodes(n_s, n_xi):
    s = -1.0 + (np.arange(n_s) + 0.5) * 2.0 / n_s
    xi = (np.arange(n_xi) + 0.5) / n_xi
    return np.meshgrid(s, xi, indexing="ij")  # (n_s, n_xi) each


def _rz_values(setting, time_s, n_s, n_xi):
    p = model_progress(setting, time_s)
    a = body_semi_length_um(p)
    s, xi = _mapped_nodes(n_s, n_xi)
    big_r = _radius_um(s, a)
    r = xi * big_r
    z = a * (1.0 + s)
    rho = np.sqrt(s * s + xi * xi * (1.0 - s * s))
    depth = (1.0 - rho) * RADIUS_RATIO * a
    return {"p": p, "a": a, "s": s, "xi": xi, "R": big_r, "r": r, "z": z, "rho": rho,
            "porosity": model_porosity(rho, depth, p)}


def rz_field(setting: str, time_s: float, *, nodes=_RZ_NODES) -> dict:
    """The (r, z) field at one time on the moving mapped mesh, lengths in µm.

    Returns
    -------
    dict of ndarray (n,)
        ``r_um``, ``z_um`` (z from the first tip), ``porosity``, ``moisture_wb``,
        ``temperature_c``; the same n nodes in the same order at every time.
    """
    v = _rz_values(setting, time_s, *nodes)
    moisture, temperature = _moisture_temperature(v["rho"], v["p"], float(time_s))
    return {"r_um": v["r"].ravel(), "z_um": v["z"].ravel(), "porosity": v["porosity"].ravel(),
            "moisture_wb": moisture.ravel(), "temperature_c": temperature.ravel()}


def model_mean_porosity(setting: str, time_s: float, *, nodes=_FINE_NODES) -> float:
    """Mean porosity over the model body: ring volumes integrated exactly on a mapped mesh.

    With ``r = ξ·R(s)`` and ``z = a(1 + s)`` the volume element is
    ``dV = 2π r dr dz = 2π ξ R(s)² a dξ ds`` (the Jacobian of the map), so the midpoint rule
    on a fine (s, ξ) mesh integrates ``∫φ dV / ∫dV``.
    """
    v = _rz_values(setting, time_s, *nodes)
    w = v["xi"] * v["R"] ** 2
    return float(np.sum(w * v["porosity"]) / np.sum(w))


def grid_field(setting: str, time_s: float, *, step_um: float = _GRID_STEP_UM) -> dict:
    """The 3-D field on a fixed regular grid, long axis along the grid's x, lengths in µm.

    The grid covers the fully puffed body with one step to spare and is the same at every
    time; ``domain`` marks the points inside the body at this time.

    Returns
    -------
    dict
        ``porosity`` (nz, ny, nx) float64 (0 outside the domain), ``domain`` (bool),
        ``origin_um`` and ``spacing_um`` (z, y, x), ``moisture_wb``, ``temperature_c``.
    """
    a_max = body_semi_length_um(1.0)
    half = [SECTION_RATIOS[1] * a_max, SECTION_RATIOS[0] * a_max, a_max]  # z, y, x
    n = [2 * int(math.ceil(h / step_um)) + 3 for h in half]
    origin = [-(k - 1) / 2 * step_um for k in n]
    z, y, x = np.meshgrid(*[o + np.arange(k) * step_um for o, k in zip(origin, n)],
                          indexing="ij")
    p = model_progress(setting, time_s)
    a = body_semi_length_um(p)
    s = x / a
    taper = 1.0 - TAPER * np.minimum(s * s, 1.0)
    rho2 = s * s + ((y / (SECTION_RATIOS[0] * a)) ** 2
                    + (z / (SECTION_RATIOS[1] * a)) ** 2) / (taper * taper)
    domain = rho2 <= 1.0
    rho = np.sqrt(np.minimum(rho2, 1.0))
    depth = (1.0 - rho) * SECTION_RATIOS[1] * a
    por = np.where(domain, model_porosity(rho, depth, p), 0.0)
    moisture, temperature = _moisture_temperature(rho, p, float(time_s))
    return {"porosity": por, "domain": domain, "origin_um": np.array(origin),
            "spacing_um": np.full(3, float(step_um)),
            "moisture_wb": np.where(domain, moisture, 0.0),
            "temperature_c": np.where(domain, temperature, 0.0)}


def _write_npz(path: Path, arrays: dict) -> None:
    """An ``np.load``-able .npz archive with a fixed zip date (same arrays, same bytes)."""
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_STORED) as zf:
        for name, value in arrays.items():
            buf = io.BytesIO()
            np.lib.format.write_array(buf, np.asanyarray(value), allow_pickle=False)
            info = zipfile.ZipInfo(f"{name}.npy", date_time=_ZIP_DATE)
            info.external_attr = 0o644 << 16
            zf.writestr(info, buf.getvalue())


def _write_rows(path: Path, header, rows) -> None:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        for row in rows:
            w.writerow([repr(float(v)) if isinstance(v, (float, np.floating)) else v
                        for v in row])


def write_demo_model(out_dir, *, settings=None) -> dict:
    """Write the invented model's output for each setting into ``out_dir/<setting>/``.

    Files per setting: ``rz_fields.csv`` (columns ``r,z,time_s,porosity,moisture_wb,
    temperature_c``, lengths in mm, all of :data:`MODEL_TIMES_S`), ``curve.csv``
    (``time_s,porosity``: mean porosity over the piece at :data:`CURVE_TIMES_S`),
    ``grid_<t>s.npz`` per model time (``porosity``, ``domain``, ``origin`` and ``spacing`` in
    metres, ``length_unit = "m"``, ``time_s``, ``moisture_wb``, ``temperature_c``) and
    ``grid_fields.csv`` (``time_s,field``) listing them. ``out_dir/model.json`` describes the
    model, its units and its files.

    Parameters
    ----------
    out_dir : str or Path
        Folder to write to (created if needed).
    settings : sequence of str, optional
        Settings to write (default: all of :data:`ctpore.demo_scenario.SETTINGS`).

    Returns
    -------
    dict
        Per setting, the paths written: ``{"rz": Path, "curve": Path, "grid_list": Path,
        "grids": {time_s: Path}}``.

    Raises
    ------
    InputError
        On an unknown setting.
    """
    out = Path(out_dir)
    settings = list(SETTINGS) if settings is None else list(settings)
    for s in settings:
        if s not in SETTINGS:
            raise InputError(f"setting {s!r} is not one of {sorted(SETTINGS)}",
                             "use 'gentle' or 'intense'")
    paths = {}
    for setting in settings:
        folder = out / setting
        folder.mkdir(parents=True, exist_ok=True)
        rows = []
        for t in MODEL_TIMES_S:
            f = rz_field(setting, t)
            for k in range(f["porosity"].size):
                rows.append([f["r_um"][k] / 1000.0, f["z_um"][k] / 1000.0, float(t),
                             f["porosity"][k], f["moisture_wb"][k], f["temperature_c"][k]])
        rz_path = folder / "rz_fields.csv"
        _write_rows(rz_path, ["r", "z", "time_s", "porosity", "moisture_wb", "temperature_c"],
                    rows)
        curve_path = folder / "curve.csv"
        _write_rows(curve_path, ["time_s", "porosity"],
                    [[float(t), model_mean_porosity(setting, t)] for t in CURVE_TIMES_S])
        grids = {}
        for t in MODEL_TIMES_S:
            g = grid_field(setting, t)
            grids[t] = folder / f"grid_{t:g}s.npz"
            _write_npz(grids[t], {
                "porosity": g["porosity"], "domain": g["domain"],
                "origin": g["origin_um"] * 1e-6, "spacing": g["spacing_um"] * 1e-6,
                "length_unit": np.array("m"), "time_s": np.array(float(t)),
                "moisture_wb": g["moisture_wb"], "temperature_c": g["temperature_c"]})
        list_path = folder / "grid_fields.csv"
        _write_rows(list_path, ["time_s", "field"],
                    [[float(t), grids[t].name] for t in MODEL_TIMES_S])
        paths[setting] = {"rz": rz_path, "curve": curve_path, "grid_list": list_path,
                          "grids": grids}
    description = {
        "what": "invented continuum-model output for the ctpore demo (not a real simulation)",
        "settings": settings,
        "model_times_s": list(MODEL_TIMES_S),
        "curve_times_s": list(CURVE_TIMES_S),
        "time_scale": TIME_SCALE,
        "nominal_length_um": NOMINAL_LENGTH_UM,
        "radius_ratio": RADIUS_RATIO,
        "section_ratios": list(SECTION_RATIOS),
        "taper": TAPER,
        "files": {
            "rz_fields.csv": "axisymmetric (r, z) field on a mapped mesh that moves with the "
                             "body (same nodes at every time); lengths in mm; z from the first "
                             "tip; moisture_wb (wet basis) and temperature_c carried along",
            "curve.csv": "mean porosity over the piece versus time (ring-volume integral)",
            "grid_<t>s.npz": "3-D regular grid in the model's own frame (long axis along x); "
                             "origin and spacing in metres; domain marks the body",
            "grid_fields.csv": "time_s,field list of the 3-D grids",
        },
        "length_units": {"rz_fields.csv": "mm", "grid_<t>s.npz": "m"},
        "scenario_pieces": [e["sample_id"] for e in SCENARIO if e["setting"] in settings],
    }
    (out / "model.json").write_text(json.dumps(description, indent=2, sort_keys=True) + "\n",
                                    encoding="utf-8")
    return paths
