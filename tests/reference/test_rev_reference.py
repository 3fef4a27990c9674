"""REV study against known integral ranges (REFERENCES.md "Representative volume").

Each check names its source beside it. Test images are built here: independent random blocks
(A3 = b³ exactly) and Boolean models of spheres (A3 from the covariance of the Boolean model,
Lantuéjoul 1991, J. Microsc. 161:387; values in REFERENCES.md [derived numerically]).
"""

from __future__ import annotations

import json
import math

import edt
import numpy as np
import pytest

from ctpore.continuum.coarse import sampling_uncertainty
from ctpore.continuum.kernels import Kernel
from ctpore.continuum.rev import equivalent_widths_um, rev_study, rev_volume_um3, write_rev
from ctpore.errors import InputError
from ctpore.recipe import RevSection


def _blocks(shape, block, p, seed):
    """Labels (1 pore, 2 solid) of independent blocks of ``block`` voxels, pore with prob. p."""
    rng = np.random.default_rng(seed)
    g = rng.random([-(-n // b) for n, b in zip(shape, block)]) < p
    for axis, b in enumerate(block):
        g = np.repeat(g, b, axis)
    return np.where(g[: shape[0], : shape[1], : shape[2]], 1, 2).astype(np.uint8)


def _boolean_spheres(n, radius, porosity, seed):
    """Labels of the pore space outside a Boolean model of balls of ``radius`` voxels.

    Poisson germs of intensity λ = −ln(porosity)/(4πr³/3) in a domain padded by the radius, so
    that P(a point is outside every ball) = exp(−λ·v) = porosity (Matheron 1975, Random Sets and
    Integral Geometry, from memory). Balls are the voxels within ``radius`` of a germ's voxel.
    """
    rng = np.random.default_rng(seed)
    pad = radius + 1
    size = n + 2 * pad
    lam = -math.log(porosity) / (4 / 3 * math.pi * radius**3)
    germs = np.floor(rng.uniform(0, size, size=(rng.poisson(lam * size**3), 3))).astype(int)
    free = np.ones((size,) * 3, dtype=bool)
    free[germs[:, 0], germs[:, 1], germs[:, 2]] = False
    dist = edt.edt(free, black_border=False, parallel=1)[pad:-pad, pad:-pad, pad:-pad]
    return np.where(dist <= radius, 2, 1).astype(np.uint8)


@pytest.mark.parametrize("shape,block,spacing", [
    ((128, 128, 128), (8, 8, 8), (1.0, 1.0, 1.0)),
    ((64, 128, 128), (4, 8, 8), (2.0, 1.0, 1.0)),  # the same 8 µm blocks on anisotropic voxels
], ids=["isotropic", "anisotropic"])
def test_iid_blocks_integral_range_is_block_volume(shape, block, spacing):
    # Independent random blocks of side b have A3 = b³ exactly (REFERENCES.md); ±15 % with
    # ≥ 300 windows (Kanit et al. 2003, Int. J. Solids Struct. 40:3647).
    phases = _blocks(shape, block, 0.3, seed=1)
    result = rev_study(phases, spacing_um=spacing, section=RevSection(windows=2000, seed=0))
    assert result.integral_range_um3 == pytest.approx(512.0, rel=0.15)
    assert sum(r["used_in_fit"] for r in result.rows) >= 3


@pytest.fixture(scope="module", params=[(0.8, 1986.0), (0.5, 1673.0)], ids=["phi0.8", "phi0.5"])
def boolean_study(request):
    porosity, a3 = request.param
    phases = _boolean_spheres(192, 8, porosity, seed=3)
    return rev_study(phases, spacing_um=1.0, section=RevSection(windows=2000, seed=0)), a3


def test_boolean_spheres_integral_range(boolean_study):
    # Boolean spheres r = 8 voxels: A3 ≈ 1986 voxel³ at φ = 0.8 and ≈ 1673 at φ = 0.5, ±15 %
    # with ≥ 300 windows (REFERENCES.md [derived numerically]; Kanit et al. 2003; Lantuéjoul
    # 1991). The direct covariance sum is a second estimate of the same quantity.
    result, a3 = boolean_study
    assert result.integral_range_um3 == pytest.approx(a3, rel=0.15)
    assert result.integral_range_covariance_um3 == pytest.approx(a3, rel=0.15)
    # The balls' covariance vanishes beyond one diameter (16 voxels); the cut sits just below.
    assert 12 <= result.correlation_range_um <= 18


def test_large_window_law_alone_is_biased_at_a_few_grain_diameters(boolean_study):
    # REFERENCES.md [derived numerically]: at 2–4 grain diameters the large-window law
    # overstates D², i.e. D²·V/(p(1 − p)) reads 20–35 % below A3; the exact finite-window
    # factor ψ removes that bias (Kanit et al. 2003 fit only where V ≫ A3).
    result, a3 = boolean_study
    p = result.porosity
    rows = [r for r in result.rows if 32 <= r["window_width_um"] <= 48]
    assert rows
    for r in rows:
        raw = r["porosity_variance"] * r["window_volume_um3"] / (p * (1 - p))
        assert raw < 0.85 * a3
        assert 0.6 < r["finite_window_factor"] < 0.85


def test_rev_is_reproducible_with_the_seed():
    phases = _blocks((64, 64, 64), (4, 4, 4), 0.4, seed=2)
    section = RevSection(windows=300, sizes=6, seed=5)
    a = rev_study(phases, spacing_um=3.0, section=section)
    b = rev_study(phases, spacing_um=3.0, section=section)
    c = rev_study(phases, spacing_um=3.0, section=RevSection(windows=300, sizes=6, seed=6))
    assert a.rows == b.rows and a.integral_range_um3 == b.integral_range_um3
    assert [r["porosity_variance"] for r in a.rows] != [r["porosity_variance"] for r in c.rows]
    widths = [r["window_width_um"] for r in a.rows]
    assert widths[0] == pytest.approx(4 * 3.0)  # 0 → 4 voxels of the coarsest axis
    assert widths[-1] == pytest.approx(32 * 3.0)  # half the field: 2³ disjoint windows fit
    assert all(r["windows_used"] == 300 for r in a.rows)
    # The recommendation feeds a [coarsen] kernel of any shape with the same effective volume.
    for shape in ("box", "ball", "gaussian"):
        kernel = Kernel(shape, a.recommended_width_for(shape), 4.0)
        assert kernel.effective_volume_um3(2.0) == pytest.approx(a.rev_volume_um3, rel=0.05)


def test_rev_formula_and_equivalent_widths():
    # V_REV = 4(1 − p)·A3/(ε²·p·n) (Kanit et al. 2003; REFERENCES.md); the recommended kernel
    # then has 2·D/p = ε for a single average (D from the integral-range law with its V_eff).
    p, a3, eps = 0.7, 5.0e5, 0.05
    v = rev_volume_um3(p, a3, relative_error=eps)
    assert v == pytest.approx(4 * 0.3 * a3 / (eps**2 * 0.7))
    assert rev_volume_um3(p, a3, relative_error=eps, windows=8) == pytest.approx(v / 8)
    widths = equivalent_widths_um(v)
    spacing = (5.0, 5.0, 5.0)
    for kernel in (Kernel("gaussian", widths["gaussian_sigma_um"], 4.0),
                   Kernel("ball", widths["ball_diameter_um"]),
                   Kernel("box", widths["box_width_um"])):
        d = float(sampling_uncertainty(p, kernel=kernel, A3_um3=a3, spacing_um=spacing))
        # Box: up to one voxel wider than asked (odd voxel count), i.e. a few % in volume.
        assert 2 * d / p == pytest.approx(eps, rel=0.08)
    with pytest.raises(InputError):
        rev_volume_um3(1.0, a3, relative_error=eps)


def test_write_rev_is_deterministic(tmp_path):
    phases = _blocks((48, 48, 48), (3, 3, 3), 0.5, seed=4)
    result = rev_study(phases, spacing_um=(12.0, 10.0, 10.0),
                       section=RevSection(windows=100, sizes=5, seed=1))
    first, second = tmp_path / "a", tmp_path / "b"
    first.mkdir()
    second.mkdir()
    paths = write_rev(first, result)
    write_rev(second, result)
    names = sorted(p.name for p in paths)
    assert names == ["rev.csv", "rev.json", "rev_mean.png", "rev_mean.svg", "rev_variance.png",
                     "rev_variance.svg"]
    for name in names:
        assert (first / name).read_bytes() == (second / name).read_bytes(), name
    data = json.loads((first / "rev.json").read_text(encoding="utf-8"))
    for key in ("integral_range_um3", "porosity", "recommended_width_um", "relative_error",
                "windows", "rows", "recommended_gaussian_sigma_um", "rev_volume_um3"):
        assert key in data
    assert data["integral_range_um3"] == pytest.approx(result.integral_range_um3)
    lines = (first / "rev.csv").read_text(encoding="utf-8").splitlines()
    assert lines[0].startswith("window_width_um,window_volume_um3,windows_used,porosity_mean,"
                               "porosity_variance")
    assert len(lines) == 1 + len(result.rows)
    assert (first / "rev_variance.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "<dc:date>" not in (first / "rev_variance.svg").read_text(encoding="utf-8")


def test_bad_input():
    with pytest.raises(InputError, match="pore and solid"):
        rev_study(np.full((16, 16, 16), 2, np.uint8), spacing_um=1.0)
    tiny = np.zeros((32, 32, 32), np.uint8)
    tiny[10:14, 10:14, 10:14] = _blocks((4, 4, 4), (1, 1, 1), 0.5, seed=0)
    with pytest.raises(InputError, match="too small"):
        rev_study(tiny, spacing_um=1.0)
