"""What the tests of algorithms/cluster share: the files a grid job is described by (the Meuse samples as a
GeoPackage and the project's Meuse log-zinc model of tests/reference.py as a model file) and raster comparison."""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from osgeo import gdal

from fieldcast.algorithms import MeanModel, ModelDocument, Transform, to_wkt2
from qgis_process_support import write_meuse_geopackage
from reference import MEUSE_LOG_ZINC

EXTENT = (178500.0, 329600.0, 181500.0, 333700.0)
"""Around the Meuse samples (EPSG:28992 metres); at 10 m: 300 x 410 cells, 2 x 2 blocks of 256 x 256 tiles."""
PIXEL = 10.0
KINDS = ("prediction", "variance", "sd", "distance")


@dataclass(frozen=True)
class JobFiles:
    """A model file, a sample file and an empty folder for the outputs."""

    model: str
    samples: str
    folder: Path
    document: ModelDocument


def write_job_files(folder: Path) -> JobFiles:
    """The Meuse log-zinc model (constant mean, log transform, EPSG:28992) saved as a model file, and the Meuse
    samples as a GeoPackage layer with the field zinc, in ``folder``."""
    document = ModelDocument(MEUSE_LOG_ZINC, MeanModel("constant"), np.zeros(1), Transform("log"),
                             to_wkt2("EPSG:28992"), "metre", "zinc")
    model = folder / "zinc.json"
    document.save(str(model))
    samples = write_meuse_geopackage(folder / "meuse.gpkg").split("|")[0]
    outputs = folder / "out"
    outputs.mkdir()
    return JobFiles(str(model), samples, outputs, document)


def job_outputs(folder: Path, name: str) -> dict[str, str]:
    """Destinations of the rasters of :data:`KINDS` in ``folder``, named ``<name>_<kind>.tif``."""
    return {kind: str(folder / f"{name}_{kind}.tif") for kind in KINDS}


def read_raster(path) -> tuple[np.ndarray, tuple, str]:
    """Band 1, geotransform and CRS (WKT) of a GeoTIFF."""
    dataset = gdal.Open(str(path))
    return dataset.GetRasterBand(1).ReadAsArray(), dataset.GetGeoTransform(), dataset.GetProjection()


def same_rasters(path_a, path_b) -> bool:
    """True when two GeoTIFFs hold the same numbers bit for bit on the same grid and CRS."""
    (a, grid_a, crs_a), (b, grid_b, crs_b) = read_raster(path_a), read_raster(path_b)
    return a.dtype == b.dtype and np.array_equal(a, b) and grid_a == grid_b and crs_a == crs_b
