"""Run Fieldcast's toolbox algorithms through ``qgis_process.bin`` with a throwaway QGIS profile.

The profile is a folder used as ``QGIS_CUSTOM_CONFIG_PATH``: the repository is
linked in as the plugin ``fieldcast`` and enabled in ``QGIS3.ini``, so nothing
in the user's own QGIS settings is read or changed. ``qgis_process.bin`` is
used instead of Debian's ``qgis_process`` wrapper, which passes an option that
QGIS 3.22 rejects. The Meuse GeoPackage and the template raster the runs take
are written here too, so that the processing.run tests share them.
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

REPO_ROOT = Path(__file__).resolve().parent.parent
PLUGIN_NAME = "fieldcast"
QGIS_PROCESS = shutil.which("qgis_process.bin")
RUN_TIMEOUT_SECONDS = 900  # a hang guard, not a speed target
MEUSE_METALS = ("zinc", "copper", "lead")
# A template raster over the Meuse samples whose top-left corner is off the multiples of its 40 m cells.
MEUSE_TEMPLATE = (178605.0, 40.0, 0.0, 333615.0, 0.0, -40.0)
COLUMNS, ROWS = 70, 98  # to 181405 / 329695: every Meuse sample lies inside
TEMPLATE_NODATA = -32768.0


def make_profile(root: Path, plugin_folder: Path = REPO_ROOT) -> Path:
    """Create a QGIS profile under ``root`` with ``plugin_folder`` installed and enabled as ``fieldcast``.

    Returns ``root``, the value for ``QGIS_CUSTOM_CONFIG_PATH``.
    """
    profile = root / "profiles" / "default"
    plugins = profile / "python" / "plugins"
    plugins.mkdir(parents=True, exist_ok=True)
    (plugins / PLUGIN_NAME).symlink_to(plugin_folder, target_is_directory=True)
    (profile / "QGIS").mkdir(exist_ok=True)
    (profile / "QGIS" / "QGIS3.ini").write_text(f"[PythonPlugins]\n{PLUGIN_NAME}=true\n", encoding="utf-8")
    return root


@dataclass
class ProcessRun:
    """The outcome of one ``qgis_process.bin --json`` call.

    Attributes
    ----------
    returncode : int
        Exit status; 0 means the algorithm finished.
    document : dict or None
        The parsed JSON written on standard output (None when there was none,
        as after a failed run).
    stderr : str
        Standard error: error messages, warnings and Python tracebacks.
    """

    returncode: int
    document: dict | None
    stderr: str

    @property
    def results(self) -> dict:
        """The algorithm's outputs (``{}`` when the run wrote no JSON)."""
        return (self.document or {}).get("results", {})

    @property
    def messages(self) -> str:
        """Every message of the run as one text: the JSON log (info, warnings, errors) and stderr."""
        log = (self.document or {}).get("log", {})
        lines = [line for entries in log.values() for line in entries]
        return "\n".join(lines + [self.stderr])


def run_qgis_process(profile: Path, *arguments: str) -> ProcessRun:
    """Run ``qgis_process.bin --json ARGUMENTS`` offscreen with the given profile."""
    if QGIS_PROCESS is None:
        raise RuntimeError("qgis_process.bin is not on PATH; install the Debian package qgis.")
    environment = dict(os.environ, QGIS_CUSTOM_CONFIG_PATH=str(profile), QT_QPA_PLATFORM="offscreen")
    completed = subprocess.run(
        [QGIS_PROCESS, "--json", *arguments],
        capture_output=True, text=True, env=environment, timeout=RUN_TIMEOUT_SECONDS, check=False,
    )
    try:
        document = json.loads(completed.stdout)
    except json.JSONDecodeError:
        document = None
    return ProcessRun(completed.returncode, document, completed.stderr)


def run_algorithm(profile: Path, algorithm: str, parameters: dict[str, object]) -> ProcessRun:
    """Run one algorithm (an id such as ``fieldcast:fitmodel`` or a ``.model3`` path) with ``NAME=value`` pairs.

    Booleans are passed as ``true``/``false``; a list as one ``NAME=item`` pair per item (how
    qgis_process takes several values, e.g. several fields); everything else as ``str(value)``.
    """
    def text(value: object) -> str:
        return str(value).lower() if isinstance(value, bool) else str(value)

    pairs = [f"{name}={text(item)}" for name, value in parameters.items()
             for item in (value if isinstance(value, list) else [value])]
    return run_qgis_process(profile, "run", str(algorithm), "--", *pairs)


def write_graphical_model(path: Path, name: str, steps: list[tuple[str, str, dict, dict]],
                          output: tuple[str, str, str]) -> None:
    """Save a graphical model (``.model3``) with one input, ``samples``, the INPUT of every step.

    ``steps`` are ``(child_id, algorithm, fixed, linked)``: ``fixed`` maps parameter names to static
    values, ``linked`` maps parameter names to ``(child_id, output_name)`` of an earlier step. ``output``
    is ``(model_output, child_id, child_output)``, set on the command line as ``child_id:model_output=PATH``.
    Building the model needs a running ``QgsApplication`` in this process.
    """
    from qgis.core import (
        QgsProcessingModelAlgorithm,
        QgsProcessingModelChildAlgorithm,
        QgsProcessingModelChildParameterSource,
        QgsProcessingModelOutput,
        QgsProcessingModelParameter,
        QgsProcessingParameterFeatureSource,
    )

    model = QgsProcessingModelAlgorithm(name, "Fieldcast tests")
    model.addModelParameter(QgsProcessingParameterFeatureSource("samples", "Samples"),
                            QgsProcessingModelParameter("samples"))
    samples = QgsProcessingModelChildParameterSource.fromModelParameter("samples")
    output_name, output_child, child_output = output
    for child_id, algorithm, fixed, linked in steps:
        step = QgsProcessingModelChildAlgorithm(algorithm)
        step.setChildId(child_id)
        # one name at a time: setParameterSources with a dict crashes the QGIS 3.22 Python bindings
        step.addParameterSources("INPUT", [samples])
        for parameter, value in fixed.items():
            step.addParameterSources(parameter, [QgsProcessingModelChildParameterSource.fromStaticValue(value)])
        for parameter, (source_child, source_output) in linked.items():
            step.addParameterSources(
                parameter, [QgsProcessingModelChildParameterSource.fromChildOutput(source_child, source_output)])
        if child_id == output_child:
            model_output = QgsProcessingModelOutput(output_name, output_name.capitalize())
            model_output.setChildId(child_id)
            model_output.setChildOutputName(child_output)
            step.setModelOutputs({output_name: model_output})
        model.addChildAlgorithm(step)
    if not model.toFile(str(path)):
        raise OSError(f"could not write the model file {path}")


def write_fit_then_predict_model(path: Path, fit_parameters: dict, predict_parameters: dict) -> None:
    """A ``.model3`` chaining ``fieldcast:fitmodel`` into ``fieldcast:predict``.

    The predict step's MODEL is the fit step's OUTPUT_MODEL, a temporary file; the predict step's
    OUTPUT is the model output ``surface`` (``predict:surface=PATH`` on the command line).
    """
    write_graphical_model(path, "Fit then predict",
                          [("fit", "fieldcast:fitmodel", fit_parameters, {}),
                           ("predict", "fieldcast:predict", predict_parameters, {"MODEL": ("fit", "OUTPUT_MODEL")})],
                          ("surface", "predict", "OUTPUT"))


def write_point_geopackage(path: Path, name: str, xy, columns: dict[str, list]) -> str:
    """A GeoPackage point layer ``name`` in EPSG:28992 with one point per row of ``xy``; returns ``path`` as text.

    Each column becomes a field in the given order: text for ``str`` values, whole numbers for ``int``
    values, real numbers otherwise (the type of the column's first value decides).
    """
    from osgeo import ogr, osr

    def field_type(values: list) -> int:
        first = values[0] if len(values) else 0.0
        return ogr.OFTString if isinstance(first, str) else ogr.OFTInteger if isinstance(first, int) else ogr.OFTReal

    srs = osr.SpatialReference()
    srs.ImportFromEPSG(28992)
    source = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    layer = source.CreateLayer(name, srs, ogr.wkbPoint)
    for column, values in columns.items():
        layer.CreateField(ogr.FieldDefn(column, field_type(values)))
    layer.StartTransaction()
    for row, (x, y) in enumerate(xy):
        feature = ogr.Feature(layer.GetLayerDefn())
        for column, values in columns.items():
            feature.SetField(column, values[row])
        point = ogr.Geometry(ogr.wkbPoint)
        point.AddPoint_2D(float(x), float(y))
        feature.SetGeometry(point)
        layer.CreateFeature(feature)
    layer.CommitTransaction()
    source = None
    return str(path)


def write_meuse_geopackage(path: Path) -> str:
    """The Meuse samples (tests/data/meuse.csv) as a GeoPackage point layer ``meuse`` in EPSG:28992.

    Fields: ``id``, ``zinc``, ``copper``, ``lead`` (ppm) and the text field ``landuse``. Returns the
    layer's OGR URI. The data set is the published Meuse survey (see tests/data/README.md).
    """
    from osgeo import ogr

    csv_source = ogr.Open(str(REPO_ROOT / "tests" / "data" / "meuse.csv"))  # held: a layer outliving it crashes
    rows = list(csv_source.GetLayer())
    columns = {"id": [int(row["id"]) for row in rows],
               **{name: [float(row[name]) for row in rows] for name in MEUSE_METALS},
               "landuse": [row["landuse"] for row in rows]}
    xy = [(float(row["x"]), float(row["y"])) for row in rows]
    return f"{write_point_geopackage(path, 'meuse', xy, columns)}|layername=meuse"


def write_geopackage_without_srs(path: Path) -> str:
    """A GeoPackage point layer ``site`` written by GDAL without a spatial reference; returns its OGR URI.

    GDAL gives such a layer its "Undefined geographic SRS", which QGIS reports as a valid CRS in degrees. The six
    points of a 6 m site grid and their field ``depth`` are invented: only the missing CRS matters (a refusal).
    """
    from osgeo import ogr

    source = ogr.GetDriverByName("GPKG").CreateDataSource(str(path))
    table = source.CreateLayer("site", None, ogr.wkbPoint)
    table.CreateField(ogr.FieldDefn("depth", ogr.OFTReal))
    for x, y, depth in [(0, 0, 1.0), (6, 0, 2.0), (0, 6, 1.5), (6, 6, 3.0), (3, 3, 2.5), (2, 5, 1.2)]:
        feature = ogr.Feature(table.GetLayerDefn())
        feature.SetField("depth", depth)
        feature.SetGeometry(ogr.CreateGeometryFromWkt(f"POINT ({x} {y})"))
        table.CreateFeature(feature)
    source = None
    return f"{path}|layername=site"


def write_template(path: Path, geotransform: tuple = MEUSE_TEMPLATE, epsg: int = 28992,
                   size: tuple[int, int] = (COLUMNS, ROWS), nodata_block: bool = True) -> str:
    """A one-band Int16 GeoTIFF template raster; with ``nodata_block`` its top-left 10 x 20 cells hold nodata.

    Returns its path as text. ``size`` is (columns, rows); the other cells hold 7.
    """
    import numpy as np
    from osgeo import gdal, osr

    dataset = gdal.GetDriverByName("GTiff").Create(str(path), size[0], size[1], 1, gdal.GDT_Int16)
    dataset.SetGeoTransform(geotransform)
    crs = osr.SpatialReference()
    crs.ImportFromEPSG(epsg)
    dataset.SetProjection(crs.ExportToWkt())
    values = np.full((size[1], size[0]), 7, dtype=np.int16)
    if nodata_block:
        values[:10, :20] = TEMPLATE_NODATA
    band = dataset.GetRasterBand(1)
    band.SetNoDataValue(TEMPLATE_NODATA)
    band.WriteArray(values)
    dataset = None
    return str(path)


def template_centres(template: str):
    """Cell centres of the raster ``template`` (any GeoTIFF) in raster order as an (n, 2) array, by GDAL's
    ApplyGeoTransform at (pixel + 0.5, line + 0.5)."""
    import numpy as np
    from osgeo import gdal

    dataset = gdal.Open(str(template))
    transform = dataset.GetGeoTransform()
    return np.array([gdal.ApplyGeoTransform(transform, col + 0.5, row + 0.5)
                     for row in range(dataset.RasterYSize) for col in range(dataset.RasterXSize)])
