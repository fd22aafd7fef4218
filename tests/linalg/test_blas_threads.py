"""The single-BLAS-thread switch used by small fits restores what it changed."""
from __future__ import annotations

import numpy as np
import pytest

from fieldcast.algorithms.linalg.blas_threads import _openblas_thread_controls, single_blas_thread


def test_one_thread_inside_and_the_previous_count_after():
    controls = _openblas_thread_controls()
    if controls is None:
        pytest.skip("numpy's BLAS here is not a loaded OpenBLAS; the switch does nothing")
    set_threads, get_threads = controls
    before = get_threads()
    with single_blas_thread():
        assert get_threads() == 1
        matrix = np.eye(50) * 2.0
        assert np.allclose(np.linalg.cholesky(matrix), np.eye(50) * np.sqrt(2.0))
    assert get_threads() == before
    with single_blas_thread(active=False):
        assert get_threads() == before


def test_the_count_is_restored_after_an_error():
    controls = _openblas_thread_controls()
    if controls is None:
        pytest.skip("numpy's BLAS here is not a loaded OpenBLAS; the switch does nothing")
    before = controls[1]()
    with pytest.raises(RuntimeError), single_blas_thread():
        raise RuntimeError("inside")
    assert controls[1]() == before
