"""The working-CRS choice (algorithms/io/working_crs.py), tested without QGIS."""
from __future__ import annotations

import numpy as np
import pyproj
import pytest
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from fieldcast.algorithms import FieldcastError, choose_working_crs, to_wkt2


def test_projected_layer_crs_is_kept():
    wkt = to_wkt2("EPSG:28992")
    working = choose_working_crs(wkt, np.array([[181000.0, 333000.0], [182000.0, 334000.0]]))
    assert pyproj.CRS(working.wkt).equals(pyproj.CRS("EPSG:28992"))
    assert working.units == "metre"
    assert "own projected CRS" in working.reason


def test_geographic_layer_gets_the_utm_zone_pyproj_names_for_the_data():
    # Reference: pyproj's own UTM lookup from the EPSG database (query_utm_crs_info) for the same small area.
    lonlat = np.array([[5.72, 50.96], [5.76, 50.99]])
    working = choose_working_crs(to_wkt2("EPSG:4326"), lonlat)
    area = AreaOfInterest(5.72, 50.96, 5.76, 50.99)
    expected = {info.code for info in query_utm_crs_info(datum_name="WGS 84", area_of_interest=area)}
    assert str(pyproj.CRS(working.wkt).to_epsg()) in expected
    assert "in degrees" in working.reason


def test_target_crs_wins_and_a_geographic_target_is_refused():
    layer = to_wkt2("EPSG:4326")
    lonlat = np.array([[5.72, 50.96], [5.76, 50.99]])
    working = choose_working_crs(layer, lonlat, to_wkt2("EPSG:28992"))
    assert pyproj.CRS(working.wkt).to_epsg() == 28992
    with pytest.raises(FieldcastError, match="projected CRS"):
        choose_working_crs(layer, lonlat, to_wkt2("EPSG:4258"))


# What GDAL writes for a GeoPackage layer created without SRS (srs_id 0 of the GeoPackage standard).
GDAL_UNDEFINED_WKT = ('GEOGCS["Undefined geographic SRS",DATUM["unknown",SPHEROID["unknown",6378137,298.257223563]],'
                      'PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433,AUTHORITY["EPSG","9122"]],'
                      'AXIS["Latitude",NORTH],AXIS["Longitude",EAST]]')
# A geographic CRS on an unknown datum and ellipsoid under another name.
UNKNOWN_DATUM_WKT = ('GEOGCS["unnamed",DATUM["unknown",SPHEROID["unknown",6378137,298.257223563]],'
                     'PRIMEM["Greenwich",0],UNIT["degree",0.0174532925199433]]')
SITE_GRID = np.array([[0.0, 0.0], [6.0, 0.0], [0.0, 6.0], [6.0, 6.0]])


@pytest.mark.parametrize("wkt", [GDAL_UNDEFINED_WKT, UNKNOWN_DATUM_WKT, ""])
def test_undefined_layer_crs_is_refused_not_taken_for_degrees(wkt):
    with pytest.raises(FieldcastError, match="The layer site has no defined CRS .*Assign projection.*local "
                                             "engineering CRS"):
        choose_working_crs(wkt, SITE_GRID, layer_name="site")


def test_undefined_layer_crs_is_refused_even_with_a_target():
    with pytest.raises(FieldcastError, match="no defined CRS"):
        choose_working_crs(GDAL_UNDEFINED_WKT, SITE_GRID, to_wkt2("EPSG:28992"))


def test_data_across_the_antimeridian_get_the_utm_zone_pyproj_names_there():
    # Reference: pyproj's UTM lookup (query_utm_crs_info) for a small area around the data's middle, 179.4 E.
    lonlat = np.array([[178.9, -17.8], [179.6, -17.5], [-179.9, -17.2], [179.2, -17.0]])
    working = pyproj.CRS(choose_working_crs(to_wkt2("EPSG:4326"), lonlat).wkt)
    area = AreaOfInterest(179.3, -17.5, 179.5, -17.3)
    expected = {info.code for info in query_utm_crs_info(datum_name="WGS 84", area_of_interest=area)}
    assert expected == {"32760"}
    assert str(working.to_epsg()) in expected


def test_samples_wider_than_a_utm_zone_are_warned_about():
    narrow = choose_working_crs(to_wkt2("EPSG:4326"), np.array([[4.0, 50.0], [5.0, 51.0]]))
    wide = choose_working_crs(to_wkt2("EPSG:4326"), np.array([[2.0, 50.0], [9.5, 51.0]]))
    assert not narrow.warnings
    assert any("span 7.5 degrees of longitude, more than one UTM zone" in line for line in wide.warnings)


def test_web_mercator_working_crs_is_warned_about():
    xy = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:3857", always_xy=True).transform([5.7, 5.8], [50.9, 51.0])
    working = choose_working_crs(to_wkt2("EPSG:3857"), np.column_stack(xy))
    assert any("web-mapping projection" in line and "1/cos(latitude)" in line for line in working.warnings)
    targeted = choose_working_crs(to_wkt2("EPSG:4326"), np.array([[5.7, 50.9], [5.8, 51.0]]), to_wkt2("EPSG:3857"))
    assert any("web-mapping projection" in line for line in targeted.warnings)


def test_samples_outside_the_area_of_use_are_warned_about():
    # EPSG:28992 (Amersfoort / RD New) is defined for the Netherlands; one of the three samples is in Paris.
    lonlat = np.array([[5.7, 50.9], [5.8, 51.0], [2.35, 48.85]])
    inside = choose_working_crs(to_wkt2("EPSG:4326"), lonlat[:2], to_wkt2("EPSG:28992"))
    outside = choose_working_crs(to_wkt2("EPSG:4326"), lonlat, to_wkt2("EPSG:28992"))
    assert not inside.warnings
    assert any(line.startswith("1 of 3 samples lie outside the area of use") for line in outside.warnings)
