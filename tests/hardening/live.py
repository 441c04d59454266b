"""A served collection of runs that are the reference plus a constant, opened on the score
table, for the tests that change files under a running server."""

from __future__ import annotations

import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from browser.conftest import Session, open_dashboard, serving, wait_for_view

from .hostile import write_run


def rows(page: Any) -> list[str]:
    """The text of every row of the score table."""
    return page.locator(".gs-view-scores .tabulator-row").all_text_contents()


def wait_for_row(page: Any, text: str, *, present: bool = True, timeout_s: float = 60) -> list[str]:
    """Wait until a row holds ``text`` (or, ``present=False``, none does)."""
    deadline = time.monotonic() + timeout_s
    while True:
        shown = rows(page)
        if shown and any(text in r for r in shown) == present:
            return shown
        assert time.monotonic() < deadline, shown
        page.wait_for_timeout(50)


def offset_collection(root: Path, **runs: float) -> Path:
    """``root/references/ref`` (offset 0) and ``root/runs/<name>`` the reference plus each offset."""
    write_run(root / "references" / "ref", offset=0.0)
    for name, offset in runs.items():
        write_run(root / "runs" / name, offset=offset)
    return root


def open_scores(browser: Any, url: str, query: str = "", *, row: str | None = None) -> Session:
    """The score table of the page at ``url`` (with ``query``), once a row holds ``row``."""
    session = open_dashboard(browser, f"{url}/?tab=scores{'&' + query if query else ''}")
    wait_for_view(session.page, "scores", what=".tabulator-row")
    if row is not None:
        wait_for_row(session.page, row)
    return session


def served(path: Path) -> Iterator[str]:
    """Serve the collection at ``path`` (for a module fixture: ``yield from served(...)``); yields the URL."""
    from app.views.results import Results
    from evaluation.catalog import Collection

    results = Results(Collection.from_path(path))
    with serving(results) as url:
        yield url
    results.close()
