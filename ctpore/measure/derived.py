"""Quantities derived from the measured porosity and facts about the sample (moisture, mass...)."""

from __future__ import annotations

import math

from ..recipe import SampleSection

__all__ = ["derived_quantities"]


def derived_quantities(measured: dict, sample: SampleSection) -> dict:
    """Moisture-corrected porosity, expansion and density figures, as far as the inputs allow.

    Each group of keys appears only when its inputs are given (finite, and positive where a
    positive value is required); the ``notes`` list says how each value was obtained and why a
    group was left out.

    **Moisture** (needs ``sample.moisture``; the total porosity also needs ``porosity_gas`` and
    ``sample.solid_density_g_cm3``). ``moisture_dry_basis`` is X = X_w / (1 − X_w) for a
    wet-basis moisture X_w, or the given value on a dry basis. CT cannot tell bound water from
    the solid, so the CT "solid" holds both. Per unit envelope volume let ε_s be the dry-solid
    fraction. Its mass is ρ_s·ε_s, the water's mass X·ρ_s·ε_s and the water's volume
    X·ρ_s·ε_s/ρ_w, so the CT-solid fraction is

        f = 1 − porosity_gas = ε_s·(1 + X·ρ_s/ρ_w),

    and the total porosity, the volume not taken by dry solid (gas plus water), is

        porosity_total = 1 − ε_s = 1 − f / (1 + X·ρ_s/ρ_w).

    **Unpuffed reference** (needs ``envelope_volume_mm3`` and ``sample.unpuffed_volume_mm3``).
    ``expansion_ratio`` = V / V0. The skeleton volume is conserved during expansion,
    (1 − φ0)·V0 = (1 − φ)·V, so ``porosity_expected_from_expansion`` = 1 − (1 − φ0)·V0/V with
    φ0 = ``sample.unpuffed_porosity``. ``porosity_expansion_gap`` is always
    ``porosity_gas`` − expected (one convention whatever else is given): like φ0 of a kernel
    measured by CT, ``porosity_gas`` counts bound water as skeleton. A negative expected
    porosity (the piece is smaller than its skeleton) is flagged as inconsistent.

    **Mass** (needs ``envelope_volume_mm3`` and ``sample.mass_mg``). ``apparent_density_g_cm3``
    = mass / envelope volume (1 mg/mm³ = 1 g/cm³). With ``sample.solid_density_g_cm3`` also
    given, ``porosity_from_density`` = 1 − apparent density / ρ_s, which assumes the whole mass
    is dry solid (water in the piece makes it read low).

    Parameters
    ----------
    measured : dict
        Measurements, e.g. the result of :func:`ctpore.measure.porosity.porosity`; the keys used
        are ``porosity_gas`` and ``envelope_volume_mm3``. Missing or NaN values are "not given".
    sample : SampleSection
        Facts about the piece from the recipe's ``[sample]`` section (validated again here).

    Returns
    -------
    dict
        Some of ``moisture_dry_basis``, ``porosity_total``, ``expansion_ratio``,
        ``porosity_expected_from_expansion``, ``porosity_expansion_gap``,
        ``apparent_density_g_cm3``, ``porosity_from_density``; always ``notes`` (list of str).

    Raises
    ------
    InputError
        If ``sample`` holds invalid values (see ``SampleSection.check``).

    References
    ----------
    Skeleton conservation and the moisture correction follow from mass and volume balances
    (derived; the project's REFERENCES.md, "Puffed-product facts"). Cereal starch true density
    ≈ 1.5 g/cm³: Dengate, Baruch & Meredith (1978), Starch/Stärke 30:80.

    Examples
    --------
    >>> from ctpore.recipe import SampleSection
    >>> out = derived_quantities({"porosity_gas": 0.8, "envelope_volume_mm3": 80.0},
    ...                          SampleSection(mass_mg=20.0))
    >>> out["apparent_density_g_cm3"]
    0.25
    """
    sample.check()
    porosity_gas = _value(measured, "porosity_gas")
    volume_mm3 = _value(measured, "envelope_volume_mm3")
    rho_s = sample.solid_density_g_cm3 if _positive(sample.solid_density_g_cm3) else math.nan
    out: dict = {}
    notes: list[str] = []

    # Moisture: dry basis, then total porosity counting bound water as pore space.
    if math.isfinite(sample.moisture):
        if sample.moisture_basis == "wet":
            x_dry = sample.moisture / (1.0 - sample.moisture)
            notes.append(f"moisture_dry_basis = Xw/(1 − Xw) from the wet-basis moisture "
                         f"{sample.moisture:g}")
        else:
            x_dry = sample.moisture
            notes.append("moisture_dry_basis is the given dry-basis moisture")
        out["moisture_dry_basis"] = x_dry
        if math.isfinite(porosity_gas) and math.isfinite(rho_s):
            swelling = 1.0 + x_dry * rho_s / sample.water_density_g_cm3
            out["porosity_total"] = 1.0 - (1.0 - porosity_gas) / swelling
            notes.append(
                "porosity_total = 1 − (1 − porosity_gas)/(1 + X·ρs/ρw): the volume not taken by "
                "dry solid (gas plus water), since CT counts bound water as solid "
                f"(X = {x_dry:.4g}, ρs = {rho_s:g}, ρw = {sample.water_density_g_cm3:g} g/cm³)")
        else:
            notes.append("porosity_total not computed: it needs porosity_gas and "
                         "sample.solid_density_g_cm3")
    else:
        notes.append("moisture not given: porosity_gas counts any bound water as solid")

    # Unpuffed reference: expansion and the porosity the skeleton balance predicts.
    if _positive(volume_mm3) and _positive(sample.unpuffed_volume_mm3):
        v0 = sample.unpuffed_volume_mm3
        out["expansion_ratio"] = volume_mm3 / v0
        notes.append("expansion_ratio = envelope_volume_mm3 / sample.unpuffed_volume_mm3")
        phi0 = sample.unpuffed_porosity
        if math.isfinite(phi0):
            expected = 1.0 - (1.0 - phi0) * v0 / volume_mm3
            out["porosity_expected_from_expansion"] = expected
            notes.append(
                f"porosity_expected_from_expansion = 1 − (1 − φ0)·V0/V with φ0 = {phi0:g}: the "
                "skeleton volume is conserved, (1 − φ0)·V0 = (1 − φ)·V")
            if expected < 0:
                notes.append(
                    "inconsistent: the piece is smaller than its unpuffed skeleton "
                    f"((1 − φ0)·V0 = {(1.0 - phi0) * v0:.4g} mm³ > V = {volume_mm3:.4g} mm³); "
                    "check sample.unpuffed_volume_mm3 and the envelope")
            if math.isfinite(porosity_gas):
                out["porosity_expansion_gap"] = porosity_gas - expected
                notes.append(
                    "porosity_expansion_gap = porosity_gas − porosity_expected_from_expansion "
                    "(always the gas porosity, which like a CT-measured φ0 counts bound water "
                    "as skeleton); > 0: more gas than the expansion explains, e.g. water lost "
                    "during puffing or φ0 too low")
    else:
        notes.append("expansion not computed: it needs envelope_volume_mm3 and "
                     "sample.unpuffed_volume_mm3")

    # Mass: apparent density and the porosity it implies for a dry solid.
    if _positive(volume_mm3) and _positive(sample.mass_mg):
        density = sample.mass_mg / volume_mm3
        out["apparent_density_g_cm3"] = density
        notes.append("apparent_density_g_cm3 = sample.mass_mg / envelope_volume_mm3 "
                     "(1 mg/mm³ = 1 g/cm³)")
        if math.isfinite(rho_s):
            out["porosity_from_density"] = 1.0 - density / rho_s
            notes.append(
                f"porosity_from_density = 1 − apparent density / ρs (ρs = {rho_s:g} g/cm³), "
                "assuming the whole mass is dry solid; water in the piece makes it read low")
    else:
        notes.append("density not computed: it needs envelope_volume_mm3 and sample.mass_mg")

    out["notes"] = notes
    return out


def _value(measured: dict, key: str) -> float:
    """``measured[key]`` as a float, NaN when missing or not a number."""
    try:
        return float(measured.get(key, math.nan))
    except (TypeError, ValueError):
        return math.nan


def _positive(value: float) -> bool:
    return math.isfinite(value) and value > 0
