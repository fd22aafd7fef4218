"""Write a text file so that it is either complete or absent."""
from __future__ import annotations

import os

from ..errors import FieldcastError
from .staging import place, temporary_path


def write_text_atomically(path: str | os.PathLike, text: str, what: str) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder, then move it into place.

    A failure or interruption leaves no partly written file, and an earlier
    file at ``path`` stays as it was. Inside an :class:`.staging.OutputSet` the
    finished file waits for the set's commit. The new file gets the usual permissions
    (those of a newly created file under the process umask).

    Parameters
    ----------
    path : str or path-like
        Destination file.
    text : str
        Content, written as UTF-8 with ``\\n`` line ends.
    what : str
        What the file is, for the error message (e.g. ``"the model file"``).
    """
    target = os.path.abspath(os.fspath(path))
    folder = os.path.dirname(target)
    if not os.path.isdir(folder):
        raise FieldcastError(f"The folder {folder} does not exist; choose an existing folder for {what}.")
    temporary = temporary_path(target)
    try:
        try:
            with open(temporary, "x", encoding="utf-8", newline="\n") as stream:
                stream.write(text)
        except OSError as exc:
            raise FieldcastError(f"Could not write {what} {target}: {exc.strerror or exc}. Free some disk space or "
                                 "choose another folder.") from exc
        place(temporary, target)
    except BaseException:
        if os.path.exists(temporary):
            os.remove(temporary)
        raise
