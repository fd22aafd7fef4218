"""Run the many small dense solves of a small fit on one BLAS thread.

A likelihood fit of a few hundred samples factorises hundreds of matrices of
that size. With several threads OpenBLAS synchronises them on every call,
which costs more than the work it shares and makes run times erratic (on this
project's 2-core benchmark machine a fit of the 155 Meuse samples took 0.5 s
on one thread and 1 to 2.7 s on two). :func:`single_blas_thread` switches the
already loaded OpenBLAS to one thread for the duration of a ``with`` block and
restores the previous count; where no OpenBLAS is loaded it does nothing.
"""
from __future__ import annotations

import contextlib
import ctypes
import os
from collections.abc import Iterator

_LIBRARIES = (None, "libblas.so.3", "libopenblas.so.0")
"""Where numpy's OpenBLAS is found: the process's global symbols, then the sonames Linux distributions use."""


def _openblas_thread_controls() -> tuple | None:
    """``(set_num_threads, get_num_threads)`` of a loaded OpenBLAS, or None."""
    mode = getattr(os, "RTLD_NOLOAD", 0)  # never load a library that is not loaded yet
    for name in _LIBRARIES:
        try:
            library = ctypes.CDLL(name, mode=mode)
            return library.openblas_set_num_threads, library.openblas_get_num_threads
        except (OSError, AttributeError):
            continue
    return None


@contextlib.contextmanager
def single_blas_thread(active: bool = True) -> Iterator[None]:
    """Within the block, OpenBLAS uses one thread (if ``active`` and OpenBLAS is loaded)."""
    controls = _openblas_thread_controls() if active else None
    if controls is None:
        yield
        return
    set_threads, get_threads = controls
    before = int(get_threads())
    set_threads(1)
    try:
        yield
    finally:
        set_threads(before)
