"""A ``qgis_process.bin`` run that is terminated (SIGTERM) leaves no temporary file next to its outputs.

The samples are the published Meuse data set (Rikken & Van Rijn 1993, as shipped in Debian's r-cran-sp
package; tests/data/README.md) in EPSG:28992; the 2 m grid over the published grid's extent keeps the run
busy long enough to be terminated while its rasters are being written.
"""
from __future__ import annotations

import os
import signal
import subprocess
import time
from pathlib import Path

from qgis_process_support import QGIS_PROCESS, make_profile, run_algorithm, write_meuse_geopackage
from requirements_check import skip_unless_available

pytestmark = skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")

EXTENT = "178440,181560,329600,333760 [EPSG:28992]"  # the published Meuse grid's extent (tests/data/meuse_grid.csv)
WAIT_SECONDS = 600  # a hang guard, not a speed target


def temporaries(folder: Path) -> list[str]:
    return sorted(name for name in os.listdir(folder) if name.endswith(".part"))


def interrupted_predict(tmp_path: Path, how: signal.Signals) -> tuple[Path, Path, str, subprocess.Popen]:
    """Start fieldcast:predict on the 2 m grid and send it ``how`` once its rasters are being written.

    Returns the profile, the output folder, the layer URI and the ended process.
    """
    profile = make_profile(tmp_path / "profile")
    layer = write_meuse_geopackage(tmp_path / "meuse.gpkg")
    out = tmp_path / "out"
    out.mkdir()
    arguments = [QGIS_PROCESS, "--json", "run", "fieldcast:predict", "--", f"INPUT={layer}", "FIELD=zinc",
                 f"EXTENT={EXTENT}", "PIXEL_SIZE=2", f"OUTPUT={out / 'prediction.tif'}",
                 f"OUTPUT_VARIANCE={out / 'variance.tif'}"]
    child = subprocess.Popen(arguments, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                             env=dict(os.environ, QGIS_CUSTOM_CONFIG_PATH=str(profile), QT_QPA_PLATFORM="offscreen"))
    deadline = time.monotonic() + WAIT_SECONDS
    while not temporaries(out) and child.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    assert temporaries(out), f"the run ended before writing: {child.communicate()[1]}"
    child.send_signal(how)
    child.communicate(timeout=WAIT_SECONDS)
    return profile, out, layer, child


def test_sigterm_during_predict_leaves_no_part_file(tmp_path):
    _, out, _, child = interrupted_predict(tmp_path, signal.SIGTERM)
    assert child.returncode == -signal.SIGTERM  # still ended by the signal, as without the handler
    assert os.listdir(out) == []


def test_the_next_run_clears_what_a_killed_run_left_and_says_so(tmp_path):
    profile, out, layer, child = interrupted_predict(tmp_path, signal.SIGKILL)  # no handler can run
    assert child.returncode == -signal.SIGKILL
    left = temporaries(out)
    assert left
    run = run_algorithm(profile, "fieldcast:predict", {"INPUT": layer, "FIELD": "zinc", "EXTENT": EXTENT,
                                                        "PIXEL_SIZE": 400, "OUTPUT": out / "prediction.tif"})
    assert run.returncode == 0, run.messages
    assert os.listdir(out) == ["prediction.tif"]
    assert f"Cleared in {out} the files an interrupted earlier run left behind: " in run.messages
    assert all(f"{name} removed" in run.messages for name in left)
