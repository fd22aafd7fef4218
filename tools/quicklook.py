"""Render a PNG quick look of a Fieldcast raster through QGIS, with the samples on top.

Run with the system Python that has the QGIS bindings, e.g.::

    /usr/bin/python3 tools/quicklook.py demo-output/prediction.tif demo-output/quicklook.png \
        --points "demo/hollmark_basin.gpkg|layername=sediment_samples" \
        --boundary "demo/hollmark_basin.gpkg|layername=basin_boundary" \
        --title "Lead, ppm (median estimate)" --ramp level

The raster is drawn with a pseudocolour ramp between its own minimum and maximum;
a title and a colour bar with those two values are added around the map.
"""
from __future__ import annotations

import argparse
import os
import sys

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("GDAL_PAM_ENABLED", "NO")  # no .aux.xml statistics files beside the raster

from qgis.core import (  # noqa: E402  (the platform must be set before Qt loads)
    QgsApplication,
    QgsColorRampShader,
    QgsFillSymbol,
    QgsMapRendererSequentialJob,
    QgsMapSettings,
    QgsMarkerSymbol,
    QgsRasterBandStats,
    QgsRasterLayer,
    QgsRasterShader,
    QgsSingleBandPseudoColorRenderer,
    QgsVectorLayer,
)
from qgis.PyQt.QtCore import QPoint, QRect, QSize, Qt  # noqa: E402
from qgis.PyQt.QtGui import QColor, QFont, QImage, QLinearGradient, QPainter  # noqa: E402

RAMPS = {
    # Our own three-colour ramps: light to dark, so more reads as darker.
    "level": ("#fbf3d5", "#d9822b", "#6b1d2f"),  # cream - amber - wine, for estimates
    "spread": ("#eef4f8", "#6a9fb5", "#1b2a49"),  # mist - steel blue - navy, for variances
}
MAP_WIDTH = 900
TITLE_HEIGHT = 44
BAR_HEIGHT = 70


def pseudocolour(layer: QgsRasterLayer, colours: tuple[str, ...]) -> tuple[float, float]:
    """Give band 1 an interpolated ramp over its value range; return (minimum, maximum)."""
    stats = layer.dataProvider().bandStatistics(1, QgsRasterBandStats.Min | QgsRasterBandStats.Max)
    low, high = stats.minimumValue, stats.maximumValue
    step = (high - low) / (len(colours) - 1)
    ramp = QgsColorRampShader(low, high)
    ramp.setColorRampType(QgsColorRampShader.Interpolated)
    ramp.setColorRampItemList(
        [QgsColorRampShader.ColorRampItem(low + i * step, QColor(c)) for i, c in enumerate(colours)]
    )
    shader = QgsRasterShader()
    shader.setRasterShaderFunction(ramp)
    layer.setRenderer(QgsSingleBandPseudoColorRenderer(layer.dataProvider(), 1, shader))
    return low, high


def vector_layer(uri: str, name: str) -> QgsVectorLayer:
    """Open an OGR layer URI such as ``file.gpkg|layername=points``; exit with a message if it fails."""
    layer = QgsVectorLayer(uri, name, "ogr")
    if not layer.isValid():
        sys.exit(f"quicklook: cannot open vector layer {uri!r}")
    return layer


def render_map(layers: list, raster: QgsRasterLayer) -> QImage:
    """Render the layers (top first) over the raster's extent, 3 % margin all round."""
    extent = raster.extent()
    extent.scale(1.06)
    settings = QgsMapSettings()
    settings.setDestinationCrs(raster.crs())
    settings.setLayers(layers)
    settings.setBackgroundColor(QColor("white"))
    height = round(MAP_WIDTH * extent.height() / extent.width())
    settings.setOutputSize(QSize(MAP_WIDTH, height))
    settings.setExtent(extent)
    job = QgsMapRendererSequentialJob(settings)
    job.start()
    job.waitForFinished()
    return job.renderedImage()


def label(value: float) -> str:
    """Colour-bar label: whole numbers with thousands separators from 1000 up, else 4 significant digits."""
    return f"{value:,.0f}" if abs(value) >= 1000 else f"{value:.4g}"


def compose(map_image: QImage, title: str, colours: tuple[str, ...], low: float, high: float) -> QImage:
    """Put a title above the map and a colour bar labelled with ``low`` and ``high`` below it."""
    width, height = map_image.width(), map_image.height()
    page = QImage(width, TITLE_HEIGHT + height + BAR_HEIGHT, QImage.Format_ARGB32)
    page.fill(QColor("white"))
    painter = QPainter(page)
    painter.setRenderHint(QPainter.Antialiasing)
    painter.setFont(QFont("DejaVu Sans", 14, QFont.Bold))
    painter.drawText(QRect(12, 0, width - 24, TITLE_HEIGHT), Qt.AlignVCenter | Qt.AlignLeft, title)
    painter.drawImage(QPoint(0, TITLE_HEIGHT), map_image)
    bar = QRect(60, TITLE_HEIGHT + height + 12, width - 120, 18)
    gradient = QLinearGradient(bar.left(), 0, bar.right(), 0)
    for i, colour in enumerate(colours):
        gradient.setColorAt(i / (len(colours) - 1), QColor(colour))
    painter.fillRect(bar, gradient)
    painter.drawRect(bar)
    painter.setFont(QFont("DejaVu Sans", 11))
    labels = QRect(bar.left(), bar.bottom() + 4, bar.width(), 24)
    painter.drawText(labels, Qt.AlignLeft, label(low))
    painter.drawText(labels, Qt.AlignRight, label(high))
    painter.end()
    return page


def quicklook(args: argparse.Namespace) -> None:
    """Draw ``args.raster`` with the optional outline and points and save the PNG."""
    raster = QgsRasterLayer(args.raster, "raster")
    if not raster.isValid():
        sys.exit(f"quicklook: cannot open raster {args.raster!r}")
    low, high = pseudocolour(raster, RAMPS[args.ramp])
    layers = [raster]
    if args.boundary:
        outline = vector_layer(args.boundary, "boundary")
        outline.renderer().setSymbol(
            QgsFillSymbol.createSimple({"style": "no", "outline_color": "#222222", "outline_width": "0.5"})
        )
        layers.insert(0, outline)
    if args.points:
        points = vector_layer(args.points, "points")
        points.renderer().setSymbol(
            QgsMarkerSymbol.createSimple({"name": "circle", "color": "white", "outline_color": "black", "size": "1.4"})
        )
        layers.insert(0, points)
    page = compose(render_map(layers, raster), args.title, RAMPS[args.ramp], low, high)
    if not page.save(args.output, "PNG"):
        sys.exit(f"quicklook: cannot write {args.output!r}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("raster", help="single-band raster to draw (GeoTIFF)")
    parser.add_argument("output", help="PNG file to write")
    parser.add_argument("--points", help="OGR URI of sample points drawn on top")
    parser.add_argument("--boundary", help="OGR URI of a polygon layer drawn as an outline")
    parser.add_argument("--title", default="", help="text above the map")
    parser.add_argument("--ramp", choices=sorted(RAMPS), default="level", help="colour ramp")
    args = parser.parse_args()
    app = QgsApplication([], False)
    app.initQgis()
    quicklook(args)  # the layers live only inside this call, so they are gone before exitQgis
    app.exitQgis()
    print(f"wrote {args.output}")


if __name__ == "__main__":
    main()
