"""Helpers of the all-or-nothing tests: list a folder, and make a call fail the way a full disk would."""
from __future__ import annotations

from fieldcast.algorithms import FieldcastError

DISK_FULL = "No space left on device"


def names(folder) -> list[str]:
    """The files in ``folder``, hidden temporaries included."""
    return sorted(path.name for path in folder.iterdir())


def fail_on_call(monkeypatch, owner, attribute: str, failing_call: int) -> None:
    """Make ``owner.attribute`` raise FieldcastError on its ``failing_call``-th call (from 1), as a full disk would."""
    original = getattr(owner, attribute)
    calls = []

    def wrapper(*args, **kwargs):
        calls.append(None)
        if len(calls) == failing_call:
            raise FieldcastError(f"{DISK_FULL}.")
        return original(*args, **kwargs)

    monkeypatch.setattr(owner, attribute, wrapper)
