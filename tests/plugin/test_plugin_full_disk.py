"""A full disk: each run fails with a message naming the output, no traceback, and leaves no file behind.

The disk is a 200 KiB tmpfs mounted for each test (the tests run as root in CI) and filled with a filler
file up to a few KiB. Data: the published Meuse topsoil samples and 40 m grid (Rikken & Van Rijn 1993, as
shipped in Debian's r-cran-sp package; tests/data/README.md), zinc in ppm with a log model, on the 80 m grid
of tests/plugin/test_plugin_decision_maps.py.
"""
from __future__ import annotations

import os
import subprocess
import tempfile
from pathlib import Path

import pytest
from qgis.core import QgsProcessingException, QgsProcessingFeedback

from fault_injection import names
from qgis_process_support import QGIS_PROCESS, make_profile, run_algorithm, write_meuse_geopackage
from qgis_support import fieldcast_plugin, point_layer, qgis_processing  # noqa: F401 - fixtures
from requirements_check import skip_unless_available
from test_plugin_decision_maps import (  # noqa: F401 - zinc_model is a fixture
    QUICK_LOG_FIT,
    ZINC_THRESHOLD,
    grid_parameters,
    zinc_model,
)

DISK_SIZE = "200k"
FILLER = "filler"
PREDICTION_ROOM = 14 * 1024
"""Free bytes for predict: one compressed raster of the 80 m grid (about 9 KB), not both."""


def mount(folder: Path) -> str:
    """Mount a :data:`DISK_SIZE` tmpfs on ``folder``; "" when done, else why it could not be."""
    try:
        completed = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={DISK_SIZE}", "tmpfs", str(folder)],
                                   capture_output=True, text=True, check=False)
    except OSError as exc:
        return f"cannot run mount: {exc}"
    return "" if completed.returncode == 0 else f"cannot mount a tmpfs: {completed.stderr.strip()}"


def unmount(folder: Path) -> None:
    """Unmount ``folder``; lazily when something still holds a file on it."""
    if subprocess.run(["umount", str(folder)], capture_output=True, check=False).returncode:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True, check=False)


def probe_mount() -> str:
    """Why a tmpfs cannot be mounted here ("" when it can): mounting needs root or CAP_SYS_ADMIN."""
    with tempfile.TemporaryDirectory() as folder:
        reason = mount(Path(folder))
        if not reason:
            unmount(Path(folder))
    return reason


MOUNT_PROBLEM = probe_mount()
pytestmark = skip_unless_available(not MOUNT_PROBLEM, f"full-disk tests need a small tmpfs, but {MOUNT_PROBLEM}")


@pytest.fixture()
def disk(tmp_path):
    """A small tmpfs, unmounted afterwards."""
    folder = tmp_path / "disk"
    folder.mkdir()
    assert not mount(folder)
    try:
        yield folder
    finally:
        unmount(folder)


def fill(folder: Path, room: int = 0) -> None:
    """Fill ``folder``'s disk with a filler file until ``room`` bytes are free (0: until it is full)."""
    with open(folder / FILLER, "wb", buffering=0) as stream:
        status = os.statvfs(folder)
        stream.write(b"\0" * max(status.f_bavail * status.f_frsize - room, 0))
        if room == 0:
            with pytest.raises(OSError, match="No space left"):
                while True:
                    stream.write(b"\0" * 4096)


def fails_cleanly(processing, algorithm: str, parameters: dict, output: Path, disk: Path) -> str:
    """Run ``algorithm``, which must fail naming ``output`` and the way out; no traceback in the log; the disk holds
    only the filler. Returns the message."""
    feedback = QgsProcessingFeedback()
    with pytest.raises(QgsProcessingException) as error:
        processing.run(algorithm, parameters, feedback=feedback)
    message = str(error.value)
    assert str(output) in message
    assert "Traceback" not in message and "Traceback" not in feedback.textLog()
    assert "Internal error" not in message
    # The way out: free space, or another file or folder.
    assert "space" in message.lower() and ("another output file" in message or "another folder" in message)
    assert names(disk) == [FILLER]
    return message


GEOPACKAGE_ROOMS = {"at creation": 0, "at a feature": 100 * 1024, "at commit": 130 * 1024}
"""Free bytes at which the GeoPackage runs full while it is created, at its first feature and at the final commit
(which QGIS's writer does not report; the read-back finds the empty layer), measured with GDAL 3.6."""


@pytest.mark.parametrize("room", GEOPACKAGE_ROOMS.values(), ids=GEOPACKAGE_ROOMS.keys())
def test_crossvalidate_into_a_geopackage(qgis_processing, meuse, zinc_model, disk, room):  # noqa: F811
    output = disk / "cv.gpkg"
    fill(disk, room)
    fails_cleanly(qgis_processing, "fieldcast:crossvalidate",
                  {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", "MODEL": zinc_model,
                   "OUTPUT": str(output)}, output, disk)


def test_simulate_csv_table(qgis_processing, meuse, meuse_grid, zinc_model, disk, tmp_path):  # noqa: F811
    output = disk / "realisations.csv"
    fill(disk)
    fails_cleanly(qgis_processing, "fieldcast:simulate",
                  {**grid_parameters(meuse, meuse_grid, zinc_model), "REALIZATIONS": 200,
                   "THRESHOLD": ZINC_THRESHOLD, "OUTPUT": str(tmp_path / "realisations.tif"),
                   "OUTPUT_TABLE": str(output)}, output, disk)
    assert names(tmp_path) == ["disk"]  # the rasters beside the disk are not left either


def test_predict_with_prediction_and_variance(qgis_processing, meuse, meuse_grid, zinc_model, disk):  # noqa: F811
    fill(disk, room=PREDICTION_ROOM)
    message = fails_cleanly(qgis_processing, "fieldcast:predict",
                            {**grid_parameters(meuse, meuse_grid, zinc_model), "OUTPUT": str(disk / "prediction.tif"),
                             "OUTPUT_VARIANCE": str(disk / "variance.tif")}, disk, disk)
    assert "prediction.tif" in message or "variance.tif" in message


def test_fitmodel_model_file(qgis_processing, meuse, disk):  # noqa: F811
    output = disk / "zinc.json"
    fill(disk)
    fails_cleanly(qgis_processing, "fieldcast:fitmodel",
                  {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", **QUICK_LOG_FIT,
                   "OUTPUT_MODEL": str(output)}, output, disk)


def test_fitmodel_report(qgis_processing, meuse, disk, tmp_path):  # noqa: F811
    output = disk / "zinc_fit.html"
    fill(disk, room=16 * 1024)  # far less than a report
    fails_cleanly(qgis_processing, "fieldcast:fitmodel",
                  {"INPUT": point_layer(meuse.xy, {"zinc": meuse.zinc}), "FIELD": "zinc", **QUICK_LOG_FIT,
                   "OUTPUT_MODEL": str(tmp_path / "zinc.json"), "OUTPUT_REPORT": str(output)}, output, disk)
    assert names(tmp_path) == ["disk"]  # the model file beside the disk is not left either


@skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")
def test_qgis_process_crossvalidate_whose_geopackage_fails_at_commit(zinc_model, disk, tmp_path):  # noqa: F811
    profile = make_profile(tmp_path / "profile")
    layer = write_meuse_geopackage(tmp_path / "meuse.gpkg")
    output = disk / "cv.gpkg"
    fill(disk, GEOPACKAGE_ROOMS["at commit"])
    run = run_algorithm(profile, "fieldcast:crossvalidate", {"INPUT": layer, "FIELD": "zinc", "MODEL": zinc_model,
                                                            "OUTPUT": output})
    assert run.returncode != 0
    assert f"{output} was not written completely" in run.messages
    assert "Traceback" not in run.messages
    assert names(disk) == [FILLER]
