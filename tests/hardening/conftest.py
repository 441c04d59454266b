"""Fixtures of the hardening suite: the browser of tests/browser, and hostile collections."""

from __future__ import annotations

from browser.conftest import browser, screenshots  # noqa: F401  (fixtures shared with the browser tests)
