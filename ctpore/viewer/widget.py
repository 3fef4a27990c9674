"""Dock widget: re-run the segmentation on the open grey stack with live parameters.

The widget thresholds the grey stack with the chosen method (or a value typed in), builds the
envelope with the chosen method and radius, and shows the gas, open and closed porosity and the
threshold-sensitivity band as the parameters change; it saves the recipe as TOML.

To stay responsive a large stack is segmented on a preview that keeps every ``s``-th voxel
along each axis (``s`` chosen so the preview has at most :data:`PREVIEW_MAX_VOXELS` voxels), at
``s`` times the voxel size. The preview's porosity is then a systematic point count of the
whole stack, an unbiased estimate of the volume fraction by the Delesse principle; walls
thinner than ``s`` voxels may break up in the preview's envelope and specks, so the widget says
when it works on a preview, and the saved recipe is meant for a full ``ctpore analyze`` run.

The pure parts (:func:`preview_stride`, :func:`preview_segmentation`, :func:`recipe_with`)
need no GUI; the widget class is built on first access of ``SegmentationWidget`` so that this
module imports without napari or Qt.

References
----------
Delesse A. (1847), Ann. Mines 13:379; Underwood E. E. (1970), Quantitative Stereology,
Addison-Wesley (V_V = P_P, systematic point counting).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..recipe import ENVELOPE_METHODS, THRESHOLD_METHODS, Recipe, load_recipe
from ..spacing import as_spacing_um

__all__ = ["PREVIEW_MAX_VOXELS", "preview_stride", "preview_segmentation", "recipe_with",
           "base_recipe_for", "SegmentationWidget"]

#: Largest preview segmented live (2**19 voxels ≈ 80³: about 0.1–0.3 s on one core).
PREVIEW_MAX_VOXELS = 2**19

_PREVIEW_LAYER = "ctpore preview phases"


def preview_stride(shape, max_voxels: int = PREVIEW_MAX_VOXELS) -> int:
    """Smallest common step ``s`` so that ``volume[::s, ::s, ::s]`` has at most ``max_voxels``.

    Examples
    --------
    >>> preview_stride((64, 64, 64), 2**19), preview_stride((256, 256, 256), 2**19)
    (1, 4)
    """
    if max_voxels < 1:
        raise ValueError(f"max_voxels must be ≥ 1; got {max_voxels}")
    s = 1
    while math.prod(-(-int(n) // s) for n in shape) > max_voxels:
        s += 1
    return s


def recipe_with(base: Recipe | None = None, *, threshold_method: str,
                threshold_value: float = math.nan, envelope_method: str,
                envelope_radius_um: float) -> Recipe:
    """``base`` (default recipe when None) with the widget's threshold and envelope settings.

    The threshold value is kept only for the "manual" method (NaN otherwise, as the recipe
    reads it only then). Raises InputError on values the recipe refuses.
    """
    base = base or Recipe()
    value = float(threshold_value) if threshold_method == "manual" else math.nan
    recipe = base.replace("threshold", method=threshold_method, value=value)
    return recipe.replace("envelope", method=envelope_method, radius_um=float(envelope_radius_um))


def base_recipe_for(layer_metadata) -> tuple[Recipe, str]:
    """The recipe of the result a grey layer came from (its recipe.toml), or the defaults.

    Returns the recipe and where it came from.
    """
    info = (layer_metadata or {}).get("ctpore") or {}
    result = info.get("result")
    if result and (Path(result) / "recipe.toml").is_file():
        path = Path(result) / "recipe.toml"
        return load_recipe(path), str(path)
    return Recipe(), "default recipe"


def preview_segmentation(volume, *, spacing_um, recipe: Recipe,
                         max_voxels: int = PREVIEW_MAX_VOXELS, preview=None) -> dict:
    """Segment a (possibly subsampled) grey stack and measure its porosity.

    Parameters
    ----------
    volume : array-like (z, y, x)
        The grey stack (may be lazy: only the preview voxels are read).
    spacing_um : float or 3 floats
        Voxel size of ``volume`` in µm.
    recipe : Recipe
        Parameters of the segmentation.
    max_voxels : int
        Largest preview; above it every ``s``-th voxel is kept (:func:`preview_stride`).
    preview : ndarray, optional
        The preview array already extracted with the same stride (saves re-reading it).

    Returns
    -------
    dict
        ``phases`` (uint8 preview labels), ``porosity`` (:func:`ctpore.measure.porosity.porosity`
        of the preview), ``band`` (porosity with the threshold ∓/± delta), ``threshold``
        (:class:`~ctpore.segment.threshold.ThresholdChoice`), ``stride``, ``spacing_um`` of the
        preview, ``preview_shape``, ``shape`` and ``note`` (a sentence for the user).

    Raises
    ------
    InputError
        When the segmentation finds no piece (e.g. a threshold outside the grey values).
    """
    from ..measure.porosity import porosity
    from ..segment.pipeline import segment

    spacing = as_spacing_um(spacing_um)
    shape = tuple(int(n) for n in volume.shape)
    stride = preview_stride(shape, max_voxels)
    if preview is None:
        preview = np.asarray(volume[::stride, ::stride, ::stride])
    pspacing = tuple(d * stride for d in spacing)
    seg = segment(preview, spacing_um=pspacing, recipe=recipe)
    measured = porosity(seg.phases, spacing_um=pspacing)
    if stride == 1:
        note = f"full resolution ({'×'.join(map(str, shape))} voxels)"
    else:
        note = (f"preview: one voxel in {stride} along each axis "
                f"({'×'.join(map(str, preview.shape))} of {'×'.join(map(str, shape))}): the "
                "porosity is a point count of the whole stack; walls thinner than "
                f"{stride} voxels may break up. Run `ctpore analyze` with the saved recipe for "
                "full-resolution numbers")
    return {"phases": seg.phases, "porosity": measured, "band": seg.band,
            "threshold": seg.threshold, "stride": stride, "spacing_um": pspacing,
            "preview_shape": tuple(preview.shape), "shape": shape, "note": note}


def _format_result(out: dict) -> str:
    p, b, t = out["porosity"], out["band"], out["threshold"]
    return (f"gas porosity {p['porosity_gas']:.4f}\n"
            f"  open {p['porosity_open']:.4f}, closed {p['porosity_closed']:.4f}\n"
            f"sensitivity band {b['porosity_low']:.4f} – {b['porosity_high']:.4f}\n"
            f"  (threshold {t.value:.6g} ± {t.delta:.4g})\n"
            f"envelope {p['envelope_volume_mm3']:.4g} mm³")


_CLASS = None


def _build_class():
    """Define the widget class (imports magicgui, napari and Qt: only when asked for)."""
    from magicgui.widgets import ComboBox, Container, FileEdit, FloatSpinBox, Label, PushButton
    from qtpy.QtCore import QTimer

    from . import palette

    class SegmentationWidget(Container):
        """Live re-segmentation of the open grey stack (see module docstring).

        Parameters
        ----------
        napari_viewer : napari.Viewer
        max_preview_voxels : int
            Largest preview segmented live.
        debounce_ms : int
            Wait after the last change before recomputing.
        """

        def __init__(self, napari_viewer, *, max_preview_voxels: int = PREVIEW_MAX_VOXELS,
                     debounce_ms: int = 250):
            self.viewer = napari_viewer
            self.max_preview_voxels = int(max_preview_voxels)
            self.last = None  # the last preview_segmentation output
            self._setting = False  # True while the widget sets its own fields
            self._cache = (None, None, None)  # (layer id, stride, preview array)
            self._base, self._base_source = Recipe(), "default recipe"
            self.layer_box = ComboBox(label="grey stack", choices=self._grey_choices)
            self.method_box = ComboBox(label="threshold method", choices=THRESHOLD_METHODS,
                                       value="otsu")
            self.value_box = FloatSpinBox(label="threshold value", min=-1e12, max=1e12,
                                          step=1.0, value=0.0)
            self.envelope_box = ComboBox(label="envelope method", choices=ENVELOPE_METHODS,
                                         value="closing")
            self.radius_box = FloatSpinBox(label="envelope radius (µm)", min=0.001, max=1e6,
                                           step=5.0, value=150.0)
            self.preview_label = Label(label="sampling", value="")
            self.result_label = Label(label="porosity", value="")
            self.path_box = FileEdit(label="recipe file", mode="w", filter="*.toml")
            self.save_button = PushButton(text="Save recipe")
            self.status_label = Label(label="status", value="")
            super().__init__(widgets=[
                self.layer_box, self.method_box, self.value_box, self.envelope_box,
                self.radius_box, self.preview_label, self.result_label, self.path_box,
                self.save_button, self.status_label])
            for label in (self.preview_label, self.result_label, self.status_label):
                label.native.setWordWrap(True)
            self._timer = QTimer()
            self._timer.setSingleShot(True)
            self._timer.setInterval(int(debounce_ms))
            self._timer.timeout.connect(self.recompute)
            self.layer_box.changed.connect(self._layer_changed)
            self.method_box.changed.connect(self._schedule)
            self.value_box.changed.connect(self._value_changed)
            self.envelope_box.changed.connect(self._schedule)
            self.radius_box.changed.connect(self._schedule)
            self.save_button.changed.connect(self.save_recipe)
            events = self.viewer.layers.events
            events.inserted.connect(self._layers_changed)
            events.removed.connect(self._layers_changed)
            self._layer_changed()

        # ---- choices and parameters --------------------------------------------------------
        def _grey_choices(self, _widget=None):
            from napari.layers import Image

            return [(layer.name, layer) for layer in self.viewer.layers
                    if isinstance(layer, Image) and layer.ndim == 3 and not layer.rgb
                    and ((layer.metadata or {}).get("ctpore") or {}).get("kind", "grey")
                    == "grey"]

        def _layers_changed(self, _event=None):
            if self._setting:
                return
            self.layer_box.reset_choices()

        def _layer_changed(self, _value=None):
            layer = self.layer_box.value
            self._cache = (None, None, None)
            if layer is None:
                self.status_label.value = "open a grey stack (3-D image layer)"
                return
            self._base, self._base_source = base_recipe_for(layer.metadata)
            self._setting = True
            try:
                self.method_box.value = self._base.threshold.method
                self.envelope_box.value = self._base.envelope.method
                self.radius_box.value = self._base.envelope.radius_um
                if math.isfinite(self._base.threshold.value):
                    self.value_box.value = self._base.threshold.value
            finally:
                self._setting = False
            self.status_label.value = f"starting from {self._base_source}"
            self._schedule()

        def _value_changed(self, _value=None):
            if self._setting:
                return
            if self.method_box.value != "manual":  # typing a value means a manual threshold
                self._setting = True
                try:
                    self.method_box.value = "manual"
                finally:
                    self._setting = False
            self._schedule()

        def _schedule(self, _value=None):
            if self._setting:
                return
            self._timer.start()

        def recipe(self) -> Recipe:
            """The base recipe with the widget's threshold and envelope settings."""
            return recipe_with(self._base, threshold_method=self.method_box.value,
                               threshold_value=self.value_box.value,
                               envelope_method=self.envelope_box.value,
                               envelope_radius_um=self.radius_box.value)

        def spacing_um(self, layer) -> tuple[float, float, float]:
            """Voxel size of a layer in µm (its scale; ctpore layers are in µm)."""
            return as_spacing_um(tuple(float(s) for s in layer.scale[-3:]))

        def _preview(self, layer):
            shape = tuple(int(n) for n in layer.data.shape)
            stride = preview_stride(shape, self.max_preview_voxels)
            key = (id(layer), stride)
            if self._cache[:2] != key:
                arr = np.asarray(layer.data[::stride, ::stride, ::stride])
                self._cache = (id(layer), stride, arr)
                self._set_value_range(arr)
            return self._cache[2]

        def _set_value_range(self, arr):
            lo, hi = float(np.min(arr)), float(np.max(arr))
            self._setting = True
            try:
                value = self.value_box.value
                self.value_box.min, self.value_box.max = lo, hi
                self.value_box.step = 1.0 if np.issubdtype(arr.dtype, np.integer) \
                    else max((hi - lo) / 1000.0, 1e-9)
                self.value_box.value = min(max(value, lo), hi)
            finally:
                self._setting = False

        # ---- computing -----------------------------------------------------------------
        def recompute(self):
            """Segment the preview with the current settings and show the porosity."""
            self._timer.stop()
            layer = self.layer_box.value
            if layer is None:
                self.status_label.value = "open a grey stack (3-D image layer)"
                return None
            try:
                recipe = self.recipe()
                preview = self._preview(layer)
                out = preview_segmentation(layer.data, spacing_um=self.spacing_um(layer),
                                           recipe=recipe, max_voxels=self.max_preview_voxels,
                                           preview=preview)
            except (InputError, ValueError) as err:
                self.last = None
                self.result_label.value = ""
                self.status_label.value = f"cannot segment: {err}"
                return None
            self.last = out
            if self.method_box.value != "manual":
                self._setting = True
                try:
                    self.value_box.value = float(out["threshold"].value)
                finally:
                    self._setting = False
            self.preview_label.value = out["note"]
            self.result_label.value = _format_result(out)
            units = {str(u) for u in layer.units[-3:]}
            spacing = ", ".join(f"{v:g}" for v in self.spacing_um(layer))
            self.status_label.value = (
                f"recipe from {self._base_source}; voxel size {spacing} µm"
                + ("" if units == {"micrometer"} else
                   f" (the layer's scale, taken as µm: its units are {sorted(units)})"))
            self._show_phases(layer, out)
            return out

        def _show_phases(self, layer, out):
            """Show the preview labels just below the envelope outline; on first showing,
            hide the result's own phase labels so the colours are not stacked twice."""
            kwargs = {"scale": out["spacing_um"], "translate": tuple(layer.translate[-3:]),
                      "units": tuple(str(u) for u in layer.units[-3:]),
                      "axis_labels": tuple(layer.axis_labels[-3:])}
            layers = self.viewer.layers
            self._setting = True
            try:
                if _PREVIEW_LAYER in layers:
                    shown = layers[_PREVIEW_LAYER]
                    shown.scale = kwargs["scale"]
                    shown.translate = kwargs["translate"]
                    shown.data = out["phases"]
                    return
                shown = self.viewer.add_labels(out["phases"], name=_PREVIEW_LAYER, opacity=0.5,
                                               colormap=palette.phase_colormap(),
                                               **kwargs)
                for other in list(layers):
                    kind = ((other.metadata or {}).get("ctpore") or {}).get("kind")
                    if kind == "phases":
                        other.visible = False
                    elif kind == "envelope":
                        layers.move(layers.index(shown), layers.index(other))
            finally:
                self._setting = False

        # ---- saving ------------------------------------------------------------------
        def save_recipe(self, _value=None, path=None) -> Path | None:
            """Write the current recipe (all keys) as TOML to ``path`` or the file box."""
            target = Path(path) if path is not None else Path(self.path_box.value)
            if not str(target) or str(target) == "." or target.is_dir():
                self.status_label.value = "choose a recipe file name first"
                return None
            if target.suffix.lower() != ".toml":
                target = target.with_suffix(".toml")
            try:
                text = self.recipe().to_toml()
            except InputError as err:
                self.status_label.value = f"cannot save: {err}"
                return None
            if not target.parent.is_dir():
                self.status_label.value = f"cannot save: folder {target.parent} does not exist"
                return None
            target.write_text(text, encoding="utf-8")
            self.status_label.value = f"recipe saved to {target}"
            return target

    return SegmentationWidget


def __getattr__(name):
    global _CLASS
    if name == "SegmentationWidget":
        if _CLASS is None:
            _CLASS = _build_class()
        return _CLASS
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
