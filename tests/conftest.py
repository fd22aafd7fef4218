"""Shared pytest fixtures: the published Meuse data set (see tests/data/README.md).

Arrays handed out by the fixtures are read-only, so a test fails loudly if engine
code modifies its inputs.
"""
from __future__ import annotations

import csv
import os
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from repo_package import load_repo_package

REPO_ROOT = Path(__file__).resolve().parent.parent
DATA_DIR = Path(__file__).resolve().parent / "data"

load_repo_package()  # tests import fieldcast.algorithms... and fieldcast.plugin...

# In a venv sys.prefix is the venv, so pyproj cannot find the system PROJ database by
# itself and warns on import; point it at the base interpreter's copy.
_base_proj_dir = Path(sys.base_prefix, "share", "proj")
if "PROJ_DATA" not in os.environ and "PROJ_LIB" not in os.environ and (_base_proj_dir / "proj.db").exists():
    os.environ["PROJ_DATA"] = str(_base_proj_dir)


@dataclass(frozen=True)
class MeuseSamples:
    """The 155 Meuse topsoil samples; coordinates in EPSG:28992 metres, metals in ppm."""

    ids: np.ndarray
    xy: np.ndarray
    zinc: np.ndarray
    copper: np.ndarray
    lead: np.ndarray
    cadmium: np.ndarray
    elev: np.ndarray
    dist: np.ndarray
    crs: str = "EPSG:28992"


@dataclass(frozen=True)
class MeuseGrid:
    """Centres of the 3103 cells of the 40 m Meuse prediction grid (EPSG:28992 metres)."""

    xy: np.ndarray
    dist: np.ndarray
    crs: str = "EPSG:28992"


def read_columns(path: Path) -> dict[str, list[str]]:
    """Read a CSV file with a header into ``{column name: list of text fields}``."""
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    return {name: [row[name] for row in rows] for name in rows[0]}


def float_column(columns: dict[str, list[str]], name: str) -> np.ndarray:
    """Read-only float array of one column; empty fields become NaN."""
    values = np.array([float(text) if text else np.nan for text in columns[name]])
    values.setflags(write=False)
    return values


def stacked_xy(columns: dict[str, list[str]]) -> np.ndarray:
    """Read-only (n, 2) array of the x and y columns."""
    xy = np.column_stack([float_column(columns, "x"), float_column(columns, "y")])
    xy.setflags(write=False)
    return xy


@pytest.fixture(scope="session")
def meuse() -> MeuseSamples:
    """The Meuse samples from tests/data/meuse.csv."""
    columns = read_columns(DATA_DIR / "meuse.csv")
    ids = np.array([int(text) for text in columns["id"]])
    ids.setflags(write=False)
    return MeuseSamples(
        ids=ids,
        xy=stacked_xy(columns),
        **{name: float_column(columns, name)
           for name in ("zinc", "copper", "lead", "cadmium", "elev", "dist")},
    )


@pytest.fixture(scope="session")
def meuse_grid() -> MeuseGrid:
    """The Meuse prediction grid from tests/data/meuse_grid.csv."""
    columns = read_columns(DATA_DIR / "meuse_grid.csv")
    return MeuseGrid(xy=stacked_xy(columns), dist=float_column(columns, "dist"))
