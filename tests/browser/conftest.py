"""Fixtures and the skip/fail rule for real-browser tests.

Browser tests are skipped when Debian's Chromium is missing, unless
``LOOPCRAFT_REQUIRE_BROWSER=1`` is set (CI sets it), in which case they fail.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

import pytest

from .lab import LabServer, browser_page, chromium_available, jupyter_lab

NO_CHROMIUM_REASON = "chromium not installed at /usr/bin/chromium; .ci/run installs it"

#: Where browser tests put screenshots (git-ignored).
ARTIFACTS_DIR = Path(__file__).resolve().parents[1] / "_artifacts"


def _browser_required() -> bool:
    return os.environ.get("LOOPCRAFT_REQUIRE_BROWSER", "") == "1"


def pytest_runtest_setup(item: pytest.Item) -> None:
    if item.get_closest_marker("browser") is None or chromium_available():
        return
    if _browser_required():
        pytest.fail(f"{NO_CHROMIUM_REASON} (LOOPCRAFT_REQUIRE_BROWSER=1)", pytrace=False)
    pytest.skip(NO_CHROMIUM_REASON)


@pytest.fixture(scope="session")
def lab_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LabServer]:
    """One private JupyterLab per test session, rooted at a fresh temp dir."""
    root = tmp_path_factory.mktemp("lab-root")
    with jupyter_lab(root) as server:
        yield server


@pytest.fixture
def lab_page(lab_server: LabServer):
    """A fresh headless Chromium page; the server's sessions are deleted afterwards."""
    with browser_page() as page:
        yield page
    lab_server.delete_sessions()


@pytest.fixture
def artifacts_dir() -> Path:
    ARTIFACTS_DIR.mkdir(parents=True, exist_ok=True)
    return ARTIFACTS_DIR
