"""Derived quantities against values worked by hand from the mass and volume balances.

Sources: skeleton conservation (1 − φ0)·V0 = (1 − φ)·V and the moisture correction
f = ε_s(1 + X·ρs/ρw) are derived in REFERENCES.md, "Puffed-product facts"; the wet-to-dry
moisture conversion X = Xw/(1 − Xw) is the definition of the two bases.
"""

from __future__ import annotations

import math

import pytest

from ctpore.errors import InputError
from ctpore.measure.derived import derived_quantities
from ctpore.recipe import SampleSection

MEASURED = {"porosity_gas": 0.80, "envelope_volume_mm3": 80.0}


def test_wet_basis_moisture_to_dry_basis():
    # Definition of the bases: X = Xw/(1 − Xw) = 0.12/0.88 = 0.136363...
    out = derived_quantities(MEASURED, SampleSection(moisture=0.12, solid_density_g_cm3=1.5))
    assert out["moisture_dry_basis"] == pytest.approx(0.12 / 0.88, rel=1e-12)
    assert out["moisture_dry_basis"] == pytest.approx(0.1363636, abs=1e-7)


def test_total_porosity_worked_by_hand():
    # Worked by hand (derived, REFERENCES.md "Puffed-product facts"):
    #   X = 0.12/0.88 = 3/22;  X·ρs/ρw = (3/22)·1.5/1.0 = 9/44;  1 + 9/44 = 53/44
    #   CT-solid f = 1 − 0.80 = 0.20 = ε_s·53/44  →  ε_s = 0.20·44/53 = 8.8/53 = 0.166038
    #   porosity_total = 1 − ε_s = 44.2/53 = 0.833962
    sample = SampleSection(moisture=0.12, moisture_basis="wet", solid_density_g_cm3=1.5,
                           water_density_g_cm3=1.0)
    out = derived_quantities(MEASURED, sample)
    assert out["porosity_total"] == pytest.approx(44.2 / 53, rel=1e-12)
    assert out["porosity_total"] == pytest.approx(0.833962, abs=1e-6)
    # Mass balance (derived): total = gas + water volume fraction, water = X·ρs·ε_s/ρw.
    water = (3 / 22) * 1.5 * (8.8 / 53) / 1.0
    assert out["porosity_total"] == pytest.approx(0.80 + water, rel=1e-12)


def test_dry_basis_moisture_is_used_as_given():
    # X = 0.25 on a dry basis: 1 + 0.25·1.5/1.0 = 1.375; ε_s = 0.2/1.375; total = 1 − 0.145454...
    sample = SampleSection(moisture=0.25, moisture_basis="dry", solid_density_g_cm3=1.5)
    out = derived_quantities(MEASURED, sample)
    assert out["moisture_dry_basis"] == 0.25
    assert out["porosity_total"] == pytest.approx(1 - 0.2 / 1.375, rel=1e-12)


def test_expansion_worked_by_hand():
    # Skeleton conservation (derived): V0 = 10 mm³, V = 80 mm³, φ0 = 0.05
    #   expected φ = 1 − 0.95·10/80 = 1 − 0.11875 = 0.88125; expansion ratio 80/10 = 8
    #   gap (gas convention) = 0.80 − 0.88125 = −0.08125
    sample = SampleSection(unpuffed_volume_mm3=10.0, unpuffed_porosity=0.05)
    out = derived_quantities(MEASURED, sample)
    assert out["expansion_ratio"] == pytest.approx(8.0, rel=1e-12)
    assert out["porosity_expected_from_expansion"] == pytest.approx(0.88125, rel=1e-12)
    assert out["porosity_expansion_gap"] == pytest.approx(-0.08125, rel=1e-12)
    assert not any("inconsistent" in note for note in out["notes"])


def test_expansion_gap_stays_on_the_gas_basis_when_moisture_is_given():
    sample = SampleSection(unpuffed_volume_mm3=10.0, unpuffed_porosity=0.05, moisture=0.12,
                           solid_density_g_cm3=1.5)
    out = derived_quantities(MEASURED, sample)
    assert out["porosity_expansion_gap"] == pytest.approx(0.80 - 0.88125, rel=1e-12)
    assert any("porosity_gas" in note and "gap" in note for note in out["notes"])


def test_piece_smaller_than_its_skeleton_is_flagged():
    # (1 − 0)·10 mm³ of skeleton cannot fit in 5 mm³: expected φ = 1 − 10/5 = −1 (derived).
    out = derived_quantities({"porosity_gas": 0.5, "envelope_volume_mm3": 5.0},
                             SampleSection(unpuffed_volume_mm3=10.0))
    assert out["porosity_expected_from_expansion"] == pytest.approx(-1.0)
    assert any("inconsistent" in note for note in out["notes"])


def test_density_worked_by_hand():
    # 20 mg in 80 mm³ = 0.25 mg/mm³ = 0.25 g/cm³; with ρs = 1.5: 1 − 0.25/1.5 = 0.833333...
    out = derived_quantities(MEASURED, SampleSection(mass_mg=20.0, solid_density_g_cm3=1.5))
    assert out["apparent_density_g_cm3"] == pytest.approx(0.25, rel=1e-12)
    assert out["porosity_from_density"] == pytest.approx(1 - 0.25 / 1.5, rel=1e-12)
    assert any("dry solid" in note for note in out["notes"])


def test_only_what_the_inputs_allow():
    out = derived_quantities(MEASURED, SampleSection())
    assert set(out) == {"notes"}
    assert out["notes"] and all(isinstance(note, str) for note in out["notes"])
    # Mass without solid density: density only.
    out = derived_quantities(MEASURED, SampleSection(mass_mg=20.0))
    assert set(out) == {"apparent_density_g_cm3", "notes"}
    # No envelope volume measured: no expansion and no density.
    sample = SampleSection(mass_mg=20.0, unpuffed_volume_mm3=10.0, solid_density_g_cm3=1.5)
    out = derived_quantities({"porosity_gas": 0.8}, sample)
    assert set(out) == {"notes"}
    # NaN gas porosity: dry-basis moisture and expansion ratio, but no porosity_total or gap.
    sample = SampleSection(moisture=0.12, solid_density_g_cm3=1.5, unpuffed_volume_mm3=10.0)
    out = derived_quantities({"porosity_gas": math.nan, "envelope_volume_mm3": 80.0}, sample)
    assert set(out) == {"moisture_dry_basis", "expansion_ratio",
                        "porosity_expected_from_expansion", "notes"}


def test_invalid_sample_raises_input_error():
    with pytest.raises(InputError, match="mass_mg"):
        derived_quantities(MEASURED, SampleSection(mass_mg=-1.0))
    with pytest.raises(InputError, match="solid_density_g_cm3"):
        derived_quantities(MEASURED, SampleSection(moisture=0.12))
