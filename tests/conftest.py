"""Shared pytest fixtures: the published Meuse data set (see tests/data/README.md), read by reference.py.

Arrays handed out by the fixtures are read-only, so a test fails loudly if engine
code modifies its inputs.
"""
from __future__ import annotations

import os
import sys
from pathlib import Path

import pytest

from repo_package import load_repo_package

load_repo_package()  # tests import fieldcast.algorithms... and fieldcast.plugin...
from reference import MeuseGrid, MeuseSamples, load_meuse, load_meuse_grid  # noqa: E402  (needs the package)

# In a venv sys.prefix is the venv, so pyproj cannot find the system PROJ database by
# itself and warns on import; point it at the base interpreter's copy.
_base_proj_dir = Path(sys.base_prefix, "share", "proj")
if "PROJ_DATA" not in os.environ and "PROJ_LIB" not in os.environ and (_base_proj_dir / "proj.db").exists():
    os.environ["PROJ_DATA"] = str(_base_proj_dir)


@pytest.fixture(scope="session")
def meuse() -> MeuseSamples:
    """The Meuse samples from tests/data/meuse.csv."""
    return load_meuse()


@pytest.fixture(scope="session")
def meuse_grid() -> MeuseGrid:
    """The Meuse prediction grid from tests/data/meuse_grid.csv."""
    return load_meuse_grid()
