"""Tests of algorithms.io.crs against published CRS definitions and pyproj's own database."""
from __future__ import annotations

import numpy as np
import pytest
from osgeo import osr
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from fieldcast.algorithms.errors import FieldcastError
from fieldcast.algorithms.io.crs import (
    is_geographic,
    linear_units,
    longitude_span,
    same_crs,
    to_wkt2,
    transform_points,
    utm_crs_for,
    utm_zone_number,
)

LOCAL_UNKNOWN_UNIT = 'LOCAL_CS["site",LOCAL_DATUM["site",0],UNIT["unknown",1],AXIS["X",EAST],AXIS["Y",NORTH]]'
LOCAL_METRE = 'LOCAL_CS["site",LOCAL_DATUM["site",0],UNIT["Meter",1],AXIS["X",EAST],AXIS["Y",NORTH]]'


def test_meuse_samples_lie_by_the_meuse_at_stein(meuse):
    # Dataset documentation (data/meuse.rda, Debian r-cran-sp): flood plain of the Meuse near Stein (NL),
    # coordinates in RD New (EPSG:28992). Study-area centre 50.97 N, 5.74 E: from memory (Stein, NL).
    lonlat = transform_points(meuse.xy, meuse.crs, "EPSG:4326")
    lon, lat = lonlat.mean(axis=0)
    assert abs(lat - 50.97) < 0.02
    assert abs(lon - 5.74) < 0.02
    assert np.all((lonlat[:, 0] > 5.70) & (lonlat[:, 0] < 5.78))


def test_rd_new_natural_origin():
    # EPSG dataset, "RD New" projection (EPSG:28992): the natural origin 52 deg 09' 22.178" N,
    # 5 deg 23' 15.500" E on the Amersfoort datum (EPSG:4289) has false easting 155000 m and
    # false northing 463000 m.
    lon, lat = transform_points(np.array([[155000.0, 463000.0]]), "EPSG:28992", "EPSG:4289")[0]
    assert lat == pytest.approx(52 + 9 / 60 + 22.178 / 3600, abs=1e-8)
    assert lon == pytest.approx(5 + 23 / 60 + 15.5 / 3600, abs=1e-8)


def test_transform_round_trip_and_input_unchanged(meuse):
    # meuse.xy is read-only, so an in-place change would raise.
    there = transform_points(meuse.xy, meuse.crs, "EPSG:4326")
    back = transform_points(there, "EPSG:4326", meuse.crs)
    np.testing.assert_allclose(back, meuse.xy, atol=1e-3)


def test_transform_rejects_bad_shapes_and_failed_points():
    with pytest.raises(FieldcastError, match=r"\(n, 2\)"):
        transform_points(np.zeros((3, 3)), "EPSG:4326", "EPSG:3857")
    # Latitude 91 deg does not exist, so PROJ returns inf for that point.
    with pytest.raises(FieldcastError, match="1 of 2 points could not be transformed"):
        transform_points(np.array([[5.0, 50.0], [0.0, 91.0]]), "EPSG:4326", "EPSG:3857")


def test_utm_zone_of_meuse():
    # Standard UTM zone formula zone = floor((lon + 180) / 6) + 1 (Snyder 1987, USGS PP 1395).
    assert utm_crs_for(5.74, 50.97).to_epsg() == 32631
    assert utm_crs_for(-43.2, -22.9).to_epsg() == 32723  # southern hemisphere: EPSG 327zz


@pytest.mark.parametrize("lon, lat", [(5.74, 50.97), (-122.4, 37.8), (151.2, -33.9), (-58.4, -34.6),
                                      (139.7, 35.7), (-0.1, 51.5), (0.1, -0.1), (-179.5, 10.0)])
def test_utm_crs_matches_pyproj_area_of_use(lon, lat):
    # Reference: pyproj's EPSG database, the UTM CRS whose area of use contains the point.
    infos = query_utm_crs_info(datum_name="WGS 84", area_of_interest=AreaOfInterest(lon, lat, lon, lat))
    assert [int(info.code) for info in infos] == [utm_crs_for(lon, lat).to_epsg()]


def test_utm_grid_exceptions():
    # DMA Technical Manual 8358.2 (1989): zone 32V spans 3-12 E; band X uses zones 31, 33, 35, 37.
    assert utm_zone_number(5.3, 60.4) == 32  # Bergen
    assert utm_zone_number(2.0, 60.0) == 31
    assert utm_zone_number(15.6, 78.2) == 33  # Longyearbyen
    assert utm_zone_number(8.0, 78.0) == 31
    assert utm_zone_number(25.0, 78.0) == 35
    assert utm_zone_number(40.0, 78.0) == 37


def test_utm_rejects_polar_and_invalid_points():
    with pytest.raises(FieldcastError, match="outside the UTM band"):
        utm_crs_for(10.0, 85.0)
    with pytest.raises(FieldcastError, match="not a valid longitude/latitude"):
        utm_crs_for(float("nan"), 10.0)


def test_is_geographic():
    assert is_geographic(to_wkt2("EPSG:4326"))
    assert not is_geographic(to_wkt2("EPSG:28992"))


def test_linear_units():
    assert linear_units(to_wkt2("EPSG:28992")) == "metre"
    assert linear_units("EPSG:7415") == "metre"  # compound: RD New + NAP height
    assert linear_units(LOCAL_METRE) == "metre"
    assert linear_units("EPSG:2263") == "US survey foot"  # NAD83 / New York Long Island (ftUS)
    with pytest.raises(FieldcastError, match="Reproject the layer to a projected CRS"):
        linear_units(to_wkt2("EPSG:4326"))
    with pytest.raises(FieldcastError, match="has no distance unit"):
        linear_units(LOCAL_UNKNOWN_UNIT)


def test_to_wkt2_and_unreadable_crs():
    wkt = to_wkt2(28992)
    assert wkt.startswith("PROJCRS[")
    assert same_crs(wkt, "EPSG:28992")
    with pytest.raises(FieldcastError, match="Could not read"):
        to_wkt2("EPSG:999999")
    with pytest.raises(FieldcastError, match="has no coordinate reference system"):
        to_wkt2("  ")


def test_same_crs():
    gdal_wkt1 = osr.SpatialReference()
    gdal_wkt1.ImportFromEPSG(28992)
    assert same_crs(gdal_wkt1.ExportToWkt(), to_wkt2("EPSG:28992"))
    assert same_crs("EPSG:4326", "OGC:CRS84")  # same system, lat/lon versus lon/lat axis order
    assert not same_crs("EPSG:28992", "EPSG:32631")


@pytest.mark.parametrize(("lons", "centre", "width"), [
    ([5.0, 6.0, 7.0], 6.0, 2.0),
    ([179.0, -179.0, 179.5], 180.0, 2.0),  # across the antimeridian: not 0 deg, the mean of the numbers
    ([-170.0, 170.0], 180.0, 20.0),
    ([10.0, 10.0], 10.0, 0.0),
])
def test_longitude_span_is_the_shortest_interval_around_the_circle(lons, centre, width):
    got_centre, got_width = longitude_span(np.array(lons))
    assert got_width == pytest.approx(width)
    assert (got_centre - centre + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=1e-9)
