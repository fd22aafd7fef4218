"""Fixtures of the tests of algorithms/cluster."""
from __future__ import annotations

import pytest
from cluster_support import JobFiles, write_job_files


@pytest.fixture
def job_files(tmp_path) -> JobFiles:
    """The Meuse model file and sample GeoPackage of :func:`cluster_support.write_job_files`."""
    return write_job_files(tmp_path)
