"""The [corrections] options reach the segmentation and the summary (wiring only; the methods'
own checks against outside values are in tests/segment/)."""

import numpy as np
import pytest
from scipy import ndimage

import ctpore


@pytest.fixture(scope="module")
def grey():
    rng = np.random.default_rng(5)
    n = 40
    z, y, x = np.mgrid[:n, :n, :n] - n / 2 + 0.5
    body = (z / 17) ** 2 + (y / 15) ** 2 + (x / 14) ** 2 <= 1
    pores = np.zeros_like(body)
    for c in rng.uniform(-8, 8, size=(25, 3)) * (1, 0.8, 0.8):
        pores |= (z - c[0]) ** 2 + (y - c[1]) ** 2 + (x - c[2]) ** 2 <= 7
    g = ndimage.gaussian_filter(np.where(body & ~pores, 26000.0, 6000.0), 0.8)
    return np.clip(g + rng.normal(0, 800, g.shape), 0, 65535).astype(np.uint16)


def _recipe(**corrections):
    return (ctpore.Recipe().replace("structure", enabled=False)
            .replace("profiles", enabled=False).replace("envelope", radius_um=40.0)
            .replace("corrections", **corrections))


def test_default_has_no_corrections_and_no_ensemble(grey):
    s = ctpore.analyze(grey, spacing_um=10, recipe=_recipe()).summary
    assert "uncertainty" not in s and "cupping" not in s
    assert 0 < s["porosity_partial_volume"] < 1


def test_uncertainty_ensemble_brackets_the_nominal_porosity(grey):
    s = ctpore.analyze(grey, spacing_um=10, recipe=_recipe(uncertainty=True)).summary
    u = s["uncertainty"]
    assert len(u["members"]) == 6
    assert u["porosity_gas_min"] <= s["porosity_gas"] <= u["porosity_gas_max"]
    assert u["porosity_gas_min"] < u["porosity_gas_max"]


@pytest.mark.parametrize("method", ["hysteresis", "local"])
def test_thin_wall_methods_keep_at_least_the_global_solid(grey, method):
    # Both methods only add solid connected to (hysteresis) or near (local, clipped at the
    # global threshold) what the global threshold finds, so porosity can only fall.
    base = ctpore.analyze(grey, spacing_um=10, recipe=_recipe()).summary["porosity_gas"]
    s = ctpore.analyze(grey, spacing_um=10, recipe=_recipe(thin_walls=method)).summary
    assert s["porosity_gas"] <= base + 1e-12


def test_cupping_and_rings_run_and_report(grey):
    s = ctpore.analyze(grey, spacing_um=10,
                       recipe=_recipe(cupping=True, rings=True)).summary
    assert set(s["cupping"]) >= {"trend_coefficients", "profile_before", "profile_after"}
    assert 0 < s["porosity_gas"] < 1
