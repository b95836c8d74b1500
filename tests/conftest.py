"""Fixtures shared by the whole suite."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from zonedesign.io import opendata


@pytest.fixture(scope="session")
def spdata_dir() -> Path:
    """Debian's r-cran-spdata shapes folder; missing data skip locally and fail under CI."""
    try:
        return opendata.spdata_dir()
    except opendata.OpenDataUnavailable as exc:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail(f"r-cran-spdata shapes are required under CI: {exc}")
        pytest.skip(f"r-cran-spdata shapes unavailable: {exc}")


@pytest.fixture(autouse=True)
def _stop_flag_cleared():
    """A test that stops a run with a signal leaves the run-wide stop flag set (a run
    clears it when it starts, and an in-process solve checks it first); the next test
    starts with it clear."""
    yield
    from zonedesign import interrupts

    interrupts.reset()
