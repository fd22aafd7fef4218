"""Runs that are interrupted: files left by an earlier run that was killed, and a run that is being terminated.

:func:`remove_stale_files` clears a folder of the temporary and backup files (names of
:mod:`.staging`) that a killed run left behind. A file is stale when it was last changed before the
clearing run began and the process named in it is gone; where that cannot be asked (Windows, or a name
without a process id, as earlier Fieldcast versions wrote) when it is older than :data:`STALE_AGE_SECONDS`.
A stale backup is put back over its destination (the run that kept it never finished); a stale temporary
is deleted. Files of live runs are never touched.

:func:`termination_cleanup` installs, for the length of a run, a SIGTERM handler that undoes the run's
files (every open :class:`.staging.OutputSet` and every temporary name of this process) and then hands the
signal on to the handler that was there before: the default one ends the process by the signal, as it
would have; after a Python handler that returns, the run stops with :class:`Cancelled`. It installs
nothing where that is not safe: outside the main thread (QGIS runs algorithms in task threads), where the
platform has no SIGTERM, or where the present handler was not installed from Python (QGIS's own handlers
are then left alone) or ignores the signal. Python runs the handler between bytecodes, so a signal that
arrives during a long library call (a factorisation, a GDAL write) takes effect when the call returns.

A stale backup is restored because the run that kept it did not finish; a run killed outright while it
removed the backups of a finished commit (a short window) would thus get some earlier files back. A
process id reused by a live unrelated process keeps that run's files until the process ends.
"""
from __future__ import annotations

import contextlib
import os
import re
import signal
import threading
import time
from collections.abc import Iterator

from ..errors import Cancelled
from . import staging

STALE_AGE_SECONDS = 24 * 3600
"""Age after which a staging file whose process cannot be checked is taken as abandoned (one day)."""

STAGING_NAME = re.compile(r"\.(?P<name>.+)\.fieldcast-(?:(?P<pid>\d+)-)?[0-9a-f]{12}\.(?P<kind>part|keep)"
                          r"(?P<side>\.aux\.xml)?")
"""Our temporary (``part``) and backup (``keep``) names, with an optional GDAL side-file suffix."""


def process_alive(pid: int) -> bool | None:
    """Whether process ``pid`` exists; None where that cannot be asked safely (Windows)."""
    if os.name == "nt":
        return None  # os.kill there terminates the process instead of probing it
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True  # exists, owned by someone else
    return True


def is_stale(path: str, pid: str | None, before: float) -> bool:
    """Whether the staging file ``path`` (of process ``pid``, None if its name has none) is abandoned: last
    changed before the time ``before`` and its process gone, or (where that cannot be told) a day old."""
    changed = os.path.getmtime(path)
    if changed >= before:
        return False
    alive = None if pid is None else process_alive(int(pid))
    if alive is not None:
        return not alive
    return before - changed > STALE_AGE_SECONDS


def remove_stale_files(folder: str, before: float | None = None) -> list[str]:
    """Delete the stale temporaries and restore the stale backups in ``folder``; returns what was done, one
    line per file (empty when there was nothing to clear or the folder does not exist).

    Parameters
    ----------
    folder : str
        The folder to clear.
    before : float, optional
        Start of the calling run (seconds since the epoch; default now): files changed since are kept.
    """
    if not os.path.isdir(folder):
        return []
    before = time.time() if before is None else before
    done = []
    for entry in sorted(os.listdir(folder)):
        match = STAGING_NAME.fullmatch(entry)
        path = os.path.join(folder, entry)
        if match is None or not os.path.isfile(path) or not is_stale(path, match["pid"], before):
            continue
        destination = os.path.join(folder, match["name"] + (match["side"] or ""))
        try:
            if match["kind"] == "keep":
                os.replace(path, destination)
                done.append(f"{entry} restored as {destination}")
            else:
                os.remove(path)
                done.append(f"{entry} removed")
        except OSError as exc:
            done.append(f"{entry} could not be cleared ({exc})")
    return done


def undo_runs() -> None:
    """Undo every open output set of this process and delete every temporary name it made."""
    for outputs in list(staging.LIVE_SETS):
        with contextlib.suppress(OSError):
            outputs.discard_all()
    for folder in list(staging.WRITTEN_FOLDERS):
        with contextlib.suppress(OSError):
            for entry in os.listdir(folder):
                match = STAGING_NAME.fullmatch(entry)
                if match is not None and match["kind"] == "part" and match["pid"] == str(os.getpid()):
                    with contextlib.suppress(OSError):
                        os.remove(os.path.join(folder, entry))


def _installable():
    """The present SIGTERM handler when a handler of ours can be chained to it safely, else None."""
    if not hasattr(signal, "SIGTERM") or threading.current_thread() is not threading.main_thread():
        return None
    previous = signal.getsignal(signal.SIGTERM)
    return previous if previous is signal.SIG_DFL or callable(previous) else None


@contextlib.contextmanager
def termination_cleanup() -> Iterator[bool]:
    """For the block: on SIGTERM, undo the run's files, then pass the signal to the previous handler.

    Yields whether a handler was installed; the previous handler is back in place after the block.
    """
    previous = _installable()
    if previous is None:
        yield False
        return

    def on_terminate(signum, frame):
        undo_runs()
        if callable(previous):
            previous(signum, frame)
            # the process lives on: the run, whose files are gone, stops here
            raise Cancelled("Terminated (SIGTERM); no output was written.")
        signal.signal(signum, signal.SIG_DFL)
        os.kill(os.getpid(), signum)

    signal.signal(signal.SIGTERM, on_terminate)
    try:
        yield True
    finally:
        signal.signal(signal.SIGTERM, previous)
