"""What many tests share: the one Meuse log-zinc model and one Gaussian-field simulator.

The Meuse data themselves are loaded by the fixtures in ``conftest.py`` (published data; see data/README.md).
"""
from __future__ import annotations

import numpy as np

from fieldcast.algorithms import CovarianceModel, Structure

# Spherical log-zinc model of the Meuse data: nugget 0.05, partial sill 0.59, range 897 m, the magnitudes
# usually quoted for this data set's log-zinc variogram (from memory). Every test that needs "the usual Meuse
# model" uses this one.
MEUSE_LOG_ZINC = CovarianceModel((Structure("spherical", 0.59, 897.0),), nugget=0.05)


def gaussian_field(covariance: CovarianceModel, xy: np.ndarray, rng: np.random.Generator,
                   mean: float = 0.0) -> np.ndarray:
    """One draw of a Gaussian field with ``covariance`` (nugget included) at ``xy``: ``mean + L z`` with
    ``L`` the Cholesky factor of the sample covariance matrix and ``z`` standard normal (for simulation
    studies: invented data, drawn from a known model)."""
    return mean + np.linalg.cholesky(covariance.data_covariance(xy)) @ rng.standard_normal(len(xy))
