"""The error type for problems a user can fix."""
from __future__ import annotations


class FieldcastError(ValueError):
    """A problem with the input or settings; the message says what to change.

    The toolbox algorithms show this message to the user as it is, so it
    must name the offending value and the remedy in plain words.
    """


class Cancelled(Exception):
    """Raised when the caller's ``should_stop()`` asked to stop; nothing is half-written."""
