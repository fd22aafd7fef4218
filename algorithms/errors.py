"""The engine's error types: every error the engine raises is a :class:`FieldcastError`."""
from __future__ import annotations


class FieldcastError(ValueError):
    """A problem with the input or settings; the message says what to change.

    The toolbox algorithms show this message to the user as it is, so it
    must name the offending value and the remedy in plain words.
    """


class FieldcastUsageError(FieldcastError):
    """A programming error in a caller, not the user's input: a function called against its contract
    (a band index out of range, an unknown keyword, a table that misses an entry).

    No toolbox input reaches it; the plugin reports it as an internal error, its traceback in the log.
    """


class Cancelled(Exception):
    """Raised when the caller's ``should_stop()`` asked to stop; nothing is half-written."""
