"""The browser fixture of tests/pages/browser.py, for every page test."""

from tests.pages.browser import browser

__all__ = ["browser"]
