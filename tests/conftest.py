"""Shared test fixtures.

``shared_data`` points at the public reference data (``../shared/data`` from the project
root); tests that need it are skipped, with the reason, when it is absent.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from hypothesis import settings

from checks import SHARED_DATA

# No per-example deadline anywhere (numba compiles kernels on first use); in CI the
# examples are derived from each test's name, so a run is reproducible.
settings.register_profile("segcut", deadline=None)
settings.register_profile("segcut-ci", deadline=None, derandomize=True, database=None)
settings.load_profile("segcut-ci" if os.environ.get("CI") else "segcut")

TEST_DATA = Path(__file__).resolve().parent / "data"


@pytest.fixture
def shared_data() -> Path:
    """The public reference data folder; skips the test when it is not there."""
    if not SHARED_DATA.is_dir():
        pytest.skip(f"public reference data not found at ../shared/data (looked in {SHARED_DATA.parent.name}/)")
    return SHARED_DATA


@pytest.fixture
def test_data() -> Path:
    """The small data files committed with the tests (tests/data)."""
    return TEST_DATA


@pytest.fixture(autouse=True)
def _doctest_namespace(doctest_namespace):
    doctest_namespace["np"] = np
