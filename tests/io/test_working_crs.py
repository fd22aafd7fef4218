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
