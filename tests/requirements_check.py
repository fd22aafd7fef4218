"""Skip a test when an outside tool is missing, except where every tool must be present.

``make test`` installs every system package the tests use and exports
``FIELDCAST_REQUIRE_ALL=1``. There a missing tool means a broken setup, so the
acceptance tests that need it fail with the reason instead of being skipped.
"""
from __future__ import annotations

import os

import pytest

REQUIRE_ALL_VARIABLE = "FIELDCAST_REQUIRE_ALL"
"""Environment variable that turns skips for missing tools into failures when set to 1."""


class MissingRequirement:
    """A ``skipif`` condition that cannot be evaluated: pytest then fails the test, showing the reason."""

    def __init__(self, reason: str) -> None:
        self.reason = reason

    def __bool__(self) -> bool:
        raise RuntimeError(f"{self.reason}, and {REQUIRE_ALL_VARIABLE}=1 requires every tool the tests use "
                           "(run 'make deps').")


def require_all() -> bool:
    """True when :data:`REQUIRE_ALL_VARIABLE` is set to 1."""
    return os.environ.get(REQUIRE_ALL_VARIABLE, "") == "1"


def skip_unless_available(available: bool, reason: str) -> pytest.MarkDecorator:
    """``pytest.mark.skipif(not available, reason=reason)``; under ``FIELDCAST_REQUIRE_ALL=1`` a missing tool
    makes the marked tests fail instead (pytest fails a test whose ``skipif`` condition raises)."""
    if available or not require_all():
        return pytest.mark.skipif(not available, reason=reason)
    return pytest.mark.skipif(MissingRequirement(reason), reason=reason)
