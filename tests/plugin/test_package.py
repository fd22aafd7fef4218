"""`make package` builds a zip that QGIS's "Install from ZIP" accepts.

"Install from ZIP" unpacks the archive into the profile's python/plugins folder,
so the zip must hold exactly one folder with the plugin's ``__init__.py`` and
``metadata.txt`` at its top. The test builds the zip from a copy of the
repository, unpacks it into a throwaway profile and lists the algorithms QGIS
finds through ``qgis_process.bin``.
"""
from __future__ import annotations

import shutil
import subprocess
import zipfile
from pathlib import Path

import pytest

from qgis_process_support import QGIS_PROCESS, make_profile, run_qgis_process
from repo_package import REPO_ROOT
from requirements_check import skip_unless_available

LEFT_OUT = {"tests", "tools", "demo", ".ci", "Makefile", "pyproject.toml", "DEVELOPERS.md", ".venv", ".git"}


@pytest.fixture(scope="module")
def built_zip(tmp_path_factory) -> Path:
    """``dist/fieldcast.zip`` built by ``make package`` in a copy of the repository."""
    copy = tmp_path_factory.mktemp("repo") / "fieldcast-src"
    shutil.copytree(REPO_ROOT, copy, ignore=shutil.ignore_patterns(
        ".venv", ".git", "__pycache__", "build", "dist", "demo-output", "test-artifacts", ".pytest_cache"))
    subprocess.run(["make", "--no-print-directory", "package"], cwd=copy, check=True, capture_output=True)
    return copy / "dist" / "fieldcast.zip"


def test_zip_holds_one_plugin_folder_without_development_files(built_zip):
    names = zipfile.ZipFile(built_zip).namelist()
    assert {name.split("/")[0] for name in names} == {"fieldcast"}
    top_level = {name.split("/")[1] for name in names if name.count("/") >= 1 and name.split("/")[1]}
    # README.md is also the help page each algorithm's help button opens (helpUrl).
    assert {"__init__.py", "metadata.txt", "LICENSE", "README.md", "plugin", "algorithms", "icons"} <= top_level
    assert not top_level & LEFT_OUT
    assert not any("__pycache__" in name or name.endswith(".pyc") for name in names)
    vendored = {"plotly-basic.min.js", "LICENSE-plotly.js", "README.md"}  # the reports' plotly.js and its licence
    assert {f"fieldcast/plugin/report/vendor/{name}" for name in vendored} <= set(names)


@skip_unless_available(QGIS_PROCESS is not None, "qgis_process.bin is not installed")
def test_unpacked_zip_loads_as_a_plugin(built_zip, tmp_path):
    plugins = tmp_path / "unpacked"
    zipfile.ZipFile(built_zip).extractall(plugins)
    profile = make_profile(tmp_path / "profile", plugin_folder=plugins / "fieldcast")
    listing = run_qgis_process(profile, "list")
    assert listing.returncode == 0, listing.messages
    providers = listing.document["providers"]
    assert set(providers["fieldcast"]["algorithms"]) >= {
        "fieldcast:fitmodel", "fieldcast:predict", "fieldcast:crossvalidate", "fieldcast:simulate"}
