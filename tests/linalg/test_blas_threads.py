"""The single-BLAS-thread switch used by small fits restores what it changed, also when fits overlap on threads."""
from __future__ import annotations

import sys
import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
import threadpoolctl

from fieldcast.algorithms.fit.fitting import fit_model
from fieldcast.algorithms.linalg.blas_threads import _openblas_thread_controls, single_blas_thread
from fieldcast.algorithms.model.covariance import CovarianceModel, Structure
from reference import gaussian_field
from requirements_check import skip_unless_available

pytestmark = skip_unless_available(bool(_openblas_thread_controls()),
                                   "numpy's BLAS here is not a loaded OpenBLAS (make deps installs "
                                   "libopenblas0-pthread)")

START_COUNT = 2
"""Thread count set before each test, so that a switch stuck at one thread shows (the test machine has 2 cores)."""

WAIT = 30.0
"""Seconds a thread waits for the other before the test fails instead of hanging."""


def counts() -> list[int]:
    """Thread count of every loaded OpenBLAS, read through the ctypes functions the module's fallback uses."""
    return [int(get_threads()) for _, get_threads in _openblas_thread_controls()]


def threadpoolctl_counts() -> list[int]:
    """Thread count of every BLAS threadpoolctl finds (a cross-check independent of the module)."""
    return [info["num_threads"] for info in threadpoolctl.threadpool_info() if info["user_api"] == "blas"]


@pytest.fixture(params=["threadpoolctl", "ctypes"])
def backend(request, monkeypatch):
    """Run the test with threadpoolctl finding the libraries, then without it (importing it fails, as in a QGIS
    without scikit-learn)."""
    if request.param == "ctypes":
        monkeypatch.setitem(sys.modules, "threadpoolctl", None)
    controls = _openblas_thread_controls()
    before = counts()
    for set_threads, _ in controls:
        set_threads(START_COUNT)
    assert counts() == [START_COUNT] * len(controls)
    yield request.param
    for (set_threads, _), count in zip(controls, before):
        set_threads(count)


def assert_counts(expected: int) -> None:
    assert counts() == [expected] * len(counts())
    assert threadpoolctl_counts() == [expected] * len(threadpoolctl_counts())


def test_one_thread_inside_and_the_previous_count_after(backend):
    with single_blas_thread():
        assert_counts(1)
        matrix = np.eye(50) * 2.0
        assert np.allclose(np.linalg.cholesky(matrix), np.eye(50) * np.sqrt(2.0))
    assert_counts(START_COUNT)
    with single_blas_thread(active=False):
        assert_counts(START_COUNT)


def test_nested_blocks_restore_when_the_outer_one_closes(backend):
    with single_blas_thread():
        with single_blas_thread():
            assert_counts(1)
        assert_counts(1)
    assert_counts(START_COUNT)


def test_the_count_is_restored_after_an_error(backend):
    with pytest.raises(RuntimeError), single_blas_thread():
        raise RuntimeError("inside")
    assert_counts(START_COUNT)
    with single_blas_thread():
        assert_counts(1)
    assert_counts(START_COUNT)


def test_blocks_overlapping_on_two_threads_restore_the_count(backend):
    # The order that left an unlocked save-and-restore stuck at one thread: A opens, B opens, A closes, B closes.
    a_open, b_open, a_closed = threading.Event(), threading.Event(), threading.Event()

    def first() -> None:
        with single_blas_thread():
            a_open.set()
            assert b_open.wait(WAIT)
        a_closed.set()

    def second() -> list[int]:
        assert a_open.wait(WAIT)
        with single_blas_thread():
            b_open.set()
            assert a_closed.wait(WAIT)
            return counts()  # A has closed; B is still open, so one thread

    with ThreadPoolExecutor(2) as pool:
        a, b = pool.submit(first), pool.submit(second)
        a.result()
        inside_b_after_a = b.result()
    assert inside_b_after_a == [1] * len(inside_b_after_a)
    assert_counts(START_COUNT)


def test_two_fits_on_two_threads_restore_the_count(backend):
    # Invented simulation-study data: 60 uniform points on a 1 km square, a stationary field with exponential
    # covariance (sill 1, range 200 m) plus nugget 0.1, one seed per thread.
    start = threading.Barrier(2, timeout=WAIT)

    def fit(seed: int):
        rng = np.random.default_rng(seed)
        xy = rng.uniform(0.0, 1000.0, (60, 2))
        values = gaussian_field(CovarianceModel((Structure("exponential", 1.0, 200.0),), 0.1), xy, rng, mean=5.0)
        start.wait()
        return fit_model(xy, values, kernel="exponential", anisotropy=False)

    with ThreadPoolExecutor(2) as pool:
        results = list(pool.map(fit, (1, 2)))
    assert all(np.isfinite(result.log_likelihood) for result in results)
    assert_counts(START_COUNT)
