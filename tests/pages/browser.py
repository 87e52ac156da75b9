"""Debian's Chromium driven by Playwright, and a watcher of everything a page does.

The browser is the system's (``shutil.which("chromium")``, installed by the Makefile's
venv step), never one Playwright downloads. As root it needs ``--no-sandbox``; background
networking, component updates and sync are off, so the only requests are the pages' own.
Under CI a missing Chromium fails the test; elsewhere it is skipped with the reason.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import urlsplit

import pytest
from playwright.sync_api import Browser, ConsoleMessage, Page, Request, sync_playwright

CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--no-first-run",
    "--disable-sync",
    "--disable-dev-shm-usage",  # small /dev/shm in containers
]
IN_CI = os.environ.get("CI", "").lower() == "true"


def chromium_path() -> str:
    path = shutil.which("chromium")
    if path is None:
        message = "chromium is not on PATH (make venv installs it with apt-get)"
        if IN_CI:
            pytest.fail(message + "; CI=true: the browser tests must run, not skip")
        pytest.skip(message)
    return path


@pytest.fixture(scope="session")
def browser() -> Iterator[Browser]:
    executable = chromium_path()
    with sync_playwright() as playwright:
        launched = playwright.chromium.launch(executable_path=executable, args=CHROMIUM_ARGS, headless=True)
        yield launched
        launched.close()


@dataclass
class PageWatch:
    """Console errors, failed requests, and every request to a host other than the server's."""

    host: str
    console_errors: list[str] = field(default_factory=list)
    failed: list[str] = field(default_factory=list)
    off_host: list[str] = field(default_factory=list)
    requests: list[str] = field(default_factory=list)

    def attach(self, page: Page) -> None:
        page.on("console", self._console)
        page.on("pageerror", lambda error: self.console_errors.append(f"page error: {error}"))
        page.on("request", self._request)
        page.on("requestfailed", lambda request: self.failed.append(f"{request.url}: {request.failure}"))
        page.on("response", lambda response: response.status >= 400 and self.failed.append(
            f"{response.url}: HTTP {response.status}"))

    def _console(self, message: ConsoleMessage) -> None:
        if message.type == "error":
            self.console_errors.append(message.text)

    def _request(self, request: Request) -> None:
        self.requests.append(request.url)
        parts = urlsplit(request.url)
        if parts.scheme in {"http", "https", "ws", "wss"} and parts.netloc != self.host:
            self.off_host.append(request.url)

    def assert_clean(self) -> None:
        assert self.console_errors == [], self.console_errors
        assert self.failed == [], self.failed
        assert self.off_host == [], self.off_host


def screenshot(page: Page, directory: Path, name: str) -> Path:
    """Save a full-page screenshot as a test artefact and say where it went."""
    directory.mkdir(parents=True, exist_ok=True)
    path = directory / f"{name}.png"
    page.screenshot(path=str(path), full_page=True)
    print(f"screenshot: {path}")
    return path
