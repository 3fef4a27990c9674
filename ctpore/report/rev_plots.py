"""Convergence plots of a representative-volume study (PNG and SVG, byte-identical reruns).

Two figures, as in Kanit et al. (2003, Int. J. Solids Struct. 40:3647,
https://doi.org/10.1016/S0020-7683(03)00143-4):

``rev_variance``
    Porosity variance D² of the windows against window volume V on log–log axes, with the
    fitted integral-range law ``p(1 − p)·A3 / V`` and the exact finite-window curve
    ``p(1 − p)·A3·(ψ − V/V_env) / V`` through the points.
``rev_mean``
    Mean window porosity ± 2 standard deviations against window width, with the bulk porosity.

matplotlib's object API is used (no pyplot state). PNG files are saved without the software
tag; SVG files with a fixed ``svg.hashsalt`` and without a date, so the same study gives the
same bytes.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["save_rev_plots"]

_COLOURS = {"points": "#2c7bb6", "law": "#d7191c", "finite": "#555555", "band": "#abd9e9"}
_SVG_SALT = "ctpore-rev"


def _figure(width_in, height_in):
    from matplotlib.figure import Figure

    return Figure(figsize=(width_in, height_in), dpi=100)


def _save_both(fig, stem: Path) -> list[Path]:
    import matplotlib

    png, svg = stem.with_suffix(".png"), stem.with_suffix(".svg")
    fig.savefig(png, metadata={"Software": None})
    with matplotlib.rc_context({"svg.hashsalt": _SVG_SALT}):
        fig.savefig(svg, metadata={"Date": None})
    return [png, svg]


def _variance_figure(result):
    rows = result.rows
    p = result.porosity
    a3 = result.integral_range_um3
    v = np.array([r["window_volume_um3"] for r in rows], float)
    d2 = np.array([r["porosity_variance"] for r in rows], float)
    psi = np.array([r["finite_window_factor"] for r in rows], float)
    used = np.array([r["used_in_fit"] for r in rows], bool)
    ok = np.isfinite(d2) & (d2 > 0)

    fig = _figure(6.0, 4.2)
    ax = fig.add_subplot()
    ax.loglog(v[ok & used], d2[ok & used], "o", color=_COLOURS["points"],
              label="windows (used in the fit)")
    if (ok & ~used).any():
        ax.loglog(v[ok & ~used], d2[ok & ~used], "o", mfc="none", color=_COLOURS["points"],
                  label="windows (not used)")
    if np.isfinite(a3) and ok.any():
        vv = np.geomspace(v[ok].min(), max(v[ok].max(), result.rev_volume_um3), 100)
        # The law, capped at the single-point variance p(1 − p) where V < A3.
        ax.loglog(vv, p * (1 - p) * np.minimum(1.0, a3 / vv), "-", color=_COLOURS["law"],
                  label=f"p(1−p)·A3/V, A3 = {a3:.4g} µm³")
        fin = np.isfinite(psi) & ok
        if fin.any():
            ax.loglog(v[fin], p * (1 - p) * a3 * (psi[fin] - v[fin] / result.envelope_volume_um3)
                      / v[fin], "--", color=_COLOURS["finite"], label="exact finite-window law")
        d2_rev = p * (1 - p) * a3 / result.rev_volume_um3
        ax.axvline(result.rev_volume_um3, color=_COLOURS["law"], lw=0.8, ls=":",
                   label=f"REV for ε = {result.relative_error:g}: "
                         f"{result.recommended_width_um:.4g} µm cube")
        ax.plot([result.rev_volume_um3], [d2_rev], "s", color=_COLOURS["law"])
    ax.set_xlabel("window volume V (µm³)")
    ax.set_ylabel("porosity variance D²")
    ax.set_title(f"porosity {p:.3f}: variance of {result.windows} windows per size",
                 fontsize=9)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return fig


def _mean_figure(result):
    rows = result.rows
    w = np.array([r["window_width_um"] for r in rows], float)
    mean = np.array([r["porosity_mean"] for r in rows], float)
    sd = np.array([r["porosity_sd"] for r in rows], float)
    ok = np.isfinite(mean) & np.isfinite(sd)

    fig = _figure(6.0, 4.2)
    ax = fig.add_subplot()
    ax.fill_between(w[ok], np.clip(mean[ok] - 2 * sd[ok], 0, 1),
                    np.clip(mean[ok] + 2 * sd[ok], 0, 1), color=_COLOURS["band"],
                    label="mean ± 2 SD (within 0–1)")
    ax.plot(w[ok], mean[ok], "o-", color=_COLOURS["points"], label="mean of the windows")
    ax.axhline(result.porosity, color=_COLOURS["law"], lw=1,
               label=f"bulk porosity {result.porosity:.3f}")
    ax.set_xscale("log")
    ax.set_xlabel("window width (µm)")
    ax.set_ylabel("porosity")
    ax.set_title("window porosity against window width", fontsize=9)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return fig


def save_rev_plots(result, folder) -> list[Path]:
    """Save ``rev_variance.png/.svg`` and ``rev_mean.png/.svg`` for a RevResult into ``folder``.

    Returns
    -------
    list of Path
        The four files written.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = _save_both(_variance_figure(result), folder / "rev_variance")
    paths += _save_both(_mean_figure(result), folder / "rev_mean")
    return paths
