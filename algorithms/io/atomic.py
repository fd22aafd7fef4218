"""Write a text file so that it is either complete or absent."""
from __future__ import annotations

import os
import tempfile

from ..errors import FieldcastError


def write_text_atomically(path: str | os.PathLike, text: str, what: str) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder, then move it into place.

    A failure or interruption leaves no partly written file, and an earlier
    file at ``path`` stays as it was. The new file gets the usual permissions
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
    handle, temporary = tempfile.mkstemp(prefix=".fieldcast-", suffix=".part", dir=folder)
    try:
        with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as stream:
            stream.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(temporary, 0o666 & ~umask)
        os.replace(temporary, target)
    except BaseException:
        if os.path.exists(temporary):
            os.remove(temporary)
        raise
