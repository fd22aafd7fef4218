"""Run the many small dense solves of a small fit on one BLAS thread.

A likelihood fit of a few hundred samples factorises hundreds of matrices of
that size. With several threads OpenBLAS synchronises them on every call,
which costs more than the work it shares and makes run times erratic (on this
project's 2-core benchmark machine a fit of the 155 Meuse samples took 0.5 s
on one thread and 1 to 2.7 s on two). :func:`single_blas_thread` switches the
already loaded OpenBLAS libraries to one thread for the duration of a ``with``
block and restores the previous count.

The thread count is process-wide, and QGIS runs Processing algorithms as
tasks on several threads at once, so the blocks share one switch: a module
lock guards a count of the blocks currently open. The first block to open
saves the counts and sets one thread; blocks opened while it is open only
add to the count; the last block to close restores the saved counts. Blocks
may overlap in any order and nest.

The switch calls OpenBLAS's own ``openblas_set_num_threads`` through ctypes,
in every loaded OpenBLAS, under the names the builds use (numpy 2 wheels:
``scipy_openblas_set_num_threads64_``). Where threadpoolctl is importable (it
is not a dependency of the plugin) its ``threadpool_info`` names the loaded
OpenBLAS files; its ``threadpool_limits`` is not used because from version 3.8
it ignores a call from a thread other than the one that last limited OpenBLAS,
and here the last block to close may be on another thread than the first.
Without threadpoolctl the libraries are looked up in the process's global
symbols, under the sonames Linux distributions use, and in the library
directories of the numpy and scipy wheels. Other BLAS libraries (MKL, BLIS)
are left alone; where no OpenBLAS is found the switch does nothing.
"""
from __future__ import annotations

import contextlib
import ctypes
import os
import sys
import threading
from collections.abc import Callable, Iterator
from pathlib import Path

_LIBRARIES = (None, "libblas.so.3", "libopenblas.so.0")
"""Libraries searched first: the process's global symbols, then the sonames Linux distributions use."""

_WHEEL_LIBRARY_DIRECTORIES = ("{package}.libs", "{package}/.libs", "{package}/.dylibs")
"""Where numpy and scipy wheels bundle their OpenBLAS, relative to site-packages (Linux/Windows, older, macOS)."""

_SYMBOL_NAMES = tuple((f"{prefix}openblas_set_num_threads{suffix}", f"{prefix}openblas_get_num_threads{suffix}")
                      for prefix in ("", "scipy_") for suffix in ("", "64_"))
"""``(set, get)`` names: plain OpenBLAS, the 64-bit-integer builds, and the scipy-openblas builds of the wheels."""

_LOCK = threading.Lock()
_open_blocks = 0
_restore: Callable[[], None] | None = None


def _wheel_libraries() -> list[str]:
    """Paths of the OpenBLAS libraries bundled with the numpy and scipy packages already imported."""
    paths = []
    for package in ("numpy", "scipy"):
        module = sys.modules.get(package)
        if module is None or getattr(module, "__file__", None) is None:
            continue
        site_packages = Path(module.__file__).resolve().parent.parent
        for directory in _WHEEL_LIBRARY_DIRECTORIES:
            paths.extend(str(path) for path in sorted((site_packages / directory.format(package=package))
                                                      .glob("*openblas*")))
    return paths


def _loaded_openblas_candidates() -> list[str | None]:
    """Names or paths under which a loaded OpenBLAS may be opened (None: the process's global symbols)."""
    try:
        from threadpoolctl import threadpool_info
    except ImportError:
        return [*_LIBRARIES, *_wheel_libraries()]
    return [info["filepath"] for info in threadpool_info() if info["internal_api"] == "openblas"]


def _openblas_thread_controls() -> list[tuple[Callable[..., int], Callable[[], int]]]:
    """``(set_num_threads, get_num_threads)`` of each distinct loaded OpenBLAS; empty when none is found."""
    mode = getattr(os, "RTLD_NOLOAD", 0)  # never load a library that is not loaded yet
    controls, seen = [], set()
    for name in _loaded_openblas_candidates():
        try:
            library = ctypes.CDLL(name, mode=mode)
        except OSError:
            continue
        for set_name, get_name in _SYMBOL_NAMES:
            try:
                set_threads, get_threads = getattr(library, set_name), getattr(library, get_name)
            except AttributeError:
                continue
            address = ctypes.cast(set_threads, ctypes.c_void_p).value
            if address not in seen:
                seen.add(address)
                controls.append((set_threads, get_threads))
    return controls


def _limit_to_one_thread() -> Callable[[], None]:
    """Set the loaded OpenBLAS libraries to one thread; return the function that restores the previous counts."""
    controls = _openblas_thread_controls()
    before = [int(get_threads()) for _, get_threads in controls]
    for set_threads, _ in controls:
        set_threads(1)

    def restore() -> None:
        for (set_threads, _), count in zip(controls, before):
            set_threads(count)

    return restore


@contextlib.contextmanager
def single_blas_thread(active: bool = True) -> Iterator[None]:
    """Within the block, OpenBLAS uses one thread (if ``active`` and an OpenBLAS is loaded).

    Parameters
    ----------
    active : bool
        False makes the block do nothing (callers pass whether their problem is small).

    Notes
    -----
    Safe to enter from several threads at once and to nest: the counts saved by
    the first open block are restored when the last open block closes, also
    when the block raises.
    """
    global _open_blocks, _restore
    if not active:
        yield
        return
    with _LOCK:
        if _open_blocks == 0:
            _restore = _limit_to_one_thread()
        _open_blocks += 1
    try:
        yield
    finally:
        with _LOCK:
            _open_blocks -= 1
            if _open_blocks == 0:
                _restore()
                _restore = None
