"""Files of the porosity profiles: CSV tables, frame.json and figures (PNG and SVG).

matplotlib is used through its object API (no pyplot state). The figures carry no date or
software metadata and SVG ids come from a fixed hash salt, so the same profiles give the same
bytes on every run.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["write_profiles", "profile_figure", "rz_figure", "save_figure"]

#: Line colours for gas, open and closed porosity (a blue / orange / grey set that stays
#: distinct for the common colour-vision deficiencies).
_COLOURS = {"porosity_gas": "#2c7bb6", "porosity_open": "#fdae61", "porosity_closed": "#555555"}
_SVG_SALT = "ctpore-profiles"
_TITLES = {
    "depth": ("porosity by depth below the envelope surface", "depth (µm)"),
    "radial": ("porosity by distance from the long axis", "distance from the long axis (µm)"),
    "axial": ("porosity along the long axis", "position from the first tip (µm)"),
}


def write_profiles(folder, profiles: dict, frame) -> list[Path]:
    """Write ``folder/profiles/``: depth, radial, axial and r–z CSV, frame.json and figures.

    Parameters
    ----------
    folder : str or Path
        The result folder; the files go into its ``profiles`` sub-folder.
    profiles : dict
        As returned by :func:`ctpore.profiles.profiles_for_result` (``"depth"``, ``"radial"``,
        ``"axial"``, ``"rz_map"``; any other key, such as ``"frame"``, is ignored).
    frame : ctpore.piece_frame.PieceFrame
        The frame the profiles were computed in.

    Returns
    -------
    list of Path
        The files written: depth.csv, radial.csv, axial.csv, rz_map.csv (long format, one row
        per cell: ``r_bin_centre_um, z_bin_centre_um, voxels, volume_mm3, porosity_gas,
        porosity_open, porosity_closed``; empty cells have blank porosity), frame.json, and
        depth, radial, axial and rz_map figures as .png and .svg.
    """
    from ..io.result_folder import write_csv_rows, write_json
    from ..profiles import RZ_COLUMNS

    out = Path(folder) / "profiles"
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for name in ("depth", "radial", "axial"):
        table = profiles[name]
        header = list(table)
        rows = np.column_stack([np.asarray(table[c], dtype=object) for c in header]).tolist()
        paths.append(out / f"{name}.csv")
        write_csv_rows(paths[-1], header, rows)
        title, xlabel = _TITLES[name]
        paths += save_figure(profile_figure(table, title=title, xlabel=xlabel),
                             out / f"{name}")
    rz = profiles["rz_map"]
    r_c, z_c = np.meshgrid(rz["r_bin_centre_um"], rz["z_bin_centre_um"])
    cols = {"r_bin_centre_um": r_c, "z_bin_centre_um": z_c,
            **{k: rz[k] for k in RZ_COLUMNS[2:]}}
    rows = np.column_stack([np.asarray(cols[c], dtype=object).ravel() for c in RZ_COLUMNS])
    paths.append(out / "rz_map.csv")
    write_csv_rows(paths[-1], list(RZ_COLUMNS), rows.tolist())
    paths += save_figure(rz_figure(rz), out / "rz_map")
    paths.append(out / "frame.json")
    write_json(paths[-1], frame.to_dict())
    return paths


def profile_figure(table: dict, *, title: str, xlabel: str):
    """Gas, open and closed porosity per bin as lines; below, each bin's share of the volume."""
    fig = _figure(6.4, 4.8)
    ax, ax_v = fig.subplots(2, 1, sharex=True, height_ratios=(3, 1))
    x = np.asarray(table["bin_centre_um"])
    for key, label in (("porosity_gas", "gas"), ("porosity_open", "open"),
                       ("porosity_closed", "closed")):
        ax.plot(x, table[key], marker="o", markersize=3, color=_COLOURS[key], label=label)
    ax.set_ylabel("porosity (fraction of envelope)")
    ax.set_ylim(0, 1)
    ax.set_title(title, fontsize=10)
    ax.legend(fontsize=8, loc="best")
    ax.grid(True, linewidth=0.3)
    edges = np.append(table["bin_start_um"], table["bin_end_um"][-1:])
    volume = np.asarray(table["volume_mm3"], dtype=float)
    ax_v.stairs(100.0 * volume / volume.sum(), edges, fill=True, color="#bbbbbb")
    ax_v.set_ylabel("% of volume", fontsize=8)
    ax_v.set_xlabel(xlabel)
    fig.subplots_adjust(left=0.11, right=0.97, bottom=0.1, top=0.93, hspace=0.1)
    return fig


def rz_figure(rz: dict):
    """The azimuthally averaged gas porosity over (r, z), mirrored about the long axis.

    The map is drawn for r ≥ 0 and its mirror image for r < 0, so the picture reads as a
    section through the axis; empty cells stay blank.
    """
    r_max = float(rz["r_bin_end_um"][-1])
    z_max = float(rz["z_bin_end_um"][-1])
    width_in = min(10.0, max(4.0, 1.8 + 5.0 * 2 * r_max / max(z_max, 1e-12)))
    fig = _figure(width_in, 6.4)
    ax = fig.add_subplot()
    grid = np.asarray(rz["porosity_gas"], dtype=float)
    grid = np.ma.masked_invalid(np.concatenate([grid[:, ::-1], grid], axis=1))
    im = ax.imshow(grid, origin="lower", extent=(-r_max, r_max, 0.0, z_max), vmin=0.0,
                   vmax=1.0, cmap="viridis", interpolation="nearest", aspect="equal")
    ax.axvline(0.0, color="#ffffff", linewidth=0.5, linestyle=":")
    fig.colorbar(im, ax=ax, label="gas porosity")
    ax.set_xlabel("r, from the long axis (µm), mirrored")
    ax.set_ylabel("z, position from the first tip (µm)")
    ax.set_title("azimuthally averaged porosity", fontsize=10)
    fig.subplots_adjust(left=0.15, right=0.86, bottom=0.09, top=0.94)
    return fig


def save_figure(fig, stem: Path) -> list[Path]:
    """Save ``stem``.png and ``stem``.svg with no date or software metadata."""
    from matplotlib import rc_context

    stem = Path(stem)
    png, svg = stem.with_suffix(".png"), stem.with_suffix(".svg")
    fig.savefig(png, format="png", metadata={"Software": None})
    with rc_context({"svg.hashsalt": _SVG_SALT}):
        fig.savefig(svg, format="svg", metadata={"Date": None, "Creator": None})
    return [png, svg]


def _figure(width_in, height_in):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100)
