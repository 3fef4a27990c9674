"""The recipe: every parameter of a run in one TOML file, with defaults and validation.

A recipe has sections ``[denoise]``, ``[threshold]``, ``[clean]``, ``[envelope]`` and
``[sample]``. Any key left out takes its default (docs/recipe.md lists them all); an unknown
section or key is an error that lists the valid ones. The result folder keeps a full copy
(``recipe.toml``, defaults filled in) so a run can be re-made exactly.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from .errors import InputError

__all__ = [
    "Recipe",
    "DenoiseSection",
    "ThresholdSection",
    "CleanSection",
    "EnvelopeSection",
    "SampleSection",
    "StructureSection",
    "ProfilesSection",
    "CoarsenSection",
    "RevSection",
    "BatchSection",
    "CorrectionsSection",
    "load_recipe",
]

DENOISE_METHODS = ("none", "median", "gaussian")
THRESHOLD_METHODS = ("otsu", "isodata", "li", "triangle", "multiotsu", "peak_midpoint", "manual")
ENVELOPE_METHODS = ("closing", "rolling_sphere", "slice_hull")
KERNELS = ("box", "ball", "gaussian")
LONG_AXES = ("auto", "z", "y", "x")
MOISTURE_BASES = ("wet", "dry")


@dataclass(frozen=True)
class DenoiseSection:
    """Noise reduction before thresholding.

    method : "none", "median" (3-D median in a ball of ``radius_um``) or "gaussian"
        (standard deviation ``sigma_um``, same physical width in every axis).
    """

    method: str = "none"
    radius_um: float = 0.0
    sigma_um: float = 0.0

    def check(self):
        _choice("denoise.method", self.method, DENOISE_METHODS)
        _nonneg("denoise.radius_um", self.radius_um)
        _nonneg("denoise.sigma_um", self.sigma_um)
        if self.method == "median" and self.radius_um <= 0:
            raise InputError("denoise.radius_um must be > 0 for the median filter",
                             "set e.g. radius_um = 15.0 (about 1.5 voxels)")
        if self.method == "gaussian" and self.sigma_um <= 0:
            raise InputError("denoise.sigma_um must be > 0 for the Gaussian filter",
                             "set e.g. sigma_um = 8.0 (about one voxel)")


@dataclass(frozen=True)
class ThresholdSection:
    """Grey-value threshold between gas (dark) and solid (bright).

    method : one of THRESHOLD_METHODS; ``value`` is used only with "manual".
    classes, boundary : multi-level Otsu with ``classes`` classes; ``boundary`` picks which of
        the ``classes - 1`` thresholds (1 = lowest) separates gas from solid.
    sensitivity_delta : grey-value step for the porosity band (threshold ± delta). When 0, the
        step is ``sensitivity_fraction`` of the distance between the gas and solid peaks.
    solid_is_bright : True for the usual attenuation contrast (solid brighter than gas).
    """

    method: str = "otsu"
    value: float = math.nan
    classes: int = 3
    boundary: int = 1
    sensitivity_delta: float = 0.0
    sensitivity_fraction: float = 0.05
    solid_is_bright: bool = True

    def check(self):
        _choice("threshold.method", self.method, THRESHOLD_METHODS)
        if self.method == "manual" and not math.isfinite(self.value):
            raise InputError("threshold.value is needed when threshold.method = 'manual'",
                             "set threshold.value to a grey value of the stack")
        if int(self.classes) != self.classes or self.classes < 2 or self.classes > 5:
            raise InputError(f"threshold.classes must be an integer from 2 to 5; got {self.classes}",
                             "use 3 for gas / wall / dense inclusions")
        if not 1 <= self.boundary <= self.classes - 1:
            raise InputError(
                f"threshold.boundary must be between 1 and classes-1 = {self.classes - 1}; "
                f"got {self.boundary}", "1 picks the lowest class boundary")
        _nonneg("threshold.sensitivity_delta", self.sensitivity_delta)
        if not 0 <= self.sensitivity_fraction < 0.5:
            raise InputError("threshold.sensitivity_fraction must be in [0, 0.5)",
                             "0.05 is the default")


@dataclass(frozen=True)
class CleanSection:
    """Removal of specks after thresholding (volumes in µm³)."""

    min_solid_speck_um3: float = 0.0
    min_pore_speck_um3: float = 0.0
    keep_largest_solid: bool = True

    def check(self):
        _nonneg("clean.min_solid_speck_um3", self.min_solid_speck_um3)
        _nonneg("clean.min_pore_speck_um3", self.min_pore_speck_um3)


@dataclass(frozen=True)
class EnvelopeSection:
    """The piece's own outer boundary, which defines its volume.

    method : "closing" (ball closing of radius ``radius_um`` then hole filling),
        "rolling_sphere" (shrink-wrap by a ball of radius ``radius_um`` rolled from outside) or
        "slice_hull" (convex hull of the solid in each slice along ``hull_axis``).
    """

    method: str = "closing"
    radius_um: float = 150.0
    hull_axis: str = "z"

    def check(self):
        _choice("envelope.method", self.method, ENVELOPE_METHODS)
        _choice("envelope.hull_axis", self.hull_axis, ("z", "y", "x"))
        if self.method != "slice_hull" and not self.radius_um > 0:
            raise InputError(f"envelope.radius_um must be > 0; got {self.radius_um}",
                             "use a radius a little above the largest open cell's radius")


@dataclass(frozen=True)
class SampleSection:
    """Optional facts about the piece, for derived quantities. 0 or NaN means "not given".

    moisture : water content as a fraction (0.12, not 12), on ``moisture_basis`` "wet" or "dry".
    solid_density_g_cm3 : true density of the dry solid (cereal starch ≈ 1.5 g/cm³).
    water_density_g_cm3 : density of the water held in the solid.
    mass_mg : mass of the scanned piece.
    unpuffed_volume_mm3, unpuffed_porosity : the piece (or an average kernel) before puffing.
    """

    moisture: float = math.nan
    moisture_basis: str = "wet"
    solid_density_g_cm3: float = math.nan
    water_density_g_cm3: float = 1.0
    mass_mg: float = math.nan
    unpuffed_volume_mm3: float = math.nan
    unpuffed_porosity: float = 0.0

    def check(self):
        _choice("sample.moisture_basis", self.moisture_basis, MOISTURE_BASES)
        if math.isfinite(self.moisture):
            upper = 1.0 if self.moisture_basis == "wet" else math.inf
            if not 0 <= self.moisture < upper:
                raise InputError(
                    f"sample.moisture must be a fraction in [0, {upper}) on a "
                    f"{self.moisture_basis} basis; got {self.moisture}",
                    "write 0.12 for 12 %")
            if not (math.isfinite(self.solid_density_g_cm3) and self.solid_density_g_cm3 > 0):
                raise InputError("sample.solid_density_g_cm3 is needed with sample.moisture",
                                 "cereal starch is about 1.5 g/cm³ (Dengate et al. 1978)")
        for name in ("solid_density_g_cm3", "mass_mg", "unpuffed_volume_mm3"):
            v = getattr(self, name)
            if math.isfinite(v) and v <= 0:
                raise InputError(f"sample.{name} must be > 0 when given; got {v}",
                                 "leave it out if unknown")
        if not self.water_density_g_cm3 > 0:
            raise InputError("sample.water_density_g_cm3 must be > 0", "1.0 is the default")
        if not 0 <= self.unpuffed_porosity < 1:
            raise InputError("sample.unpuffed_porosity must be in [0, 1)", "0 if unknown")


@dataclass(frozen=True)
class StructureSection:
    """Cell and wall measures (local thickness, cells, surface, topology, anisotropy, chords).

    enabled : run the structure measures at all (they cost more than porosity).
    min_cell_volume_um3 : cells smaller than this are merged into a neighbour or left out of
        the cell statistics; 0 means 27 voxel volumes (a 3×3×3 cube, the smallest cell the
        watershed resolves).
    surface_sigma_um : Gaussian pre-smoothing of the grey image before marching cubes (0: none).
    chord_bin_um : bin width of the chord-length histograms (0: the largest voxel size).
    thickness_bin_um : bin width of the thickness histograms (0: one voxel of the finest axis).
    """

    enabled: bool = True
    min_cell_volume_um3: float = 0.0
    surface_sigma_um: float = 0.0
    chord_bin_um: float = 0.0
    thickness_bin_um: float = 0.0

    def check(self):
        for name in ("min_cell_volume_um3", "surface_sigma_um", "chord_bin_um",
                     "thickness_bin_um"):
            _nonneg(f"structure.{name}", getattr(self, name))


@dataclass(frozen=True)
class ProfilesSection:
    """Where the porosity sits: depth, radial, axial profiles and the r–z map.

    enabled : write profiles with every analysis.
    long_axis : "auto" (principal axis of the envelope with the smallest moment of inertia) or
        a fixed grid axis "z", "y", "x".
    depth_bin_um, radial_bin_um, axial_bin_um : bin widths in µm (0: 2 voxels of the
        coarsest axis).
    axial_window_um : radial profile only within |axial position| ≤ this (0: whole piece).
    """

    enabled: bool = True
    long_axis: str = "auto"
    depth_bin_um: float = 0.0
    radial_bin_um: float = 0.0
    axial_bin_um: float = 0.0
    axial_window_um: float = 0.0

    def check(self):
        _choice("profiles.long_axis", self.long_axis, LONG_AXES)
        for name in ("depth_bin_um", "radial_bin_um", "axial_bin_um", "axial_window_um"):
            _nonneg(f"profiles.{name}", getattr(self, name))


@dataclass(frozen=True)
class CoarsenSection:
    """Continuum-scale porosity field: normalised (masked) averaging with a named kernel.

    kernel : "box" (cube of side width_um), "ball" (diameter width_um) or "gaussian"
        (σ = width_um, truncated at ``truncate_sigma`` σ).
    width_um : kernel width in µm; 0 means "use the REV study's recommendation".
    min_coverage : points whose kernel holds less than this fraction of piece volume are
        masked (NaN).
    """

    kernel: str = "gaussian"
    width_um: float = 0.0
    truncate_sigma: float = 3.0
    min_coverage: float = 0.5

    def check(self):
        _choice("coarsen.kernel", self.kernel, KERNELS)
        _nonneg("coarsen.width_um", self.width_um)
        if not self.truncate_sigma > 0:
            raise InputError("coarsen.truncate_sigma must be > 0", "3.0 is the default")
        if not 0 <= self.min_coverage <= 1:
            raise InputError("coarsen.min_coverage must be in [0, 1]", "0.5 is the default")


@dataclass(frozen=True)
class RevSection:
    """Representative-volume study (Kanit et al. 2003).

    windows : number of windows per size; sizes : number of window sizes (log-spaced from
    ``min_width_um`` to the largest cube that fits the envelope); relative_error : target
    relative error of the porosity for the recommended width; seed : random seed.
    """

    windows: int = 300
    sizes: int = 8
    min_width_um: float = 0.0
    relative_error: float = 0.05
    seed: int = 0

    def check(self):
        if self.windows < 10 or self.sizes < 3:
            raise InputError("rev.windows must be ≥ 10 and rev.sizes ≥ 3",
                             "defaults are 300 windows and 8 sizes")
        _nonneg("rev.min_width_um", self.min_width_um)
        if not 0 < self.relative_error < 1:
            raise InputError("rev.relative_error must be in (0, 1)", "0.05 is the default")


_BATCH_MEASURES = ("porosity_gas", "porosity_open", "porosity_closed", "pore_thickness_d50_um",
                   "wall_thickness_d50_um", "cell_density_per_mm3", "specific_surface_per_mm",
                   "degree_of_anisotropy")


@dataclass(frozen=True)
class BatchSection:
    """Piece-level statistics of a batch run against a reference batch.

    reference : name of the reference batch ("" = the first batch in the manifest).
    measures : summary.json keys compared between batches (piece-level values).
    margins : equivalence margin ±Δ per measure, in the measure's own unit; a measure without a
        margin gets the tests but no equivalence verdict.
    alpha : significance level of every test (TOST uses the (1 − 2α) interval).
    control_measure : measure of the individuals control chart ("" = the first measure).
    """

    reference: str = ""
    measures: tuple = _BATCH_MEASURES
    margins: dict = field(default_factory=dict)
    alpha: float = 0.05
    control_measure: str = ""

    def __post_init__(self):
        object.__setattr__(self, "measures", tuple(self.measures))
        object.__setattr__(self, "margins", dict(self.margins))

    def check(self):
        if not self.measures or not all(isinstance(m, str) for m in self.measures):
            raise InputError("batch.measures must be a non-empty list of summary keys",
                             f"e.g. {list(_BATCH_MEASURES[:3])}")
        for key, value in self.margins.items():
            if isinstance(value, bool) or not isinstance(value, (int, float)) or \
                    not (math.isfinite(value) and value > 0):
                raise InputError(f"batch.margins.{key} must be a positive number; got {value!r}",
                                 "give the margin in the measure's own unit, e.g. "
                                 "porosity_gas = 0.03")
        if not 0 < self.alpha < 0.5:
            raise InputError(f"batch.alpha must be in (0, 0.5); got {self.alpha}",
                             "0.05 is the default")


THIN_WALL_METHODS = ("none", "hysteresis", "local")


@dataclass(frozen=True)
class CorrectionsSection:
    """Artefact corrections and thin-wall options of the segmentation (all off by default).

    rings : reduce ring artefacts on axial (z) slices before thresholding (polar filtering).
    cupping : remove the solid's grey-value trend with depth (beam hardening) and re-threshold.
    cupping_degree : degree of the polynomial trend in depth.
    thin_walls : "none" (global threshold), "hysteresis" (voxels above ``low`` connected to
        voxels above the threshold; low = gas peak + ``hysteresis_low_fraction`` × contrast) or
        "local" (local-mean threshold in a ``local_window_um`` box, between the low value and
        the global threshold).
    uncertainty : recompute porosity, open share and wall-thickness D50 over six segmentations
        (three thresholds spanning the nominal, the pure-phase midpoint and the
        volume-preserving threshold, × both ball envelope methods), with the partial-volume
        porosity ± 2u as a seventh porosity member; report their ranges (off by default
        because it multiplies the cost of a run; see ctpore.segment.uncertainty).
    """

    rings: bool = False
    cupping: bool = False
    cupping_degree: int = 2
    thin_walls: str = "none"
    hysteresis_low_fraction: float = 0.3
    local_window_um: float = 0.0
    uncertainty: bool = False

    def check(self):
        _choice("corrections.thin_walls", self.thin_walls, THIN_WALL_METHODS)
        if not 0 < self.hysteresis_low_fraction < 1:
            raise InputError("corrections.hysteresis_low_fraction must be in (0, 1)",
                             "0.3 suits one-voxel walls blurred by about one voxel")
        _nonneg("corrections.local_window_um", self.local_window_um)
        if not 1 <= self.cupping_degree <= 4:
            raise InputError("corrections.cupping_degree must be 1 to 4", "2 is the default")


_SECTIONS = {
    "denoise": DenoiseSection,
    "threshold": ThresholdSection,
    "clean": CleanSection,
    "envelope": EnvelopeSection,
    "sample": SampleSection,
    "structure": StructureSection,
    "profiles": ProfilesSection,
    "coarsen": CoarsenSection,
    "rev": RevSection,
    "batch": BatchSection,
    "corrections": CorrectionsSection,
}


@dataclass(frozen=True)
class Recipe:
    """All parameters of an analysis. Build with :func:`load_recipe` or ``Recipe.from_dict``."""

    denoise: DenoiseSection = field(default_factory=DenoiseSection)
    threshold: ThresholdSection = field(default_factory=ThresholdSection)
    clean: CleanSection = field(default_factory=CleanSection)
    envelope: EnvelopeSection = field(default_factory=EnvelopeSection)
    sample: SampleSection = field(default_factory=SampleSection)
    structure: StructureSection = field(default_factory=StructureSection)
    profiles: ProfilesSection = field(default_factory=ProfilesSection)
    coarsen: CoarsenSection = field(default_factory=CoarsenSection)
    rev: RevSection = field(default_factory=RevSection)
    batch: BatchSection = field(default_factory=BatchSection)
    corrections: CorrectionsSection = field(default_factory=CorrectionsSection)

    def __post_init__(self):
        for name in _SECTIONS:
            getattr(self, name).check()

    @classmethod
    def from_dict(cls, data: dict[str, Any], *, source: str = "recipe") -> "Recipe":
        """Build a recipe from nested dicts, rejecting unknown sections and keys by name."""
        if not isinstance(data, dict):
            raise InputError(f"{source}: a recipe must be a table of sections",
                             f"use sections {sorted(_SECTIONS)}")
        unknown = sorted(set(data) - set(_SECTIONS))
        if unknown:
            raise InputError(f"{source}: unknown recipe section(s) {unknown}",
                             f"valid sections are {sorted(_SECTIONS)}")
        sections = {}
        for name, section_cls in _SECTIONS.items():
            values = data.get(name, {})
            if not isinstance(values, dict):
                raise InputError(f"{source}: [{name}] must be a table of keys",
                                 f"valid keys are {_field_names(section_cls)}")
            bad = sorted(set(values) - set(_field_names(section_cls)))
            if bad:
                raise InputError(f"{source}: unknown key(s) {bad} in [{name}]",
                                 f"valid keys in [{name}] are {_field_names(section_cls)}")
            sections[name] = section_cls(**{k: _coerce(section_cls, k, v, source, name)
                                            for k, v in values.items()})
        try:
            return cls(**sections)
        except InputError as err:
            raise InputError(f"{source}: {err.what}", err.fix) from None

    def to_dict(self) -> dict[str, dict[str, Any]]:
        """Nested dict of every parameter, defaults included."""
        return {name: dataclasses.asdict(getattr(self, name)) for name in _SECTIONS}

    def to_toml(self) -> str:
        """The full recipe as TOML text (NaN written as ``nan``, which TOML allows)."""
        lines = ["# ctpore recipe: every parameter of the run, defaults filled in"]
        for name, values in self.to_dict().items():
            lines.append("")
            lines.append(f"[{name}]")
            for key, value in values.items():
                lines.append(f"{key} = {_toml_value(value)}")
        return "\n".join(lines) + "\n"

    def replace(self, section: str, **changes) -> "Recipe":
        """A copy with some keys of one section changed (validated again)."""
        new_section = dataclasses.replace(getattr(self, section), **changes)
        return dataclasses.replace(self, **{section: new_section})


def load_recipe(path: str | Path | None) -> Recipe:
    """Read a recipe TOML file; ``None`` gives the default recipe.

    Raises
    ------
    InputError
        If the file is missing, not valid TOML, or holds unknown sections, keys or bad values.
    """
    if path is None:
        return Recipe()
    path = Path(path)
    if not path.is_file():
        raise InputError(f"recipe file {path} does not exist",
                         "give the path of a TOML recipe, or leave --recipe out for defaults")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputError(f"recipe file {path} is not valid TOML ({err})",
                         "check the line named; docs/recipe.md shows the format") from None
    return Recipe.from_dict(data, source=f"recipe file {path}")


def _field_names(section_cls) -> list[str]:
    return [f.name for f in fields(section_cls)]


def _coerce(section_cls, key, value, source, section):
    ftype = {f.name: f.type for f in fields(section_cls)}[key]
    kind = ftype if isinstance(ftype, str) else getattr(ftype, "__name__", str(ftype))
    ok = {
        "float": isinstance(value, (int, float)) and not isinstance(value, bool),
        "int": isinstance(value, int) and not isinstance(value, bool),
        "bool": isinstance(value, bool),
        "str": isinstance(value, str),
        "tuple": isinstance(value, (list, tuple)),
        "dict": isinstance(value, dict),
    }.get(kind, True)
    if not ok:
        raise InputError(f"{source}: [{section}] {key} = {value!r} should be a {kind}",
                         "see docs/recipe.md for each key's type")
    return float(value) if kind == "float" else value


def _choice(name, value, allowed):
    if value not in allowed:
        raise InputError(f"{name} = {value!r} is not one of {list(allowed)}",
                         f"choose one of {list(allowed)}")


def _nonneg(name, value):
    if not (math.isfinite(value) and value >= 0):
        raise InputError(f"{name} must be a finite number ≥ 0; got {value}", "see docs/recipe.md")


def _toml_value(value) -> str:
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + "}"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return "nan" if math.isnan(value) else repr(value)
    if isinstance(value, int):
        return str(value)
    return '"' + str(value).replace("\\", "\\\\").replace('"', '\\"') + '"'
