"""Shared fixtures: the example event, artifact folder, and the headless browser.

Browser tests use the system Chromium through Playwright (never a downloaded browser). Without
Chromium they skip with a message, except when DEBRIEF_REQUIRE_BROWSER=1 (CI), where a missing
browser fails the run.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE_EVENT = ROOT / "example_event"
ARTIFACTS = ROOT / "test-artifacts"

CHROMIUM_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--disable-dev-shm-usage",
]
LOCAL_PREFIXES = ("http://127.0.0.1", "http://localhost", "ws://127.0.0.1", "ws://localhost", "file:", "data:", "blob:", "about:")


def chromium_path() -> str | None:
    for name in ("/usr/bin/chromium", "/usr/bin/chromium-browser"):
        if os.path.exists(name):
            return name
    return shutil.which("chromium")


@pytest.fixture(scope="session")
def example_event() -> Path:
    return EXAMPLE_EVENT


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture(scope="session")
def browser():
    """A headless system Chromium, shared by the session's browser tests."""
    exe = chromium_path()
    required = os.environ.get("DEBRIEF_REQUIRE_BROWSER") == "1"
    if exe is None:
        msg = "Chromium not found (apt-get install chromium); browser tests need it"
        if required:
            pytest.fail(msg + " and DEBRIEF_REQUIRE_BROWSER=1 is set")
        pytest.skip(msg)
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        if required:
            pytest.fail("playwright is not installed and DEBRIEF_REQUIRE_BROWSER=1 is set")
        pytest.skip("playwright is not installed")
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=exe, headless=True, args=CHROMIUM_ARGS)
        try:
            yield b
        finally:
            b.close()


class OfflinePage:
    """A page whose requests to anywhere but this machine are aborted and counted."""

    def __init__(self, browser):
        self.context = browser.new_context(viewport={"width": 1280, "height": 900})
        self.page = self.context.new_page()
        self.blocked: list[str] = []
        self.console_errors: list[str] = []
        self.context.route("**/*", self._route)
        self.page.on("console", lambda m: self.console_errors.append(m.text) if m.type == "error" else None)
        self.page.on("pageerror", lambda e: self.console_errors.append(str(e)))

    def _route(self, route):
        url = route.request.url
        if url.startswith(LOCAL_PREFIXES):
            route.continue_()
        else:
            self.blocked.append(url)
            route.abort()

    def close(self):
        self.context.close()


@pytest.fixture
def offline_page(browser):
    op = OfflinePage(browser)
    try:
        yield op
    finally:
        op.close()
