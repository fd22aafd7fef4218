"""Staged outputs: a run's files appear together when the run is complete, or not at all.

Each writer writes under a temporary name next to its destination
(:func:`temporary_path`) and hands the finished file to :func:`place`. Outside an
:class:`OutputSet` the file is moved into place at once; inside one (``with
OutputSet() as outputs:``) it is registered, and :meth:`OutputSet.commit_all`
moves every registered file into place at the end of the run. Leaving the block
without a commit (an exception, a cancel) removes every temporary file, so no
output of the run is left and earlier files of the same names stay as they were.
"""
from __future__ import annotations

import contextlib
import contextvars
import os
import uuid
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

from ..errors import FieldcastError

_CURRENT: contextvars.ContextVar[OutputSet | None] = contextvars.ContextVar("fieldcast_output_set", default=None)


def temporary_path(path: str | os.PathLike) -> str:
    """A fresh temporary name beside ``path``: ``.<name>.fieldcast-<uuid>.part`` in the same folder."""
    folder, name = os.path.split(os.path.abspath(os.fspath(path)))
    return os.path.join(folder, f".{name}.fieldcast-{uuid.uuid4().hex[:12]}.part")


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

    def move_into_place(self) -> None:
        """Replace :attr:`final` (and its side files) by the temporary file."""
        try:
            for suffix in self.side_suffixes:
                if os.path.exists(self.temporary + suffix):
                    os.replace(self.temporary + suffix, self.final + suffix)
                elif os.path.exists(self.final + suffix):
                    os.remove(self.final + suffix)
            os.replace(self.temporary, self.final)
        except OSError as exc:
            raise FieldcastError(f"Could not save {self.final}: {exc}. Close the file if another program has "
                                 "it open, or choose another output name.") from exc

    def remove(self, which: str) -> None:
        """Delete the file at ``which`` (its temporary or final name) and its side files, if present."""
        for leftover in (which, *(which + suffix for suffix in self.side_suffixes)):
            with contextlib.suppress(FileNotFoundError):
                os.remove(leftover)


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
        self._token: contextvars.Token | None = None

    def __enter__(self) -> OutputSet:
        self._token = _CURRENT.set(self)
        return self

    def __exit__(self, exc_type, exc_value, traceback) -> None:
        _CURRENT.reset(self._token)
        self.discard_all()

    def add(self, staged: StagedFile) -> None:
        """Register a finished temporary file."""
        self._staged.append(staged)

    def commit_all(self) -> list[str]:
        """Move every registered file into place; returns their destinations.

        Raises
        ------
        FieldcastError
            If a file cannot be moved; the files of the set already moved are then removed
            and the remaining temporaries deleted, so none of the run's outputs is left.
        """
        moved: list[StagedFile] = []
        try:
            while self._staged:
                staged = self._staged[0]
                staged.move_into_place()
                moved.append(self._staged.pop(0))
        except BaseException:
            for done in moved:
                done.remove(done.final)
            self.discard_all()
            raise
        return [staged.final for staged in moved]

    def discard_all(self) -> None:
        """Delete every registered temporary file; destinations are left untouched. Safe to repeat."""
        while self._staged:
            staged = self._staged.pop()
            staged.remove(staged.temporary)


def place(temporary: str, final: str, side_suffixes: Sequence[str] = ()) -> None:
    """Hand over a finished temporary file: registered with the current :class:`OutputSet`, else moved now."""
    staged = StagedFile(temporary, final, tuple(side_suffixes))
    current = _CURRENT.get()
    if current is None:
        staged.move_into_place()
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
