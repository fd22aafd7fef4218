"""The skip helper of tests/requirements_check.py: a skip normally, a failure under FIELDCAST_REQUIRE_ALL=1."""
from __future__ import annotations

import pytest

from requirements_check import REQUIRE_ALL_VARIABLE, skip_unless_available


def test_available_tool_never_skips(monkeypatch):
    monkeypatch.setenv(REQUIRE_ALL_VARIABLE, "1")
    mark = skip_unless_available(True, "tool is not installed")
    assert mark.name == "skipif" and mark.args == (False,)


def test_missing_tool_skips_by_default(monkeypatch):
    monkeypatch.delenv(REQUIRE_ALL_VARIABLE, raising=False)
    mark = skip_unless_available(False, "tool is not installed")
    assert mark.args == (True,) and mark.kwargs["reason"] == "tool is not installed"


def test_missing_tool_fails_when_every_tool_is_required(monkeypatch):
    monkeypatch.setenv(REQUIRE_ALL_VARIABLE, "1")
    mark = skip_unless_available(False, "tool is not installed")
    # pytest evaluates the condition with bool() and fails the test when that raises (_pytest/skipping.py).
    with pytest.raises(RuntimeError, match="tool is not installed, and FIELDCAST_REQUIRE_ALL=1 requires"):
        bool(mark.args[0])
