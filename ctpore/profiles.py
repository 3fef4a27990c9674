"""Where the porosity sits: profiles by depth, radius, axial position, and the r–z map.

Puffing starts where a piece heats first (tips, skin) and moves inward, so the porosity is
profiled by depth from the envelope surface, by distance from the long axis, along the long
axis from tip to tip, and as an azimuthally averaged r–z map (the form in which axisymmetric
continuum models give their fields).

Every profile partitions the envelope's voxels into bins and counts, per bin, the solid, open
and closed pore voxels (one distance transform for depth, one pass over the slices for the
frame profiles, ``np.bincount`` throughout). Porosity in a bin is its pore voxel count over its
envelope voxel count: the Delesse principle V_V = P_P applied to the voxel centres of the bin
(Delesse 1847; Underwood 1970). Empty bins have 0 voxels and NaN porosity. Because the bins
partition the envelope, the volume-weighted mean of any profile equals the bulk porosity
exactly.

Coordinates follow :mod:`ctpore.piece_frame`: µm, (z, y, x), voxel centre i·spacing.
"""

from __future__ import annotations

import math

import numpy as np

from .errors import InputError
from .measure.porosity import _checked_phases, open_pore_mask
from .piece_frame import PieceFrame, _projection_tables, piece_frame
from .spacing import as_spacing_um

__all__ = ["depth_profile", "radial_profile", "axial_profile", "rz_map", "profiles_for_result",
           "PROFILE_COLUMNS", "AXIAL_COLUMNS", "RZ_COLUMNS"]

#: Columns of the depth and radial tables (the axial table adds ``position_normalised``).
PROFILE_COLUMNS = ("bin_start_um", "bin_end_um", "bin_centre_um", "voxels", "volume_mm3",
                   "porosity_gas", "porosity_open", "porosity_closed")
AXIAL_COLUMNS = PROFILE_COLUMNS[:3] + ("position_normalised",) + PROFILE_COLUMNS[3:]
#: Columns of rz_map.csv (long format, one row per cell).
RZ_COLUMNS = ("r_bin_centre_um", "z_bin_centre_um", "voxels", "volume_mm3", "porosity_gas",
              "porosity_open", "porosity_closed")

# Voxel classes: phase labels with the open pores moved to 3 (0 exterior, 1 closed pore,
# 2 solid, 3 open pore); a bincount over 4·bin + class counts all three at once.
_CLOSED, _SOLID, _OPEN = 1, 2, 3
_UM3_PER_MM3 = 1e9
_MAX_BINS = 10_000_000


def depth_profile(phases, *, spacing_um, bin_um: float = 0.0) -> dict:
    """Porosity by depth below the envelope surface.

    The depth of an envelope voxel is its Euclidean distance (anisotropic voxels exact) to the
    nearest exterior voxel centre, less half the finest voxel size: the outermost layer then
    reads half a voxel, the distance from its centre to its outer face. The image is padded
    with one layer of exterior first, so a piece cut by the field of view has a surface at the
    image border too (as the open-pore rule of :func:`ctpore.measure.porosity.open_pore_mask`
    treats it).

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    bin_um : float
        Bin width in µm; 0 means two voxels of the coarsest axis.

    Returns
    -------
    dict of 1-D ndarrays
        Columns :data:`PROFILE_COLUMNS`; bin k covers depths [k·bin_um, (k + 1)·bin_um).
        ``porosity_*`` are fractions of the envelope volume of the bin (NaN when empty).

    Raises
    ------
    InputError
        If the envelope is empty or a parameter is invalid.

    References
    ----------
    A. Delesse (1847), Ann. Mines 13:379; E. E. Underwood (1970), Quantitative Stereology.
    Exact Euclidean distance transform (the edt package, a separable algorithm by lower
    envelopes of parabolas): P. F. Felzenszwalb & D. P. Huttenlocher (2012), Theory Comput.
    8:415, doi:10.4086/toc.2012.v008a019.
    """
    spacing = as_spacing_um(spacing_um)
    cls = _classes(phases)
    bin_um = _bin_width("bin_um", bin_um, spacing)
    return _table(_depth_counts(cls, spacing, bin_um), bin_um, spacing)


def radial_profile(phases, *, spacing_um, frame: PieceFrame | None = None, bin_um: float = 0.0,
                   axial_window_um: float = 0.0) -> dict:
    """Porosity by distance from the piece's long axis (through its centroid).

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    frame : PieceFrame, optional
        The piece's frame (:func:`ctpore.piece_frame.piece_frame`); computed with
        ``long_axis="auto"`` when omitted.
    bin_um : float
        Bin width in µm; 0 means two voxels of the coarsest axis.
    axial_window_um : float
        Only voxels with |axial position − centroid| ≤ this count; 0 means the whole piece.

    Returns
    -------
    dict of 1-D ndarrays
        Columns :data:`PROFILE_COLUMNS`; bin k covers radii [k·bin_um, (k + 1)·bin_um), up to
        the last non-empty bin.

    Raises
    ------
    InputError
        If the envelope (or the axial window) is empty, the frame does not fit, or a
        parameter is invalid.
    """
    spacing = as_spacing_um(spacing_um)
    cls = _classes(phases)
    frame = _frame_for(cls, spacing, frame)
    bin_um = _bin_width("bin_um", bin_um, spacing)
    window = _window("axial_window_um", axial_window_um)
    (counts,) = _frame_pass(cls, spacing, frame, [_radial_binner(frame, bin_um, window)])
    return _table(_trim(counts, "axial_window_um"), bin_um, spacing)


def axial_profile(phases, *, spacing_um, frame: PieceFrame | None = None,
                  bin_um: float = 0.0) -> dict:
    """Porosity along the long axis, tip to tip.

    Positions are measured from the first tip (the envelope voxel centre with the smallest
    projection onto the long axis, whose direction is fixed by the frame's sign rule).
    ``position_normalised`` is the bin centre over the tip-to-tip length (the last bin may
    overhang the far tip, so it can exceed 1 by up to half a bin).

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    frame : PieceFrame, optional
        The piece's frame; computed with ``long_axis="auto"`` when omitted.
    bin_um : float
        Bin width in µm; 0 means two voxels of the coarsest axis.

    Returns
    -------
    dict of 1-D ndarrays
        Columns :data:`AXIAL_COLUMNS`.

    Raises
    ------
    InputError
        If the envelope is empty, the frame does not fit, or a parameter is invalid.
    """
    spacing = as_spacing_um(spacing_um)
    cls = _classes(phases)
    frame = _frame_for(cls, spacing, frame)
    bin_um = _bin_width("bin_um", bin_um, spacing)
    (counts,) = _frame_pass(cls, spacing, frame, [_axial_binner(frame, bin_um)])
    return _axial_table(counts, bin_um, spacing, frame)


def rz_map(phases, *, spacing_um, frame: PieceFrame | None = None, r_bin_um: float = 0.0,
           z_bin_um: float = 0.0) -> dict:
    """Azimuthally averaged porosity on an (axial position, radius) grid.

    z is the position along the long axis from the first tip (as in :func:`axial_profile`),
    r ≥ 0 the distance from the long axis. Each cell is an annular ring of the piece; its
    porosity is the pore fraction of the envelope voxels whose centres fall in it.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    frame : PieceFrame, optional
        The piece's frame; computed with ``long_axis="auto"`` when omitted.
    r_bin_um, z_bin_um : float
        Cell size in µm; 0 means two voxels of the coarsest axis.

    Returns
    -------
    dict
        1-D ``r_bin_start_um``, ``r_bin_end_um``, ``r_bin_centre_um`` (n_r,) and
        ``z_bin_start_um``, ``z_bin_end_um``, ``z_bin_centre_um`` (n_z,); 2-D (n_z, n_r)
        ``voxels``, ``volume_mm3``, ``porosity_gas``, ``porosity_open``,
        ``porosity_closed`` (NaN where empty).

    Raises
    ------
    InputError
        If the envelope is empty, the frame does not fit, or a parameter is invalid.
    """
    spacing = as_spacing_um(spacing_um)
    cls = _classes(phases)
    frame = _frame_for(cls, spacing, frame)
    r_bin = _bin_width("r_bin_um", r_bin_um, spacing)
    z_bin = _bin_width("z_bin_um", z_bin_um, spacing)
    binner, shape = _rz_binner(frame, r_bin, z_bin)
    (counts,) = _frame_pass(cls, spacing, frame, [binner])
    return _rz_table(counts, shape, r_bin, z_bin, spacing)


def profiles_for_result(phases, *, spacing_um, section=None) -> dict:
    """All four profiles and the piece frame, as a result folder holds them.

    The open-pore labelling, the frame and the slice pass are shared: one distance transform,
    one labelling, one pass for the radial, axial and r–z profiles. Whether to call this at all
    is the caller's choice (``section.enabled``).

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    section : ctpore.recipe.ProfilesSection, optional
        ``long_axis``, ``depth_bin_um``, ``radial_bin_um``, ``axial_bin_um`` (also the r and z
        cell sizes of the r–z map) and ``axial_window_um``; defaults when omitted.

    Returns
    -------
    dict
        ``"depth"``, ``"radial"``, ``"axial"``, ``"rz_map"`` (tables as returned by the
        single functions) and ``"frame"`` (the :class:`PieceFrame`).
    """
    from .recipe import ProfilesSection

    section = ProfilesSection() if section is None else section
    section.check()
    spacing = as_spacing_um(spacing_um)
    cls = _classes(phases)
    frame = piece_frame(cls, spacing_um=spacing, long_axis=section.long_axis)
    depth_bin = _bin_width("profiles.depth_bin_um", section.depth_bin_um, spacing)
    radial_bin = _bin_width("profiles.radial_bin_um", section.radial_bin_um, spacing)
    axial_bin = _bin_width("profiles.axial_bin_um", section.axial_bin_um, spacing)
    window = _window("profiles.axial_window_um", section.axial_window_um)
    depth = _table(_depth_counts(cls, spacing, depth_bin, "profiles.depth_bin_um"), depth_bin,
                   spacing)
    rz_binner, rz_shape = _rz_binner(frame, radial_bin, axial_bin,
                                     ("profiles.radial_bin_um", "profiles.axial_bin_um"))
    radial, axial, rz = _frame_pass(cls, spacing, frame, [
        _radial_binner(frame, radial_bin, window, "profiles.radial_bin_um"),
        _axial_binner(frame, axial_bin, "profiles.axial_bin_um"), rz_binner])
    return {
        "depth": depth,
        "radial": _table(_trim(radial, "profiles.axial_window_um"), radial_bin, spacing),
        "axial": _axial_table(axial, axial_bin, spacing, frame),
        "rz_map": _rz_table(rz, rz_shape, radial_bin, axial_bin, spacing),
        "frame": frame,
    }


# --- kernels ---------------------------------------------------------------------------------

def _classes(phases) -> np.ndarray:
    """uint8 copy of the phases with open pore voxels relabelled 3 (see ``_OPEN``)."""
    phases = _checked_phases(phases)
    cls = phases.astype(np.uint8, copy=True)
    if not cls.any():
        raise InputError("phases: the envelope is empty (no pore or solid voxel)",
                         "check the segmentation: the piece was not found")
    cls[open_pore_mask(phases)] = _OPEN
    return cls


def _depth_counts(cls: np.ndarray, spacing, bin_um: float, name: str = "bin_um") -> np.ndarray:
    """(n_bins, 4) class counts per depth bin, from one EDT of the padded envelope."""
    import edt

    inside = np.pad(cls != 0, 1, mode="constant", constant_values=False)
    dist = edt.edt(inside, anisotropy=spacing, black_border=False, parallel=1)
    del inside
    offset = 0.5 * min(spacing)
    n = _n_bins(name, (float(dist.max()) - offset) / bin_um)
    counts = np.zeros(4 * n, dtype=np.int64)
    for z in range(cls.shape[0]):
        c = cls[z]
        inside = c != 0
        if not inside.any():
            continue
        depth = dist[z + 1, 1:-1, 1:-1][inside].astype(np.float64) - offset
        idx = np.minimum(np.floor(np.maximum(depth, 0.0) / bin_um).astype(np.intp), n - 1)
        counts += np.bincount(4 * idx + c[inside], minlength=4 * n)
    return counts.reshape(n, 4)


def _axial_binner(frame: PieceFrame, bin_um: float, name: str = "bin_um"):
    a0 = frame.extents_um[0, 0]
    n = _n_bins(name, frame.length_um / bin_um)

    def binner(a, r):
        idx = np.floor((a - a0) / bin_um).astype(np.intp)
        return np.clip(idx, 0, n - 1), None

    return n, binner, False


def _radial_bound(frame: PieceFrame) -> float:
    """An upper bound of the distance of any envelope voxel centre from the long axis."""
    e = np.abs(frame.extents_um[1:]).max(axis=1)
    return float(math.hypot(e[0], e[1]))


def _radial_binner(frame: PieceFrame, bin_um: float, window: float, name: str = "bin_um"):
    n = _n_bins(name, _radial_bound(frame) / bin_um, extra=2)

    def binner(a, r):
        idx = np.minimum(np.floor(r / bin_um).astype(np.intp), n - 1)
        return idx, (np.abs(a) <= window if window > 0 else None)

    return n, binner, True


def _rz_binner(frame: PieceFrame, r_bin: float, z_bin: float,
               names: tuple[str, str] = ("r_bin_um", "z_bin_um")):
    a0 = frame.extents_um[0, 0]
    n_z = _n_bins(names[1], frame.length_um / z_bin)
    n_r = _n_bins(names[0], _radial_bound(frame) / r_bin, extra=2)
    _n_bins(" and ".join(names), n_z * n_r, extra=0)

    def binner(a, r):
        iz = np.clip(np.floor((a - a0) / z_bin).astype(np.intp), 0, n_z - 1)
        ir = np.minimum(np.floor(r / r_bin).astype(np.intp), n_r - 1)
        return iz * n_r + ir, None

    return (n_z * n_r, binner, True), (n_z, n_r)


def _frame_pass(cls: np.ndarray, spacing, frame: PieceFrame, binners) -> list[np.ndarray]:
    """One pass over the slices; per binner, (n_bins, 4) class counts."""
    planes, tables = _projection_tables(cls.shape, spacing, frame.centroid_um, frame.axes)
    need_r = any(b[2] for b in binners)
    counts = [np.zeros(4 * n, dtype=np.int64) for n, _, _ in binners]
    for z in range(cls.shape[0]):
        c = cls[z]
        inside = c != 0
        if not inside.any():
            continue
        code = c[inside].astype(np.intp)
        a = planes[0][inside] + tables[0][z]
        r = None
        if need_r:
            r = np.hypot(planes[1][inside] + tables[1][z], planes[2][inside] + tables[2][z])
        for (n, binner, _), acc in zip(binners, counts):
            idx, keep = binner(a, r)
            key = 4 * idx + code
            acc += np.bincount(key if keep is None else key[keep], minlength=4 * n)
    return [acc.reshape(-1, 4) for acc in counts]


# --- tables ----------------------------------------------------------------------------------

def _fractions(counts: np.ndarray, voxel_mm3: float) -> dict:
    voxels = counts[..., 1:].sum(axis=-1)
    closed = counts[..., _CLOSED]
    opened = counts[..., _OPEN]

    def frac(k):
        return np.divide(k, voxels, out=np.full(voxels.shape, np.nan), where=voxels > 0)

    return {"voxels": voxels, "volume_mm3": voxels * voxel_mm3,
            "porosity_gas": frac(closed + opened), "porosity_open": frac(opened),
            "porosity_closed": frac(closed)}


def _edges(n: int, bin_um: float, prefix: str = "") -> dict:
    start = np.arange(n) * bin_um
    return {f"{prefix}bin_start_um": start, f"{prefix}bin_end_um": start + bin_um,
            f"{prefix}bin_centre_um": start + 0.5 * bin_um}


def _table(counts: np.ndarray, bin_um: float, spacing) -> dict:
    voxel_mm3 = spacing[0] * spacing[1] * spacing[2] / _UM3_PER_MM3
    return {**_edges(len(counts), bin_um), **_fractions(counts, voxel_mm3)}


def _axial_table(counts: np.ndarray, bin_um: float, spacing, frame: PieceFrame) -> dict:
    table = _table(counts, bin_um, spacing)
    length = frame.length_um
    centre = table["bin_centre_um"]
    norm = centre / length if length > 0 else np.zeros_like(centre)
    out = {k: table[k] for k in PROFILE_COLUMNS[:3]}
    out["position_normalised"] = norm
    out.update({k: table[k] for k in PROFILE_COLUMNS[3:]})
    return out


def _rz_table(counts: np.ndarray, shape, r_bin: float, z_bin: float, spacing) -> dict:
    n_z, n_r = shape
    grid = counts.reshape(n_z, n_r, 4)
    used = np.flatnonzero(grid[..., 1:].sum(axis=(0, 2)))
    n_r = int(used[-1]) + 1  # the envelope is not empty, so some ring is used
    grid = grid[:, :n_r]
    voxel_mm3 = spacing[0] * spacing[1] * spacing[2] / _UM3_PER_MM3
    return {**_edges(n_r, r_bin, "r_"), **_edges(n_z, z_bin, "z_"),
            **_fractions(grid, voxel_mm3)}


def _trim(counts: np.ndarray, window_name: str) -> np.ndarray:
    """Drop the empty bins after the last used one."""
    used = np.flatnonzero(counts[:, 1:].sum(axis=1))
    if used.size == 0:
        raise InputError(f"{window_name}: no envelope voxel lies within the axial window",
                         "widen the window (0 = whole piece)")
    return counts[: used[-1] + 1]


# --- checks ----------------------------------------------------------------------------------

def _bin_width(name: str, value, spacing) -> float:
    if value is None or value == 0:
        return 2.0 * max(spacing)
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{name} = {value!r} is not a number", "give a bin width in µm") from None
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"{name} must be a finite bin width > 0 in µm; got {value}",
                         "give a positive width in µm, or 0 for two voxels of the coarsest axis")
    return value


def _window(name: str, value) -> float:
    value = float(value)
    if not (math.isfinite(value) and value >= 0):
        raise InputError(f"{name} must be a finite number ≥ 0 in µm; got {value}",
                         "give a half-length in µm, or 0 for the whole piece")
    return value


def _n_bins(name: str, quotient: float, extra: int = 1) -> int:
    """floor(quotient) + extra bins (bin k holds [k, k + 1)·width), within a sane limit."""
    if not quotient + extra <= _MAX_BINS:
        raise InputError(f"{name}: {quotient + extra:.3g} bins would be needed "
                         f"(at most {_MAX_BINS})", "choose a wider bin")
    return max(1, math.floor(quotient) + extra)


def _frame_for(cls: np.ndarray, spacing, frame: PieceFrame | None) -> PieceFrame:
    if frame is None:
        return piece_frame(cls, spacing_um=spacing)
    if not isinstance(frame, PieceFrame):
        raise TypeError(f"frame must be a PieceFrame from piece_frame(); got {type(frame)}")
    if tuple(frame.spacing_um) != tuple(spacing):
        raise InputError(f"frame: it was computed with spacing_um {frame.spacing_um}, "
                         f"not {spacing}", "compute the frame with the same spacing_um")
    if frame.shape != cls.shape or frame.voxels != np.count_nonzero(cls):
        raise InputError(f"frame: it was computed for another piece (shape {frame.shape}, "
                         f"{frame.voxels} envelope voxels; these phases: shape {cls.shape}, "
                         f"{np.count_nonzero(cls)})", "compute the frame from these phases")
    return frame
