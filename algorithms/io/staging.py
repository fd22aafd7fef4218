"""Staged outputs: a run's files appear together when the run is complete, or not at all.

Each writer writes under a temporary name next to its destination
(:func:`temporary_path`) and hands the finished file to :func:`place`. Outside an
:class:`OutputSet` the file is moved into place at once; inside one (``with
OutputSet() as outputs:``) it is registered, and :meth:`OutputSet.commit_all`
moves every registered file into place at the end of the run. Leaving the block
without a commit (an exception, a cancel) removes every temporary file, so no
output of the run is left and earlier files of the same names stay as they were.

An earlier file that a move replaces is kept under a backup name (:func:`backup_path`) until every file of
the set is in place, and put back if a later move fails. Files that another library writes in place (a
feature sink) are registered with :meth:`OutputSet.protect` before they are opened: a copy of the earlier
file is kept and restored when the run fails, and a file the run created is removed.

Names (``<pid>`` is the writing process, so that a later run can tell an abandoned file from a live one):
temporaries ``.<name>.fieldcast-<pid>-<12 hex>.part``, backups ``.<name>.fieldcast-<pid>-<12 hex>.keep``,
GDAL side files with their suffix appended (``….part.aux.xml``).
"""
from __future__ import annotations

import contextlib
import contextvars
import os
import shutil
import stat
import uuid
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

from ..errors import FieldcastError

_CURRENT: contextvars.ContextVar[OutputSet | None] = contextvars.ContextVar("fieldcast_output_set", default=None)
LIVE_SETS: list[OutputSet] = []
"""Every :class:`OutputSet` open in this process, for the termination handler (``interruption.py``)."""
WRITTEN_FOLDERS: set[str] = set()
"""Every folder this process has made a temporary or backup name in."""


def _staging_name(path: str | os.PathLike, kind: str) -> str:
    folder, name = os.path.split(os.path.abspath(os.fspath(path)))
    WRITTEN_FOLDERS.add(folder)
    return os.path.join(folder, f".{name}.fieldcast-{os.getpid()}-{uuid.uuid4().hex[:12]}.{kind}")


def temporary_path(path: str | os.PathLike) -> str:
    """A fresh temporary name beside ``path``: ``.<name>.fieldcast-<pid>-<12 hex>.part`` in the same folder."""
    return _staging_name(path, "part")


def backup_path(path: str | os.PathLike) -> str:
    """A fresh backup name beside ``path``: ``.<name>.fieldcast-<pid>-<12 hex>.keep`` in the same folder."""
    return _staging_name(path, "keep")


def refuse_read_only(path: str, parameter: str = "") -> None:
    """Raise :class:`FieldcastError` if ``path`` exists and is read-only (no write permission bit, or no access).

    A read-only file is one its owner asked to keep: it is never replaced by a writable one. ``parameter``
    (the output's parameter name, if any) is named in the message.
    """
    if not path or not os.path.isfile(path):
        return
    if stat.S_IMODE(os.stat(path).st_mode) & 0o222 == 0 or not os.access(path, os.W_OK):
        named = f" ({parameter})" if parameter else ""
        raise FieldcastError(f"The output file {path}{named} exists and is read-only, so it is not replaced. "
                             "Make the file writable if it may be replaced, or choose another file name.")


def _remove(path: str) -> None:
    with contextlib.suppress(FileNotFoundError):
        os.remove(path)


@dataclass(frozen=True)
class Replaced:
    """A destination and the backup of the file it held before the run (``backup`` None: there was none)."""

    final: str
    backup: str | None
    suffixes: tuple[str, ...] = ("",)

    @classmethod
    def keep(cls, final: str, suffixes: Sequence[str] = ("",), copy: bool = False) -> Replaced:
        """Keep the present ``final`` (and its side files) under a backup name: a hard link (a copy when
        ``copy`` or when the file system has no links), so ``final`` itself stays in place."""
        if not os.path.isfile(final):
            return cls(final, None, tuple(suffixes))
        backup = backup_path(final)
        try:
            for suffix in suffixes:
                if os.path.exists(final + suffix):
                    if copy:
                        shutil.copy2(final + suffix, backup + suffix)
                    else:
                        try:
                            os.link(final + suffix, backup + suffix)
                        except OSError:
                            shutil.copy2(final + suffix, backup + suffix)
        except OSError as exc:
            for suffix in suffixes:
                _remove(backup + suffix)
            raise FieldcastError(f"Could not keep a copy of {final} before replacing it: {exc}. Free some disk "
                                 "space or choose another output name.") from exc
        return cls(final, backup, tuple(suffixes))

    def restore(self) -> None:
        """Put the earlier file back (or remove the run's file when there was none)."""
        for suffix in self.suffixes:
            if self.backup is not None and os.path.exists(self.backup + suffix):
                os.replace(self.backup + suffix, self.final + suffix)
            elif os.path.isfile(self.final + suffix):
                _remove(self.final + suffix)

    def drop(self) -> None:
        """Forget the earlier file: delete the backup."""
        if self.backup is not None:
            for suffix in self.suffixes:
                _remove(self.backup + suffix)


@dataclass(frozen=True)
class StagedFile:
    """A finished temporary file and where it goes.

    Attributes
    ----------
    temporary : str
        The finished file under its temporary name.
    final : str
        Its destination.
    side_suffixes : tuple of str
        Side files (e.g. ``".aux.xml"``) that follow the file: moved with it when the temporary one
        exists, otherwise a stale one at the destination is removed.
    """

    temporary: str
    final: str
    side_suffixes: tuple[str, ...] = ()

    def move_into_place(self) -> Replaced:
        """Replace :attr:`final` (and its side files) by the temporary file; the earlier files are kept as a
        backup, returned (call its ``drop`` once every file of the run is in place, ``restore`` to undo).

        Raises
        ------
        FieldcastError
            If the destination is read-only or the system refuses the move (nothing is then changed).
        """
        refuse_read_only(self.final)
        replaced = Replaced.keep(self.final, ("", *self.side_suffixes))
        try:
            for suffix in self.side_suffixes:
                if os.path.exists(self.temporary + suffix):
                    os.replace(self.temporary + suffix, self.final + suffix)
                else:
                    _remove(self.final + suffix)
            os.replace(self.temporary, self.final)
        except OSError as exc:
            replaced.restore()
            raise FieldcastError(f"Could not save {self.final}: {exc}. Close the file if another program has "
                                 "it open, or choose another output name.") from exc
        return replaced

    def remove(self, which: str) -> None:
        """Delete the file at ``which`` (its temporary or final name) and its side files, if present."""
        for leftover in (which, *(which + suffix for suffix in self.side_suffixes)):
            _remove(leftover)


class OutputSet:
    """The files of one run, moved into place together by :meth:`commit_all`.

    Use it as a context manager; inside the block, :func:`place` registers files with
    this set instead of moving them. Leaving the block without :meth:`commit_all`
    calls :meth:`discard_all`::

        with OutputSet() as outputs:
            write_surfaces(...)            # rasters finished under temporary names
            document.save(model_path)      # the model file too
            outputs.commit_all()           # all appear now
    """

    def __init__(self) -> None:
        self._staged: list[StagedFile] = []
        self._protected: list[Replaced] = []
        self._moved: list[Replaced] = []
        self._token: contextvars.Token | None = None

    def __enter__(self) -> OutputSet:
        self._token = _CURRENT.set(self)
        LIVE_SETS.append(self)
        return self

    def __exit__(self, exc_type, exc_value, traceback) -> None:
        _CURRENT.reset(self._token)
        try:
            self.discard_all()
        finally:
            LIVE_SETS.remove(self)

    def add(self, staged: StagedFile) -> None:
        """Register a finished temporary file."""
        self._staged.append(staged)

    def protect(self, path: str) -> None:
        """Register a file the run is about to write in place (not staged): a copy of the present file is
        kept, restored by :meth:`discard_all` and deleted by :meth:`commit_all`; a new file is removed by
        :meth:`discard_all`.

        Raises
        ------
        FieldcastError
            If the file is read-only or no copy can be made.
        """
        refuse_read_only(path)
        self._protected.append(Replaced.keep(path, copy=True))

    def commit_all(self) -> list[str]:
        """Move every registered file into place; returns their destinations.

        Raises
        ------
        FieldcastError
            If a file cannot be moved; the files of the set already moved are then taken back (the earlier
            files of those names restored) and the remaining temporaries deleted, so none of the run's
            outputs is left and nothing earlier is lost.
        """
        try:
            while self._staged:
                self._moved.append(self._staged[0].move_into_place())
                self._staged.pop(0)
        except BaseException:
            self.discard_all()
            raise
        placed = [replaced.final for replaced in self._moved]
        for replaced in (*self._moved, *self._protected):
            replaced.drop()
        self._moved.clear()
        self._protected.clear()
        return placed

    def discard_all(self) -> None:
        """Undo the run: files already moved are taken back, protected files restored, temporaries deleted;
        earlier files stay as they were. Safe to repeat."""
        while self._moved:
            self._moved.pop().restore()
        while self._protected:
            self._protected.pop().restore()
        while self._staged:
            staged = self._staged.pop()
            staged.remove(staged.temporary)


def current_output_set() -> OutputSet | None:
    """The :class:`OutputSet` of the running code, None outside one."""
    return _CURRENT.get()


def place(temporary: str, final: str, side_suffixes: Sequence[str] = ()) -> None:
    """Hand over a finished temporary file: registered with the current :class:`OutputSet`, else moved now."""
    staged = StagedFile(temporary, final, tuple(side_suffixes))
    current = _CURRENT.get()
    if current is None:
        staged.move_into_place().drop()
    else:
        current.add(staged)


@contextlib.contextmanager
def staged_together() -> Iterator[None]:
    """Files placed inside the block appear together at its end: in the current :class:`OutputSet` when there
    is one (they then wait for its commit), otherwise in a set of their own committed on success."""
    if _CURRENT.get() is not None:
        yield
        return
    with OutputSet() as outputs:
        yield
        outputs.commit_all()
