"""How Fieldcast's rasters look when QGIS loads them: a name that says field and quantity, and a colour ramp.

An algorithm calls :func:`style_on_load` for each raster it writes, with the
field and the quantity (a key of :data:`LOOKS`). When Processing is to load that
raster on completion (the dialog's "Open output file after running"), a layer
post-processor names the layer ("zinc — prediction") and gives it a
single-band pseudocolour renderer: values by one ramp stretched over the
layer's minimum and maximum, spreads (variance, standard error) by another,
and probabilities by a third fixed to 0–1, so a colour means the same
probability in every run. A new output needs one entry in :data:`LOOKS`.

The ramps are our own; the one for values matches the sample map of the reports.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from qgis.core import (
    QgsColorRampShader,
    QgsGradientColorRamp,
    QgsGradientStop,
    QgsProcessingContext,
    QgsProcessingLayerPostProcessorInterface,
    QgsProcessingUtils,
    QgsRasterBandStats,
    QgsRasterLayer,
    QgsRasterMinMaxOrigin,
    QgsSingleBandPseudoColorRenderer,
)
from qgis.PyQt.QtGui import QColor

from .report.plotting import VALUE_SCALE

Stops = tuple[tuple[float, str], ...]

VALUE_RAMP: Stops = tuple((position, colour) for position, colour in VALUE_SCALE)
"""Values (prediction, realisations, their summaries): sand to teal to deep blue, as the reports' sample map."""
SPREAD_RAMP: Stops = ((0.0, "#f7f4ee"), (0.5, "#d29a5b"), (1.0, "#6e2a1b"))
"""Spreads (variance, standard error): pale where the map is sure, dark brown where it is not."""
PROBABILITY_RAMP: Stops = ((0.0, "#2d5f8b"), (0.5, "#eadfb4"), (1.0, "#a8432a"))
"""Probabilities on 0–1: blue (unlikely), pale straw at one half, brick red (likely)."""


@dataclass(frozen=True)
class Look:
    """How one quantity is shown.

    Attributes
    ----------
    words : str
        The quantity in the layer name, a format string: ``{threshold:g}`` takes the ``threshold`` passed to
        :func:`style_on_load`, and so on for any other number named there.
    stops : Stops
        Colour ramp: ``(position in 0–1, "#rrggbb")`` pairs, first at 0 and last at 1.
    fixed_range : tuple of float, optional
        Values at the ends of the ramp; None stretches the ramp over the layer's minimum and maximum.
    """

    words: str
    stops: Stops
    fixed_range: tuple[float, float] | None = None


LOOKS: dict[str, Look] = {
    "prediction": Look("prediction", VALUE_RAMP),
    "variance": Look("variance", SPREAD_RAMP),
    "sd": Look("standard error", SPREAD_RAMP),
    "lower": Look("{percent:g} % predictive quantile", VALUE_RAMP),
    "upper": Look("{percent:g} % predictive quantile", VALUE_RAMP),
    "distance": Look("distance to the nearest sample", SPREAD_RAMP),
    "exceedance": Look("probability above {threshold:g}", PROBABILITY_RAMP, (0.0, 1.0)),
    "realisations": Look("realisations", VALUE_RAMP),
    "mean": Look("mean of realisations", VALUE_RAMP),
    "std": Look("standard deviation of realisations", SPREAD_RAMP),
    "p10": Look("10th percentile of realisations", VALUE_RAMP),
    "p90": Look("90th percentile of realisations", VALUE_RAMP),
    "share_above": Look("share of realisations above {threshold:g}", PROBABILITY_RAMP, (0.0, 1.0)),
}
"""The look of each quantity an algorithm writes, by the key passed to :func:`style_on_load`."""

_WAITING: list[OutputStyler] = []
"""Post-processors set on a layer still to be loaded. QGIS does not take ownership of them, so they are kept
here until they have run; without this Python would collect them before the layer loads."""


def layer_name(field: str, quantity: str, **numbers: float | None) -> str:
    """The layer name of a raster: ``layer_name("zinc", "exceedance", threshold=150)`` is
    ``"zinc — probability above 150"``; ``numbers`` the look's words do not use are ignored."""
    return f"{field} \u2014 {LOOKS[quantity].words.format(**numbers)}"


def colour_ramp(stops: Stops) -> QgsGradientColorRamp:
    """A continuous QGIS colour ramp through ``stops``."""
    inner = [QgsGradientStop(position, QColor(colour)) for position, colour in stops[1:-1]]
    return QgsGradientColorRamp(QColor(stops[0][1]), QColor(stops[-1][1]), False, inner)


def value_range(layer: QgsRasterLayer, look: Look) -> tuple[float, float]:
    """The values at the ends of the ramp: the fixed range, or band 1's exact minimum and maximum.

    A constant band gets a range of one unit about its value, an empty band 0–1, so the ramp is never empty.
    """
    if look.fixed_range is not None:
        return look.fixed_range
    stats = layer.dataProvider().bandStatistics(1, QgsRasterBandStats.Min | QgsRasterBandStats.Max)
    low, high = stats.minimumValue, stats.maximumValue
    if not (math.isfinite(low) and math.isfinite(high)) or high < low:  # no valid cell: QGIS gives max < min
        return 0.0, 1.0
    return (low, high) if high > low else (low - 0.5, low + 0.5)


def pseudocolour_renderer(layer: QgsRasterLayer, look: Look) -> QgsSingleBandPseudoColorRenderer:
    """Band 1 of ``layer`` through the ramp of ``look``, interpolated between its stops."""
    low, high = value_range(layer, look)
    renderer = QgsSingleBandPseudoColorRenderer(layer.dataProvider(), 1)
    renderer.setClassificationMin(low)
    renderer.setClassificationMax(high)
    renderer.createShader(colour_ramp(look.stops), QgsColorRampShader.Interpolated, QgsColorRampShader.Continuous)
    origin = QgsRasterMinMaxOrigin()
    if look.fixed_range is None:
        origin.setLimits(QgsRasterMinMaxOrigin.MinMax)
        origin.setExtent(QgsRasterMinMaxOrigin.WholeRaster)
        origin.setStatAccuracy(QgsRasterMinMaxOrigin.Exact)
    else:
        origin.setLimits(QgsRasterMinMaxOrigin.None_)
    renderer.setMinMaxOrigin(origin)
    return renderer


class OutputStyler(QgsProcessingLayerPostProcessorInterface):
    """Names and colours one output layer when Processing loads it (then lets itself be collected)."""

    def __init__(self, name: str, look: Look) -> None:
        super().__init__()
        self.name = name
        self.look = look

    def postProcessLayer(self, layer, context, feedback) -> None:
        try:
            if isinstance(layer, QgsRasterLayer) and layer.isValid():
                layer.setName(self.name)
                layer.setRenderer(pseudocolour_renderer(layer, self.look))
                layer.triggerRepaint()
        finally:
            _WAITING[:] = [styler for styler in _WAITING if styler is not self]


def style_on_load(context: QgsProcessingContext, destination: str, field: str, quantity: str,
                  **numbers: float | None) -> None:
    """Name and colour the raster ``destination`` by ``quantity`` (a key of :data:`LOOKS`) when it is loaded.

    ``numbers`` fill the look's words (``threshold=500``). Does nothing when Processing will not load the
    raster (no destination, or loading not asked for).
    """
    if not destination or not context.willLoadLayerOnCompletion(destination):
        return
    styler = OutputStyler(layer_name(field, quantity, **numbers), LOOKS[quantity])
    _WAITING.append(styler)
    context.layerToLoadOnCompletionDetails(destination).setPostProcessor(styler)


def load_styled(context: QgsProcessingContext, path: str, field: str, quantity: str) -> None:
    """Load the raster ``path`` into the run's project on completion, named and coloured as by :func:`style_on_load`.

    For rasters written into a folder output, which Processing does not load by itself; nothing without a project.
    """
    if context.project() is None:
        return
    details = QgsProcessingContext.LayerDetails(layer_name(field, quantity), context.project(), "",
                                                QgsProcessingUtils.LayerHint.Raster)
    context.addLayerToLoadOnCompletion(path, details)
    style_on_load(context, path, field, quantity)
