"""Representative-volume (REV) study: porosity variance against window size, integral range.

Cubic windows of physical side L are placed at random inside the piece's envelope; the variance
D²(V) of their porosity falls as the integral-range law ``D²(V) = p(1 − p)·A3 / V`` once the
window volume V is large compared with the integral range A3 (Kanit et al. 2003; Lantuéjoul
1991). From A3 and a target relative error ε of the porosity, the REV is
``V_REV = 4(1 − p)·A3 / (ε²·p·n)`` for n windows (ε = 2·D/(p·√n), a two-standard-deviation
error); n = 1 gives the width of a single kernel average, the recommended coarse-graining width.

Finite windows
--------------
For windows of a few grain sizes the large-window law overstates D² by 20–35 %, so fitting it
there underestimates A3. The exact variance of the mean over a cube of ``n_i`` voxels per axis
is ``D² = (1/N) Σ_h Π_i (1 − |h_i|/n_i)⁺ χ(h)`` (χ the covariance of the pore indicator,
N = Π n_i), that is ``D²·V / (p(1 − p)) = A3·ψ(L)`` with the finite-window factor
``ψ(L) = Σ_h Π_i (1 − |h_i|/n_i)⁺ ρ(h) / Σ_h ρ(h)``, ρ = χ / (p(1 − p)), and ψ → 1 as L → ∞.
The study measures ρ of the piece itself by FFT (pairs of voxels both inside the envelope),
truncates it at its correlation range, and fits A3 to the window variances with that exact
law. The correlation range is the first lag radius where the shell-averaged ρ̂ is no longer
significantly positive: not above twice the standard deviation of ρ̂ at lags beyond the range,
from Bartlett's formula ``Var ρ̂ ≈ Σ_k ρ(k)² / N`` (Bartlett 1946, from memory; integrating a
correlation function to where it vanishes is the integral-scale convention of turbulence,
common practice, no source; the factor 2 is common practice). Correlation weaker than that
noise cannot be told from it: a long faint tail is missed, and A3 is then underestimated by the
tail's share. A negative lobe (the cell-wall
spacing of a foam) lies beyond the cut, which overestimates A3 and so errs towards a larger
REV.

Fit
---
Window porosities are compared with the piece's bulk porosity p, whose own sampling error
lowers the expected squared deviation by ``p(1 − p)·A3 / V_env`` (V_env the envelope volume):
``E[(f − p)²]·V / (p(1 − p)) = A3·(ψ(L) − V / V_env)``. A3 is the least-squares fit in log
space with slope fixed to −1, i.e. the weighted mean of ``log(y / (ψ − V/V_env))``, weighted
by the number of nearly independent windows ``min(n, V_env / V)`` (the variance of a
log-variance is about 2/n). Because ψ makes the law exact at every size, all sizes with at
least 10 windows enter the fit, not only those with V ≫ A3 that the large-window law needs:
small windows tie the fit to the covariance near the origin, where it is best measured, and
large ones to the variances themselves. (Fitting only windows wider than the correlation range
was tried and was about 1.5 times as noisy on Boolean spheres in a 192³ image.) The covariance
sum itself, ``Σ_{|h| < range} ρ(h)·v``, is reported as a check.

References
----------
Kanit T., Forest S., Galliet I., Mounoury V. & Jeulin D. (2003). Determination of the size of the
representative volume element for random composites: statistical and numerical approach. Int.
J. Solids Struct. 40:3647–3679. https://doi.org/10.1016/S0020-7683(03)00143-4
Lantuéjoul C. (1991). Ergodicity and integral range. J. Microsc. 161:387–403 (from memory).
Crow F. C. (1984). Summed-area tables for texture mapping. SIGGRAPH '84, Comput. Graph.
18(3):207–212. https://doi.org/10.1145/964965.808600
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..recipe import RevSection
from ..spacing import as_spacing_um, voxel_volume_um3

__all__ = ["RevResult", "rev_study", "rev_volume_um3", "equivalent_widths_um", "write_rev"]

PORE, EXTERIOR = 1, 0
_MIN_WINDOWS_FIT = 10
_MAX_DRAWS_PER_WINDOW = 1000
_NOISE_SDS = 2.0  # the covariance is cut where it is no longer 2 SD above zero
_CENTRE_GRID = 64  # corner positions per axis when measuring the room left for a window


@dataclass(frozen=True, eq=False)
class RevResult:
    """Outcome of :func:`rev_study`.

    Attributes
    ----------
    spacing_um : tuple of 3 floats
        Voxel size of the scan.
    porosity : float
        Bulk porosity p of the envelope.
    envelope_volume_um3 : float
        Volume of the envelope.
    rows : tuple of dict
        One per window size: ``window_width_um`` (mean side of the voxel box, which has
        ``round(L / spacing_i)`` voxels along axis i), ``window_volume_um3``, ``window_voxels``
        (z, y, x), ``windows_used``, ``porosity_mean``, ``porosity_variance`` (mean squared
        deviation from p), ``porosity_sd`` (sample standard deviation of the window porosities),
        ``finite_window_factor`` (ψ), ``used_in_fit``.
    integral_range_um3 : float
        A3 fitted to the window variances.
    integral_range_covariance_um3 : float
        A3 as the covariance sum up to the correlation range (a check).
    correlation_range_um : float
        Lag radius where the covariance is cut.
    relative_error : float
        Target relative error ε of the porosity.
    windows : int
        Windows requested per size.
    seed : int
        Seed of the random window positions.
    rev_volume_um3 : float
        ``4(1 − p)·A3 / (ε²·p)``: the volume of one average with relative error ε.
    recommended_width_um : float
        Side of the cube of volume ``rev_volume_um3``.
    recommended_gaussian_sigma_um, recommended_ball_diameter_um : float
        σ of the Gaussian kernel, diameter of the ball, with the same effective volume.
    covariance_radius_um, covariance_rho : ndarray
        Shell-averaged normalised covariance ρ(r) of the pore indicator (for plots).
    notes : tuple of str
        Warnings about the study (for example a correlation range larger than the windows).
    """

    spacing_um: tuple[float, float, float]
    porosity: float
    envelope_volume_um3: float
    rows: tuple
    integral_range_um3: float
    integral_range_covariance_um3: float
    correlation_range_um: float
    relative_error: float
    windows: int
    seed: int
    rev_volume_um3: float
    recommended_width_um: float
    recommended_gaussian_sigma_um: float
    recommended_ball_diameter_um: float
    covariance_radius_um: np.ndarray = field(repr=False)
    covariance_rho: np.ndarray = field(repr=False)
    notes: tuple = ()

    def recommended_width_for(self, shape: str) -> float:
        """The recommended ``width_um`` of a kernel of this shape (cube side, σ or diameter)."""
        widths = {"box": self.recommended_width_um, "gaussian": self.recommended_gaussian_sigma_um,
                  "ball": self.recommended_ball_diameter_um}
        if shape not in widths:
            raise InputError(f"kernel shape {shape!r} is not one of {sorted(widths)}",
                             f"choose one of {sorted(widths)}")
        return widths[shape]


def rev_volume_um3(porosity: float, integral_range_um3: float, *, relative_error: float,
                   windows: int = 1) -> float:
    """Volume for which the mean porosity of ``windows`` windows has relative error ε.

    ``V_REV = 4(1 − p)·A3 / (ε²·p·n)``, from ε = 2·D/(p·√n) and D² = p(1 − p)·A3/V
    (Kanit et al. 2003, Int. J. Solids Struct. 40:3647,
    https://doi.org/10.1016/S0020-7683(03)00143-4).

    Examples
    --------
    >>> round(rev_volume_um3(0.8, 1000.0, relative_error=0.05), 6)  # 4·0.2·1000/(0.05²·0.8)
    400000.0
    """
    if not 0 < porosity < 1:
        raise InputError(f"porosity must be in (0, 1) for an REV; got {porosity!r}",
                         "a piece of porosity 0 or 1 has no sampling error")
    if not 0 < relative_error < 1:
        raise InputError(f"relative_error must be in (0, 1); got {relative_error!r}",
                         "0.05 is the default")
    if windows < 1:
        raise InputError(f"windows must be ≥ 1; got {windows!r}", "use 1 for a single average")
    return 4.0 * (1.0 - porosity) * integral_range_um3 / (relative_error ** 2 * porosity
                                                          * windows)


def equivalent_widths_um(volume_um3: float) -> dict:
    """Kernel widths with a given effective volume (see ``Kernel.effective_volume_um3``).

    Returns ``box_width_um`` (cube side ``V^(1/3)``), ``gaussian_sigma_um``
    (``(2√π σ)³ = V``, the effective volume of a continuous Gaussian, ``1/∫g²``) and
    ``ball_diameter_um`` (``π d³/6 = V``).

    Examples
    --------
    >>> {k: round(v, 3) for k, v in equivalent_widths_um(1000.0).items()}
    {'box_width_um': 10.0, 'gaussian_sigma_um': 2.821, 'ball_diameter_um': 12.407}
    """
    side = volume_um3 ** (1 / 3)
    return {"box_width_um": side, "gaussian_sigma_um": side / (2 * math.sqrt(math.pi)),
            "ball_diameter_um": (6 * volume_um3 / math.pi) ** (1 / 3)}


# ----------------------------------------------------------------------------- windows

def _summed_area(mask):
    """3-D summed-area table with a leading row of zeros: S[i, j, k] = Σ mask[:i, :j, :k]."""
    dtype = np.int32 if mask.size < 2**31 - 1 else np.int64
    table = np.zeros(tuple(n + 1 for n in mask.shape), dtype=dtype)
    inner = table[1:, 1:, 1:]
    np.cumsum(mask, axis=0, dtype=dtype, out=inner)
    np.cumsum(inner, axis=1, dtype=dtype, out=inner)
    np.cumsum(inner, axis=2, dtype=dtype, out=inner)
    return table


def _box_sums(table, corners, size):
    """Sums over the boxes [c, c + size) for an (n, 3) array of corners, by inclusion–exclusion."""
    z0, y0, x0 = corners[:, 0], corners[:, 1], corners[:, 2]
    z1, y1, x1 = z0 + size[0], y0 + size[1], x0 + size[2]
    t = table
    return (t[z1, y1, x1].astype(np.int64) - t[z0, y1, x1] - t[z1, y0, x1] - t[z1, y1, x0]
            + t[z0, y0, x1] + t[z0, y1, x0] + t[z1, y0, x0] - t[z0, y0, x0])


def _window_voxels(width_um, spacing):
    return tuple(max(1, int(math.floor(width_um / s + 0.5))) for s in spacing)


def _centre_room_um3(env_table, shape, size, spacing):
    """Volume of window positions (corner set) whose window lies inside the envelope.

    Counted on a grid of at most ``_CENTRE_GRID`` corner positions per axis and scaled up.
    """
    free = [n - w + 1 for n, w in zip(shape, size)]
    if min(free) < 1:
        return 0.0
    axes = [np.arange(0, m, max(1, math.ceil(m / _CENTRE_GRID))) for m in free]
    corners = np.stack([a.ravel() for a in np.meshgrid(*axes, indexing="ij")], axis=1)
    inside = _box_sums(env_table, corners, size) == math.prod(size)
    return float(inside.mean()) * math.prod(free) * voxel_volume_um3(spacing)


def _largest_width_um(env_table, shape, spacing, min_width):
    """Largest cube side whose allowed positions fill at least the cube's own volume.

    For a cubic field this is half its side: at least 2³ disjoint windows fit. Bisection on
    the physical side; the criterion is evaluated on the rounded voxel sizes.
    """
    def fits(width):
        size = _window_voxels(width, spacing)
        volume = math.prod(size) * voxel_volume_um3(spacing)
        return _centre_room_um3(env_table, shape, size, spacing) >= volume

    if not fits(min_width):
        return None
    lo, hi = min_width, min(n * s for n, s in zip(shape, spacing))
    while hi - lo > 0.25 * min(spacing):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if fits(mid) else (lo, mid)
    return lo


def _draw_windows(rng, env_table, pore_table, shape, size, n):
    """Pore fractions of up to n windows at random corners lying wholly inside the envelope."""
    free = np.array([m - w + 1 for m, w in zip(shape, size)])
    volume = math.prod(size)
    accepted = []
    count, draws = 0, 0
    while count < n and draws < _MAX_DRAWS_PER_WINDOW * n:
        batch = max(256, 2 * (n - count))
        corners = rng.integers(0, free, size=(batch, 3))
        draws += batch
        ok = corners[_box_sums(env_table, corners, size) == volume]
        ok = ok[: n - count]
        accepted.append(_box_sums(pore_table, ok, size) / volume)
        count += len(ok)
    return np.concatenate(accepted) if accepted else np.empty(0)


# ----------------------------------------------------------------------------- covariance

def _covariance(pore, envelope, p, max_lag):
    """Normalised covariance ρ(h) = χ(h)/(p(1 − p)) for lags |h_i| ≤ max_lag_i (centred array).

    χ(h) = Σ_x E(x)E(x+h)(P(x) − p)(P(x+h) − p) / Σ_x E(x)E(x+h): pairs with both voxels in
    the envelope, by FFT autocorrelation of the zero-padded volumes.
    """
    from scipy import fft

    shape = pore.shape
    lag = tuple(min(m, n - 1) for m, n in zip(max_lag, shape))
    padded = tuple(fft.next_fast_len(n + m, real=True) for n, m in zip(shape, lag))
    u = np.where(envelope, pore.astype(np.float32) - np.float32(p), np.float32(0))

    def autocorrelation(a):
        f = fft.rfftn(a, s=padded, workers=1)
        f *= np.conj(f)
        full = fft.irfftn(f, s=padded, workers=1)
        del f
        idx = [np.r_[np.arange(-m, 0) % s, np.arange(0, m + 1)] for m, s in zip(lag, padded)]
        return full[np.ix_(*idx)].astype(np.float64)

    num = autocorrelation(u)
    del u
    pairs = autocorrelation(envelope.astype(np.float32))
    pairs = np.rint(pairs)
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = np.where(pairs > 0.5, num / np.maximum(pairs, 1.0), np.nan) / (p * (1.0 - p))
    return rho, lag


def _lag_radius_um(lag, spacing):
    axes = [np.arange(-m, m + 1) * s for m, s in zip(lag, spacing)]
    return np.sqrt(axes[0][:, None, None] ** 2 + axes[1][None, :, None] ** 2
                   + axes[2][None, None, :] ** 2)


def _shell_profile(rho, radius, bin_um):
    """Mean of ρ in shells [k·bin, (k+1)·bin) of lag radius."""
    ok = np.isfinite(rho)
    k = np.floor(radius[ok] / bin_um).astype(np.int64)
    sums = np.bincount(k, weights=rho[ok])
    counts = np.bincount(k)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sums / counts
    return (np.arange(len(mean)) + 0.5) * bin_um, mean, counts


def _covariance_noise(rho, radius, shell_rho, bin_um, n_pairs):
    """Standard deviation of ρ̂ at lags beyond the correlation range (Bartlett's formula).

    Var ρ̂(h) ≈ (1/N) Σ_k ρ(k)² for |h| beyond the range (Bartlett 1946, J. R. Stat. Soc. Suppl.
    8:27, from memory; here in 3-D with N the envelope voxels), the sum taken over the lags
    inside the first zero of the shell profile.
    """
    nonpos = np.nonzero(~(shell_rho[1:] > 0))[0]
    first_zero = (nonpos[0] + 1) * bin_um if len(nonpos) else np.inf
    core = (radius < first_zero) & np.isfinite(rho)
    return math.sqrt(float(np.sum(rho[core] ** 2)) / n_pairs)


def _finite_window_factor(rho_cut, lag, size):
    """ψ = Σ Π_i (1 − |h_i|/n_i)⁺ ρ(h) / Σ ρ(h) over the truncated covariance."""
    w = [np.clip(1.0 - np.abs(np.arange(-m, m + 1)) / n, 0.0, None) for m, n in zip(lag, size)]
    weights = w[0][:, None, None] * w[1][None, :, None] * w[2][None, None, :]
    return float(np.sum(weights * rho_cut) / np.sum(rho_cut))


# ----------------------------------------------------------------------------- the study

def rev_study(phases, *, spacing_um, section: RevSection | None = None) -> RevResult:
    """Porosity variance against window size, integral range and recommended averaging width.

    Parameters
    ----------
    phases : ndarray of int, shape (nz, ny, nx)
        Labels: 0 exterior, 1 pore, 2 solid.
    spacing_um : float or sequence of 3 floats
        Voxel size (dz, dy, dx) in µm.
    section : RevSection, optional
        ``windows`` per size, ``sizes`` (log-spaced from ``min_width_um`` — 0: 4 voxels of the
        coarsest axis — up to the largest cube whose allowed positions fill at least its own
        volume, so that 2³ disjoint windows fit in a cubic field), ``relative_error`` ε and
        ``seed`` of :func:`numpy.random.default_rng`. Defaults: ``RevSection()``.

    Returns
    -------
    RevResult

    Raises
    ------
    InputError
        If the phases are not labels, the piece has porosity 0 or 1, or it is too small to hold
        windows of the smallest width.

    Notes
    -----
    A window of side L has ``round(L / spacing_i)`` voxels along axis i; its volume is that
    voxel box's. Positions are drawn uniformly over the image and kept when the window lies
    wholly inside the envelope; containment and pore counts come from summed-area tables in
    O(1) per window (Crow 1984). The fit is described in the module notes. Memory: two
    summed-area tables (4 or 8 bytes per voxel each) and the covariance FFTs of the volume
    padded by half the largest window (about 16 bytes per padded voxel).

    References
    ----------
    Kanit T. et al. (2003), Int. J. Solids Struct. 40:3647–3679,
    https://doi.org/10.1016/S0020-7683(03)00143-4; Lantuéjoul C. (1991), J. Microsc. 161:387.
    """
    spacing = as_spacing_um(spacing_um)
    section = RevSection() if section is None else section
    section.check()
    phases = np.asarray(phases)
    if phases.ndim != 3 or not np.issubdtype(phases.dtype, np.integer):
        raise InputError(f"phases must be a 3-D integer label array; got {phases.dtype} "
                         f"{phases.shape}", "pass the labels 0 exterior, 1 pore, 2 solid")
    envelope = phases != EXTERIOR
    pore = phases == PORE
    n_env = int(np.count_nonzero(envelope))
    n_pore = int(np.count_nonzero(pore))
    if n_env == 0 or n_pore == 0 or n_pore == n_env:
        raise InputError("the REV study needs a piece with both pore and solid voxels",
                         "check the segmentation")
    p = n_pore / n_env
    voxel = voxel_volume_um3(spacing)
    v_env = n_env * voxel
    env_table = _summed_area(envelope)
    pore_table = _summed_area(pore)

    min_width = section.min_width_um or 4 * max(spacing)
    max_width = _largest_width_um(env_table, phases.shape, spacing, min_width)
    if max_width is None:
        raise InputError(f"the piece is too small for windows of {min_width:g} µm "
                         "(fewer than 2³ disjoint positions inside the envelope)",
                         "lower rev.min_width_um, or scan a larger piece or field of view")
    widths = np.geomspace(min_width, max(max_width, min_width), section.sizes)
    sizes, seen = [], set()
    for width in widths:
        size = _window_voxels(width, spacing)
        if size not in seen:
            seen.add(size)
            sizes.append(size)

    rng = np.random.default_rng(section.seed)
    fractions = [_draw_windows(rng, env_table, pore_table, phases.shape, s, section.windows)
                 for s in sizes]
    del env_table, pore_table

    # Covariance up to half the largest window, cut at its correlation range.
    notes = []
    max_lag_um = 0.5 * max(n * s for n, s in zip(sizes[-1], spacing))
    rho, lag = _covariance(pore, envelope, p, [int(math.ceil(max_lag_um / s)) for s in spacing])
    del pore, envelope
    radius = _lag_radius_um(lag, spacing)
    bin_um = min(spacing)
    shell_r, shell_rho, _ = _shell_profile(rho, radius, bin_um)
    noise = _covariance_noise(rho, radius, shell_rho, bin_um, n_env)
    below = np.nonzero(~(shell_rho[1:] > _NOISE_SDS * noise))[0]
    if len(below):
        corr_range = float((below[0] + 1) * bin_um)
    else:
        corr_range = float(max_lag_um)
        notes.append(f"the covariance stays positive up to the largest lag examined "
                     f"({max_lag_um:g} µm): the piece is small for its structure and A3 may be "
                     "underestimated")
    inside = (radius < corr_range) & np.isfinite(rho)
    rho_cut = np.where(inside, rho, 0.0)
    # The covariance is centred on the sample porosity, which lowers each lag by about
    # Var(p̂) = p(1 − p)·A3 / V_env; over the cut region this is a factor (1 − V_cut / V_env).
    cut_volume = float(np.count_nonzero(inside)) * voxel
    a3_cov = float(np.sum(rho_cut)) * voxel / max(1e-12, 1.0 - cut_volume / v_env)

    rows = []
    for size, f in zip(sizes, fractions):
        volume = math.prod(size) * voxel
        width = float(np.mean([n * s for n, s in zip(size, spacing)]))
        used = len(f)
        psi = _finite_window_factor(rho_cut, lag, size) if np.any(rho_cut) else math.nan
        rows.append({
            "window_width_um": width,
            "window_volume_um3": volume,
            "window_voxels": list(size),
            "windows_used": used,
            "porosity_mean": float(np.mean(f)) if used else math.nan,
            "porosity_variance": float(np.mean((f - p) ** 2)) if used else math.nan,
            "porosity_sd": float(np.std(f, ddof=1)) if used > 1 else math.nan,
            "finite_window_factor": psi,
            "used_in_fit": False,
        })

    _check_stationarity(rows, p, notes)
    a3 = _fit_integral_range(rows, p, v_env, spacing, corr_range, notes)
    if not math.isfinite(a3) or a3 <= 0:
        notes.append("the window variances gave no usable fit; A3 is the covariance sum")
        a3 = a3_cov
    v_rev = rev_volume_um3(p, a3, relative_error=section.relative_error)
    widths_eq = equivalent_widths_um(v_rev)
    return RevResult(
        spacing_um=spacing, porosity=p, envelope_volume_um3=v_env, rows=tuple(rows),
        integral_range_um3=a3, integral_range_covariance_um3=a3_cov,
        correlation_range_um=corr_range, relative_error=section.relative_error,
        windows=section.windows, seed=section.seed, rev_volume_um3=v_rev,
        recommended_width_um=widths_eq["box_width_um"],
        recommended_gaussian_sigma_um=widths_eq["gaussian_sigma_um"],
        recommended_ball_diameter_um=widths_eq["ball_diameter_um"],
        covariance_radius_um=shell_r[: int(math.ceil(max_lag_um / bin_um))],
        covariance_rho=shell_rho[: int(math.ceil(max_lag_um / bin_um))],
        notes=tuple(notes))


def _check_stationarity(rows, p, notes):
    """Note when the windows' mean porosity departs from the bulk porosity.

    Windows must lie wholly inside the envelope, so the larger ones sample only the core. In a
    graded piece (a dense skin around a porous core) their porosity then differs from the bulk
    p, the squared deviations from p are inflated by that offset, and A3, the recommended width
    and every sampling uncertainty come out too large. The law assumes a stationary structure;
    this check flags where it does not hold.
    """
    for row in rows:
        n, sd = row["windows_used"], row["porosity_sd"]
        if n < 10 or not math.isfinite(sd):
            continue
        offset = row["porosity_mean"] - p
        if abs(offset) > max(0.01, 3 * sd / math.sqrt(n)):
            notes.append(
                f"not stationary: windows of {row['window_width_um']:.4g} µm (inside the "
                f"envelope) average porosity {row['porosity_mean']:.3f} against the bulk "
                f"{p:.3f}; the piece is graded (see profiles/depth.csv), which inflates A3 and "
                "the recommended width: treat them as upper bounds")
            return


def _fit_integral_range(rows, p, v_env, spacing, corr_range, notes):
    """Weighted log-space fit of A3 with slope −1 and the finite-window factor (module notes)."""
    chosen = [r for r in rows
              if r["windows_used"] >= _MIN_WINDOWS_FIT and r["porosity_variance"] > 0
              and r["finite_window_factor"] - r["window_volume_um3"] / v_env > 0]
    if not chosen:
        return math.nan
    widest = max(min(n * s for n, s in zip(r["window_voxels"], spacing)) for r in chosen)
    if widest < corr_range:
        notes.append(f"no window is as wide as the correlation range ({corr_range:g} µm): "
                     "the study does not reach the scale of the structure and A3 is uncertain")
    logs, weights = [], []
    for row in chosen:
        row["used_in_fit"] = True
        v = row["window_volume_um3"]
        y = row["porosity_variance"] * v / (p * (1 - p))
        logs.append(math.log(y / (row["finite_window_factor"] - v / v_env)))
        weights.append(min(row["windows_used"], v_env / v))
    return float(math.exp(np.average(logs, weights=weights)))


# ----------------------------------------------------------------------------- output

def write_rev(folder, result: RevResult) -> list[Path]:
    """Write ``rev.json``, ``rev.csv`` and the convergence plots (PNG and SVG).

    ``rev.json`` holds ``integral_range_um3``, ``integral_range_covariance_um3``,
    ``correlation_range_um``, ``porosity``, ``relative_error``, ``windows``, ``seed``,
    ``rev_volume_um3``, ``recommended_width_um`` (cube side),
    ``recommended_gaussian_sigma_um``, ``recommended_ball_diameter_um``,
    ``envelope_volume_um3``, ``spacing_um``, ``notes`` and ``rows`` (the table).
    ``rev.csv`` has one line per window size: ``window_width_um, window_volume_um3,
    windows_used, porosity_mean, porosity_variance``, then ``porosity_sd,
    finite_window_factor, used_in_fit``. Plots: see :mod:`ctpore.report.rev_plots`.
    """
    from ..io.result_folder import write_csv_rows, write_json
    from ..report.rev_plots import save_rev_plots

    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"cannot write the REV study: folder {folder} does not exist",
                         "create the folder first")
    data = {
        "integral_range_um3": result.integral_range_um3,
        "integral_range_covariance_um3": result.integral_range_covariance_um3,
        "correlation_range_um": result.correlation_range_um,
        "porosity": result.porosity,
        "relative_error": result.relative_error,
        "windows": result.windows,
        "seed": result.seed,
        "rev_volume_um3": result.rev_volume_um3,
        "recommended_width_um": result.recommended_width_um,
        "recommended_gaussian_sigma_um": result.recommended_gaussian_sigma_um,
        "recommended_ball_diameter_um": result.recommended_ball_diameter_um,
        "envelope_volume_um3": result.envelope_volume_um3,
        "spacing_um": list(result.spacing_um),
        "notes": list(result.notes),
        "rows": [dict(r) for r in result.rows],
    }
    paths = [folder / "rev.json", folder / "rev.csv"]
    write_json(paths[0], data)
    header = ["window_width_um", "window_volume_um3", "windows_used", "porosity_mean",
              "porosity_variance", "porosity_sd", "finite_window_factor", "used_in_fit"]
    write_csv_rows(paths[1], header, [[r[k] for k in header] for r in result.rows])
    paths.extend(save_rev_plots(result, folder))
    return paths
