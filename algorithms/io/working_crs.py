"""Choice of the projected CRS in which distances are measured (the working CRS)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyproj

from ..errors import FieldcastError
from .crs import defined_crs, linear_units, longitude_span, parse_crs, same_crs, to_wkt2, utm_crs_for
from .template import RasterTemplate

UTM_ZONE_WIDTH = 6.0  # degrees of longitude (Snyder 1987, USGS Professional Paper 1395, Transverse Mercator chapter)


@dataclass(frozen=True)
class WorkingCrs:
    """The working CRS and why it was chosen.

    Attributes
    ----------
    wkt : str
        WKT2 of the projected working CRS.
    units : str
        Its linear unit (``"metre"`` for metres).
    reason : str
        One sentence for the log saying which CRS is used and why.
    warnings : tuple of str
        Sentences for the log about distance errors the working CRS brings to these samples (may be empty).
    template : bool
        True when it is the CRS of a template raster (then a model file must have been fitted in it).
    """

    wkt: str
    units: str
    reason: str
    warnings: tuple[str, ...] = ()
    template: bool = False


def sample_lonlat(layer: pyproj.CRS, layer_xy: np.ndarray) -> np.ndarray:
    """``(n, 2)`` longitude/latitude of the samples on the layer's own geodetic datum."""
    points = np.asarray(layer_xy, dtype=float)
    if layer.is_geographic:
        return points
    to_degrees = pyproj.Transformer.from_crs(layer, layer.geodetic_crs, always_xy=True)
    lon, lat = to_degrees.transform(points[:, 0], points[:, 1])
    return np.column_stack([lon, lat])


def is_web_mercator(crs: pyproj.CRS) -> bool:
    """True for the web-mapping Pseudo-Mercator projection (EPSG:3857 and its aliases)."""
    operation = crs.coordinate_operation
    method = operation.method_name.lower() if operation is not None else ""
    return "pseudo mercator" in method or "pseudo-mercator" in crs.name.lower()


def outside_area_of_use(crs: pyproj.CRS, lonlat: np.ndarray) -> int:
    """How many samples lie outside the CRS's area of use (0 when the CRS declares none)."""
    area = crs.area_of_use
    if area is None:
        return 0
    lon = (lonlat[:, 0] + 180.0) % 360.0 - 180.0
    lat = lonlat[:, 1]
    if area.west <= area.east:
        inside_lon = (lon >= area.west) & (lon <= area.east)
    else:  # the area crosses the antimeridian
        inside_lon = (lon >= area.west) | (lon <= area.east)
    return int(np.sum(~(inside_lon & (lat >= area.south) & (lat <= area.north))))


def crs_warnings(working: pyproj.CRS, lonlat: np.ndarray) -> tuple[str, ...]:
    """Warnings about the working CRS for samples at ``lonlat``: web Mercator, outside its area of use."""
    found = []
    if is_web_mercator(working):
        found.append(f"The working CRS {working.name} is a web-mapping projection: its distances are stretched by "
                     "1/cos(latitude) (about 41 % at 45 degrees), which distorts the variogram ranges. Set "
                     "'Target CRS' to an equal-distance local CRS, e.g. the UTM zone or the national grid.")
    outside = outside_area_of_use(working, lonlat)
    if outside:
        found.append(f"{outside} of {len(lonlat)} samples lie outside the area of use of the working CRS "
                     f"{working.name} ({working.area_of_use.name}), where its distances are not reliable. Set "
                     "'Target CRS' to a projected CRS made for the samples' region.")
    return tuple(found)


def wide_span_warnings(utm: pyproj.CRS, width: float) -> tuple[str, ...]:
    """A warning when samples ``width`` degrees of longitude wide exceed one UTM zone (none otherwise)."""
    if width <= UTM_ZONE_WIDTH:
        return ()
    return (f"The samples span {width:.1f} degrees of longitude, more than one UTM zone ({UTM_ZONE_WIDTH:g} degrees), "
            f"so the scale error of {utm.name} grows towards their edges. Set 'Target CRS' to a projected CRS made "
            "for the whole region, or model smaller areas separately.",)


def template_working_crs(template: RasterTemplate, target_wkt: str | None, lonlat: np.ndarray) -> WorkingCrs:
    """The CRS of a template raster (projected, see :class:`.template.RasterTemplate`) as the working CRS.

    Raises
    ------
    FieldcastError
        If a target CRS other than the template's is set: the outputs take the template's CRS.
    """
    crs = parse_crs(template.crs_wkt)
    if target_wkt and not same_crs(target_wkt, template.crs_wkt):
        raise FieldcastError(f"'Target CRS' (TARGET_CRS) is {parse_crs(target_wkt).name!r}, but the outputs take the "
                             f"CRS of {template.name}, {crs.name!r}. Leave 'Target CRS' empty (the template's CRS is "
                             "then the working CRS), or leave TEMPLATE empty to work in the target CRS.")
    return WorkingCrs(template.crs_wkt, linear_units(template.crs_wkt),
                      f"Working CRS: {crs.name} (the CRS of {template.name}); samples are reprojected into it where "
                      "their CRS differs.", crs_warnings(crs, lonlat), template=True)


def choose_working_crs(layer_wkt: str, layer_xy: np.ndarray, target_wkt: str | None = None,
                       layer_name: str = "with the samples", template: RasterTemplate | None = None
                       ) -> WorkingCrs:
    """Pick the working CRS for samples at ``layer_xy`` (layer CRS coordinates).

    A template raster's CRS, when given, is the working CRS (see :func:`template_working_crs`; a target
    CRS must then be the same or empty). A target CRS, when given, is used as it is (it must be projected). Otherwise
    a projected layer CRS is kept, and a geographic one is replaced by the WGS 84
    UTM zone of the samples' centre: the middle of the shortest longitude interval
    holding them (so data across the antimeridian stay near 180 degrees) and of their
    latitude range; samples wider than one UTM zone then get a warning. Any working CRS
    also gets warnings when it is a web-mapping CRS or samples lie outside its area of use.

    Raises
    ------
    FieldcastError
        If the layer CRS is empty or undefined (naming ``layer_name``), the target CRS is
        geographic or differs from the template's, or a CRS has no usable distance unit.
    """
    layer = defined_crs(layer_wkt, layer_name)
    lonlat = sample_lonlat(layer, layer_xy)
    if template is not None:
        return template_working_crs(template, target_wkt, lonlat)
    if target_wkt:
        target = parse_crs(target_wkt)
        if target.is_geographic:
            raise FieldcastError(f"The target CRS {target.name!r} is in degrees. Choose a projected CRS with a "
                                 "distance unit (e.g. the local UTM zone or the national grid), or leave it empty.")
        return WorkingCrs(to_wkt2(target), linear_units(target_wkt),
                          f"Working CRS: {target.name} (the target CRS you set); samples are reprojected into it.",
                          crs_warnings(target, lonlat))
    if not layer.is_geographic:
        return WorkingCrs(to_wkt2(layer), linear_units(layer_wkt),
                          f"Working CRS: {layer.name} (the layer's own projected CRS).", crs_warnings(layer, lonlat))
    centre_lon, width = longitude_span(lonlat[:, 0])
    centre_lat = (float(np.min(lonlat[:, 1])) + float(np.max(lonlat[:, 1]))) / 2.0
    utm = utm_crs_for(centre_lon, centre_lat)
    wkt = to_wkt2(utm)
    return WorkingCrs(wkt, linear_units(wkt),
                      f"Working CRS: {utm.name} ({utm.to_string()}), the UTM zone of the data centre, because the "
                      f"layer CRS {layer.name} is in degrees. Set 'Target CRS' to choose another projected CRS.",
                      wide_span_warnings(utm, width) + crs_warnings(utm, lonlat))
