"""Shared test helpers: tool checks for the C build and emulator tests."""

from __future__ import annotations

import os
import shutil

import pytest

from hosttool.firmware import build as cbuild


def require_tools(kind: str, *, run: bool) -> None:
    """Skip the test when ``kind`` lacks its compiler (or, with ``run``, its emulator).

    With the environment variable CI=true a missing tool fails the test instead: CI must
    never pass by skipping the layer it exists to run.
    """
    missing = cbuild.missing_tools(kind, run=run)
    if not missing:
        return
    reason = f"{kind} needs {', '.join(missing)} on PATH"
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason} (CI=true: missing tools fail instead of skipping)")
    pytest.skip(reason)


def require_programs(*names: str) -> None:
    """Skip the test when a program it runs (make, cmake ...) is not on PATH; fail under CI."""
    missing = [n for n in names if shutil.which(n) is None]
    if not missing:
        return
    reason = f"needs {', '.join(missing)} on PATH"
    if os.environ.get("CI") == "true":
        pytest.fail(f"{reason} (CI=true: missing tools fail instead of skipping)")
    pytest.skip(reason)
