"""What tests and tools share: the Meuse data, the one Meuse log-zinc model and one Gaussian-field simulator.

The Meuse data are the published data set (see data/README.md); ``conftest.py`` hands them to tests as the
``meuse`` and ``meuse_grid`` fixtures, and the benchmark scripts in ``tools/`` read them from here too.
Arrays are read-only, so a test fails loudly if engine code modifies its inputs.
"""
from __future__ import annotations

import csv
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np
from scipy import linalg, stats

from fieldcast.algorithms import CovarianceModel, Structure, covariance_factor

DATA_DIR = Path(__file__).resolve().parent / "data"

# Spherical log-zinc model of the Meuse data: nugget 0.05, partial sill 0.59, range 897 m, the magnitudes
# usually quoted for this data set's log-zinc variogram (from memory). Every test and benchmark that needs
# "the usual Meuse model" uses this one.
MEUSE_LOG_ZINC = CovarianceModel((Structure("spherical", 0.59, 897.0),), nugget=0.05)


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
    ffreq: np.ndarray
    crs: str = "EPSG:28992"


@dataclass(frozen=True)
class MeuseGrid:
    """Centres of the 3103 cells of the 40 m Meuse prediction grid (EPSG:28992 metres)."""

    xy: np.ndarray
    dist: np.ndarray
    ffreq: np.ndarray
    crs: str = "EPSG:28992"


GRID_CELL = 40.0
"""Cell size of the published Meuse grid (metres)."""


def write_meuse_covariates(folder: Path) -> tuple[Path, Path]:
    """GeoTIFFs of the published Meuse grid's distance to the river (``dist.tif``, Float32, nodata -9999) and
    flood-frequency class (``ffreq.tif``, Byte, nodata 0) in EPSG:28992: the 40 m cells of
    tests/data/meuse_grid.csv, nodata where the published grid has no cell."""
    from osgeo import gdal, osr

    grid = load_meuse_grid()
    x, y = grid.xy[:, 0], grid.xy[:, 1]
    x_min, y_max = x.min() - GRID_CELL / 2, y.max() + GRID_CELL / 2
    n_cols = int(round((x.max() - x.min()) / GRID_CELL)) + 1
    n_rows = int(round((y.max() - y.min()) / GRID_CELL)) + 1
    rows = np.round((y_max - y) / GRID_CELL - 0.5).astype(int)
    cols = np.round((x - x_min) / GRID_CELL - 0.5).astype(int)
    reference = osr.SpatialReference()
    reference.ImportFromEPSG(28992)
    paths = []
    for name, values, data_type, nodata in (("dist", grid.dist, gdal.GDT_Float32, -9999.0),
                                            ("ffreq", grid.ffreq, gdal.GDT_Byte, 0.0)):
        cells = np.full((n_rows, n_cols), nodata)
        cells[rows, cols] = values
        path = Path(folder) / f"{name}.tif"
        dataset = gdal.GetDriverByName("GTiff").Create(str(path), n_cols, n_rows, 1, data_type)
        dataset.SetGeoTransform((x_min, GRID_CELL, 0.0, y_max, 0.0, -GRID_CELL))
        dataset.SetProjection(reference.ExportToWkt())
        band = dataset.GetRasterBand(1)
        band.SetNoDataValue(nodata)
        band.WriteArray(cells)
        dataset = None
        paths.append(path)
    return paths[0], paths[1]


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


@lru_cache(maxsize=1)
def load_meuse() -> MeuseSamples:
    """The Meuse samples from tests/data/meuse.csv (read once)."""
    columns = read_columns(DATA_DIR / "meuse.csv")
    ids = np.array([int(text) for text in columns["id"]])
    ids.setflags(write=False)
    return MeuseSamples(
        ids=ids,
        xy=stacked_xy(columns),
        **{name: float_column(columns, name)
           for name in ("zinc", "copper", "lead", "cadmium", "elev", "dist", "ffreq")},
    )


@lru_cache(maxsize=1)
def load_meuse_grid() -> MeuseGrid:
    """The Meuse prediction grid from tests/data/meuse_grid.csv (read once)."""
    columns = read_columns(DATA_DIR / "meuse_grid.csv")
    return MeuseGrid(xy=stacked_xy(columns), dist=float_column(columns, "dist"), ffreq=float_column(columns, "ffreq"))


def gaussian_field(covariance: CovarianceModel, xy: np.ndarray, rng: np.random.Generator,
                   mean: float = 0.0) -> np.ndarray:
    """One draw of a Gaussian field with ``covariance`` (nugget included) at ``xy``.

    ``mean + L z`` with ``L`` the engine's factor of the sample covariance matrix
    (``covariance_factor``: Cholesky, or a clipped eigendecomposition when rounding makes it singular) and
    ``z`` standard normal: for simulation studies and the demo, invented data drawn from a known model.
    """
    return mean + covariance_factor(covariance.data_covariance(xy)) @ rng.standard_normal(len(xy))


def calibrated_msdr_range(n: int, probability: float = 0.999) -> tuple[float, float]:
    """Central ``probability`` interval of the mean squared standardized error of ``n`` errors under a right model.

    With independent standard normal standardized errors ``n * MSDR`` is chi-square with ``n`` degrees of freedom
    (scipy.stats.chi2); leave-one-out errors are only weakly dependent, so this is an approximation.
    """
    low, high = stats.chi2.ppf([(1.0 - probability) / 2.0, (1.0 + probability) / 2.0], n)
    return float(low) / n, float(high) / n


def calibrated_coverage_range(n: int, probability: float = 0.999) -> tuple[float, float]:
    """Central ``probability`` interval of the share of ``n`` errors inside their 95 % intervals under a right
    model: binomial(n, 0.95) quantiles over n (scipy.stats.binom; independence assumed as above)."""
    low, high = stats.binom.ppf([(1.0 - probability) / 2.0, (1.0 + probability) / 2.0], n, 0.95)
    return float(low) / n, float(high) / n


def ordinary_joint_law(xy: np.ndarray, y: np.ndarray, covariance: CovarianceModel, points: np.ndarray,
                       error_variance: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean, covariance and weights of the latent field at ``points`` given the data, by ordinary kriging.

    Solved from the ordinary-kriging system with its Lagrange multiplier (Cressie 1993, *Statistics for
    Spatial Data*, rev. ed., section 3.2), independently of the engine's GLS route; ``error_variance`` (n,), when
    given, is added to the samples' diagonal beside the nugget.
    """
    n = len(xy)
    system = np.zeros((n + 1, n + 1))
    system[:n, :n] = covariance.data_covariance(xy) + np.diag(np.zeros(n) if error_variance is None else error_variance)
    system[:n, n] = system[n, :n] = 1.0
    right = np.vstack([covariance.cross_covariance(xy, points), np.ones((1, len(points)))])
    solved = linalg.solve(system, right, assume_a="sym")
    weights, multipliers = solved[:n], solved[n]
    joint = covariance.cross_covariance(points, points) - weights.T @ right[:n] - multipliers[:, None]
    return weights.T @ y, (joint + joint.T) / 2.0, weights
