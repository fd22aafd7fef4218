"""Coordinate reference system helpers built on pyproj.

Kriging measures distances between points, so the engine works in a projected CRS
with a linear unit (metre, foot, ...). These helpers read a CRS given as WKT (or any
text pyproj understands, such as ``"EPSG:28992"``), tell geographic from projected
systems, pick a UTM zone for data in longitude/latitude, and move points between
systems. Every unreadable or unsuitable CRS raises :class:`.errors.FieldcastError`
with advice.
"""
from __future__ import annotations

import math
from typing import Any

import numpy as np
import pyproj
from pyproj.enums import WktVersion

from ..errors import FieldcastError

# UTM covers 80 deg S to 84 deg N; the polar caps use UPS (DMA Technical Manual 8358.2, 1989).
UTM_SOUTH_LIMIT = -80.0
UTM_NORTH_LIMIT = 84.0
UNKNOWN_UNIT_NAMES = {"", "unknown", "none"}
# Placeholder systems of a GeoPackage without SRS, srs_id 0 and -1, named so by OGC 12-128r18 (1.1.2.1.2) and GDAL.
UNDEFINED_CRS_NAMES = {"undefined geographic srs", "undefined cartesian srs"}
UNKNOWN_NAMES = {"", "unknown"}


def parse_crs(crs_like: Any) -> pyproj.CRS:
    """Read a CRS from WKT, an authority string (``"EPSG:28992"``), an EPSG integer or a pyproj CRS.

    Raises
    ------
    FieldcastError
        If pyproj cannot read it.
    """
    if isinstance(crs_like, str) and not crs_like.strip():
        raise FieldcastError("The layer has no coordinate reference system. Assign one to the layer "
                             "(Layer Properties > Source) before running the tool.")
    try:
        return pyproj.CRS.from_user_input(crs_like)
    except pyproj.exceptions.CRSError as exc:
        shown = str(crs_like)
        shown = shown if len(shown) <= 80 else shown[:77] + "..."
        raise FieldcastError(f"Could not read the coordinate reference system {shown!r} ({exc}). "
                             "Assign a valid CRS to the layer, e.g. its EPSG code.") from exc


def undefined_crs_error(layer_name: str) -> FieldcastError:
    """The refusal for a layer whose CRS does not say whether its coordinates are degrees or metres."""
    return FieldcastError(f"The layer {layer_name} has no defined CRS (its coordinates are not known to be degrees "
                          "or metres). Assign its real CRS (Layer Properties \u2192 Source \u2192 Assigned Coordinate "
                          "Reference System, or the 'Assign projection' tool), or, for a site grid in local metres, "
                          "assign a local engineering CRS.")


def is_undefined(crs: pyproj.CRS) -> bool:
    """True for a placeholder CRS: GDAL's "Undefined ... SRS" or a geographic CRS on an unknown datum and ellipsoid."""
    if crs.name.strip().lower() in UNDEFINED_CRS_NAMES:
        return True
    datum, ellipsoid = crs.datum, crs.ellipsoid
    return (crs.is_geographic and datum is not None and ellipsoid is not None
            and datum.name.strip().lower() in UNKNOWN_NAMES and ellipsoid.name.strip().lower() in UNKNOWN_NAMES)


def defined_crs(wkt: str, layer_name: str) -> pyproj.CRS:
    """The layer's CRS read from ``wkt``, refused when empty or undefined (see :func:`is_undefined`).

    Raises
    ------
    FieldcastError
        Naming ``layer_name`` and how to assign a CRS.
    """
    if not wkt.strip():
        raise undefined_crs_error(layer_name)
    crs = parse_crs(wkt)
    if is_undefined(crs):
        raise undefined_crs_error(layer_name)
    return crs


def longitude_span(lons: np.ndarray) -> tuple[float, float]:
    """Centre and width in degrees of the shortest longitude interval holding every ``lons`` value.

    The interval is the circle minus its widest gap between neighbouring sorted longitudes, so data
    from 179 deg E to 179 deg W give a centre near 180 deg and a width of 2 degrees. The centre is in [-180, 180).
    """
    wrapped = np.sort((np.asarray(lons, dtype=float) + 180.0) % 360.0 - 180.0)
    gaps = np.diff(np.append(wrapped, wrapped[0] + 360.0))
    widest = int(np.argmax(gaps))
    start = wrapped[(widest + 1) % len(wrapped)]
    width = 360.0 - float(gaps[widest])
    return float((start + width / 2.0 + 180.0) % 360.0 - 180.0), width


def utm_zone_number(lon: float, lat: float) -> int:
    """UTM zone number (1..60) of a point given in degrees.

    Zones are 6 degrees wide and numbered eastwards from 180 deg W:
    ``zone = floor((lon + 180) / 6) + 1`` (Snyder 1987, Map Projections - A Working Manual,
    USGS Professional Paper 1395, Transverse Mercator chapter),
    with the exceptions of the UTM grid: zone 32 widened to 3..12 deg E between 56 and
    64 deg N (south-west Norway), and zones 31, 33, 35, 37 spanning 9 or 12 degrees
    between 72 and 84 deg N (Svalbard) (DMA Technical Manual 8358.2, 1989).
    """
    lon = (lon + 180.0) % 360.0 - 180.0  # wrap into [-180, 180) so the zone is 1..60
    if 56.0 <= lat < 64.0 and 3.0 <= lon < 12.0:
        return 32
    if 72.0 <= lat <= 84.0 and 0.0 <= lon < 42.0:
        return 31 + 2 * int((lon + 3.0) // 12.0)  # 31: 0-9, 33: 9-21, 35: 21-33, 37: 33-42 deg E
    return int(math.floor((lon + 180.0) / 6.0)) + 1


def utm_crs_for(lon: float, lat: float) -> pyproj.CRS:
    """WGS 84 / UTM CRS for a point given in degrees: EPSG:326zz north of the equator, 327zz south.

    Raises
    ------
    FieldcastError
        If the point is not finite or lies outside the UTM latitude band (80 deg S to 84 deg N).
    """
    if not (math.isfinite(lon) and math.isfinite(lat)) or abs(lat) > 90.0:
        raise FieldcastError(f"({lon}, {lat}) is not a valid longitude/latitude in degrees. "
                             "Check that the layer's CRS is really geographic.")
    if not UTM_SOUTH_LIMIT <= lat <= UTM_NORTH_LIMIT:
        raise FieldcastError(f"Latitude {lat:.2f} lies outside the UTM band (80 S to 84 N). Reproject the "
                             "layer to a polar projected CRS (e.g. EPSG:5041 north, EPSG:5042 south) first.")
    base = 32600 if lat >= 0.0 else 32700
    return pyproj.CRS.from_epsg(base + utm_zone_number(lon, lat))


def is_geographic(wkt: str) -> bool:
    """True when the CRS has longitude/latitude axes in angular units."""
    return parse_crs(wkt).is_geographic


def horizontal_axes(crs: pyproj.CRS) -> list:
    """The axes of ``crs`` other than vertical ones (a compound CRS also lists its height axis)."""
    return [axis for axis in crs.axis_info if axis.direction.lower() not in ("up", "down")]


def linear_units(wkt: str) -> str:
    """Name of the horizontal linear unit of a projected or local CRS (``"metre"`` for metres).

    Any unit whose conversion factor to metres is 1 is reported as ``"metre"``; other
    units keep pyproj's name, e.g. ``"US survey foot"``.

    Raises
    ------
    FieldcastError
        If the CRS is geographic or geocentric, has no unit, or mixes units between axes.
    """
    crs = parse_crs(wkt)
    if crs.is_geographic or crs.is_geocentric:
        raise FieldcastError(f"The CRS {crs.name!r} measures positions in degrees or on the globe, not in a "
                             "plane, so distances are not meaningful. Reproject the layer to a projected CRS "
                             "in metres, e.g. the local UTM zone or the national grid.")
    axes = horizontal_axes(crs)
    names = {axis.unit_name.strip().lower() for axis in axes}
    if not axes or names & UNKNOWN_UNIT_NAMES:
        raise FieldcastError(f"The CRS {crs.name!r} has no distance unit. Assign the layer a projected CRS "
                             "whose unit is known (e.g. metres).")
    factors = {axis.unit_conversion_factor for axis in axes}
    if len(factors) != 1:
        raise FieldcastError(f"The CRS {crs.name!r} uses different units on its axes. "
                             "Reproject the layer to a projected CRS with one unit, e.g. metres.")
    return "metre" if factors == {1.0} else axes[0].unit_name


def transform_points(xy: np.ndarray, src_wkt: str, dst_wkt: str) -> np.ndarray:
    """Transform ``(n, 2)`` x/y (or lon/lat) coordinates from one CRS to another.

    Coordinates are always in x, y order (easting, northing or longitude, latitude),
    whatever the axis order the CRS defines. The input is not modified.

    Returns
    -------
    ndarray of shape (n, 2)

    Raises
    ------
    FieldcastError
        If ``xy`` is not an ``(n, 2)`` array or some finite points cannot be transformed
        (they lie outside the area where the transformation is defined).
    """
    points = np.asarray(xy, dtype=float)
    if points.ndim != 2 or points.shape[1] != 2:
        raise FieldcastError(f"Expected an (n, 2) array of x, y coordinates, got shape {points.shape}.")
    transformer = pyproj.Transformer.from_crs(parse_crs(src_wkt), parse_crs(dst_wkt), always_xy=True)
    x_out, y_out = transformer.transform(points[:, 0], points[:, 1])
    result = np.column_stack([np.asarray(x_out, dtype=float), np.asarray(y_out, dtype=float)])
    failed = np.all(np.isfinite(points), axis=1) & ~np.all(np.isfinite(result), axis=1)
    if np.any(failed):
        raise FieldcastError(f"{int(failed.sum())} of {len(points)} points could not be transformed from "
                             f"{parse_crs(src_wkt).name!r} to {parse_crs(dst_wkt).name!r}; the first is "
                             f"{tuple(points[failed][0])}. Check the layer's CRS or remove points outside "
                             "its area of use.")
    return result


def to_wkt2(crs_like: Any) -> str:
    """WKT2 (ISO 19162:2019) text of a CRS given in any form :func:`parse_crs` accepts."""
    return parse_crs(crs_like).to_wkt(WktVersion.WKT2_2019)


def same_crs(wkt_a: str, wkt_b: str) -> bool:
    """True when two CRS descriptions denote the same system, ignoring axis order.

    Uses pyproj's equivalence test; descriptions that differ only in wording (e.g. a
    CRS read back from a GeoTIFF) also match when both identify, with at least 90 %
    confidence, as the same authority code.
    """
    crs_a, crs_b = parse_crs(wkt_a), parse_crs(wkt_b)
    if crs_a.equals(crs_b, ignore_axis_order=True):
        return True
    code_a = crs_a.to_authority(min_confidence=90)
    return code_a is not None and code_a == crs_b.to_authority(min_confidence=90)
