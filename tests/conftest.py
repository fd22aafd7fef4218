"""Shared pytest fixtures: the published Meuse data set (see tests/data/README.md), read by reference.py.

Arrays handed out by the fixtures are read-only, so a test fails loudly if engine
code modifies its inputs.
"""
from __future__ import annotations

import pytest

from repo_package import load_repo_package

load_repo_package()  # tests import fieldcast.algorithms... and fieldcast.plugin...
from reference import MeuseGrid, MeuseSamples, load_meuse, load_meuse_grid  # noqa: E402  (needs the package)


@pytest.fixture(scope="session")
def meuse() -> MeuseSamples:
    """The Meuse samples from tests/data/meuse.csv."""
    return load_meuse()


@pytest.fixture(scope="session")
def meuse_grid() -> MeuseGrid:
    """The Meuse prediction grid from tests/data/meuse_grid.csv."""
    return load_meuse_grid()
