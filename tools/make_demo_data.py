"""Simulate the invented Hollmark Basin sediment survey and write demo/hollmark_basin.gpkg.

Run once from anywhere with the system Python (it needs numpy and GDAL only)::

    /usr/bin/python3 tools/make_demo_data.py

Everything here is invented: the harbour basin, its outline and the survey. Lead
values are drawn from a known anisotropic Gaussian random field (log scale) with a
fixed seed, so the demo can show how close a fit comes to the truth. The true model
is printed and recorded in demo/README.md. A re-run gives the same values.
"""
from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np
from osgeo import gdal, ogr, osr

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))  # the repository loader, the field draw
from repo_package import load_repo_package  # noqa: E402

load_repo_package()
from fieldcast.algorithms import CovarianceModel, Structure  # noqa: E402
from reference import gaussian_field  # noqa: E402

REPO = Path(__file__).resolve().parent.parent
DEFAULT_OUTPUT = REPO / "demo" / "hollmark_basin.gpkg"
EPSG = 25832  # ETRS89 / UTM zone 32N
ORIGIN = (531_200.0, 6_011_400.0)  # arbitrary easting/northing of the local origin, m
SEED = 20261201

# Basin outline in local metres: a channel about 1.4 km long running east-north-east.
BOUNDARY_LOCAL = [
    (0, 0), (260, -150), (620, 20), (1010, 250), (1330, 470), (1420, 640),
    (1310, 760), (1060, 700), (720, 520), (360, 360), (60, 250), (-60, 120),
]
TRUE_MEAN_LOG_PPM = math.log(90.0)  # constant mean of ln(lead / ppm)
BASIN_AXIS_AZIMUTH = 60.0  # degrees clockwise from grid north
MISSING_LEAD_IDS = ("HB-017", "HB-058", "T2-09")  # lab results "lost": written as NULL
DUPLICATE_OF = "HB-040"  # a field duplicate taken at exactly the same spot


def true_covariance() -> CovarianceModel:
    """The simulation model for ln(lead): Matérn 3/2 along the basin axis plus a nugget."""
    structure = Structure(family="matern32", partial_sill=0.40, range=150.0, azimuth=BASIN_AXIS_AZIMUTH, ratio=0.4)
    return CovarianceModel((structure,), nugget=0.05)


def boundary_geometry() -> ogr.Geometry:
    """The basin polygon in EPSG:25832."""
    ring = ogr.Geometry(ogr.wkbLinearRing)
    for x, y in BOUNDARY_LOCAL + BOUNDARY_LOCAL[:1]:
        ring.AddPoint_2D(ORIGIN[0] + x, ORIGIN[1] + y)
    polygon = ogr.Geometry(ogr.wkbPolygon)
    polygon.AddGeometry(ring)
    return polygon


def inside(polygon: ogr.Geometry, x: float, y: float) -> bool:
    """True when the point lies inside the polygon."""
    point = ogr.Geometry(ogr.wkbPoint)
    point.AddPoint_2D(x, y)
    return polygon.Contains(point)


def sample_layout(polygon: ogr.Geometry, rng: np.random.Generator) -> list[tuple[str, str, float, float]]:
    """(sample id, survey, easting, northing) of every sample.

    A jittered 68 m grid over the basin, three cross-basin transects with 25 m
    spacing, and one field duplicate at the location of :data:`DUPLICATE_OF`.
    """
    x0, x1, y0, y1 = polygon.GetEnvelope()
    rows = []
    for y in np.arange(y0 + 30.0, y1, 68.0):
        for x in np.arange(x0 + 30.0, x1, 68.0):
            px, py = x + rng.uniform(-20, 20), y + rng.uniform(-20, 20)
            if inside(polygon, px, py):
                rows.append((f"HB-{len(rows) + 1:03d}", "grid", px, py))
    across = math.radians(BASIN_AXIS_AZIMUTH + 90.0)
    for number, (cx, cy) in enumerate([(330, 110), (760, 360), (1180, 560)], start=1):
        steps = np.arange(-14, 15) * 25.0
        points = [(ORIGIN[0] + cx + s * math.sin(across), ORIGIN[1] + cy + s * math.cos(across)) for s in steps]
        points = [p for p in points if inside(polygon, *p)]
        rows += [(f"T{number}-{k:02d}", f"transect T{number}", px, py) for k, (px, py) in enumerate(points, 1)]
    _, _, dx, dy = next(r for r in rows if r[0] == DUPLICATE_OF)
    rows.append((f"{DUPLICATE_OF}-D", "field duplicate", dx, dy))
    return rows


def water_depth(xy: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Invented water depth in metres: deepest along the basin's centre line."""
    theta = math.radians(BASIN_AXIS_AZIMUTH)
    local = xy - np.array(ORIGIN)
    off_axis = local[:, 0] * math.cos(theta) - local[:, 1] * math.sin(theta) + 120.0
    depth = 1.5 + 7.0 * np.exp(-((off_axis / 170.0) ** 2)) + rng.normal(0.0, 0.3, len(xy))
    return np.round(np.clip(depth, 0.4, None), 1)


def simulate(rows, covariance, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Lead and zinc (ppm) and water depth (m) at the sample locations."""
    xy = np.array([(r[2], r[3]) for r in rows])
    log_lead = gaussian_field(covariance, xy, rng, mean=TRUE_MEAN_LOG_PPM)
    # zinc follows lead (same sources) with its own scatter: ln(zinc) = ln(210) + 0.75 (ln(lead) - mean) + e
    log_zinc = math.log(210.0) + 0.75 * (log_lead - TRUE_MEAN_LOG_PPM) + rng.normal(0.0, 0.25, len(xy))
    lead = np.round(np.exp(log_lead), 1)
    for sample_id in MISSING_LEAD_IDS:
        lead[[r[0] for r in rows].index(sample_id)] = np.nan
    return {"xy": xy, "lead_ppm": lead, "zinc_ppm": np.round(np.exp(log_zinc)), "water_depth_m": water_depth(xy, rng)}


def write_geopackage(path: Path, rows, values: dict[str, np.ndarray], boundary: ogr.Geometry) -> None:
    """Write the point layer ``sediment_samples`` and the polygon layer ``basin_boundary``."""
    gdal.SetConfigOption("OGR_CURRENT_DATE", "2026-12-01T00:00:00Z")  # reproducible file
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.exists():
        path.unlink()
    srs = osr.SpatialReference()
    srs.ImportFromEPSG(EPSG)
    source = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    points = source.CreateLayer("sediment_samples", srs, ogr.wkbPoint)
    points.CreateField(ogr.FieldDefn("sample_id", ogr.OFTString))
    points.CreateField(ogr.FieldDefn("survey", ogr.OFTString))
    for name in ("lead_ppm", "zinc_ppm", "water_depth_m"):
        points.CreateField(ogr.FieldDefn(name, ogr.OFTReal))
    for i, (sample_id, survey, x, y) in enumerate(rows):
        feature = ogr.Feature(points.GetLayerDefn())
        feature.SetField("sample_id", sample_id)
        feature.SetField("survey", survey)
        for name in ("lead_ppm", "zinc_ppm", "water_depth_m"):
            value = float(values[name][i])
            if math.isnan(value):
                feature.SetFieldNull(name)
            else:
                feature.SetField(name, value)
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(round(x, 2), round(y, 2))
        feature.SetGeometry(point)
        points.CreateFeature(feature)
    outline = source.CreateLayer("basin_boundary", srs, ogr.wkbPolygon)
    outline.CreateField(ogr.FieldDefn("name", ogr.OFTString))
    feature = ogr.Feature(outline.GetLayerDefn())
    feature.SetField("name", "Hollmark Basin (invented)")
    feature.SetGeometry(boundary)
    outline.CreateFeature(feature)
    source = None


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--output", type=Path, default=DEFAULT_OUTPUT, help="GeoPackage to write")
    args = parser.parse_args()
    rng = np.random.default_rng(SEED)
    covariance = true_covariance()
    boundary = boundary_geometry()
    rows = sample_layout(boundary, rng)
    values = simulate(rows, covariance, rng)
    write_geopackage(args.output, rows, values, boundary)
    lead = values["lead_ppm"]
    print(f"wrote {args.output}: {len(rows)} samples ({int(np.isnan(lead).sum())} without lead), EPSG:{EPSG}")
    print(f"lead ppm: min {np.nanmin(lead):.1f}, median {np.nanmedian(lead):.1f}, max {np.nanmax(lead):.1f}")
    print(f"true model of ln(lead): mean {TRUE_MEAN_LOG_PPM:.4f}, covariance {covariance.to_dict()}")


if __name__ == "__main__":
    main()
