"""Test-wide setup: a fresh build cache per test session.

Set LYACOMP_TEST_CACHE=keep to reuse the user's cache instead (faster reruns).
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"

_SESSION_CACHE: str | None = None


def pytest_configure(config: pytest.Config) -> None:
    global _SESSION_CACHE
    if os.environ.get("LYACOMP_TEST_CACHE") != "keep":
        _SESSION_CACHE = tempfile.mkdtemp(prefix="lyacomp-test-cache-")
        os.environ["LYACOMP_CACHE_DIR"] = _SESSION_CACHE


def pytest_unconfigure(config: pytest.Config) -> None:
    if _SESSION_CACHE:
        shutil.rmtree(_SESSION_CACHE, ignore_errors=True)


@pytest.fixture(scope="session")
def examples_dir() -> Path:
    return EXAMPLES


@pytest.fixture(scope="session")
def documented_keys() -> set[str]:
    """The keys README promises for `lyacomp eval --json` and HopfResult.to_dict()."""
    return {
        "status",
        "l1",
        "omega",
        "critical_value",
        "bifurcation_parameter",
        "equilibrium",
        "transversality",
        "amplitude",
        "cycle_side",
        "period",
        "criticality",
        "unstable_count",
        "stable_side",
        "search",
    }
