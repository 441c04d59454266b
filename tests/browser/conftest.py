"""Headless Chromium (Debian's package) driven by Playwright, and a served dashboard.

The server runs in a thread of the test process on a free loopback port, as Panel's own
test suite does (``threaded=True``, wait on ``/liveness``, then on the browser console
message "Websocket connection 0 is now open").  One browser serves the whole session;
each test module serves its own collection once.

Outside CI (``CI`` unset) the tests skip, saying why, when no ``chromium`` is on the PATH;
under CI they fail instead, so a missing browser cannot pass unnoticed.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pytest

from app.liveness import free_port, wait_until_live

CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]
SCREENSHOTS = Path(__file__).resolve().parents[2] / "test-artifacts" / "screenshots"
#: Longest wait for a computation to appear on the page (the first one reduces every file).
COMPUTE_TIMEOUT_MS = 90_000


def _in_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def _unavailable(reason: str) -> None:
    if _in_ci():
        pytest.fail(f"browser tests must run under CI, but {reason}")
    print(f"\nbrowser tests skipped: {reason}")
    pytest.skip(reason)


def launch_browser() -> Iterator[Any]:
    """Headless Debian Chromium through Playwright's sync API.

    The ``browser`` fixture that yields it lives in tests/conftest.py, so that every folder
    shares one Playwright instance: a second one started while the first is alive finds
    its event loop running in the main thread and refuses to start.
    """
    path = shutil.which("chromium")
    if path is None:
        _unavailable("no 'chromium' on the PATH (Debian: apt-get install chromium)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("the Python package playwright is not installed (pip install -e '.[test]')")
    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=path, args=CHROMIUM_ARGS)
        yield chromium
        chromium.close()


def screenshot_folder() -> Path:
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    print(f"\nscreenshots: {SCREENSHOTS}")
    return SCREENSHOTS


def pytest_terminal_summary(terminalreporter: Any) -> None:
    if SCREENSHOTS.is_dir() and any(SCREENSHOTS.glob("*.png")):
        terminalreporter.write_line(f"dashboard screenshots: {SCREENSHOTS}")


@contextlib.contextmanager
def serving(results: Any) -> Iterator[str]:
    """Serve ``results`` on a free loopback port in a thread; yields the base URL.

    Sessions whose browser has gone are discarded after half a second (Bokeh's default is
    a quarter of a minute), so that tests can check that closed sessions free memory.
    """
    from app.server import make_server

    port = free_port()
    thread = make_server(
        results, port=port, address="127.0.0.1", threaded=True,
        check_unused_sessions_milliseconds=250, unused_session_lifetime_milliseconds=500,
    )
    url = f"http://127.0.0.1:{port}"
    wait_until_live(port, deadline=time.monotonic() + 30, poll=0.1, why=f"{url}/liveness did not answer within 30 s")
    try:
        yield url
    finally:
        thread.stop()


#: Console messages of each open page, for failure messages.
_PAGES: dict[int, list[str]] = {}


@dataclass
class Session:
    """One browser context and page on the dashboard, with its console messages."""

    context: Any
    page: Any
    messages: list[str] = field(default_factory=list)

    def errors(self) -> list[str]:
        return [m for m in self.messages if m.startswith(("error:", "pageerror:"))]

    def close(self) -> None:
        _PAGES.pop(id(self.page), None)
        self.context.close()


def open_dashboard(browser: Any, url: str) -> Session:
    """Open ``url`` in a fresh context and wait for the websocket to open."""
    context = browser.new_context(viewport={"width": 1500, "height": 1000}, accept_downloads=True)
    page = context.new_page()
    session = Session(context, page)
    page.on("console", lambda m: session.messages.append(f"{m.type}: {m.text}"))
    page.on("pageerror", lambda e: session.messages.append(f"pageerror: {e}"))
    # the page must make no request beyond the server (panel serves its own JS and CSS)
    page.on("requestfailed", lambda r: session.messages.append(f"error: request failed {r.url[:120]}"))
    _PAGES[id(page)] = session.messages
    page.goto(url, wait_until="domcontentloaded")
    deadline = time.monotonic() + 30
    while not any("Websocket connection 0 is now open" in m for m in session.messages):
        if time.monotonic() > deadline:
            raise AssertionError(f"the websocket did not open; console: {session.messages[-5:]}")
        page.wait_for_timeout(20)
    return session


def wait_for_view(page: Any, tab: str, *, what: str = "canvas", timeout_ms: int = COMPUTE_TIMEOUT_MS) -> None:
    """Wait until the view of ``tab`` shows ``what`` (a CSS selector) and is not loading."""
    body = page.locator(f".gs-view-{tab}")
    try:
        body.locator(what).first.wait_for(state="attached", timeout=timeout_ms)
    except Exception as error:
        classes = body.first.evaluate("e => e.className") if body.count() else "absent"
        console = _PAGES.get(id(page), [])[-8:]
        raise AssertionError(f"view {tab} did not show {what!r} (classes: {classes}; url {page.url}; console {console})") from error
    deadline = time.monotonic() + timeout_ms / 1000
    while page.locator(f".gs-view-{tab}.pn-loading").count():
        if time.monotonic() > deadline:
            raise AssertionError(f"view {tab} still loading")
        page.wait_for_timeout(20)


@pytest.fixture(scope="session")
def sample_manifest(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The bundled sample collection, or the core's tiny demo where the sample is missing."""
    bundled = Path(__file__).resolve().parents[2] / "sample_output" / "manifest.toml"
    if bundled.is_file():
        return bundled
    from evaluation.demo import write_demo

    return Path(write_demo(tmp_path_factory.mktemp("sample") / "collection", size="tiny"))


@pytest.fixture(scope="module")
def served_sample(sample_manifest: Path) -> Iterator[str]:
    """The sample collection served for one test module; yields the base URL."""
    from app.views.results import Results
    from evaluation.catalog import Collection

    results = Results(Collection.from_path(sample_manifest))
    with serving(results) as url:
        yield url
    results.close()


#: Every model of the page's Bokeh documents, as one JavaScript array expression (the
#: documents' model list is ``all_models`` in Bokeh 3.x, ``_all_models`` before).
PAGE_MODELS_JS = "Bokeh.documents.flatMap(doc => Array.from(doc.all_models ?? doc._all_models?.values() ?? []))"
