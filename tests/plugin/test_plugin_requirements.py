"""Start-up without a required package: the plugin loads and says which package to install."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).with_name("blocked_package_start.py")


def start_without(package: str) -> dict:
    """What the plugin reports when started in a fresh process in which ``package`` cannot be imported."""
    result = subprocess.run([sys.executable, str(SCRIPT), package], capture_output=True, text=True, timeout=120,
                            check=True)
    return json.loads(result.stdout.strip().splitlines()[-1])


@pytest.mark.parametrize(("blocked", "words"), [
    ("scipy", ("scipy", "python3-scipy", "pip install scipy")),
    ("osgeo", ("GDAL", "python3-gdal", "pip install GDAL")),
    ("pyproj", ("pyproj", "python3-pyproj", "pip install pyproj")),
    ("numpy", ("numpy", "python3-numpy", "pip install numpy")),
])
def test_plugin_loads_and_names_the_package_to_install(blocked, words):
    started = start_without(blocked)
    assert started["plugin"] == "UnavailablePlugin" and started["algorithms"] == 0
    for place in (started["provider"], started["log"][0], started["message_bar"][0]):
        assert "restart QGIS" in place
        assert all(word in place for word in words), place


def test_plugin_with_every_package_starts_in_full():
    # Blocking a module the plugin never imports must change nothing: the check is not always on.
    started = start_without("module_fieldcast_never_imports")
    assert started == {"plugin": "FieldcastPlugin", "algorithms": 8,
                       "provider": started["provider"], "log": [], "message_bar": []}
    assert started["provider"].startswith("Fieldcast ")
